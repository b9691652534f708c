"""Plots of the working point: amplification and leak rate against imbalance.

The amplification plot has the linear and the exact response along the imbalance mount, the
current and the planned point, and where each limit of amplification lies (a vertical line per
mechanism, a horizontal line at the combined largest amplification). The leak-rate plot (log
scale) has the predicted leak rate, the same two points, the leak rate at which the detector
would reach its safe rate, and the measured points of the latest sweep with their intervals.

The curves come from :func:`aligner.prediction.predict` along the imbalance mount (worked out
in a thread); the widgets only draw. Side by side on a wide terminal, stacked on a narrow one.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Container
from textual.timer import Timer
from textual.widgets import Static
from textual_plotext import PlotextPlot

from ..format import num, sci

if TYPE_CHECKING:
    from ...prediction import Limits, Prediction
    from ...run.log import LoggedPoint

__all__ = ["Curve", "Spot", "WorkingPoint", "curve_readings", "safe_leak"]

#: Points of a curve.
CURVE_POINTS = 241
#: Seconds without a change before the plots are drawn again (a burst of keys draws once,
#: after it).
REDRAW_S = 0.2
#: Colours of the curves and marks (plotext names).
LINEAR, EXACT, LEAK, NOW, PLANNED, LIMIT, SAFE, MEASURED = (
    "cyan",
    "orange",
    "cyan",
    "white",
    "magenta",
    "gray",
    "red",
    "orange",
)


@dataclass(frozen=True)
class Curve:
    """The prediction along the imbalance mount, sorted by imbalance (deg): amplification
    (linear, exact), leak rate (per source photon) and detector exposure (counts/s)."""

    imbalance: tuple[float, ...]
    linear: tuple[float, ...]
    exact: tuple[float, ...]
    leak: tuple[float, ...]
    exposure: tuple[float, ...]

    @classmethod
    def of(cls, p: Prediction) -> Curve:
        """From an array :class:`aligner.prediction.Prediction`."""
        order = np.argsort(np.asarray(p.imbalance_deg, float))

        def col(values: ArrayLike) -> tuple[float, ...]:
            return tuple(np.asarray(values, float)[order].tolist())

        return cls(
            col(p.imbalance_deg),
            col(p.amplification_linear),
            col(p.amplification_exact),
            col(p.leak_rate),
            col(p.exposure_rate),
        )


@dataclass(frozen=True)
class Spot:
    """One working point: imbalance (deg), exact amplification and leak rate."""

    imbalance: float
    amplification: float
    leak: float

    @classmethod
    def of(cls, p: Prediction) -> Spot:
        """From a scalar :class:`aligner.prediction.Prediction`."""
        return cls(float(p.imbalance_deg), float(p.amplification_exact), float(p.leak_rate))


def curve_readings(mount: Any, null_deg: float, half_width_deg: float) -> np.ndarray:
    """Readings (deg) of the imbalance ``mount`` (:class:`aligner.bench.Mount`) for a curve
    around its null: ``null_deg`` plus and minus ``half_width_deg`` (at least 0.5 deg, at most
    90), inside its travel."""
    half = min(max(half_width_deg, 0.5), 90.0)
    low, high = mount.travel_deg
    return np.linspace(max(null_deg - half, low), min(null_deg + half, high), CURVE_POINTS)


def safe_leak(curve: Curve, safe_rate: float) -> float | None:
    """The leak rate at which the predicted exposure reaches ``safe_rate`` (counts/s): read off
    the curve where it crosses, else scaled from its brightest point (exposure is proportional
    to the leak rate below saturation)."""
    leak, exposure = np.asarray(curve.leak), np.asarray(curve.exposure)
    if not len(leak) or not math.isfinite(safe_rate):
        return None
    order = np.argsort(exposure)
    if exposure[order[0]] <= safe_rate <= exposure[order[-1]]:
        return float(np.interp(safe_rate, exposure[order], leak[order]))
    k = int(order[-1])
    return float(leak[k] * safe_rate / exposure[k]) if exposure[k] > 0 else None


class _Plot(PlotextPlot):
    """One of the two plots; draws what its :class:`WorkingPoint` holds."""

    def __init__(self, quantity: str, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.quantity = quantity
        self.border_title = (
            "Amplification vs imbalance"
            if quantity == "amplification"
            else "Leak rate vs imbalance"
        )

    def draw(self, view: WorkingPoint) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        plt.xlabel("imbalance (deg)")
        if self.quantity == "amplification":
            _amplification(plt, view)
        else:
            _leak(plt, view)
        self.refresh()


def _spots(view: WorkingPoint) -> list[tuple[Spot, str, str, str]]:
    return [
        (s, marker, color, label)
        for s, marker, color, label in (
            (view.current, "●", NOW, "now"),
            (view.planned, "◆", PLANNED, "plan"),
        )
        if s is not None
    ]


def _amplification(plt: Any, view: WorkingPoint) -> None:
    plt.ylabel("amplification")
    c = view.curve
    top = 1.0
    if c is not None:
        x = list(c.imbalance)
        plt.plot(x, list(c.exact), marker="braille", color=EXACT, label="exact")
        plt.plot(x, list(c.linear), marker="braille", color=LINEAR, label="linear")
        top = max((abs(v) for v in c.exact), default=1.0)
    lim = view.limits
    if lim is not None:
        top = max(top, abs(lim.max_amplification))
        for value in (lim.max_amplification, -lim.max_amplification):
            plt.hline(value, color=LIMIT)
        for name, m in lim.mechanisms.items():
            if c is None or c.imbalance[0] <= m.at_imbalance_deg <= c.imbalance[-1]:
                plt.vline(m.at_imbalance_deg, color=SAFE if name == lim.limited_by else LIMIT)
    for s, marker, color, label in _spots(view):
        plt.scatter([s.imbalance], [s.amplification], marker=marker, color=color, label=label)
        top = max(top, abs(s.amplification))
    plt.ylim(-1.3 * top, 1.3 * top)
    if c is None and lim is None:
        plt.title("working out the curve…")


def _log(values: Sequence[float]) -> list[float]:
    return [math.log10(v) for v in values]


def _leak(plt: Any, view: WorkingPoint) -> None:
    """The leak-rate plot, drawn as log10 on a linear axis with decade labels (plotext's own
    log scale transforms its data again on every render)."""
    plt.ylabel("leak rate")
    c = view.curve
    ys: list[float] = []
    if c is not None:
        ys += _log(c.leak)
        plt.plot(list(c.imbalance), _log(c.leak), marker="braille", color=LEAK, label="predicted")
        level = safe_leak(c, view.safe_rate)
        if level is not None and level > 0:
            plt.hline(math.log10(level), color=SAFE)  # named in the caption
            ys.append(math.log10(level))
    measured = [p for p in view.measured if p.leak is not None and p.leak > 0]
    for p in measured[-150:]:
        if p.leak_lo is not None and p.leak_hi is not None and p.leak_lo > 0:
            plt.plot(
                [p.imbalance_deg, p.imbalance_deg], _log([p.leak_lo, p.leak_hi]), color=MEASURED
            )
    if measured:
        leaks = [p.leak for p in measured if p.leak is not None]  # all of them (filtered above)
        ys += _log(leaks)
        plt.scatter(
            [p.imbalance_deg for p in measured],
            _log(leaks),
            marker="+",
            color=MEASURED,
            label="measured",
        )
    for s, marker, color, label in _spots(view):
        if s.leak > 0:
            ys.append(math.log10(s.leak))
            plt.scatter(
                [s.imbalance], [math.log10(s.leak)], marker=marker, color=color, label=label
            )
    if not ys:
        plt.title("working out the curve…")
        return
    decades = range(math.floor(min(ys)), math.ceil(max(ys)) + 1)
    plt.yticks(list(decades), [f"1e{d}" for d in decades])


class WorkingPoint(Container):
    """The two plots and what they show; every ``show_*`` keeps the rest."""

    def __init__(self, safe_rate: float, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.safe_rate = safe_rate
        self.curve: Curve | None = None
        self.limits: Limits | None = None
        self.current: Spot | None = None
        self.planned: Spot | None = None
        self.measured: tuple[LoggedPoint, ...] = ()
        self._timer: Timer | None = None

    def compose(self) -> ComposeResult:
        with Container(classes="working-plots"):
            yield _Plot("amplification", classes="working-plot")
            yield _Plot("leak", classes="working-plot")
        yield Static("", classes="working-caption")

    def on_mount(self) -> None:
        self._draw()

    def show_curve(self, curve: Curve | None, limits: Limits | None = None) -> None:
        """A new prediction curve and the limits (None: unknown)."""
        self.curve, self.limits = curve, limits
        self._soon()

    def show_points(
        self,
        *,
        current: Spot | None = None,
        planned: Spot | None = None,
        measured: Sequence[LoggedPoint] | None = None,
    ) -> None:
        """Move the marked points (arguments left out are kept); ``measured`` are logged
        points of a sweep (``imbalance_deg``, ``leak``, ``leak_lo``, ``leak_hi``)."""
        if current is not None:
            self.current = current
        if planned is not None:
            self.planned = planned
        if measured is not None:
            self.measured = tuple(measured)
        self._soon()

    @property
    def drawn(self) -> bool:
        """True when the plots show everything given so far (no redraw is pending)."""
        return self._timer is None

    def _soon(self) -> None:
        if self._timer is not None:
            self._timer.stop()
        self._timer = self.set_timer(REDRAW_S, self._draw)

    def _draw(self) -> None:
        self._timer = None
        for plot in self.query(_Plot):
            plot.draw(self)
        self.query_one(".working-caption", Static).update(self.caption())

    def caption(self) -> Text:
        """The marked numbers in words (the plots are coarse on a small terminal)."""
        text = Text()
        for s, marker, _color, label in _spots(self):
            text.append(f"{marker} {label}: ", style="bold")
            text.append(
                f"imbalance {s.imbalance:+.4f}°, exact amplification {num(s.amplification, 4)}, "
                f"leak rate {sci(s.leak)}\n"
            )
        lim = self.limits
        if lim is not None:
            text.append("| limits: ", style="bold")
            text.append(
                f"largest amplification {num(lim.max_amplification, 4)} as seen at "
                f"{lim.at_imbalance_deg:+.4f}°, limited by {lim.limited_by}; each alone: "
                + ", ".join(
                    f"{name} {m.at_imbalance_deg:+.3f}°" for name, m in lim.mechanisms.items()
                )
                + "\n"
            )
        level = safe_leak(self.curve, self.safe_rate) if self.curve is not None else None
        if level is not None:
            text.append("— safe rate: ", style=f"bold {SAFE}")
            text.append(f"reached at a leak rate of {sci(level)}\n")
        if self.measured:
            text.append("+ measured: ", style="bold")
            text.append(f"{len(self.measured)} points of the latest sweep\n")
        text.rstrip()
        return text
