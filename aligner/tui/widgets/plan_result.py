"""A planner result: readings to set, sensitivity and the tolerance budget (the branches are
in :class:`BranchTable`, where the operator picks one)."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, ClassVar

from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual.widgets import DataTable, Static

from ...bench import Bench
from ..format import literal, num, sci

if TYPE_CHECKING:
    from ...planning import Plan

__all__ = ["BranchTable", "PlanResult"]

#: A reading change beyond a full turn is shown as "no practical effect".
FULL_TURN_DEG = 360.0


def _table(*columns: str) -> Table:
    table = Table(box=None, padding=(0, 2), show_edge=False, header_style="bold")
    for c in columns:
        table.add_column(literal(c))
    return table


def _heading(text: str) -> Text:
    return literal(text, "bold underline")


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
                literal(message),
                Text(""),
                Text("Readings on the bench screen are unchanged.", style="dim"),
            )
        )

    def show(self, plan: Plan) -> None:
        """Settings (rounded to the mounts' steps), sensitivity, tolerance and the planner's
        own summary of ``plan``."""
        q = plan.quantized
        settings = _table("mount", "reading", "exact solution", "step")
        for name, reading in q.settings.items():
            settings.add_row(
                literal(name),
                f"{float(reading):.4f}°",
                f"{float(plan.settings[name]):.5f}°",
                f"{self.bench.mounts[name].resolution_deg:g}°",
            )
        reached = literal(
            f"reached at the rounded readings: {num(q.value, 6)} "
            f"({q.relative_error * 100:+.2g} % from the exact solution); one step of "
            f"{self.bench.imbalance_mount} changes it by {q.step_change * 100:.2g} %"
        )
        parts: list[Any] = [
            _heading(
                f"Branch {plan.chosen}: the mounts' readings (rounded to their steps) for the "
                f"{plan.quantity}"
            ),
            settings,
            reached,
            literal(f"chosen: {plan.reason}", "dim"),
            Text(""),
        ]
        parts += self._sensitivity(plan) + self._tolerance(plan)
        for warning in plan.warnings:
            parts.append(literal(f"⚠ {warning}", "yellow"))
        parts += [Text(""), Text("Planner summary", style="bold"), literal(plan.message)]
        self.update(Group(*parts))

    def _sensitivity(self, plan: Plan) -> list[Any]:
        table = _table("mount", "d(value)/d(reading)", "change for 1 %")
        for s in plan.sensitivity:
            change = s.reading_for_1pct_deg
            table.add_row(
                literal(s.mount),
                f"{num(s.derivative, 4)} per deg",
                f"{num(change, 3)}°"
                if change <= FULL_TURN_DEG
                else "more than a turn (no practical effect)",
            )
        return [_heading("Sensitivity"), table, Text("")]

    def _tolerance(self, plan: Plan) -> list[Any]:
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
            by.add_row(literal(name), f"{num(width, 3)}{mark}")
        return [
            _heading(f"Tolerance budget ({tol.samples} Monte Carlo samples)"),
            table,
            Text(""),
            by,
            Text(""),
        ]


class BranchTable(DataTable[Any]):
    """Every branch (distinct optical setting) of a plan; the cursor marks the chosen one and
    Enter plans that branch instead. Row keys are the branch indices. The sign of the
    imbalance says the side of the null (+: the high-reading side)."""

    HELP_KEYS: ClassVar = (("↑ / ↓ then Enter", "plan the branch under the cursor"),)

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(zebra_stripes=True, cursor_type="row", **kwargs)
        self.border_title = "Branches · ↑/↓ then Enter to plan that branch"

    def show(self, plan: Plan) -> None:
        """List ``plan``'s branches, the cursor on the chosen one."""
        self.clear(columns=True)
        names = list(plan.settings)
        self.add_column("#", key="index")
        for name in names:
            self.add_column(literal(name), key=f"mount-{names.index(name)}")
        for label in ("imbalance", "regime", "exact A", "leak rate"):
            self.add_column(label, key=label)
        for b in plan.branches:
            self.add_row(
                f"{'▶' if b.index == plan.chosen else ' '}{b.index}",
                *(f"{b.settings[n]:.4f}°" for n in names),
                f"{b.imbalance_deg:+.4f}°",
                b.regime,
                num(b.amplification_exact, 5),
                sci(b.leak_rate),
                key=str(b.index),
            )
        self.border_subtitle = f"{len(plan.branches)} branches"
        self.move_cursor(row=self.get_row_index(str(plan.chosen)))

    def failed(self) -> None:
        """No plan: no branches."""
        self.clear(columns=True)
        self.border_subtitle = ""
