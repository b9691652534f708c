"""Measured leak rate with its interval against the prediction, versus imbalance."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

from textual_plotext import PlotextPlot

if TYPE_CHECKING:
    from ...run.log import LoggedPoint

__all__ = ["LeakPlot"]

#: Interval bars drawn for at most this many points (the newest); markers for all.
MAX_BARS = 150


class LeakPlot(PlotextPlot):
    """Leak rate (per source photon) versus imbalance (deg): the prediction as a line (a curve
    when given, else the logged prediction at each point) and the measured points with their
    intervals as bars."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.border_title = "Leak rate vs imbalance"
        self._points: tuple[LoggedPoint, ...] = ()
        self._curve: tuple[Sequence[float], Sequence[float]] | None = None

    def on_mount(self) -> None:
        super().on_mount()
        self._draw()

    def show(
        self,
        points: Sequence[LoggedPoint],
        curve: tuple[Sequence[float], Sequence[float]] | None = None,
    ) -> None:
        """Plot logged points (``imbalance_deg``, ``leak``, ``leak_lo``, ``leak_hi``,
        ``predicted_leak``) and optionally a prediction ``curve`` (imbalance deg, leak)."""
        self._points = tuple(points)
        self._curve = curve
        self._draw()

    def _draw(self) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        plt.xlabel("imbalance (deg)")
        plt.ylabel("leak rate")
        if self._curve is not None:
            x, y = self._curve
            plt.plot(list(x), list(y), marker="braille", color="cyan", label="predicted")
        elif self._points:
            ordered = sorted(self._points, key=lambda p: p.imbalance_deg)
            plt.plot(
                [p.imbalance_deg for p in ordered],
                [p.predicted_leak for p in ordered],
                marker="braille",
                color="cyan",
                label="predicted",
            )
        if self._points:
            for p in self._points[-MAX_BARS:]:
                plt.plot(
                    [p.imbalance_deg, p.imbalance_deg],
                    [p.leak_lo, p.leak_hi],
                    marker="braille",
                    color="orange",
                )
            plt.scatter(
                [p.imbalance_deg for p in self._points],
                [p.leak for p in self._points],
                marker="●",
                color="orange+",
                label="measured",
            )
        if self._curve is None and not self._points:
            plt.title("no points yet")
        self.refresh()
