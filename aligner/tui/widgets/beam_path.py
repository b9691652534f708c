"""The beam path: every element of the bench in beam order with its mount, reading and angle."""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from textual.widgets import DataTable

from ...bench import Bench
from ..format import deg, literal, num

if TYPE_CHECKING:
    from ...bench import Element

__all__ = ["BeamPath"]

#: Width of the reading and angle columns (``-170.000°``), fixed so a new reading repaints
#: the cells without a new layout.
READING_WIDTH = 9

_KIND = {
    "hwp": "half-wave",
    "qwp": "quarter-wave",
    "retarder": "retarder",
    "rotator": "rotator",
    "polarizer": "polarizer",
}


def _element_rows(bench: Bench) -> list[tuple[str, str | None, float | None, str]]:
    """(label, mount or None, fixed angle deg or None, detail) in beam order, source to analyzer."""
    s, c, a = bench.source, bench.coupling, bench.analyzer
    rows: list[tuple[str, str | None, float | None, str]] = [
        ("source polarizer", s.mount, s.angle_deg, f"ER {num(s.extinction_ratio, 2)}")
    ]
    for e in bench.pre:
        rows.append((f"{_KIND.get(e.type, e.type)} {e.key}", e.mount, e.angle_deg, _detail(e)))
    rows.append((f"coupling ({c.observable})", None, None, f"{c.readout}"))
    for e in bench.post:
        rows.append((f"{_KIND.get(e.type, e.type)} {e.key}", e.mount, e.angle_deg, _detail(e)))
    rows.append(("analyzer", a.mount, a.angle_deg, f"ER {num(a.extinction_ratio, 2)}"))
    return rows


def _detail(element: Element) -> str:
    if element.type in ("hwp", "qwp", "retarder"):
        return f"{num(element.retardance_waves, 4)} λ"
    if element.type == "polarizer":
        return f"ER {num(element.extinction_ratio, 2)}"
    return ""


class BeamPath(DataTable):
    """Elements in beam order: mount, reading (deg) and element angle (deg) at the readings
    (only the reading and angle cells change as the readings do)."""

    can_focus = False

    def __init__(self, bench: Bench, **kwargs: Any) -> None:
        super().__init__(cursor_type="none", zebra_stripes=True, **kwargs)
        self.bench = bench
        self.rows_spec = _element_rows(bench)

    def on_mount(self) -> None:
        self.add_column("element", key="element")
        self.add_column("mount", key="mount")
        self.add_column("reading", key="reading", width=READING_WIDTH)
        self.add_column("angle", key="angle", width=READING_WIDTH)
        self.add_column("", key="detail")
        for n, (label, mount, fixed, detail) in enumerate(self.rows_spec):
            fixed_cells = ("", "") if fixed is None else ("fixed", deg(fixed, 2))
            reading, angle = fixed_cells if mount is None else ("", "")
            self.add_row(
                literal(label), literal(mount or ""), reading, angle, literal(detail), key=str(n)
            )
        d = self.bench.detector
        self.add_row("detector", "", "", "", f"η {num(d.efficiency, 2)}")
        self.show(self.bench.readings(), {})

    def show(self, readings: Mapping[str, float], angles_deg: Mapping[str, Any]) -> None:
        """Refresh with mount ``readings`` and element ``angles_deg`` (both deg, by mount)."""
        for n, (_label, mount, _fixed, _detail) in enumerate(self.rows_spec):
            if mount is not None:
                self.update_cell(str(n), "reading", deg(readings[mount]))
                self.update_cell(str(n), "angle", deg(angles_deg.get(mount)))
