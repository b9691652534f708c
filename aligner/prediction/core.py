"""The prediction at mount readings: one pass over the bench in Stokes space
(:class:`aligner.physics.weak.StokesResponse`), the detector, and the two fields that cost
extra work (the signed imbalance, the SNR) computed on first access."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import Forward, forward, full_readings, signed_imbalance
from ..physics.detection import DetectorRates
from ..physics.weak import StokesResponse
from .detector import detector_flags, detector_rates
from .readout import readout_axis, readout_units, response
from .snr import snr_of

__all__ = ["Prediction", "predict"]

Real = NDArray[np.float64]
Readings = Mapping[str, ArrayLike]


@dataclass(frozen=True)
class _Evaluation:
    """What :func:`predict` evaluated, kept for the fields computed on first access."""

    bench: Bench
    fwd: Forward
    resp: StokesResponse
    rates: DetectorRates
    shape: tuple[int, ...]


@dataclass(frozen=True)
class Prediction:
    """What the bench does at some readings (arrays of the readings' broadcast shape).

    ``weak_value`` (complex), ``leak_rate`` (per source photon), ``amplification_linear`` and
    ``amplification_exact`` (along ``axis``), ``pointer_shift`` (``units``), ``detector_rate``
    (true count rate incl. dark, counts/s), ``measured_rate`` (after dead time), ``saturated``,
    ``over_safe_rate``, ``exposure_rate`` (photons detected per second before saturation, what
    ``safe_rate`` limits), ``imbalance_deg``, ``snr_per_sqrt_s``, ``signal_fraction`` (share of the
    counts holding a signal photon; dark counts dilute the pointer shift by it); ``angles_deg``
    maps each mount to its element angle (deg). ``imbalance_deg`` and ``snr_per_sqrt_s`` are
    computed on first access.
    """

    weak_value: NDArray[np.complex128]
    leak_rate: Real
    amplification_linear: Real
    amplification_exact: Real
    pointer_shift: Real
    detector_rate: Real
    measured_rate: Real
    saturated: NDArray[np.bool_]
    over_safe_rate: NDArray[np.bool_]
    exposure_rate: Real
    signal_fraction: Real
    angles_deg: Mapping[str, Real]
    axis: str
    units: str
    _evaluation: _Evaluation = field(repr=False, compare=False)

    @cached_property
    def imbalance_deg(self) -> Real:
        """Signed imbalance (deg), :func:`aligner.model.imbalance_deg`."""
        ev = self._evaluation
        return np.broadcast_to(signed_imbalance(ev.bench, ev.fwd), ev.shape)

    @cached_property
    def snr_per_sqrt_s(self) -> Real:
        """SNR of the coupling estimate per sqrt(s) of counting (:mod:`.snr`)."""
        ev = self._evaluation
        return np.broadcast_to(snr_of(ev.bench, ev.resp, ev.rates, self.axis), ev.shape)


def predict(bench: Bench, readings: Readings | None = None) -> Prediction:
    """Predict the bench at mount ``readings`` (deg; floats or arrays broadcast together; the
    bench file's readings for mounts not given)."""
    r = full_readings(bench, readings)
    shape = np.broadcast_shapes(*(v.shape for v in r.values()))
    fwd = forward(bench, r)
    axis = readout_axis(bench)
    c = bench.coupling
    resp = response(bench, fwd)
    wv = np.broadcast_to(resp.weak_value, shape)
    probability = np.broadcast_to(resp.probability, shape)
    shift = np.broadcast_to(resp.shift(axis), shape)
    rates = detector_rates(bench, probability)
    saturated, over = detector_flags(bench, rates)
    scale = 1.0 if axis == "re" else 1.0 / (2 * c.pointer_sigma**2)
    return Prediction(
        weak_value=wv,
        leak_rate=probability,
        amplification_linear=wv.real if axis == "re" else wv.imag,
        amplification_exact=shift / c.strength,
        pointer_shift=shift * scale,
        detector_rate=np.broadcast_to(rates.true_rate, shape),
        measured_rate=np.broadcast_to(rates.measured_rate, shape),
        saturated=np.broadcast_to(saturated, shape),
        over_safe_rate=np.broadcast_to(over, shape),
        exposure_rate=np.broadcast_to(rates.linear_rate, shape),
        signal_fraction=np.broadcast_to(rates.signal_fraction, shape),
        angles_deg=MappingProxyType(
            {k: np.broadcast_to(v, shape) for k, v in fwd.angles_deg.items()}
        ),
        axis=axis,
        units=readout_units(bench),
        _evaluation=_Evaluation(bench, fwd, resp, rates, shape),
    )
