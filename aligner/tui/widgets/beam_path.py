"""The beam path: every element of the bench in beam order with its mount, reading and angle."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from textual.widgets import DataTable

from ...bench import Bench
from ..format import deg, num

__all__ = ["BeamPath"]

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
    rows = [("source polarizer", s.mount, s.angle_deg, f"ER {num(s.extinction_ratio, 2)}")]
    for e in bench.pre:
        rows.append((f"{_KIND.get(e.type, e.type)} {e.key}", e.mount, e.angle_deg, _detail(e)))
    rows.append((f"coupling ({c.observable})", None, None, f"{c.readout}"))
    for e in bench.post:
        rows.append((f"{_KIND.get(e.type, e.type)} {e.key}", e.mount, e.angle_deg, _detail(e)))
    rows.append(("analyzer", a.mount, a.angle_deg, f"ER {num(a.extinction_ratio, 2)}"))
    return rows


def _detail(element: Any) -> str:
    if element.type in ("hwp", "qwp", "retarder"):
        return f"{num(element.retardance_waves, 4)} λ"
    if element.type == "polarizer":
        return f"ER {num(element.extinction_ratio, 2)}"
    return ""


class BeamPath(DataTable):
    """Elements in beam order: mount, reading (deg) and element angle (deg) at the readings."""

    can_focus = False

    def __init__(self, bench: Bench, **kwargs: Any) -> None:
        super().__init__(cursor_type="none", zebra_stripes=True, **kwargs)
        self.bench = bench
        self.rows_spec = _element_rows(bench)

    def on_mount(self) -> None:
        self.add_columns("element", "mount", "reading", "angle", "")
        self.show(self.bench.readings(), {})

    def show(self, readings: Mapping[str, float], angles_deg: Mapping[str, Any]) -> None:
        """Refresh with mount ``readings`` and element ``angles_deg`` (both deg, by mount)."""
        self.clear()
        for label, mount, fixed, detail in self.rows_spec:
            if mount is None:
                reading, angle = ("", "") if fixed is None else ("fixed", deg(fixed, 2))
            else:
                reading, angle = deg(readings[mount]), deg(angles_deg.get(mount))
            self.add_row(label, mount or "", reading, angle, detail)
        d = self.bench.detector
        self.add_row("detector", "", "", "", f"η {num(d.efficiency, 2)}")
