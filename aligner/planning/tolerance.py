"""Tolerance budget of a planned setting: how far the amplification and the leak rate stray when
the mounts and plates are only as good as the bench file says.

Error sources (each drawn independently per sample, vectorized over all samples at once):

* ``repeatability``: every mount lands at its reading plus a Gaussian error of rms
  ``repeatability_deg``;
* ``offset``: the element angle of every mount is off by a Gaussian error of rms
  ``offset_err_deg`` (the calibration's uncertainty of ``offset_deg``);
* ``retardance``: every waveplate's retardance is off by a uniform error in
  ``±retardance_tol_waves`` (a manufacturer's tolerance is a bound, not an rms).

The spread is reported as the median and the central 68 % and 95 % ranges of the Monte Carlo
samples; each error is also run alone (on a tenth of the samples), and the one with the
widest 68 % range dominates. The
first-order (linear) propagation through the sensitivities is given beside it: for small
errors the two agree.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import NamedTuple, cast

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench, Element
from ..model import BLOCK
from .observe import observe
from .targets import Target

__all__ = ["ErrorItem", "Spread", "Tolerance", "error_items", "first_order_std", "tolerance_budget"]

Real = NDArray[np.float64]
#: A plate's position in the bench: arm (``pre``/``post``) and index in that arm.
PlateKey = tuple[str, int]

_PLATES = ("hwp", "qwp", "retarder")
_STEP_DEG = 1e-4  # finite-difference step of the first-order propagation (reading, deg)
_STEP_WAVES = 1e-5  # ... and of the retardance (waves)


#: The reported percentiles: median, central 68 % and 95 % ranges (fractions).
_QUANTILES = np.array([50.0, 15.865, 84.135, 2.275, 97.725]) / 100


def _percentiles(ordered: Real) -> Real:
    """:data:`_QUANTILES` of sorted values as ``numpy.percentile`` computes them by default
    (linear interpolation between the order statistics around ``(n - 1) q``, with numpy's
    two-sided formula, so the numbers agree to the last bit). One sort and ten look-ups cost
    a quarter of numpy's partition around ten order statistics on 1e5 values."""
    n = ordered.size
    index = (n - 1) * _QUANTILES
    below = np.floor(index).astype(np.intp)
    gamma = index - below
    a, b = ordered[below], ordered[np.minimum(below + 1, n - 1)]
    diff = b - a
    return np.where(gamma >= 0.5, b - diff * (1 - gamma), a + diff * gamma)


@dataclass(frozen=True)
class Spread:
    """Median, central 68 % / 95 % ranges and standard deviation of a sampled quantity."""

    median: float
    low68: float
    high68: float
    low95: float
    high95: float
    std: float

    @classmethod
    def of(cls, values: Real) -> Spread:
        """The spread of the finite ``values`` (all NaN when none is finite)."""
        v = values[np.isfinite(values)]
        if v.size == 0:
            nan = float("nan")
            return cls(nan, nan, nan, nan, nan, nan)
        median, low68, high68, low95, high95 = (float(x) for x in _percentiles(np.sort(v)))
        return cls(median, low68, high68, low95, high95, float(np.std(v)))

    @property
    def half_width68(self) -> float:
        """Half the 68 % range: the Monte Carlo counterpart of one standard deviation."""
        return 0.5 * (self.high68 - self.low68)


@dataclass(frozen=True)
class Tolerance:
    """Monte Carlo spread of the target quantity (``figure``: the amplification on the
    target's axis, ``|A_w|``, or the leak rate) and of the leak rate at a setting."""

    samples: int
    figure: Spread
    leak_rate: Spread
    by_source: Mapping[str, float]  # 68 % half-width of the figure with that error alone
    dominant: str | None  # None when the bench file gives no errors at all
    first_order_std: float  # linear propagation through the sensitivities

    def to_dict(self) -> dict[str, object]:
        def spread(s: Spread) -> dict[str, float | list[float]]:
            return {
                "median": s.median,
                "range68": [s.low68, s.high68],
                "range95": [s.low95, s.high95],
                "std": s.std,
            }

        return {
            "samples": self.samples,
            "value": spread(self.figure),
            "leak": spread(self.leak_rate),
            "by_source": dict(self.by_source),
            "dominant": self.dominant,
            "first_order_std": self.first_order_std,
        }


def _plates(bench: Bench) -> list[tuple[str, int, Element]]:
    return [
        (arm, i, e)
        for arm in ("pre", "post")
        for i, e in enumerate(getattr(bench, arm))
        if e.type in _PLATES
    ]


def _with_retardance(bench: Bench, shifts: Mapping[PlateKey, Real]) -> Bench:
    """A bench whose plates carry extra retardance (waves; per-sample arrays, which
    :func:`aligner.model.forward` broadcasts like readings)."""

    def shifted(arm: str, i: int, e: Element) -> Element:
        if (arm, i) not in shifts:
            return e
        # Element declares the file's float; the model broadcasts an array there like a reading
        waves = cast(float, e.retardance_waves + shifts[(arm, i)])
        return replace(e, retardance_waves=waves)

    pre, post = (
        tuple(shifted(arm, i, e) for i, e in enumerate(getattr(bench, arm)))
        for arm in ("pre", "post")
    )
    return replace(bench, pre=pre, post=post)


