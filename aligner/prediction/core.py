"""The prediction at mount readings: the bench in Stokes space in closed form
(:class:`aligner.physics.weak.StokesResponse`), the detector, the pointer as its sensor reads it
(:mod:`.pointer`), and the fields that cost extra work (the signed imbalance, the SNRs, the
Fisher information) computed on first access.

Many settings are evaluated in blocks of :data:`aligner.model.BLOCK`: every temporary array
of a block stays in the processor's cache, which about halves the time of a million settings.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from functools import cached_property
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import BLOCK, Forward, coupling_scale, forward, full_readings, signed_imbalance
from ..physics.detection import DetectorRates
from ..physics.weak import StokesResponse
from .detector import detector_flags, detector_rates
from .pointer import (
    Reading,
    ReadRates,
    exact_phase,
    is_plain,
    read_rates,
    reading,
    reading_of,
    sensor_information,
)
from .readout import readout_axis, readout_units, response
from .snr import information_snr, snr_of, switched_snr

__all__ = ["Prediction", "predict"]

Real = NDArray[np.float64]
Readings = Mapping[str, ArrayLike]


class _Block:
    """One block of settings as evaluated: the forward model and the response; the
    post-selection probability (the response's on a plain bench, else the reading's), the
    detector's rates, the reading and the events it uses, each computed on first use."""

    def __init__(self, bench: Bench, fwd: Forward, resp: StokesResponse, plain: bool):
        self.bench, self.fwd, self.resp, self.plain = bench, fwd, resp, plain

    @cached_property
    def reading(self) -> Reading:
        return reading_of(self.bench, self.fwd, self.resp)

    @cached_property
    def probability(self) -> Real:
        return np.asarray(self.resp.probability if self.plain else self.reading.probability)

    @cached_property
    def rates(self) -> DetectorRates:
        return detector_rates(self.bench, self.probability)

    @cached_property
    def read(self) -> ReadRates:
        rd = self.reading
        with np.errstate(divide="ignore", invalid="ignore"):
            share = np.where(rd.probability > 0, rd.read / rd.probability, 1.0)
        return read_rates(self.bench, rd.probability, self.rates, share)


def _imbalance(b: _Block) -> Real:
    return signed_imbalance(b.bench, b.fwd)


def _snr(b: _Block) -> Real:
    return snr_of(b.bench, b.reading, b.read)


def _information(effect: Callable[[_Block], NDArray[np.complex128]]) -> Callable[[_Block], Real]:
    def evaluate(b: _Block) -> Real:
        info = sensor_information(b.bench, b.fwd.rho, effect(b))
        return information_snr(b.bench, info)

    return evaluate


#: The fields computed on first access, from one evaluated block.
_LAZY: Mapping[str, Callable[[_Block], Real]] = {
    "imbalance": _imbalance,
    "snr": _snr,
    "spread": lambda b: np.sqrt(b.reading.variance),
    "reading_rate": lambda b: np.asarray(b.read.rate, float),
    "reading_fraction": lambda b: np.asarray(b.read.fraction, float),
    "information": _information(lambda b: b.fwd.effect),
    "both_ports": lambda b: np.hypot(
        _information(lambda b: b.fwd.effect)(b),
        _information(lambda b: np.eye(2) - b.fwd.effect)(b),
    ),
    "switched": lambda b: switched_snr(b.bench, b.reading, b.read),
}
#: Lazy fields of many blocks computed with each block, while its arrays are in cache.
_WITH_EACH_BLOCK = ("imbalance", "snr")


@dataclass(frozen=True)
class _Evaluation:
    """For the fields computed on first access: a prediction of one block keeps that block
    (``kept``); one of many blocks keeps the flat readings and evaluates again, block by block,
    except for the fields of :data:`_WITH_EACH_BLOCK`, computed with each block (``computed``)
    since keeping every block would cost more than they do."""

    bench: Bench
    readings: Mapping[str, NDArray[np.float64]]
    size: int
    kept: _Block | None
    computed: Mapping[str, Real] = field(default_factory=dict)

    def field(self, name: str) -> Real:
        """A lazy field on the flattened settings (or a scalar)."""
        if name in self.computed:
            return self.computed[name]
        if self.kept is not None:
            return _LAZY[name](self.kept)
        out = np.empty(self.size)
        for part, block in _blocks(self.bench, self.readings, self.size):
            out[part] = _LAZY[name](block)
        return out


def _blocks(
    bench: Bench, flat: Mapping[str, NDArray[np.float64]], size: int
) -> Iterator[tuple[slice, _Block]]:
    """``(slice, _Block)`` for every block of the flattened settings."""
    plain = is_plain(bench)
    for start in range(0, size, BLOCK):
        part = slice(start, min(start + BLOCK, size))
        fwd = forward(bench, {k: v[part] if v.ndim else v for k, v in flat.items()})
        yield part, _Block(bench, fwd, response(bench, fwd), plain)


