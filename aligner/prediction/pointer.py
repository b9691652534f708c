"""How the pointer is read: the reading per event at the sensor (mean, spread, slope), the
events it is read from and their signal share, the information it carries about the coupling,
and the technical noise at the reading (conventions: :mod:`aligner.prediction`).

Readings are in the readout's units (``units``; 1/``units`` for a momentum readout).

* A *plain* bench (a shift coupling read at the coupling plane by its centroid, in position or
  momentum, or a phase readout of more than :data:`aligner.physics.phase.MAX_PHOTONS`
  photons) has every moment in closed form from the Stokes response
  (:class:`aligner.physics.weak.StokesResponse`: ``T``, ``X``, ``W``, ``kappa``, ``u``): with
  ``D = T - W/2`` the weight of the diagonal of the post-selected pointer, the exact
  post-selected variance is ``sigma^2 + u sigma^2 D/P - (g X / 2P)^2`` for a position and
  ``s^2 (1 - u kappa W / 2P) - <p>^2`` (``s = 1/(2 sigma)``) for a momentum readout (derived from
  the branch sums of :mod:`aligner.physics.branches`; tested against them).
* Any other bench is read through the exact post-selected pointer at the sensor: the branches
  after the readout geometry (:func:`aligner.physics.propagation.detector_branches`), a split or
  quadrant detector on them (:func:`aligner.physics.splitdetector.split_branches`, calibrated
  to a position with its slope at the centre for the undeflected spot), or the coherent probe's
  canonical phase (:func:`aligner.physics.phase.phase_moments`).
* Phase readout: the mean cross-phase of the probe turns the pre-selection by a retardance
  ``N sin(g (a0 - a1))`` rad between the eigenstates of ``A`` that turning the analyzer cannot
  cancel. A compensator is assumed (a retarder, or the phase mount, set to cancel it): the
  reading is that of the compensated pre-selection, whose Gaussian limit is the plain bench's
  (:func:`cross_phase_rad` states the retardance to compensate).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import Forward, coupling_observable, coupling_scale, wavelength_in_units
from ..physics.branches import Branches
from ..physics.detection import DetectorRates
from ..physics.information import FisherInformation, fisher_information
from ..physics.noise import NoiseSpectrum
from ..physics.weak import StokesResponse

__all__ = [
    "ReadRates",
    "Reading",
    "coincidences",
    "cross_phase_rad",
    "exact_phase",
    "heralded_g2",
    "is_plain",
    "noise_spectrum",
    "read_rates",
    "reading",
    "reading_of",
    "sensor_efficiency",
    "sensor_information",
    "standard_state",
    "train",
    "white_variance",
]

Real = NDArray[np.float64]
Complex = NDArray[np.complex128]


@dataclass(frozen=True)
class Reading:
    """The pointer as the sensor reads it (arrays of the settings' shape).

    ``probability``: post-selection probability per source photon; ``read``: the share per
    source photon of events the sensor reads (``probability`` but for a split or quadrant
    detector's gap); ``mean`` and ``variance``: mean and variance of one event's reading;
    ``slope``: ``d mean / d g`` at the coupling strength ``g`` of
    :func:`aligner.model.coupling_scale`."""

    probability: Real
    read: Real
    mean: Real
    variance: Real
    slope: Real


def exact_phase(bench: Bench) -> bool:
    """True for a phase readout treated in the photon-number basis (``probe_photons`` at most
    :data:`aligner.physics.phase.MAX_PHOTONS`)."""
    from ..physics.phase import MAX_PHOTONS

    c = bench.coupling
    return c.readout == "phase" and c.probe_photons is not None and c.probe_photons <= MAX_PHOTONS


def is_plain(bench: Bench) -> bool:
    """True when the closed form applies (see module)."""
    c, r = bench.coupling, bench.readout
    at_waist = c.readout != "position" or c.waist_to_coupling_mm == 0.0
    return (
        c.kind == "shift"
        and at_waist
        and not r.has_geometry
        and r.method == "centroid"
        and not exact_phase(bench)
    )


def train(bench: Bench) -> tuple:
    """The readout geometry after the coupling plane as :mod:`aligner.physics.propagation`
    elements, lengths in ``units``."""
    from ..physics.propagation import Lens, Space

    c, r = bench.coupling, bench.readout
    out: list = []
    if r.lens_focal_mm is not None:
        out += [Space(c.from_mm(r.lens_distance_mm or 0.0)), Lens(c.from_mm(r.lens_focal_mm))]
    if r.detector_distance_mm:
        out.append(Space(c.from_mm(r.detector_distance_mm)))
    return tuple(out)


def cross_phase_rad(bench: Bench) -> float | None:
    """Mean cross-phase retardance ``N sin(g (a_max - a_min))`` (rad) between the eigenstates of
    ``A`` that the compensator cancels (phase readout; None otherwise)."""
    c = bench.coupling
    if c.readout != "phase" or c.probe_photons is None:
        return None
    low, high = np.linalg.eigvalsh(coupling_observable(bench))
    return float(c.probe_photons * np.sin(c.strength * c.unit_size * (high - low)))


def _fast(bench: Bench, resp: StokesResponse) -> Reading:
    """The closed form of a plain bench (see module)."""
    g, sigma = resp.g, resp.sigma
    p = np.asarray(resp.probability, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if bench.coupling.readout == "momentum":
            s2 = 0.25 / sigma**2
            mean = np.asarray(resp.momentum, float)
            variance = s2 * (1 - 0.5 * resp.u * resp.kappa * resp.w / p) - mean**2
            slope = resp.sensitivity("im") / (2 * sigma**2 * g)
        else:
            mean = np.asarray(resp.position, float)
            diagonal = resp.plain - 0.5 * resp.w
            centre = g * resp.x / (2 * p)
            variance = sigma**2 * (1 + resp.u * diagonal / p) - centre**2
            slope = resp.sensitivity("re") / g
    return Reading(p, p, mean, np.asarray(variance, float), np.asarray(slope, float))


def _compensated(bench: Bench, rho: ArrayLike, g_rad: float) -> Complex:
    """The pre-selection with the probe's mean cross-phase cancelled by the compensator."""
    from ..physics.phase import back_action

    c = bench.coupling
    return back_action(rho, coupling_observable(bench), -g_rad, float(c.probe_photons or 0.0))


def _branches(bench: Bench, rho: ArrayLike, effect: ArrayLike, g: float) -> Branches:
    """Exact post-selected pointer at the sensor (position or momentum readouts)."""
    from ..physics.information import readout_branches
    from ..physics.propagation import detector_branches

    c = bench.coupling
    a = coupling_observable(bench)
    if c.readout == "position":
        return detector_branches(
            rho,
            effect,
            a,
            g,
            c.pointer_sigma,
            wavelength_in_units(bench),
            c.kind,
            c.from_mm(c.waist_to_coupling_mm),
            train(bench),
        )
    _, sigma = coupling_scale(bench)
    return readout_branches(rho, effect, a, g, sigma, c.readout)


def _split(bench: Bench, branches: Branches, probability: Real) -> Reading:
    """A split or quadrant detector on the exact pointer, calibrated with its slope at the
    centre for the undeflected spot (see module)."""
    from ..physics.splitdetector import split_branches, split_gaussian

    gap = bench.coupling.from_mm(bench.readout.split_gap_um * 1e-3)
    spot = np.sqrt(_undeflected_variance(bench))
    centre = split_gaussian(0.0, spot, gap)
    reading = split_branches(branches, gap)
    share = centre.active if bench.readout.method == "quadrant" else 1.0  # the other axis' gap
    calibration = centre.slope
    return Reading(
        probability,
        reading.active * share,
        reading.signal / calibration,
        (1 - reading.signal**2) / calibration**2,
        reading.slope / calibration,
    )


def _undeflected_variance(bench: Bench) -> float:
    """Intensity variance of the uncoupled beam at the sensor (``units^2``)."""
    from ..physics.branches import moments

    half = np.eye(2) / 2
    return float(moments(_branches(bench, half, np.eye(2), 0.0)).variance)


def reading(bench: Bench, rho: ArrayLike, effect: ArrayLike, g: float | None = None) -> Reading:
    """The reading of any bench by the exact post-selected pointer (see module), for the
    pre-selection ``rho`` and the post-selection ``effect`` at the coupling plane (..., 2, 2),
    at coupling strength ``g`` (default the bench's, :func:`aligner.model.coupling_scale`)."""
    from ..physics.branches import moments

    c = bench.coupling
    g = coupling_scale(bench)[0] if g is None else g
    if exact_phase(bench):
        from ..physics.phase import phase_moments

        size = c.unit_size
        g_rad = g * size
        m = phase_moments(
            _compensated(bench, rho, c.strength * size),
            effect,
            coupling_observable(bench),
            g_rad,
            float(c.probe_photons or 0.0),
        )
        return Reading(m.probability, m.probability, m.mean / size, m.variance / size**2, m.slope)
    branches = _branches(bench, rho, effect, g)
    m = moments(branches)
    if bench.readout.method != "centroid":
        return _split(bench, branches, m.probability)
    return Reading(m.probability, m.probability, m.mean, m.variance, m.slope)


def reading_of(bench: Bench, fwd: Forward, resp: StokesResponse) -> Reading:
    """:func:`reading` of an evaluated bench and its response, in closed form (without the
    density matrices) for a plain bench."""
    if is_plain(bench):
        return _fast(bench, resp)
    return reading(bench, fwd.rho, fwd.effect)


def sensor_information(
    bench: Bench, rho: ArrayLike, effect: ArrayLike, g: float | None = None
) -> FisherInformation:
    """Fisher information about ``g`` per source photon in the post-selected pointer at the
    sensor (its full distribution: a bound for any way of reading it; ``1/units^2``)."""
    c = bench.coupling
    g = coupling_scale(bench)[0] if g is None else g
    if exact_phase(bench):
        from ..physics.phase import phase_information

        size = c.unit_size
        info = phase_information(
            _compensated(bench, rho, c.strength * size),
            effect,
            coupling_observable(bench),
            g * size,
            float(c.probe_photons or 0.0),
        )
        return FisherInformation(info.total * size**2, info.count * size**2, info.probability)
    return fisher_information(_branches(bench, rho, effect, g))


def standard_state(
    bench: Bench, readings: Mapping[str, ArrayLike] | None = None
) -> tuple[Complex, Complex]:
    """``(rho, effect)`` of the standard measurement: the eigenstate of ``A`` with the largest
    ``|eigenvalue|``, carrying the share of the source's photons that reach the coupling plane
    with the analyzer removed (at ``readings``), and no post-selection."""
    from dataclasses import replace

    from ..model import forward

    open_bench = replace(
        bench, analyzer=replace(bench.analyzer, extinction_ratio=1.0, transmission=1.0)
    )
    fraction = float(np.ravel(forward(open_bench, readings).probability)[0])
    values, vectors = np.linalg.eigh(coupling_observable(bench))
    largest = values.size - 1 - int(np.argmax(np.abs(values[::-1])))  # +1 over -1 on a tie
    v = vectors[:, largest]
    rho = np.asarray(fraction * np.outer(v, v.conj()), complex)
    return rho, np.eye(2, dtype=complex)


def sensor_efficiency(bench: Bench) -> float:
    """Detected photons per photon reaching the sensor: the counter's efficiency, or the
    camera's."""
    r = bench.readout
    return r.sensor_efficiency if r.sensor == "camera" else bench.detector.efficiency


@dataclass(frozen=True)
class ReadRates:
    """Events per second the pointer is read from (``rate``) and the share of them that carry
    the shift (``fraction``: dark counts, background and afterpulses do not; heralded:
    accidental coincidences do not)."""

    rate: Real
    fraction: Real


def read_rates(
    bench: Bench, probability: ArrayLike, rates: DetectorRates, read_share: ArrayLike = 1.0
) -> ReadRates:
    """The events a reading uses at post-selection ``probability`` per source photon, with the
    counter's ``rates`` and the share ``read_share`` of the post-selected light the sensor
    reads (a split detector's gap).

    Camera: ``photon_rate x probability x sensor_efficiency``, all signal. Counter: its counts
    (after dead time), with its signal share. Heralded source and counter: the coincidences of
    the counter with the heralds, true ``R eta_h eta_s P eta live`` and accidental ``R_h m T_c``
    (``live`` the counter's measured over true rate, ``m`` its measured rate,
    :func:`aligner.physics.heralded.accidental_rate`)."""
    p = np.asarray(probability, float)
    share = np.asarray(read_share, float)
    if bench.readout.sensor == "camera":
        rate = bench.source.photon_rate * p * bench.readout.sensor_efficiency * share
        return ReadRates(rate, np.ones_like(rate))
    if bench.source.herald is None:
        return ReadRates(np.asarray(rates.measured_rate) * share, np.asarray(rates.signal_fraction))
    true, accidental = coincidences(bench, p, rates)
    total = true + accidental
    with np.errstate(divide="ignore", invalid="ignore"):
        fraction = np.where(total > 0, true / total, 0.0)
    return ReadRates(total * share, fraction)


def coincidences(bench: Bench, probability: ArrayLike, rates: DetectorRates) -> tuple[Real, Real]:
    """True and accidental coincidences per second of a heralded source's heralds with the
    counter (:func:`read_rates`)."""
    from ..physics.heralded import accidental_rate

    herald = bench.source.herald
    if herald is None:
        raise ValueError("coincidences need a heralded source ([source] type = 'heralded')")
    with np.errstate(divide="ignore", invalid="ignore"):
        live = np.where(rates.true_rate > 0, rates.measured_rate / rates.true_rate, 1.0)
    heralds = herald.pair_rate * herald.herald_efficiency + herald.dark_rate
    per_pair = herald.pair_rate * herald.herald_efficiency * herald.signal_efficiency
    true = per_pair * np.asarray(probability, float) * bench.detector.efficiency * live
    return true, accidental_rate(heralds, rates.measured_rate, herald.window_s)


def heralded_g2(bench: Bench) -> float:
    """Expected heralded ``g2`` of the source's photons on a 50:50 beam splitter with two
    detectors like the bench's, each coincidence window taken as a pulse of Poisson pairs
    (mean ``pair_rate x window``; dark clicks ``rate x window`` per window;
    :func:`aligner.physics.heralded.pulsed_pair_clicks`, Grangier, Roger, Aspect 1986)."""
    from ..physics.heralded import pulsed_pair_clicks

    herald = bench.source.herald
    if herald is None:
        raise ValueError("a heralded g2 needs a heralded source ([source] type = 'heralded')")
    d = bench.detector
    arm = herald.signal_efficiency * d.efficiency / 2
    window = herald.window_s
    clicks = pulsed_pair_clicks(
        herald.pair_rate * window,
        herald.herald_efficiency,
        arm,
        arm,
        min(herald.dark_rate * window, 0.5),
        min(d.dark_rate * window, 0.5),
        min(d.dark_rate * window, 0.5),
    )
    return float(clicks.g2)


def noise_spectrum(bench: Bench) -> NoiseSpectrum:
    """Technical noise at the reading (``units^2/Hz``, one-sided): the pointer jitter, the
    beam's pointing noise times the lever arm of the readout geometry (``k0`` for a momentum
    readout) and, for a camera, its own white reading noise."""
    from ..physics.propagation import ray_matrix

    c, r = bench.coupling, bench.readout
    total = NoiseSpectrum.from_rms(c.jitter_rms, c.jitter_corner_hz)
    if c.pointing_rms_urad:
        if c.readout == "momentum":
            lever = 2 * np.pi / wavelength_in_units(bench)
        else:
            lever = float(ray_matrix(train(bench))[0, 1])  # units per rad
        pointing = NoiseSpectrum.from_rms(c.pointing_rms_urad * 1e-6, c.pointing_corner_hz)
        total = total + pointing.scaled(lever)
    if r.sensor == "camera" and r.sensor_noise_rms:
        total = total + NoiseSpectrum.from_rms(r.sensor_noise_rms)
    return total


def white_variance(bench: Bench) -> float:
    """Variance of a 1-s mean reading from the white part of :func:`noise_spectrum`."""
    return noise_spectrum(bench).white / 2
