"""The beam path: every element of the bench in beam order with its mount, reading and angle."""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from rich.table import Table
from textual.widgets import Static

from ...bench import Bench
from ..format import deg, literal, num

if TYPE_CHECKING:
    from ...bench import Element

__all__ = ["BeamPath"]

#: Width of the reading and angle columns (``-170.000°``), fixed so a new reading wraps no
#: row differently and repaints without a new layout.
READING_WIDTH = 9

_KIND = {
    "hwp": "HWP",
    "qwp": "QWP",
    "retarder": "retarder",
    "rotator": "rotator",
    "polarizer": "polarizer",
}


def _element_rows(bench: Bench) -> list[tuple[str, str, str | None, float | None]]:
    """(label, detail, mount or None, fixed angle deg or None) in beam order, source to
    analyzer, then the detector."""
    s, c, a = bench.source, bench.coupling, bench.analyzer
    rows: list[tuple[str, str, str | None, float | None]] = [
        ("source polarizer", f"ER {num(s.extinction_ratio, 2)}", s.mount, s.angle_deg)
    ]
    for e in bench.pre:
        rows.append((f"{_KIND.get(e.type, e.type)} {e.key}", _detail(e), e.mount, e.angle_deg))
    rows.append((f"coupling ({c.observable})", c.readout, None, None))
    for e in bench.post:
        rows.append((f"{_KIND.get(e.type, e.type)} {e.key}", _detail(e), e.mount, e.angle_deg))
    rows.append(("analyzer", f"ER {num(a.extinction_ratio, 2)}", a.mount, a.angle_deg))
    rows.append(("detector", f"η {num(bench.detector.efficiency, 2)}", None, None))
    return rows


def _detail(element: Element) -> str:
    if element.type in ("hwp", "qwp", "retarder"):
        return f"{num(element.retardance_waves, 4)} λ"
    if element.type == "polarizer":
        return f"ER {num(element.extinction_ratio, 2)}"
    return ""


class BeamPath(Static):
    """Elements in beam order: what each is (retardance in waves, extinction ratio ER,
    detector efficiency η), its mount, reading (deg) and element angle (deg) at the readings.

    Names wrap within their column when the panel is narrow; numbers are never cut (their
    columns do not wrap, and a value wider than its column folds onto the next line)."""

    def __init__(self, bench: Bench, **kwargs: Any) -> None:
        super().__init__("", **kwargs)
        self.bench = bench
        self.rows_spec = _element_rows(bench)
        self._shown = False

    def on_mount(self) -> None:
        self.show(self.bench.readings(), {})

    def show(self, readings: Mapping[str, float], angles_deg: Mapping[str, Any]) -> None:
        """Refresh with mount ``readings`` and element ``angles_deg`` (both deg, by mount)."""
        table = Table(
            box=None, padding=(0, 1), show_edge=False, pad_edge=False, header_style="bold"
        )
        table.add_column("element", overflow="fold")  # the only column that wraps
        table.add_column("", no_wrap=True, overflow="fold")
        table.add_column("mount", no_wrap=True, overflow="fold")
        for name in ("reading", "angle"):
            table.add_column(
                name, justify="right", min_width=READING_WIDTH, no_wrap=True, overflow="fold"
            )
        for label, detail, mount, fixed in self.rows_spec:
            if mount is not None:
                reading, angle = deg(readings.get(mount)), deg(angles_deg.get(mount))
            else:
                reading, angle = ("", "") if fixed is None else ("fixed", deg(fixed, 2))
            table.add_row(literal(label), literal(detail), literal(mount or ""), reading, angle)
        # the rows wrap the same way whatever the readings: a new layout only the first time
        self.update(table, layout=not self._shown)
        self._shown = True
