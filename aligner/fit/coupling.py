"""The coupling strength ``g`` from pointer readings along a sweep.

Each point has the imbalance mount at a reading and a measured mean pointer shift with its
standard error (bench units). The model is the exact response of
:func:`aligner.physics.weak.pointer_response` for the bench (with its calibrated offsets) at
that reading: ``<q>`` for a position or phase readout, ``<p>`` for a momentum readout. ``g`` is
the Gaussian maximum-likelihood estimate (same machinery as the count fits). The linear
estimate uses ``d<q> = g Re A_w`` or ``d<p> = g Im A_w / (2 sigma^2)`` (Jozsa 2007) by
weighted least squares; its bias is stated against the exact one.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from ..bench import Bench
from ..model import coupling_observable, forward
from ..physics.weak import pointer_response, weak_value
from .counts import format_sigma
from .csvdata import PointerScan
from .likelihood import FitResult, Gaussian, maximize_likelihood
from .scanmodel import require_mount

__all__ = ["CouplingFit", "fit_coupling"]

#: |linear - exact| / stderr above which the linear estimate is called biased.
BIAS_SIGMA = 1.0


@dataclass(frozen=True)
class CouplingFit:
    """``strength`` (g, bench units per unit eigenvalue) with ``strength_err``; the linear
    estimate ``linear_strength`` (``linear_strength_err``); ``linear_bias`` = linear/exact - 1
    and ``linear_bias_sigma`` = (linear - exact)/strength_err; ``bench_strength`` is the bench
    file's ``coupling.strength`` and ``bench_difference_sigma`` = (strength -
    bench_strength)/strength_err; ``statement`` in words."""

    mount: str
    units: str
    strength: float
    strength_err: float
    linear_strength: float
    linear_strength_err: float
    linear_bias: float
    linear_bias_sigma: float
    statement: str
    fit: FitResult
    bench_strength: float = math.nan
    bench_difference_sigma: float = math.nan

    @property
    def bench_comparison(self) -> str:
        """The fitted strength against the bench file's, in words."""
        if not math.isfinite(self.bench_difference_sigma):
            return (
                f"the bench file's coupling.strength is {self.bench_strength:.5g} "
                f"{self.units}; no comparison (the error of the fit is unknown)"
            )
        far = abs(self.bench_difference_sigma) > 2.0
        return (
            f"fitted {self.strength:.5g} {self.units} against the bench file's "
            f"coupling.strength {self.bench_strength:.5g} "
            f"({format_sigma(self.bench_difference_sigma)}): "
            + (
                "they differ; store the fitted value (--write) if the scan is sound"
                if far
                else "consistent"
            )
        )

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner fit coupling --json``."""
        return {
            "fit": "coupling",
            "mount": self.mount,
            "units": self.units,
            "strength": self.strength,
            "strength_err": self.strength_err,
            "linear_strength": self.linear_strength,
            "linear_strength_err": self.linear_strength_err,
            "linear_bias": self.linear_bias,
            "linear_bias_sigma": self.linear_bias_sigma,
            "statement": self.statement,
            "bench_strength": self.bench_strength,
            "bench_difference_sigma": self.bench_difference_sigma,
            **self.fit.summary(),
        }

    def bench_updates(self) -> dict[str, float]:
        """``coupling.strength`` for :func:`aligner.bench.write_values`."""
        return {"coupling.strength": float(f"{self.strength:.6g}")}


def fit_coupling(
    bench: Bench,
    scan: PointerScan,
    mount: str | None = None,
    *,
    readings: Mapping[str, ArrayLike] | None = None,
) -> CouplingFit:
    """Fit ``g`` to pointer readings (see the module docstring); ``mount`` defaults to the
    bench's imbalance mount. ``readings`` (deg, one value or one per point) gives the other
    mounts where they were (a run's read-backs); default: the bench file's readings."""
    from ..prediction import predict

    name = require_mount(bench, mount, bench.imbalance_mount, "coupling", scan)
    c = bench.coupling
    at = {**(readings or {}), name: scan.reading_deg}
    fwd = forward(bench, at)
    a = coupling_observable(bench)
    momentum = c.readout == "momentum"
    # a pointer read from the counted events is diluted by the dark counts among them
    fraction = np.asarray(predict(bench, at).reading_fraction, float)

    def model(theta: np.ndarray) -> np.ndarray:
        g = np.atleast_2d(theta)[:, 0:1]
        r = pointer_response(fwd.rho, fwd.effect, a, g, c.pointer_sigma)
        return fraction * (r.momentum if momentum else r.position)

    wv = weak_value(fwd.rho, fwd.effect, a)
    x = fraction * (np.imag(wv) / (2 * c.pointer_sigma**2) if momentum else np.real(wv))
    w = 1 / scan.pointer_err**2
    info = float(np.sum(w * x * x))
    if not info > 0:
        from ..errors import InputError

        raise InputError(
            f"{scan.path}: the weak value is zero at every point; the pointer "
            "readings say nothing about the coupling"
        )
    g_lin = float(np.sum(w * x * scan.pointer)) / info
    g_lin_err = 1 / math.sqrt(info)
    family = Gaussian(scan.pointer, scan.pointer_err)
    # the exact response saturates, so start from the best of a wide grid, not the linear g
    centre = abs(g_lin) if g_lin != 0 else c.strength
    grid = np.sign(g_lin or 1.0) * centre * np.geomspace(0.05, 50.0, 121)[:, None]
    start = grid[int(np.argmin(np.sum(family.residuals(model(grid)) ** 2, axis=-1)))]
    step = 1e-6 * max(abs(float(start[0])), c.strength)
    fit = maximize_likelihood(model, family, start, ("strength",), [step])
    g, g_err = fit.value("strength"), fit.error("strength")
    bias = g_lin / g - 1 if g else math.nan
    bias_sigma = (g_lin - g) / g_err if g_err > 0 else math.nan
    if abs(bias_sigma) > BIAS_SIGMA:
        statement = (
            f"the linear formula is biased here: it gives {g_lin:.5g} {c.units}, "
            f"{_percent(bias)} from the exact {g:.5g} ({format_sigma(bias_sigma)}); the "
            "shifts are outside the linear regime (|g A_w| is not small against the "
            "pointer width), so use the exact estimate"
        )
    else:
        statement = (
            f"the linear formula agrees within the error ({_percent(bias)}, "
            f"{format_sigma(bias_sigma)}): the points are in the linear regime"
        )
    difference = (g - c.strength) / g_err if g_err > 0 else math.nan
    return CouplingFit(
        name,
        c.units,
        g,
        g_err,
        g_lin,
        g_lin_err,
        bias,
        bias_sigma,
        statement,
        fit,
        float(c.strength),
        difference,
    )


def _percent(value: float) -> str:
    """A signed percentage without a signed zero (``+1.2%``, ``0.00%``)."""
    return "0.00%" if abs(value) < 5e-5 else f"{value:+.2%}"
