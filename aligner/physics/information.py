"""Fisher information about the coupling strength, Cramer-Rao bounds and the centroid's SNR.

Conventions as in :mod:`aligner.physics.branches` (hbar = 1; ``g`` in the pointer's length unit
per unit eigenvalue; ``sigma`` the rms width of the pointer intensity). Information is per
source photon, in 1/(unit of g)^2.

* Post-selected events: with a Poisson source, the events in one port (their number and their
  pointer readings) carry ``F = int (df/dg)^2 / f dx`` per source photon, ``f`` the port's
  pointer intensity per source photon (integral = the port's probability ``P``). It splits into
  the count's share ``(dP/dg)^2 / P`` and the readings' share ``P F_cond``.
* Both ports: post-selected plus rejected (``E`` and ``1 - E``) events. For pure states with
  real amplitudes in the eigenbasis of ``A`` their sum is the quantum Fisher information
  ``<A^2>/sigma^2`` at every ``g`` (Combes, Ferrie, Jiang, Caves, PRA 89, 052117 (2014)).
* Standard measurement: no post-selection, the system in the eigenstate of ``A`` with the
  largest ``|a|``, pointer read in position: ``a_max^2 / sigma^2`` (Gaussian location family).
  In the linear regime the post-selected events of the ideal case reach ``cos^2(eps)`` of it
  (Ferrie & Combes, PRL 112, 040406 (2014)).
* Readouts: ``"position"``; ``"momentum"`` (the pointer read in ``p``); ``"phase"``, a coherent
  probe's phase in the Gaussian approximation (``sigma = 1/(2 sqrt N)`` rad; exact small-``N``
  treatment in :mod:`aligner.physics.phase`). Other readouts (after propagation, a lens) pass
  their :class:`~aligner.physics.branches.Branches` to :func:`fisher_information`.
* Cramer-Rao: ``delta g >= 1 / sqrt(n F)`` for ``n`` source photons; with a photon rate in
  photons/s in place of ``n`` this is the bound per root second.
* Centroid estimator (mean reading of the post-selected events):
  ``SNR = |g d<x>/dg| / sqrt(Var_post / (n P) + technical variance)`` with the exact
  post-selected spread ``Var_post`` (:func:`aligner.physics.branches.moments`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .branches import Branches, Moments, density, moments, prepare, shift, to_momentum

__all__ = [
    "READOUTS",
    "BestSetting",
    "FisherInformation",
    "best_setting",
    "both_ports_information",
    "centroid_snr",
    "cramer_rao",
    "fisher_from_density",
    "fisher_information",
    "post_selected_information",
    "readout_branches",
    "standard_information",
]

Real = NDArray[np.float64]

#: Pointer readouts with a Gaussian pointer (``"phase"``: Gaussian approximation of a probe).
READOUTS = ("position", "momentum", "phase")

# Grid for the information integral: +/- _REACH widths beyond the outermost branch, and a step
# that keeps the trapezoid rule spectrally accurate for the Gaussian-times-fringe integrand.
_REACH = 10.0
_STEPS_PER_WIDTH = 15.0
_MAX_POINTS = 200_001


@dataclass(frozen=True)
class FisherInformation:
    """Fisher information about ``g`` of one port's events, per source photon.

    ``total``: count and readings together. ``count``: the share carried by the number of
    events, ``(dP/dg)^2 / P``. ``probability``: the port's probability ``P``.
    """

    total: Real
    count: Real
    probability: Real

    @property
    def readings(self) -> Real:
        """Share carried by the pointer readings, ``P`` times the information per event."""
        return self.total - self.count


def readout_branches(
    rho: ArrayLike,
    effect: ArrayLike,
    observable: ArrayLike,
    g: ArrayLike,
    sigma: ArrayLike,
    readout: str = "position",
) -> Branches:
    """Post-selected pointer after ``U = exp(-i g A p)``, as read by ``readout`` (see module)."""
    if readout not in READOUTS:
        raise ValueError(f"unknown readout {readout!r}; allowed: {', '.join(READOUTS)}")
    branches = shift(prepare(rho, effect, observable, sigma), g)
    return to_momentum(branches) if readout == "momentum" else branches


def fisher_from_density(
    f: ArrayLike, df: ArrayLike, step: ArrayLike, probability: ArrayLike, dprobability: ArrayLike
) -> FisherInformation:
    """Information from a density ``f`` and ``df/dg`` sampled on uniform grids (last axis) of
    spacing ``step``, either periodic or reaching where both vanish: ``sum (df)^2/f step``
    (spectrally accurate for such smooth integrands). ``probability`` and ``dprobability``:
    the port's probability and its derivative (for the count's share)."""
    f = np.asarray(f, float)
    df = np.asarray(df, float)
    p = np.asarray(probability, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(f > 0, df**2 / np.where(f > 0, f, 1.0), 0.0)
        count = np.where(p > 0, np.asarray(dprobability, float) ** 2 / p, 0.0)
    total = np.sum(ratio, axis=-1) * np.asarray(step, float)
    return FisherInformation(total, count, p)


def fisher_information(branches: Branches) -> FisherInformation:
    """``int (df/dg)^2 / f dx`` over the pointer intensity ``f`` of ``branches``, on a grid
    covering every branch, fine enough for the fringes between them."""
    m = moments(branches)
    a = np.real(branches.a)
    width = 1.0 / (2.0 * np.sqrt(a))  # rms width of each branch's intensity
    centres = np.real(branches.b) / (2.0 * a[..., None])
    fringe = np.abs(np.imag(branches.b[..., 0] - branches.b[..., 1]))
    lo = np.min(centres, axis=-1) - _REACH * width
    hi = np.max(centres, axis=-1) + _REACH * width
    step = 2 * np.pi / (fringe + 2 * np.pi * _STEPS_PER_WIDTH / width)
    points = int(min(np.max(np.ceil((hi - lo) / step)) + 1, _MAX_POINTS))
    t = np.linspace(0.0, 1.0, points)
    f, df = density(branches, lo[..., None] + (hi - lo)[..., None] * t)
    return fisher_from_density(f, df, (hi - lo) / (points - 1), m.probability, m.dprobability)


def post_selected_information(
    rho: ArrayLike,
    effect: ArrayLike,
    observable: ArrayLike,
    g: ArrayLike,
    sigma: ArrayLike,
    readout: str = "position",
) -> FisherInformation:
    """Information of the events post-selected by ``effect`` (see module; ``effect = 1`` gives
    the same preparation read without post-selection)."""
    return fisher_information(readout_branches(rho, effect, observable, g, sigma, readout))


def both_ports_information(
    rho: ArrayLike,
    effect: ArrayLike,
    observable: ArrayLike,
    g: ArrayLike,
    sigma: ArrayLike,
    readout: str = "position",
    rejected: ArrayLike | None = None,
) -> Real:
    """Information of the post-selected and the rejected events together, per source photon.

    ``rejected``: POVM element of the rejected port; default ``1 - effect`` (a lossless
    analyzer whose other output is read too).
    """
    effect = np.asarray(effect, complex)
    other = np.eye(2) - effect if rejected is None else np.asarray(rejected, complex)
    kept = post_selected_information(rho, effect, observable, g, sigma, readout)
    lost = post_selected_information(rho, other, observable, g, sigma, readout)
    return kept.total + lost.total


def standard_information(observable: ArrayLike, sigma: ArrayLike) -> Real:
    """Standard measurement, per photon: ``a_max^2 / sigma^2`` (the eigenstate of ``A`` with the
    largest ``|a|``, pointer read in position, no post-selection)."""
    a_max = np.max(np.abs(np.linalg.eigvalsh(np.asarray(observable, complex))), axis=-1)
    return a_max**2 / np.asarray(sigma, float) ** 2


def cramer_rao(information: ArrayLike, photons: ArrayLike) -> Real:
    """Smallest standard deviation of an unbiased estimate of ``g``: ``1 / sqrt(n F)``.

    ``photons``: source photons ``n`` (per-photon information ``F``), or a photon rate in
    photons/s, which gives the bound per root second (unit of g times sqrt(s)).
    """
    total = np.asarray(photons, float) * np.asarray(information, float)
    with np.errstate(divide="ignore"):
        return 1.0 / np.sqrt(total)


def centroid_snr(
    response: Moments, g: ArrayLike, photons: ArrayLike, technical_variance: ArrayLike = 0.0
) -> Real:
    """SNR of ``g`` from the mean reading of the post-selected events.

    ``|g d<x>/dg| / sqrt(Var_post / (n P) + technical_variance)``: ``response`` from
    :func:`aligner.physics.branches.moments`; ``photons`` as in :func:`cramer_rao` (a rate
    gives the SNR after one second, with ``technical_variance`` that of a 1-s mean reading).
    """
    detected = np.asarray(photons, float) * response.probability
    with np.errstate(divide="ignore", invalid="ignore"):
        noise = np.sqrt(response.variance / detected + np.asarray(technical_variance, float))
        snr = np.abs(np.asarray(g, float) * response.slope) / noise
    return np.where(detected > 0, snr, 0.0)


@dataclass(frozen=True)
class BestSetting:
    """Best point of a scan: ``setting`` and ``merit`` (refined by a parabola through the best
    sample and its neighbours when it is inside the scan), ``index`` of the best sample and
    ``interior`` (False when the best sample is at an end: the scan should be widened)."""

    setting: float
    merit: float
    index: int
    interior: bool


def best_setting(setting: ArrayLike, merit: ArrayLike) -> BestSetting:
    """Maximum of ``merit`` over a 1-D scan of ``setting`` (e.g. imbalance in rad), ignoring
    NaN."""
    x = np.asarray(setting, float)
    y = np.asarray(merit, float)
    if x.ndim != 1 or x.shape != y.shape or x.size == 0:
        raise ValueError("best_setting needs two 1-D arrays of the same, non-zero length")
    i = int(np.nanargmax(y))
    if i == 0 or i == x.size - 1 or not np.all(np.isfinite(y[i - 1 : i + 2])):
        return BestSetting(float(x[i]), float(y[i]), i, False)
    (x0, x1, x2), (y0, y1, y2) = x[i - 1 : i + 2], y[i - 1 : i + 2]
    # Vertex of the parabola through three points (unequal spacing allowed).
    d01, d12 = (y1 - y0) / (x1 - x0), (y2 - y1) / (x2 - x1)
    curvature = (d12 - d01) / (x2 - x0)
    if curvature >= 0:
        return BestSetting(float(x1), float(y1), i, True)
    slope = d01 + curvature * (x1 - x0)  # derivative at x1
    vertex = x1 - slope / (2 * curvature)
    peak = y1 - slope**2 / (4 * curvature)
    return BestSetting(float(vertex), float(peak), i, True)
