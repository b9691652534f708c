"""Maximum-likelihood fitting shared by every calibration fit.

A fit is a vectorized ``model(theta) -> mean`` (``theta`` of shape ``(..., p)``, the mean of
shape ``(..., n)``: one row of means per parameter vector, so derivative stencils cost one
call) and a noise family:

* :class:`Poisson` counts -- the fit minimizes the Poisson deviance (``-2 ln L`` up to a
  constant) with :func:`scipy.optimize.least_squares` on the deviance residuals
  ``sign(n - mu) sqrt(2 (n ln(n/mu) - n + mu))``, whose sum of squares *is* the deviance, so
  the least-squares optimum is the Poisson maximum-likelihood estimate.
* :class:`PoissonPair` counts of a signal and a reference channel taken at the same points,
  each point's source intensity a nuisance parameter profiled out in closed form: the
  reference's own Poisson noise is in the likelihood (a reference treated as exact weights
  inflates the deviance when its counts are not many times the signal's).
* :class:`Gaussian` readings with known standard errors -- residuals ``(mu - y)/sigma``.

Uncertainties come from the observed information (the Hessian of ``-ln L`` at the estimate),
``H = J^T diag(d2) J + sum_i d1_i H_i`` with ``d1, d2`` the first and second derivatives of
``-ln L`` in the means, ``J`` and ``H_i`` the first and second derivatives of the means
(central differences with the given parameter steps). The covariance is ``H^-1``.

Goodness of fit: the deviance (Poisson) or chi-square (Gaussian) with ``n - p`` degrees of
freedom and its chi-square tail probability (only approximate when counts are small). Below
:data:`GOF_P_MIN` the result carries a plain warning that the model does not describe the data.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "GOF_P_MIN",
    "FitResult",
    "Gaussian",
    "Poisson",
    "PoissonPair",
    "goodness_of_fit",
    "maximize_likelihood",
]

Real = NDArray[np.float64]
Model = Callable[[Real], Real]


class Family(Protocol):
    """Noise model: residuals whose squares sum to ``-2 ln L`` (+ const) and the derivatives
    of ``-ln L`` in the means."""

    @property
    def size(self) -> int: ...

    def residuals(self, mean: Real) -> Real: ...

    def residual_slope(self, mean: Real, residuals: Real) -> Real: ...

    def nll_derivatives(self, mean: Real) -> tuple[Real, Real]: ...


_TINY = 1e-300

#: Tail probability of the deviance below which a fit is reported as not describing the data
#: (a 1 % test; common practice, no source).
GOF_P_MIN = 0.01


@dataclass(frozen=True)
class Poisson:
    """Poisson counts (whole numbers >= 0)."""

    counts: Real

    @property
    def size(self) -> int:
        return int(self.counts.size)

    def residuals(self, mean: Real) -> Real:
        n = self.counts
        mu = np.maximum(mean, _TINY)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_term = np.where(n > 0, n * np.log(np.where(n > 0, n, 1.0) / mu), 0.0)
        half = np.maximum(log_term - n + mu, 0.0)
        return np.sign(n - mu) * np.sqrt(2 * half)

    def residual_slope(self, mean: Real, residuals: Real) -> Real:
        mu = np.maximum(mean, _TINY)
        n = self.counts
        near = np.abs(n - mu) <= 1e-6 * np.maximum(mu, 1.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (1 - n / mu) / residuals
        return np.where(near, -1 / np.sqrt(mu), slope)

    def nll_derivatives(self, mean: Real) -> tuple[Real, Real]:
        mu = np.maximum(mean, _TINY)
        return 1 - self.counts / mu, self.counts / mu**2


def _half_deviance(n: Real, mu: Real) -> Real:
    """``n ln(n/mu) - n + mu`` (0 ln 0 = 0), written so that it keeps its digits near ``mu =
    n``: half a point's Poisson deviance."""
    mu = np.maximum(mu, _TINY)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_term = np.where(n > 0, n * np.log(np.where(n > 0, n, 1.0) / mu), 0.0)
    return np.maximum(log_term - n + mu, 0.0)


