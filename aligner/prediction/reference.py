"""The prediction by its definitions, the slow way: density matrices, the pointer response summed
in the eigenbasis of the observable, the signed imbalance from three stacked evaluations of the
whole chain, the SNR's ``g d<r>/dg`` by central differences in ``g``.

This is what :func:`aligner.prediction.predict` computes in closed form in Stokes space; the
test of the fast path compares the two on random benches. Nothing else should call it.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import coupling_observable, forward, full_readings
from ..physics.weak import pointer_response, weak_value
from .detector import detector_flags, detector_rates
from .readout import readout_axis
from .snr import snr_of_signal

__all__ = ["reference_prediction"]

_DERIVATIVE_STEP = 1e-4  # relative step in g for d<r>/dg


def _unit_sum_norm(s: NDArray[np.float64], e: NDArray[np.float64]) -> NDArray[np.float64]:
    """``|n_i + n_f| / 2`` from Stokes 4-vectors (..., 4)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        n_i = s[..., 1:] / np.linalg.norm(s[..., 1:], axis=-1, keepdims=True)
        n_f = e[..., 1:] / np.linalg.norm(e[..., 1:], axis=-1, keepdims=True)
    return np.linalg.norm(n_i + n_f, axis=-1) / 2


def _imbalance(bench: Bench, r: Mapping[str, NDArray[np.float64]]) -> NDArray[np.float64]:
    """Signed imbalance: the overlap at the reading, its sign from 1e-3 deg either side."""
    name = bench.imbalance_mount
    shape = np.broadcast_shapes(*(np.shape(v) for v in r.values()))
    stacked = {k: np.broadcast_to(v, shape) for k, v in r.items()}
    stacked[name] = np.stack([stacked[name], stacked[name] + 1e-3, stacked[name] - 1e-3])
    fwd = forward(bench, stacked)
    gap, up, down = _unit_sum_norm(fwd.state_stokes, fwd.effect_stokes)
    sign = np.where(up >= down, 1.0, -1.0)
    return np.rad2deg(np.arcsin(np.clip(gap, 0.0, 1.0))) * sign


def reference_prediction(
    bench: Bench, readings: Mapping[str, ArrayLike] | None = None
) -> dict[str, NDArray[np.generic]]:
    """Every field of :class:`aligner.prediction.Prediction` (except ``angles_deg``, ``axis``
    and ``units``) by the definitions above, as a dict keyed by field name."""
    r = full_readings(bench, readings)
    fwd = forward(bench, r)
    a = coupling_observable(bench)
    c = bench.coupling
    axis = readout_axis(bench)
    rho, effect = fwd.rho, fwd.effect

    def shift(g: float) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        resp = pointer_response(rho, effect, a, g, c.pointer_sigma)
        moved = resp.position if axis == "re" else resp.momentum * 2 * c.pointer_sigma**2
        return resp.probability, moved

    wv = weak_value(rho, effect, a)
    probability, moved = shift(c.strength)
    h = _DERIVATIVE_STEP
    signal = (shift(c.strength * (1 + h))[1] - shift(c.strength * (1 - h))[1]) / (2 * h)
    rates = detector_rates(bench, probability)
    saturated, over = detector_flags(bench, rates)
    return {
        "weak_value": wv,
        "leak_rate": probability,
        "amplification_linear": np.real(wv) if axis == "re" else np.imag(wv),
        "amplification_exact": moved / c.strength,
        "pointer_shift": moved if axis == "re" else moved / (2 * c.pointer_sigma**2),
        "detector_rate": rates.true_rate,
        "measured_rate": rates.measured_rate,
        "saturated": saturated,
        "over_safe_rate": over,
        "exposure_rate": rates.linear_rate,
        "imbalance_deg": _imbalance(bench, r),
        "snr_per_sqrt_s": snr_of_signal(signal, rates, bench),
        "signal_fraction": rates.signal_fraction,
    }
