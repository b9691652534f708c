"""A planner result: readings to set, branches, sensitivity and the tolerance budget."""

from __future__ import annotations

from typing import Any

from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual.widgets import Static

from ...bench import Bench
from ..format import num, sci

__all__ = ["PlanResult"]


def _table(title: str, *columns: str) -> Table:
    table = Table(title=title, title_justify="left", title_style="bold", box=None,
                  padding=(0, 2), show_edge=False, header_style="bold")
    for c in columns:
        table.add_column(c)
    return table


class PlanResult(Static):
    """Shows an :class:`aligner.plan.Plan`, or the planner's message for an infeasible target."""

    def __init__(self, bench: Bench, **kwargs: Any) -> None:
        super().__init__("", **kwargs)
        self.bench = bench

    def failed(self, message: str) -> None:
        """The engine's explanation of why the target cannot be reached."""
        self.update(Group(Text("Infeasible target", style="bold red"), Text(""),
                          Text(message), Text(""),
                          Text("Readings on the bench screen are unchanged.", style="dim")))

    def show(self, plan: Any) -> None:
        """Settings, branches, sensitivity and tolerance of ``plan``."""
        parts: list[Any] = []
        if getattr(plan, "message", ""):
            parts += [Text(plan.message), Text("")]
        settings = _table("Set the mounts to", "mount", "reading", "step")
        for name, reading in plan.settings.items():
            settings.add_row(name, f"{float(reading):.4f}°",
                             f"{self.bench.mounts[name].resolution_deg:g}°")
        parts += [settings, Text("")]
        parts += self._branches(plan) + self._sensitivity(plan) + self._tolerance(plan)
        self.update(Group(*parts))

    def _branches(self, plan: Any) -> list[Any]:
        branches = list(getattr(plan, "branches", ()))
        if not branches:
            return []
        names = list(plan.settings)
        table = _table("Branches", "", *names, "amplification", "leak rate")
        for i, b in enumerate(branches):
            mark = "▶ chosen" if getattr(b, "chosen", i == getattr(plan, "branch", 0)) else ""
            readings = b.settings if hasattr(b, "settings") else b.readings
            table.add_row(mark, *(f"{float(readings[n]):.4f}°" for n in names),
                          num(getattr(b, "amplification", float("nan")), 5),
                          sci(getattr(b, "leak_rate", float("nan"))))
        return [table, Text("")]

    def _sensitivity(self, plan: Any) -> list[Any]:
        sens = getattr(plan, "sensitivity", None)
        if not sens:
            return []
        table = _table("Sensitivity", "mount", "d(amplification)/d(reading)", "1 % change")
        for name, s in sens.items():
            table.add_row(name, f"{num(s.derivative_per_deg, 4)} per deg",
                          f"{num(s.one_percent_deg, 3)}°")
        return [table, Text("")]

    def _tolerance(self, plan: Any) -> list[Any]:
        tol = getattr(plan, "tolerance", None)
        if tol is None:
            return []
        table = _table(f"Tolerance budget ({tol.samples} Monte Carlo samples)", "quantity",
                       "median", "68 % range", "95 % range")
        for label, s, fmt in (("amplification", tol.figure, num), ("leak rate", tol.leak_rate,
                                                                      sci)):
            table.add_row(label, fmt(s.median), f"{fmt(s.low68)} … {fmt(s.high68)}",
                          f"{fmt(s.low95)} … {fmt(s.high95)}")
        by = _table("", "error source", "68 % half-width of the amplification alone")
        for name, width in tol.by_source.items():
            mark = " ◀ dominant" if name == tol.dominant else ""
            by.add_row(name, f"{num(width, 3)}{mark}")
        return [table, Text(""), by]