@dataclass(frozen=True)
class PoissonPair:
    """Signal counts ``n ~ Poisson(u lam + b)`` and reference counts ``r ~ Poisson(c lam + e)``
    at every point, with ``c = c0 + c1 u``; the point's intensity ``lam >= 0`` is profiled out.

    The model's mean is ``u`` (signal counts per unit intensity). ``b``, ``e``: the two
    channels' dark counts in their live times; ``c0``, ``c1``: the reference's counts per
    unit intensity (a monitor of the source: ``c1 = 0``; the analyzer's other port, which
    loses what the signal gains: ``c1 < 0``). For fixed ``u`` the likelihood is concave in
    ``lam`` and its maximum is the non-negative root of a quadratic; the residual of a point
    is the signed square root of its profile deviance (one degree of freedom per point), and
    the derivatives of the profile in ``u`` follow from the envelope theorem and implicit
    differentiation of the stationarity condition.
    """

    counts: Real
    reference: Real
    b: Real
    c0: Real
    c1: Real
    e: Real

    @property
    def size(self) -> int:
        return int(self.counts.size)

    def _fit(self, mean: Real) -> tuple[Real, Real, Real, Real]:
        """``lam``, ``c`` and the two fitted means at ``u = mean``."""
        u = np.maximum(mean, _TINY)
        n, r, b, e = self.counts, self.reference, self.b, self.e
        c = np.maximum(self.c0 + self.c1 * u, _TINY)
        qa = (u + c) * u * c
        qb = (u + c) * (u * e + b * c) - u * c * (n + r)
        qc = (u + c) * b * e - n * u * e - r * c * b
        root = np.sqrt(np.maximum(qb * qb - 4 * qa * qc, 0.0))
        with np.errstate(divide="ignore", invalid="ignore"):  # the stable root of each sign
            lam = np.where(qb > 0, -2 * qc / (qb + root), (root - qb) / (2 * qa))
        lam = np.maximum(np.nan_to_num(lam, nan=0.0, posinf=0.0), 0.0)
        return lam, c, u * lam + b, c * lam + e

    def residuals(self, mean: Real) -> Real:
        _, _, mu, nu = self._fit(mean)
        deviance = 2 * (_half_deviance(self.counts, mu) + _half_deviance(self.reference, nu))
        return np.sign(self.counts - mu) * np.sqrt(deviance)

    def residual_slope(self, mean: Real, residuals: Real) -> Real:
        d1, d2 = self.nll_derivatives(mean)
        near = np.abs(residuals) < 1e-6
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(near, -np.sqrt(np.maximum(d2, 0.0)), d1 / residuals)

    def nll_derivatives(self, mean: Real) -> tuple[Real, Real]:
        lam, c, mu, nu = self._fit(mean)
        u = np.maximum(mean, _TINY)
        n, r, c1 = self.counts, self.reference, self.c1
        mu, nu = np.maximum(mu, _TINY), np.maximum(nu, _TINY)
        d1 = -lam * ((n / mu - 1) + c1 * (r / nu - 1))
        g_lam = -(n * u**2 / mu**2 + r * c**2 / nu**2)  # d/dlam of the stationarity condition
        g_u = n * self.b / mu**2 - 1 + c1 * (r * self.e / nu**2 - 1)
        inside = lam > 0  # on the boundary lam = 0 the intensity does not move with u
        d2 = lam**2 * (n / mu**2 + r * c1**2 / nu**2) + np.where(inside, g_u**2 / g_lam, 0.0)
        return d1, d2


@dataclass(frozen=True)
class Gaussian:
    """Readings ``values`` with known standard errors ``errors`` (> 0)."""

    values: Real
    errors: Real

    @property
    def size(self) -> int:
        return int(self.values.size)

    def residuals(self, mean: Real) -> Real:
        return (mean - self.values) / self.errors

    def residual_slope(self, mean: Real, residuals: Real) -> Real:
        return 1 / self.errors

    def nll_derivatives(self, mean: Real) -> tuple[Real, Real]:
        return (mean - self.values) / self.errors**2, 1 / self.errors**2


