"""The prediction at mount readings: the bench in Stokes space in closed form
(:class:`aligner.physics.weak.StokesResponse`), the detector, and the two fields that cost
extra work (the signed imbalance, the SNR) computed on first access.

Many settings are evaluated in blocks of :data:`aligner.model.BLOCK`: every temporary array
of a block stays in the processor's cache, which about halves the time of a million settings.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import BLOCK, Forward, forward, full_readings, signed_imbalance
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
    """For the fields computed on first access: a prediction of one block keeps its Forward
    and response (``kept``); one of many blocks has them computed with each block, while its
    arrays were in cache (``imbalance``, ``snr``), since keeping every block would cost more
    than the two fields."""

    bench: Bench
    kept: tuple[Forward, StokesResponse] | None
    imbalance: Real | None = None
    snr: Real | None = None


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
        if ev.kept is None:
            return ev.imbalance.reshape(self.leak_rate.shape)
        return _shaped(signed_imbalance(ev.bench, ev.kept[0]), self.leak_rate)

    @cached_property
    def snr_per_sqrt_s(self) -> Real:
        """SNR of the coupling estimate per sqrt(s) of counting (:mod:`.snr`)."""
        ev = self._evaluation
        if ev.kept is None:
            return ev.snr.reshape(self.leak_rate.shape)
        rates = DetectorRates(
            *(
                np.ravel(x)
                for x in (
                    self.detector_rate,
                    self.measured_rate,
                    self.exposure_rate,
                    self.signal_fraction,
                )
            )
        )
        return _shaped(snr_of(ev.bench, ev.kept[1], rates, self.axis), self.leak_rate)


def _shaped(flat: ArrayLike, like: Real) -> Real:
    """A field evaluated on the flattened settings (or a scalar), in the shape of ``like``."""
    return np.broadcast_to(flat, (like.size,)).reshape(like.shape)


def predict(bench: Bench, readings: Readings | None = None) -> Prediction:
    """Predict the bench at mount ``readings`` (deg; floats or arrays broadcast together; the
    bench file's readings for mounts not given)."""
    r = full_readings(bench, readings)
    shape = np.broadcast_shapes(*(v.shape for v in r.values()))
    size = int(np.prod(shape))
    flat = {k: v if v.ndim == 0 else np.broadcast_to(v, shape).ravel() for k, v in r.items()}
    axis = readout_axis(bench)
    c = bench.coupling
    scale = 1.0 if axis == "re" else 1.0 / (2 * c.pointer_sigma**2)
    wv = np.empty(size, complex)
    fields = {
        name: np.empty(size)
        for name in ("leak", "exact", "shift", "true", "measured", "linear", "fraction")
    }
    flags = {name: np.empty(size, bool) for name in ("saturated", "over")}
    many = size > BLOCK
    extra = {name: np.empty(size) for name in ("imbalance", "snr")} if many else {}
    for start in range(0, size, BLOCK):
        part = slice(start, min(start + BLOCK, size))
        fwd = forward(bench, {k: v[part] if v.ndim else v for k, v in flat.items()})
        resp = response(bench, fwd)
        wv[part] = resp.weak_value
        fields["leak"][part] = resp.probability
        shift = resp.shift(axis)
        fields["exact"][part] = shift / c.strength
        fields["shift"][part] = shift * scale
        rates = detector_rates(bench, resp.probability)
        fields["true"][part] = rates.true_rate
        fields["measured"][part] = rates.measured_rate
        fields["linear"][part] = rates.linear_rate
        fields["fraction"][part] = rates.signal_fraction
        flags["saturated"][part], flags["over"][part] = detector_flags(bench, rates)
        if many:
            extra["imbalance"][part] = signed_imbalance(bench, fwd)
            extra["snr"][part] = snr_of(bench, resp, rates, axis)
    out = {k: v.reshape(shape) for k, v in fields.items()}
    wv = wv.reshape(shape)
    return Prediction(
        weak_value=wv,
        leak_rate=out["leak"],
        amplification_linear=wv.real if axis == "re" else wv.imag,
        amplification_exact=out["exact"],
        pointer_shift=out["shift"],
        detector_rate=out["true"],
        measured_rate=out["measured"],
        saturated=flags["saturated"].reshape(shape),
        over_safe_rate=flags["over"].reshape(shape),
        exposure_rate=out["linear"],
        signal_fraction=out["fraction"],
        angles_deg=MappingProxyType(
            {
                name: np.broadcast_to(np.asarray(m.element_angle_deg(r[name]), float), shape)
                for name, m in bench.mounts.items()
            }
        ),
        axis=axis,
        units=readout_units(bench),
        _evaluation=_Evaluation(bench, None, **extra) if many else _Evaluation(bench, (fwd, resp)),
    )
