"""The bench's detector facing a predicted leak: expected rates and the two warnings
(saturated, over the safe rate)."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..physics.detection import SATURATION_LOSS, DetectorRates

__all__ = ["detector_flags", "detector_rates"]


def detector_rates(bench: Bench, leak_rate: ArrayLike) -> DetectorRates:
    """Expected detector rates for a post-selection probability per source photon ``leak_rate``."""
    return bench.detector.expected_rates(bench.source.photon_rate, leak_rate)


def detector_flags(
    bench: Bench, rates: DetectorRates
) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
    """``(saturated, over_safe_rate)``.

    Saturated: the true rate exceeds ``detector.saturation_rate`` (when given) or more than
    :data:`SATURATION_LOSS` of the linear response is lost to dead time or multi-photon pulses.
    Over the safe rate: the exposure rate (the linear response ``photon_rate leak eta + dark``,
    in pulsed mode ``R (eta mu + p_d)``: photons detected per second before any saturation)
    exceeds ``detector.safe_rate``. In pulsed mode the click rate cannot exceed the repetition
    rate however bright the pulses are, so it must not be what the guard compares.
    """
    d = bench.detector
    saturated = rates.loss > SATURATION_LOSS
    if d.saturation_rate is not None:
        saturated = saturated | (rates.true_rate > d.saturation_rate)
    return np.asarray(saturated), np.asarray(rates.linear_rate > d.safe_rate)