@dataclass(frozen=True)
class FitResult:
    """A maximum-likelihood estimate.

    ``estimate``, ``stderr`` (square roots of the covariance diagonal; NaN when the observed
    information is not positive definite) and ``covariance`` are in the fit's own parameters,
    named by ``names``. ``deviance`` is ``-2 ln(L / L_saturated)`` (Poisson deviance, or
    chi-square for Gaussian readings) with ``dof`` degrees of freedom and tail probability
    ``p_value``. ``evaluations`` counts model rows evaluated. ``message`` says in words how
    the fit went (with the goodness-of-fit warning, if any); ``optimizer_message`` is the
    optimizer's own termination line.
    """

    names: tuple[str, ...]
    estimate: Real
    stderr: Real
    covariance: Real
    success: bool
    message: str
    deviance: float
    dof: int
    p_value: float
    n_points: int
    evaluations: int
    optimizer_message: str = ""

    @property
    def warning(self) -> str:
        """A plain goodness-of-fit warning when ``p_value < GOF_P_MIN``, else ``""``."""
        if not (self.dof > 0 and self.p_value < GOF_P_MIN):
            return ""
        return (
            f"warning: the model does not describe the data (deviance {self.deviance:.1f} "
            f"for {self.dof} degrees of freedom, p = {self.p_value:.2g}): the bench file "
            "or the scan may be wrong (e.g. a drifting source, the wrong mount, a wrong "
            "dark rate); the values and errors above are not to be trusted"
        )

    def value(self, name: str) -> float:
        """Estimate of the parameter ``name``."""
        return float(self.estimate[self.names.index(name)])

    def error(self, name: str) -> float:
        """Standard error of the parameter ``name``."""
        return float(self.stderr[self.names.index(name)])

    def summary(self) -> dict[str, object]:
        """The keys every fit's JSON shares: ``success``, ``message``, ``optimizer_message``,
        ``goodness_of_fit`` and ``points_fitted`` (a count: ``points`` is always a list)."""
        return {
            "success": self.success,
            "message": self.message,
            "optimizer_message": self.optimizer_message,
            "goodness_of_fit": self.goodness(),
            "points_fitted": self.n_points,
        }

    def goodness(self) -> dict[str, float | int]:
        """Goodness of fit as plain numbers (for JSON)."""
        return goodness_of_fit(self.deviance, self.dof, self.p_value)


def goodness_of_fit(deviance: float, dof: int, p_value: float) -> dict[str, float | int]:
    """The ``goodness_of_fit`` object of every fit's JSON: ``deviance`` for ``dof`` degrees of
    freedom, its tail probability ``p_value`` and ``reduced`` = deviance / dof (NaN at 0)."""
    return {
        "deviance": deviance,
        "dof": dof,
        "p_value": p_value,
        "reduced": deviance / dof if dof > 0 else math.nan,
    }


def _stencil(theta: Real, steps: Real) -> Real:
    """Parameter rows: centre, +/- each step, and the four corners of every pair."""
    p = theta.size
    rows = [theta]
    eye = np.diag(steps)
    for j in range(p):
        rows += [theta + eye[j], theta - eye[j]]
    for j in range(p):
        for k in range(j + 1, p):
            for sj, sk in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
                rows.append(theta + sj * eye[j] + sk * eye[k])
    return np.array(rows)


