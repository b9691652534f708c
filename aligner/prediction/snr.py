"""Signal to noise of the coupling estimate, with and without post-selection.

Two figures per root second of counting, both at the sensor that reads the pointer
(:mod:`.pointer`), ``g`` the coupling strength (:func:`aligner.model.coupling_scale`):

* **Centroid** (the mean reading of the post-selected events, what a lab computes):
  ``|g d<r>/dg| f / sqrt(Var_post / m + j^2)`` with ``<r>`` the mean reading, ``Var_post`` the
  exact post-selected spread of one event's reading (not the prepared pointer's), ``m`` the
  events per second the pointer is read from and ``f`` the share of them that carry the shift
  (:func:`.pointer.read_rates`: counter counts after dead time with dark counts, background and
  afterpulses diluting; heralded coincidences with accidentals diluting; a camera's detected
  photons, undiluted) and ``j^2`` the variance of a 1-s mean reading of the white technical
  noise (:func:`.pointer.white_variance`). It falls to zero where ``d<r>/dg`` does (at the
  amplification peak).
* **Cramer-Rao** (the best any unbiased estimator can do with the detected photons):
  ``g sqrt(R F)`` with ``F`` the Fisher information per source photon of the post-selected
  pointer at the sensor (its count and readings; :mod:`aligner.physics.information`) and ``R``
  the source photons per second times the sensor's efficiency (times the heralding efficiency
  for a heralded source read by the counter). No dark counts, dead time or technical noise:
  a bound. The post-selected and rejected ports together keep all the information (Combes,
  Ferrie, Jiang, Caves, PRA 89, 052117 (2014)), and near the null the post-selected events
  alone keep nearly all of it in the linear regime; beyond it the two differ.

Under shot noise alone post-selection does not beat the standard measurement: with ideal optics
in the linear regime the post-selected events reach ``cos(imbalance)`` of its SNR (Ferrie &
Combes, PRL 112, 040406 (2014)); any gain comes from technical noise, which is not amplified
(Jordan et al., PRX 4, 011031 (2014)), or from detector limits.

The standard measurement: no analyzer, the same photons, pointer, readout and sensor, the input
in the eigenstate of ``A`` with the larger ``|eigenvalue|``.

Under 1/f noise a figure per root second does not exist: :func:`switched_snr` gives the SNR of
a measurement of ``[readout] measure_s`` seconds that switches the coupling on and off every
``dwell_s`` (:func:`aligner.physics.noise.dwell_snr` with the whole spectrum at the reading).

Seam: :func:`snr_of` is the one place :class:`aligner.prediction.Prediction` takes its centroid
SNR from.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import Forward, coupling_scale
from ..physics.branches import Moments
from ..physics.information import FisherInformation, centroid_snr, cramer_rao
from .detector import detector_flags, detector_rates
from .pointer import (
    Reading,
    ReadRates,
    noise_spectrum,
    read_rates,
    reading,
    reading_of,
    sensor_efficiency,
    sensor_information,
    standard_state,
    white_variance,
)
from .readout import response

__all__ = [
    "information_rate",
    "information_snr",
    "snr_of",
    "snr_per_sqrt_s",
    "standard_information_snr",
    "standard_snr_per_sqrt_s",
    "switched_snr",
]

Real = NDArray[np.float64]


def snr_of(bench: Bench, rd: Reading, rates: ReadRates) -> Real:
    """Centroid SNR per sqrt(s) of a reading and the events it is read from (module doc)."""
    events = Moments(
        np.asarray(rates.rate, float), rd.mean, rd.variance, np.zeros_like(rd.mean), rd.slope
    )
    g = coupling_scale(bench)[0]
    return centroid_snr(events, g, 1.0, white_variance(bench)) * rates.fraction


def information_rate(bench: Bench) -> float:
    """Source photons per second whose post-selected events the sensor detects, counted once
    each (photons/s x the sensor's efficiency; x the heralding efficiency for a heralded source
    read by the counter, which uses only heralded events)."""
    rate = bench.source.photon_rate * sensor_efficiency(bench)
    herald = bench.source.herald
    if herald is not None and bench.readout.sensor == "counter":
        rate *= herald.herald_efficiency
    return rate


def information_snr(bench: Bench, information: FisherInformation | Real) -> Real:
    """Cramer-Rao SNR per sqrt(s), ``g sqrt(R F)``, of an information per source photon."""
    total = information.total if isinstance(information, FisherInformation) else information
    return coupling_scale(bench)[0] / cramer_rao(total, information_rate(bench))


def switched_snr(bench: Bench, rd: Reading, rates: ReadRates) -> Real:
    """SNR of ``[readout] measure_s`` s switching the coupling on and off every ``dwell_s``,
    under the whole noise spectrum at the reading (module doc)."""
    from ..physics.noise import dwell_snr

    r = bench.readout
    with np.errstate(divide="ignore", invalid="ignore"):
        shot = np.where(rates.rate > 0, rd.variance / rates.rate, np.inf)
    return dwell_snr(
        rd.mean * rates.fraction, shot, noise_spectrum(bench), r.dwell_s, 0.0, r.measure_s
    )


def snr_per_sqrt_s(bench: Bench, fwd: Forward) -> Real:
    """Centroid SNR per sqrt(s) of an evaluated bench (module doc)."""
    resp = response(bench, fwd)
    rd = reading_of(bench, fwd, resp)
    rates = detector_rates(bench, rd.probability)
    return snr_of(bench, rd, read_rates(bench, rd.probability, rates, _share(rd)))


def _share(rd: Reading) -> Real:
    """The share of the post-selected light the sensor reads."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(rd.probability > 0, rd.read / rd.probability, 1.0)


def standard_snr_per_sqrt_s(
    bench: Bench, readings: Mapping[str, ArrayLike] | None = None, within_limits: bool = False
) -> float:
    """Centroid SNR per sqrt(s) of the standard measurement (module doc).

    ``within_limits``: the beam is attenuated as far as needed to keep the detector below its
    safe rate and out of saturation (without it the detector may be overexposed).
    """
    rho, effect = standard_state(bench, readings)
    rd = reading(bench, rho, effect)
    attenuation = np.logspace(-8, 0, 321) if within_limits else np.array([1.0])
    leak = rd.probability * attenuation
    rates = detector_rates(bench, leak)
    snr = snr_of(bench, rd, read_rates(bench, leak, rates, _share(rd)))
    if within_limits:
        saturated, over = detector_flags(bench, rates)
        snr = np.where(saturated | over, 0.0, snr)
    return float(np.max(snr))


def standard_information_snr(
    bench: Bench, readings: Mapping[str, ArrayLike] | None = None
) -> float:
    """Cramer-Rao SNR per sqrt(s) of the standard measurement (module doc)."""
    rho, effect = standard_state(bench, readings)
    return float(information_snr(bench, sensor_information(bench, rho, effect)))
