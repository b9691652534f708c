"""The live prediction at the current readings, with the detector rate warned about plainly."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widgets import Static

from ...bench import Bench
from ...prediction import format_weak_value
from ..format import literal, num, rate, sci

if TYPE_CHECKING:
    from ...prediction import Prediction

__all__ = ["PredictionPanel"]

_AXIS = {"re": "Re A_w", "im": "Im A_w"}
#: Width of the label column (characters).
LABEL_WIDTH = 16


class _Grid:
    """Label and value lines (labels in a column of :data:`LABEL_WIDTH`); every value is shown
    as written (no markup). Plain lines rather than a table: a keystroke repaints them in a
    fraction of the time."""

    def __init__(self) -> None:
        self.text = Text()
        self.rows = 0

    def row(self, label: str, value: str) -> None:
        if self.rows:
            self.text.append("\n")
        self.text.append_text(literal(label.ljust(LABEL_WIDTH), "bold"))
        self.text.append_text(literal(value))
        self.rows += 1


class PredictionPanel(Vertical):
    """Weak value, leak rate, amplification (linear, exact, and as seen: exact diluted by the
    events that carry no shift, the figure the limits are worked out for), pointer shift, SNR,
    and the detector rate against the bench's safe rate (class ``danger`` when over it or
    saturated)."""

    def __init__(self, bench: Bench, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.bench = bench
        self.border_title = "Prediction at these readings"
        self._rows: dict[str, int] = {}

    def compose(self) -> ComposeResult:
        yield Static(id="prediction-numbers")
        yield Static(id="detector-status", classes="detector-status")

    def show(self, p: Prediction) -> None:
        """Show a scalar :class:`aligner.prediction.Prediction`."""
        wv = complex(p.weak_value)
        t = _Grid()
        t.row("imbalance", f"{float(p.imbalance_deg):+.4f}° from the null")
        t.row("weak value A_w", format_weak_value(wv, 5))
        t.row("leak rate", f"{sci(p.leak_rate)} per source photon")
        axis = _AXIS[p.axis]
        t.row(
            f"ampl. ({axis})",
            f"linear {num(p.amplification_linear, 5)} · exact {num(p.amplification_exact, 5)}",
        )
        t.row("ampl. as seen", f"{num(p.amplification_seen, 5)}, comparable with the limits")
        t.row("", f"= exact × {num(p.reading_fraction, 4)}, share with the shift")
        seen, unseen = (wv.real, wv.imag) if p.axis == "re" else (wv.imag, wv.real)
        if abs(unseen) > abs(seen):
            other = "imaginary" if p.axis == "re" else "real"
            t.row(
                "",
                f"A_w is mostly {other}; a {self.bench.coupling.readout} readout sees {axis} only",
            )
        t.row("pointer shift", f"{num(p.pointer_shift, 4)} {p.units}")
        t.row("SNR", f"{num(p.snr_per_sqrt_s, 4)} per √s of counting")
        self._update("#prediction-numbers", t)
        subtitle = f"amplification along {_AXIS[p.axis]}"
        if self.border_subtitle != subtitle:  # an unchanged border costs no repaint
            self.border_subtitle = subtitle
        self._detector(p)

    def _detector(self, p: Prediction) -> None:
        d = self.bench.detector
        over, saturated = bool(p.over_safe_rate), bool(p.saturated)
        t = _Grid()
        t.row("detector", f"{rate(p.detector_rate)} true, {rate(p.measured_rate)} counted")
        t.row("safe rate", rate(d.safe_rate))
        if over or saturated:
            why = " and ".join(
                w for w, on in (("ABOVE THE SAFE RATE", over), ("SATURATED", saturated)) if on
            )
            t.row("⚠ DANGER", why)
            t.row("", "keep the shutter shut or the beam blocked before exposing the detector")
        else:
            t.row("", "below the safe rate, not saturated")
        self._update("#detector-status", t).set_class(over or saturated, "danger")

    def _update(self, selector: str, grid: _Grid) -> Static:
        """Put ``grid`` in ``selector``; the layout is redone only when its row count changes
        (a keystroke then costs one repaint, not a new layout of the screen)."""
        box = self.query_one(selector, Static)
        rows = grid.rows
        box.update(grid.text, layout=self._rows.get(selector) != rows)
        self._rows[selector] = rows
        return box