def _derivatives(means: Real, steps: Real) -> tuple[Real, Real, Real]:
    """Means, Jacobian (n, p) and Hessians (n, p, p) from the rows of :func:`_stencil`."""
    p = steps.size
    centre = means[0]
    plus, minus = means[1 : 2 * p + 1 : 2], means[2 : 2 * p + 1 : 2]
    jac = ((plus - minus) / (2 * steps[:, None])).T
    hess = np.empty((centre.size, p, p))
    for j in range(p):
        hess[:, j, j] = (plus[j] - 2 * centre + minus[j]) / steps[j] ** 2
    row = 2 * p + 1
    for j in range(p):
        for k in range(j + 1, p):
            pp, pm, mp, mm = means[row : row + 4]
            row += 4
            hess[:, j, k] = hess[:, k, j] = (pp - pm - mp + mm) / (4 * steps[j] * steps[k])
    return centre, jac, hess


def maximize_likelihood(
    model: Model,
    family: Family,
    start: ArrayLike,
    names: Sequence[str],
    steps: ArrayLike,
    bounds: tuple[ArrayLike, ArrayLike] | None = None,
) -> FitResult:
    """Maximum-likelihood fit of ``model`` to the data held by ``family``.

    ``start`` is the initial parameter vector, ``steps`` the finite-difference step of each
    parameter (about 1e-3 of its expected uncertainty scale or smaller), ``bounds`` optional
    ``(low, high)`` arrays. Never raises on a failed optimisation: ``success`` and
    ``message`` say what happened.
    """
    from scipy.optimize import least_squares
    from scipy.special import chdtrc  # chi-squared tail without scipy.stats' import time

    x0 = np.asarray(start, float)
    h = np.asarray(steps, float)
    p = x0.size
    evaluations = 0

    def means(rows: Real) -> Real:
        nonlocal evaluations
        evaluations += rows.shape[0]
        return np.asarray(model(rows), float)

    def residuals(theta: Real) -> Real:
        return family.residuals(means(theta[None, :])[0])

    def jacobian(theta: Real) -> Real:
        rows = np.vstack([theta, theta + np.diag(h)])
        mu = means(rows)
        jac_mu = ((mu[1:] - mu[0]) / h[:, None]).T
        r = family.residuals(mu[0])
        return family.residual_slope(mu[0], r)[:, None] * jac_mu

    lo, hi = (np.full(p, -np.inf), np.full(p, np.inf)) if bounds is None else bounds
    solution = least_squares(
        residuals,
        x0,
        jac=jacobian,
        bounds=(lo, hi),
        method="trf",
        x_scale="jac",
        xtol=1e-10,
        ftol=1e-10,
        gtol=1e-10,
        max_nfev=200,
    )
    theta = solution.x
    mu, jac_mu, hess_mu = _derivatives(means(_stencil(theta, h)), h)
    d1, d2 = family.nll_derivatives(mu)
    info = jac_mu.T @ (d2[:, None] * jac_mu) + np.einsum("i,ijk->jk", d1, hess_mu)
    success = bool(solution.success)
    message = (
        "the fit converged"
        if success
        else "the optimizer stopped before converging (too many evaluations); check the "
        "scan covers the feature and the bench file's start values"
    )
    try:
        np.linalg.cholesky(info)
        covariance = np.linalg.inv(info)
    except np.linalg.LinAlgError:
        covariance = np.full((p, p), np.nan)
        success = False
        message = (
            "the observed information is not positive definite: the data do not "
            "determine every parameter (widen the scan or fix a parameter)"
        )
    at_bound = np.isclose(theta, lo) | np.isclose(theta, hi)
    if np.any(at_bound):
        success = False
        message = f"the estimate of {', '.join(np.asarray(names)[at_bound])} is at its bound"
    deviance = float(np.sum(family.residuals(mu) ** 2))
    dof = family.size - p
    p_value = float(chdtrc(dof, deviance)) if dof > 0 else math.nan
    result = FitResult(
        tuple(names),
        theta,
        np.sqrt(np.diag(covariance)),
        covariance,
        success,
        message,
        deviance,
        dof,
        p_value,
        family.size,
        evaluations,
        str(solution.message),
    )
    if result.warning:
        return replace(result, message=f"{message}; {result.warning}")
    return result