def _figure_and_leak(
    bench: Bench,
    target: Target,
    readings: Mapping[str, ArrayLike],
) -> tuple[Real, Real]:
    obs = observe(bench, readings)
    return np.asarray(target.figure(obs), float), obs.leak_rate


class ErrorItem(NamedTuple):
    """One error the bench file declares, labelled as reported (e.g. ``analyzer
    repeatability``). ``source``: ``repeatability`` or ``offset`` of the mount ``key``, or
    ``retardance`` of the plate at ``key`` = (arm, index)."""

    label: str
    source: str
    key: str | PlateKey


def error_items(bench: Bench) -> list[ErrorItem]:
    """Every error the bench file declares, mounts first, then plates."""
    items: list[ErrorItem] = []
    for name, m in bench.mounts.items():
        if m.repeatability_deg > 0:
            items.append(ErrorItem(f"{name} repeatability", "repeatability", name))
        if m.offset_err_deg > 0:
            items.append(ErrorItem(f"{name} offset", "offset", name))
    for arm, i, e in _plates(bench):
        if e.retardance_tol_waves > 0:
            where = f"{e.mount} plate" if e.mount else f"{arm}[{i}] plate"
            items.append(ErrorItem(f"{where} retardance", "retardance", (arm, i)))
    return items


def _sample(
    bench: Bench,
    target: Target,
    settings: Mapping[str, float],
    items: Sequence[ErrorItem],
    samples: int,
    rng: np.random.Generator,
) -> tuple[Real, Real]:
    """Figure and leak rate of ``samples`` fresh draws of the errors ``items``."""
    # mounts without an error stay scalars: their elements are evaluated once, not per sample
    readings: dict[str, Real] = {n: np.asarray(settings[n], float) for n in bench.mounts}
    shifts: dict[PlateKey, Real] = {}
    for _, source, key in items:
        if isinstance(key, tuple):
            arm, i = key
            tol = getattr(bench, arm)[i].retardance_tol_waves
            shifts[key] = rng.uniform(-tol, tol, samples)
        elif source == "repeatability":
            readings[key] = readings[key] + rng.normal(
                0.0, bench.mounts[key].repeatability_deg, samples
            )
        else:
            # element angle = sense*(reading - offset): an offset error acts as a reading error
            readings[key] = readings[key] - rng.normal(
                0.0, bench.mounts[key].offset_err_deg, samples
            )
    # evaluated in blocks whose temporaries stay in cache (as aligner.prediction does)
    figure, leak = np.empty(samples), np.empty(samples)
    for start in range(0, samples, BLOCK):
        part = slice(start, min(start + BLOCK, samples))
        block_bench = _with_retardance(bench, {k: v[part] for k, v in shifts.items()})
        block = {k: v[part] if v.ndim else v for k, v in readings.items()}
        figure[part], leak[part] = _figure_and_leak(block_bench, target, block)
    return figure, leak


def first_order_std(bench: Bench, target: Target, settings: Mapping[str, float]) -> float:
    """Standard deviation of the figure from linear propagation of the same error model:
    ``sum_m (df/dr_m)^2 (rep_m^2 + off_m^2) + sum_p (df/dw_p)^2 tol_p^2 / 3``."""
    names = list(bench.mounts)
    h = _STEP_DEG
    readings = {n: np.full(2 * len(names), settings[n]) for n in names}
    for k, n in enumerate(names):
        readings[n][2 * k] += h
        readings[n][2 * k + 1] -= h
    f, _ = _figure_and_leak(bench, target, readings)
    var = 0.0
    for k, n in enumerate(names):
        d = (f[2 * k] - f[2 * k + 1]) / (2 * h)
        m = bench.mounts[n]
        var += d**2 * (m.repeatability_deg**2 + m.offset_err_deg**2)
    for arm, i, e in _plates(bench):
        if e.retardance_tol_waves > 0:
            shift = np.array([_STEP_WAVES, -_STEP_WAVES])
            fp, _ = _figure_and_leak(
                _with_retardance(bench, {(arm, i): shift}), target, dict(settings)
            )
            d = (fp[0] - fp[1]) / (2 * _STEP_WAVES)
            var += d**2 * e.retardance_tol_waves**2 / 3.0
    return float(np.sqrt(var))


def tolerance_budget(
    bench: Bench,
    target: Target,
    settings: Mapping[str, float],
    *,
    samples: int = 100_000,
    seed: int = 0,
) -> Tolerance:
    """Monte Carlo tolerance budget at ``settings`` (readings, deg; missing mounts at the file
    readings): all errors together, then each alone to find the dominant one."""
    full = {**bench.readings(), **settings}
    rng = np.random.default_rng(seed)
    items = error_items(bench)
    fig, leak = _sample(bench, target, full, items, samples, rng)
    # a 68 % half-width from n samples is known to about 1/sqrt(n) of itself (Gaussian
    # order statistics; from memory): 1e4 rank the errors and give their two digits
    alone = max(samples // 10, 1000)
    by_source = {
        item[0]: Spread.of(_sample(bench, target, full, [item], alone, rng)[0]).half_width68
        for item in items
    }
    dominant = max(by_source, key=lambda k: by_source[k]) if by_source else None
    return Tolerance(
        samples,
        Spread.of(fig),
        Spread.of(leak),
        by_source,
        dominant,
        first_order_std(bench, target, full),
    )