@dataclass(frozen=True)
class Prediction:
    """What the bench does at some readings (arrays of the readings' broadcast shape).

    ``weak_value`` (complex), ``leak_rate`` (per source photon), ``amplification_linear`` and
    ``amplification_exact`` (along ``axis``, at the coupling plane), ``pointer_shift`` (the mean
    reading at the sensor, ``units``), ``detector_rate`` (true count rate incl. dark,
    counts/s), ``measured_rate`` (after dead time), ``saturated``, ``over_safe_rate``,
    ``exposure_rate`` (photons detected per second before saturation, what ``safe_rate``
    limits), ``signal_fraction`` (share of the counter's counts holding a signal photon);
    ``angles_deg`` maps each mount to its element angle (deg).

    Computed on first access: ``imbalance_deg``; ``pointer_spread`` (rms of one event's
    reading, the exact post-selected spread); ``reading_rate`` and ``reading_fraction`` (the
    events per second the pointer is read from and the share carrying the shift,
    :func:`.pointer.read_rates`); ``amplification_seen`` (the exact amplification times that
    share); ``practical_amplification`` (``pointer_shift`` over the
    standard measurement's shift at the same sensor); ``snr_per_sqrt_s`` (centroid),
    ``information_snr_per_sqrt_s`` (Cramer-Rao, post-selected events),
    ``both_ports_snr_per_sqrt_s`` (Cramer-Rao, post-selected and rejected ports) and
    ``switched_snr`` (a switched measurement under the whole noise spectrum) (:mod:`.snr`).
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

    def _lazy(self, name: str) -> Real:
        flat = self._evaluation.field(name)
        return np.broadcast_to(flat, (self.leak_rate.size,)).reshape(self.leak_rate.shape)

    @cached_property
    def imbalance_deg(self) -> Real:
        """Signed imbalance (deg), :func:`aligner.model.imbalance_deg`."""
        return self._lazy("imbalance")

    @cached_property
    def snr_per_sqrt_s(self) -> Real:
        """Centroid SNR of the coupling estimate per sqrt(s) of counting (:mod:`.snr`)."""
        return self._lazy("snr")

    @cached_property
    def pointer_spread(self) -> Real:
        """Rms of one post-selected event's reading at the sensor (``units``)."""
        return self._lazy("spread")

    @cached_property
    def reading_rate(self) -> Real:
        """Events per second the pointer is read from."""
        return self._lazy("reading_rate")

    @cached_property
    def reading_fraction(self) -> Real:
        """Share of the events the pointer is read from that carry the shift (1 for a camera)."""
        return self._lazy("reading_fraction")

    @cached_property
    def amplification_seen(self) -> Real:
        """``amplification_exact`` times ``reading_fraction``: the amplification of the shift
        as the sensor sees it, diluted by the events that carry none (dark counts); what the
        limits of amplification (:func:`.limits.limits`) are worked out for."""
        return self.amplification_exact * self.reading_fraction

    @cached_property
    def information_snr_per_sqrt_s(self) -> Real:
        """Cramer-Rao SNR per sqrt(s) of the post-selected events (:mod:`.snr`)."""
        return self._lazy("information")

    @cached_property
    def both_ports_snr_per_sqrt_s(self) -> Real:
        """Cramer-Rao SNR per sqrt(s) of the post-selected and the rejected port together
        (a lossless analyzer whose other output is read by a sensor alike)."""
        return self._lazy("both_ports")

    @cached_property
    def switched_snr(self) -> Real:
        """SNR of a coupling-on/off measurement of ``[readout] measure_s`` s (:mod:`.snr`)."""
        return self._lazy("switched")

    @cached_property
    def practical_amplification(self) -> Real:
        """``pointer_shift`` over the standard measurement's mean shift at the same sensor
        (Dixon et al., PRL 102, 173601 (2009)); inf where that vanishes
        (a shift read in a focal plane, a kick read at the coupling plane)."""
        standard = standard_shift(self._evaluation.bench)
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.pointer_shift / standard


def standard_shift(bench: Bench) -> float:
    """Mean reading of the standard measurement at the sensor (``units``)."""
    from .pointer import standard_state

    return float(reading(bench, *standard_state(bench)).mean)


def predict(bench: Bench, readings: Readings | None = None) -> Prediction:
    """Predict the bench at mount ``readings`` (deg; floats or arrays broadcast together; the
    bench file's readings for mounts not given)."""
    r = full_readings(bench, readings)
    shape = np.broadcast_shapes(*(v.shape for v in r.values()))
    size = int(np.prod(shape))
    flat = {k: v if v.ndim == 0 else np.broadcast_to(v, shape).ravel() for k, v in r.items()}
    axis = readout_axis(bench)
    g, sigma = coupling_scale(bench)
    plain, phase = is_plain(bench), exact_phase(bench)
    scale = 1.0 if axis == "re" else 1.0 / (2 * sigma**2)
    wv = np.empty(size, complex)
    fields = {
        name: np.empty(size)
        for name in ("leak", "exact", "shift", "true", "measured", "linear", "fraction")
    }
    flags = {name: np.empty(size, bool) for name in ("saturated", "over")}
    many = size > BLOCK
    computed: dict[str, Real] = {name: np.empty(size) for name in _WITH_EACH_BLOCK} if many else {}
    block = None
    for part, block in _blocks(bench, flat, size):
        resp = block.resp
        wv[part] = resp.weak_value
        on_axis = resp.shift(axis)
        fields["leak"][part] = block.probability
        if plain:
            fields["exact"][part] = on_axis / g
            fields["shift"][part] = on_axis * scale
        else:
            mean = block.reading.mean
            fields["exact"][part] = mean / g if phase else on_axis / g
            fields["shift"][part] = mean
        rates = block.rates
        fields["true"][part] = rates.true_rate
        fields["measured"][part] = rates.measured_rate
        fields["linear"][part] = rates.linear_rate
        fields["fraction"][part] = rates.signal_fraction
        flags["saturated"][part], flags["over"][part] = detector_flags(bench, rates)
        for name, values in computed.items():
            values[part] = _LAZY[name](block)
    out = {k: v.reshape(shape) for k, v in fields.items()}
    weak = wv.reshape(shape)
    return Prediction(
        weak_value=weak,
        leak_rate=out["leak"],
        amplification_linear=weak.real if axis == "re" else weak.imag,
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
        _evaluation=_Evaluation(bench, flat, size, None if many else block, computed),
    )
