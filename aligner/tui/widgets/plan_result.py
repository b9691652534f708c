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

#: Branches listed (nearest the current readings first); the rest are counted.
MAX_BRANCHES = 6
#: A reading change beyond a full turn is shown as "no practical effect".
FULL_TURN_DEG = 360.0


def _table(*columns: str) -> Table:
    table = Table(box=None, padding=(0, 2), show_edge=False, header_style="bold")
    for c in columns:
        table.add_column(c)
    return table


def _heading(text: str) -> Text:
    return Text(text, style="bold underline")


class PlanResult(Static):
    """Shows an :class:`aligner.planning.Plan`, or the planner's message for an infeasible
    target."""

    def __init__(self, bench: Bench, **kwargs: Any) -> None:
        super().__init__("", **kwargs)
        self.bench = bench

    def failed(self, message: str) -> None:
        """The engine's explanation of why the target cannot be reached."""
        self.update(
            Group(
                Text("Infeasible target", style="bold red"),
                Text(""),
                Text(message),
                Text(""),
                Text("Readings on the bench screen are unchanged.", style="dim"),
            )
        )

    def show(self, plan: Any) -> None:
        """Settings (rounded to the mounts' steps), branches, sensitivity, tolerance and the
        planner's own summary of ``plan``."""
        q = plan.quantized
        settings = _table("mount", "reading", "exact solution", "step")
        for name, reading in q.settings.items():
            settings.add_row(
                name,
                f"{float(reading):.4f}°",
                f"{float(plan.settings[name]):.5f}°",
                f"{self.bench.mounts[name].resolution_deg:g}°",
            )
        reached = Text(
            f"reached at the rounded readings: {num(q.value, 6)} "
            f"({q.relative_error * 100:+.2g} % from the exact solution); one step of "
            f"{self.bench.imbalance_mount} changes it by {q.step_change * 100:.2g} %"
        )
        parts: list[Any] = [
            _heading(f"Set the mounts to (rounded to their steps) for the {plan.quantity}"),
            settings,
            reached,
            Text(""),
        ]
        parts += self._branches(plan) + self._sensitivity(plan) + self._tolerance(plan)
        for warning in plan.warnings:
            parts.append(Text(f"⚠ {warning}", style="yellow"))
        parts += [Text(""), Text("Planner summary", style="bold"), Text(plan.message)]
        self.update(Group(*parts))

    def _branches(self, plan: Any) -> list[Any]:
        names = list(plan.settings)
        table = _table("#", *names, "side", "regime", "imbalance", "ampl. exact", "leak rate")
        for b in plan.branches[:MAX_BRANCHES]:
            mark = "▶" if b.index == plan.chosen else " "
            table.add_row(
                f"{mark}{b.index}",
                *(f"{b.settings[n]:.4f}°" for n in names),
                b.side,
                b.regime,
                f"{b.imbalance_deg:+.4f}°",
                num(b.amplification_exact, 5),
                sci(b.leak_rate),
            )
        more = len(plan.branches) - MAX_BRANCHES
        extra = (
            [Text(f"  … {more} more branches (other nulls and plate orientations)", style="dim")]
            if more > 0
            else []
        )
        return [
            _heading(f"Branches: {len(plan.branches)}"),
            Text(f"chosen {plan.reason}"),
            table,
            *extra,
            Text(""),
        ]

    def _sensitivity(self, plan: Any) -> list[Any]:
        table = _table("mount", "d(value)/d(reading)", "change for 1 %")
        for s in plan.sensitivity:
            change = s.reading_for_1pct_deg
            table.add_row(
                s.mount,
                f"{num(s.derivative, 4)} per deg",
                f"{num(change, 3)}°"
                if change <= FULL_TURN_DEG
                else "more than a turn (no practical effect)",
            )
        return [_heading("Sensitivity"), table, Text("")]

    def _tolerance(self, plan: Any) -> list[Any]:
        tol = plan.tolerance
        if tol is None:
            return []
        table = _table("quantity", "median", "68 % range", "95 % range")
        for label, s, fmt in (("target value", tol.figure, num), ("leak rate", tol.leak_rate, sci)):
            table.add_row(
                label,
                fmt(s.median),
                f"{fmt(s.low68)} … {fmt(s.high68)}",
                f"{fmt(s.low95)} … {fmt(s.high95)}",
            )
        by = _table("error source", "68 % half-width alone")
        for name, width in tol.by_source.items():
            mark = "  ◀ dominant" if name == tol.dominant else ""
            by.add_row(name, f"{num(width, 3)}{mark}")
        return [
            _heading(f"Tolerance budget ({tol.samples} Monte Carlo samples)"),
            table,
            Text(""),
            by,
            Text(""),
        ]
