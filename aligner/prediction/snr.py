"""Signal to noise of the coupling estimate, with and without post-selection.

Model (per sqrt(second) of counting): ``g d<r>/dg f / sqrt(s^2/m + j^2)`` with ``<r>`` the mean
readout shift in position-equivalent units, ``s`` the per-photon pointer spread (the prepared
one; exact in the weak regime), ``m`` the counted rate, ``f`` the share of counts that are
signal (dark counts carry no shift) and ``j`` the technical pointer jitter
(``coupling.jitter_rms``; in 1/units for a momentum readout). ``g d<r>/dg`` is the closed form
of :meth:`aligner.physics.weak.StokesResponse.sensitivity`.

The standard measurement it is compared with: no analyzer, the same photons, pointer and
detector, the input in the eigenstate of ``A`` with the larger ``|eigenvalue|``, read in
position (so it reaches ``|a| g`` per photon).

Seam: :func:`snr_of` is the one place :class:`aligner.prediction.Prediction` takes its SNR
from (a response, the detector rates, the readout axis); another estimator of the same
quantity, such as one from the Fisher information of the post-selected pointer distribution,
belongs beside it with the same arguments.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import Forward, coupling_observable, forward
from ..physics.detection import DetectorRates
from ..physics.weak import StokesResponse
from .detector import detector_flags, detector_rates
from .readout import check_axis, readout_axis, response

__all__ = ["snr_of", "snr_of_signal", "snr_per_sqrt_s", "standard_snr_per_sqrt_s"]

Real = NDArray[np.float64]


def _jitter_equivalent(bench: Bench) -> float:
    c = bench.coupling
    scale = 2 * c.pointer_sigma**2 if c.readout == "momentum" else 1.0
    return c.jitter_rms * scale


def snr_of_signal(signal: ArrayLike, rates: DetectorRates, bench: Bench) -> Real:
    """``signal f / sqrt(sigma^2/m + j^2)`` with ``signal = g d<r>/dg`` (position-equivalent)."""
    sigma = bench.coupling.pointer_sigma
    m = np.asarray(rates.measured_rate, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        noise = np.sqrt(sigma**2 / m + _jitter_equivalent(bench) ** 2)
        out = np.abs(signal) * rates.signal_fraction / noise
    return np.where(m > 0, out, 0.0)


def snr_of(bench: Bench, resp: StokesResponse, rates: DetectorRates, axis: str) -> Real:
    """Shot-noise and jitter SNR per sqrt(s) of a response with its detector rates (the
    module's model)."""
    return snr_of_signal(resp.sensitivity(axis), rates, bench)


def snr_per_sqrt_s(
    bench: Bench, fwd: Forward, rates: DetectorRates | None = None, axis: str | None = None
) -> Real:
    """Signal to noise of the coupling estimate after one second of counting (module doc)."""
    axis = axis or readout_axis(bench)
    check_axis(axis)
    resp = response(bench, fwd)
    return snr_of(bench, resp, rates or detector_rates(bench, resp.probability), axis)


def _open_bench(bench: Bench) -> Bench:
    """The bench with its analyzer removed (an analyzer with extinction ratio 1 passes all)."""
    return replace(bench, analyzer=replace(bench.analyzer, extinction_ratio=1.0, transmission=1.0))


def standard_snr_per_sqrt_s(
    bench: Bench, readings: Mapping[str, ArrayLike] | None = None, within_limits: bool = False
) -> float:
    """SNR per sqrt(s) of the standard measurement (no post-selection; module doc).

    ``within_limits``: the beam is attenuated as far as needed to keep the detector below its
    safe rate and out of saturation (without it the detector may be overexposed).
    """
    fraction = float(np.ravel(forward(_open_bench(bench), readings).probability)[0])
    attenuation = np.logspace(-8, 0, 321) if within_limits else np.array([1.0])
    rates = detector_rates(bench, fraction * attenuation)
    a_max = float(np.max(np.abs(np.linalg.eigvalsh(coupling_observable(bench)))))
    snr = snr_of_signal(bench.coupling.strength * a_max, rates, bench)
    if within_limits:
        saturated, over = detector_flags(bench, rates)
        snr = np.where(saturated | over, 0.0, snr)
    return float(np.max(snr))
