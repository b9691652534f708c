"""The live prediction at the current readings, with the detector rate warned about plainly."""

from __future__ import annotations

from typing import Any

from rich.table import Table
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widgets import Static

from ...bench import Bench
from ...prediction import format_weak_value
from ..format import num, rate, sci

__all__ = ["PredictionPanel"]

_AXIS = {"re": "Re A_w", "im": "Im A_w"}


def _grid() -> Table:
    table = Table.grid(padding=(0, 2))
    table.add_column(style="bold", no_wrap=True, min_width=14)
    table.add_column(ratio=1, overflow="fold")
    return table


class PredictionPanel(Vertical):
    """Weak value, leak rate, amplification (linear and exact), pointer shift, SNR, and the
    detector rate against the bench's safe rate (class ``danger`` when over it or saturated)."""

    def __init__(self, bench: Bench, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.bench = bench
        self.border_title = "Prediction at these readings"

    def compose(self) -> ComposeResult:
        yield Static(id="prediction-numbers")
        yield Static(id="detector-status", classes="detector-status")

    def show(self, p: Any) -> None:
        """Show a scalar :class:`aligner.prediction.Prediction`."""
        wv = complex(p.weak_value)
        t = _grid()
        t.add_row("imbalance", f"{float(p.imbalance_deg):+.4f}° from the null")
        t.add_row("weak value A_w", format_weak_value(wv, 5))
        t.add_row("leak rate", f"{sci(p.leak_rate)} per source photon")
        axis = _AXIS[p.axis]
        t.add_row(
            f"ampl. ({axis})",
            f"linear {num(p.amplification_linear, 5)} · exact {num(p.amplification_exact, 5)}",
        )
        seen, unseen = (wv.real, wv.imag) if p.axis == "re" else (wv.imag, wv.real)
        if abs(unseen) > abs(seen):
            other = "imaginary" if p.axis == "re" else "real"
            t.add_row(
                "",
                f"A_w is mostly {other}; a {self.bench.coupling.readout} readout sees {axis} only",
            )
        t.add_row("pointer shift", f"{num(p.pointer_shift, 4)} {p.units}")
        t.add_row("SNR", f"{num(p.snr_per_sqrt_s, 4)} per √s of counting")
        self.query_one("#prediction-numbers", Static).update(t)
        self.border_subtitle = f"amplification along {_AXIS[p.axis]}"
        self._detector(p)

    def _detector(self, p: Any) -> None:
        d = self.bench.detector
        over, saturated = bool(p.over_safe_rate), bool(p.saturated)
        t = _grid()
        t.add_row("detector", f"{rate(p.detector_rate)} true, {rate(p.measured_rate)} counted")
        t.add_row("safe rate", rate(d.safe_rate))
        if over or saturated:
            why = " and ".join(
                w for w, on in (("ABOVE THE SAFE RATE", over), ("SATURATED", saturated)) if on
            )
            t.add_row("⚠ DANGER", why)
            t.add_row("", "keep the shutter shut or the beam blocked before exposing the detector")
        else:
            t.add_row("", "below the safe rate, not saturated")
        box = self.query_one("#detector-status", Static)
        box.update(t)
        box.set_class(over or saturated, "danger")
