"""Every root of a target within the mounts' travel: a bracket on a logarithmic ray from each
null, a bracketing root finder along it, and (for several unknown mounts) a joint polish.

Around each null the ideal closed form (extinction-free linearization, ``eps = arccot X`` in
the textbook case) gives the direction and scale of the search; the target is bracketed on a
ray away from the null and found with ``scipy.optimize.elementwise.find_root``; two-mount
targets are polished by a vectorized Gauss-Newton step with ``scipy.optimize.least_squares``
as the fallback.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import ideal_optics
from ..nulls import mount_period_deg, nulls, segments
from .observe import Observed, observe
from .targets import Target, unknown_mounts

__all__ = ["Root", "Solution", "preferred", "solve"]

Real = NDArray[np.float64]


def _with(fixed: Mapping[str, float], name: str, values: ArrayLike) -> dict[str, ArrayLike]:
    return {**fixed, name: values}


@dataclass(frozen=True)
class Root:
    """One solution of the target equations: readings (deg) of the unknown mounts and where it
    lies relative to the null it was found from."""

    readings: tuple[float, ...]
    null: tuple[float, ...]
    inner: bool  # inside the extinction floor (between the null and the response peak)
    residual: float
    value: complex  # the signed target this root meets (response, or the leak rate)


@dataclass(frozen=True)
class Solution:
    """All roots of a target on a bench, and the best value reachable where none exists."""

    unknowns: tuple[str, ...]
    roots: tuple[Root, ...]
    peak: float  # largest |figure| found on the search rays (nan for leak-rate targets)
    nulls: int


def _ray_offsets(length: float, count: int = 160) -> Real:
    """Logarithmic distances (deg) from a null: resolves both the extinction floor (micro-deg)
    and the weak-regime root (degrees)."""
    return np.geomspace(1e-7, length, count)


def _residual_scalar(target: Target, obs: Observed, value: ArrayLike, n: int) -> Real:
    """Scalar equation along a search ray, zero at a root: the component on the target's axis
    over its target value (one unknown mount), the magnitude ratio (several unknowns), or the
    log ratio of leak rates. ``value`` broadcasts against the observation."""
    v = np.asarray(value, complex)
    if target.kind == "leak_rate":
        return np.log(obs.leak_rate / v.real)
    w = obs.response(target.exact)
    if n > 1:
        return np.abs(w) / np.abs(v) - 1.0
    on_im = v.imag != 0
    return np.where(on_im, w.imag, w.real) / np.where(on_im, v.imag, v.real) - 1.0


def _readings(names: Sequence[str], x: Real, fixed: Mapping[str, float]) -> dict[str, float | Real]:
    """Readings dict for points ``x`` (..., n) of the unknown mounts ``names``."""
    return {**fixed, **{name: x[..., k] for k, name in enumerate(names)}}


def _solve_one_mount(
    bench: Bench, target: Target, name: str, fixed: Mapping[str, float]
) -> Solution:
    """Roots along the imbalance mount alone: a bracket on each side of every null."""
    from scipy.optimize.elementwise import find_root

    segs = segments(bench, name, fixed)
    rays = []  # (centre, direction, length)
    for seg in segs:
        for sign, length in ((1.0, seg.high - seg.centre), (-1.0, seg.centre - seg.low)):
            if length > 1e-6:
                rays.append((seg.centre, sign, length))
    if not rays:
        return Solution((name,), (), float("nan"), 0)
    offsets = np.stack([_ray_offsets(length) for _, _, length in rays])  # (R, S)
    centre = np.array([c for c, _, _ in rays])[:, None]
    side = np.array([d for _, d, _ in rays])[:, None]
    obs = observe(bench, _with(fixed, name, centre + side * offsets))
    fig = np.abs(target.figure(obs))
    peak_idx = np.argmax(np.where(np.isfinite(fig), fig, -np.inf), axis=1)
    starts, ends, meta = [], [], []
    for value in target.signed_values():
        f = _residual_scalar(target, obs, value, 1)
        for r in range(len(rays)):
            ok = np.isfinite(f[r])
            flips = np.nonzero(ok[:-1] & ok[1:] & (np.sign(f[r, :-1]) != np.sign(f[r, 1:])))[0]
            for i in flips:
                starts.append(offsets[r, i])
                ends.append(offsets[r, i + 1])
                meta.append((r, value, target.kind != "leak_rate" and i < peak_idx[r]))
    peak = float(np.nanmax(fig)) if target.kind != "leak_rate" else float("nan")
    if not meta:
        return Solution((name,), (), peak, sum(s.null is not None for s in segs))
    r_idx = np.array([m[0] for m in meta])
    values = [m[1] for m in meta]
    c, d = centre[r_idx, 0], side[r_idx, 0]

    def along(s: Real, c: Real, d: Real, v: Real) -> Real:
        return _residual_scalar(target, observe(bench, _with(fixed, name, c + d * s)), v, 1)

    v_arr = np.array(values, complex)
    res = find_root(
        along,
        (np.array(starts), np.array(ends)),
        args=(c, d, v_arr),
        tolerances={"xatol": 1e-13, "xrtol": 1e-14},
    )
    x = c + d * res.x
    resid = np.abs(along(res.x, c, d, v_arr))
    roots = tuple(
        Root((float(x[k]),), (float(c[k]),), bool(meta[k][2]), float(resid[k]), complex(v_arr[k]))
        for k in range(len(meta))
        if res.success[k]
    )
    return Solution((name,), roots, peak, sum(s.null is not None for s in segs))


def _ray_directions(
    bench: Bench, names: Sequence[str], fixed: Mapping[str, float], centres: Real, values: Real
) -> tuple[Real, Real]:
    """Unit search directions (deg space) from each null towards the target, from the ideal
    closed form: the extinction-free ``1/A_w`` is linear near a null, ``1/A_w ~ J dx``, so the
    target weak value ``T`` lies along ``dx = J^+ (1/T)`` (``eps = arccot X`` in the crossed
    linear case). Returns (k, n) unit vectors and the (k,) seed distances."""
    n = centres.shape[-1]
    h = 1e-4  # central differences: 1/A_w is 0/0 at the null itself
    pts = centres[:, None, :] + np.concatenate([h * np.eye(n), -h * np.eye(n)])[None]
    with np.errstate(divide="ignore", invalid="ignore"):
        u = 1.0 / observe(ideal_optics(bench), _readings(names, pts, fixed)).weak_value  # (k, 2n)
    du = (u[:, :n] - u[:, n:]) / (2 * h)  # (k, n) complex
    jac = np.stack([du.real, du.imag], axis=1)  # (k, 2, n)
    goal = 1.0 / values
    dx = np.einsum("kij,kj->ki", np.linalg.pinv(jac), np.stack([goal.real, goal.imag], -1))
    dist = np.linalg.norm(dx, axis=-1)
    # no direction where the target needs no move (or the null's Jacobian vanishes)
    return dx / np.where(dist > 0, dist, 1.0)[:, None], dist


def _polish(
    bench: Bench,
    target: Target,
    names: Sequence[str],
    fixed: Mapping[str, float],
    x0: Real,
    values: Real,
) -> tuple[Real, Real]:
    """Gauss-Newton on ``(w(x) - T)/|T|`` for all roots at once (one forward call per step,
    forward-difference Jacobian); ``scipy.optimize.least_squares`` for any that stall."""
    from scipy.optimize import least_squares

    n = x0.shape[-1]
    h = 1e-7
    steps = np.concatenate([np.zeros((1, n)), h * np.eye(n)])[None]
    scale = np.abs(values)[:, None]

    def residuals(x: Real, v: Real, s: Real) -> Real:
        w = observe(bench, _readings(names, x, fixed)).response(target.exact)
        r = (w - v) / s
        return np.stack([r.real, r.imag], axis=-1)

    x = x0.copy()
    for _ in range(25):
        rr = residuals(x[:, None, :] + steps, values[:, None], scale)  # (k, n+1, 2)
        jac = np.swapaxes((rr[:, 1:] - rr[:, :1]) / h, 1, 2)  # (k, 2, n)
        step = np.einsum("kij,kj->ki", np.linalg.pinv(jac), rr[:, 0])
        x = x - step
        if np.all(np.abs(step) < 1e-11):
            break
    res = np.linalg.norm(residuals(x, values, scale[:, 0]), axis=-1)
    for k in np.nonzero(~(res < 1e-9))[0]:
        fit = least_squares(
            lambda y, k=k: residuals(y, values[k], scale[k, 0]),
            x0[k],
            xtol=1e-15,
            ftol=1e-15,
            gtol=1e-15,
        )
        x[k], res[k] = fit.x, np.linalg.norm(fit.fun)
    return x, res


def _translations(x: Real, names: Sequence[str], bench: Bench) -> list[Real]:
    """Copies of a solution shifted by whole periods of each mount that stay inside travel."""
    options = []
    for k, name in enumerate(names):
        lo, hi = bench.mounts[name].travel_deg
        period = mount_period_deg(bench, name)
        first = np.ceil((lo - x[k]) / period)
        last = np.floor((hi - x[k]) / period)
        options.append(x[k] + period * np.arange(first, last + 1))
    if any(len(o) == 0 for o in options):
        return []
    grid = np.meshgrid(*options, indexing="ij")
    return list(np.stack([g.ravel() for g in grid], axis=-1))


def _solve_many_mounts(
    bench: Bench, target: Target, names: tuple[str, ...], fixed: Mapping[str, float]
) -> Solution:
    """Roots in several mounts: ray searches from each null, then a joint polish."""
    from scipy.optimize.elementwise import find_root

    centres = nulls(bench, names, fixed)
    if len(centres) == 0:
        return Solution(names, (), float("nan"), 0)
    values = np.array(target.signed_values(), complex)
    k_null = np.repeat(np.arange(len(centres)), len(values))
    v_ray = np.tile(values, len(centres))
    c_ray = centres[k_null]
    direction, seed = _ray_directions(bench, names, fixed, c_ray, v_ray)
    offsets = np.stack([_ray_offsets(min(89.0, max(60.0, 3 * s))) for s in seed])  # (R, S)
    pts = c_ray[:, None, :] + offsets[..., None] * direction[:, None, :]
    obs = observe(bench, _readings(names, pts, fixed))
    fig = np.abs(obs.response(target.exact))
    peak_idx = np.argmax(np.where(np.isfinite(fig), fig, -np.inf), axis=1)
    f = _residual_scalar(target, obs, v_ray[:, None], len(names))
    starts, ends, meta = [], [], []
    for r in range(len(v_ray)):
        ok = np.isfinite(f[r])
        flips = np.nonzero(ok[:-1] & ok[1:] & (np.sign(f[r, :-1]) != np.sign(f[r, 1:])))[0]
        for i in flips:
            starts.append(offsets[r, i])
            ends.append(offsets[r, i + 1])
            meta.append((r, bool(i < peak_idx[r])))
    peak = float(np.nanmax(fig))
    count = sum(len(_translations(c, names, bench)) for c in centres)
    if not meta:
        return Solution(names, (), peak, count)
    rays = np.array([m[0] for m in meta])

    def along(s: Real, r: Real) -> Real:
        r = r.astype(int)
        x = c_ray[r] + s[..., None] * direction[r]
        return _residual_scalar(
            target, observe(bench, _readings(names, x, fixed)), v_ray[r], len(names)
        )

    res = find_root(
        along,
        (np.array(starts), np.array(ends)),
        args=(rays.astype(float),),
        tolerances={"xatol": 1e-12, "xrtol": 1e-13},
    )
    x0 = c_ray[rays] + res.x[:, None] * direction[rays]
    x, resid = _polish(bench, target, names, fixed, x0, v_ray[rays])
    roots: list[Root] = []
    for k in range(len(rays)):
        if not resid[k] < 1e-8:
            continue
        null = c_ray[rays[k]]
        for y in _translations(x[k], names, bench):
            shift = y - x[k]
            roots.append(
                Root(
                    tuple(float(v) for v in y),
                    tuple(float(v) for v in null + shift),
                    meta[k][1],
                    float(resid[k]),
                    complex(v_ray[rays[k]]),
                )
            )
    return Solution(names, tuple(roots), peak, count)


def solve(bench: Bench, target: Target, free: Sequence[str] = ()) -> Solution:
    """Every root of ``target`` within the mounts' travel (other mounts at the file readings)."""
    names = unknown_mounts(bench, target, free)
    fixed = {k: v for k, v in bench.readings().items() if k not in names}
    if len(names) == 1:
        sol = _solve_one_mount(bench, target, names[0], fixed)
    else:
        sol = _solve_many_mounts(bench, target, names, fixed)
    unique: dict[tuple[float, ...], Root] = {}
    for root in sol.roots:  # a polish may land on a root already found from another null
        unique.setdefault(tuple(np.round(root.readings, 6)), root)
    return replace(sol, roots=tuple(unique.values()))


def _distance(root: Root, names: Sequence[str], near: Mapping[str, float]) -> float:
    return float(np.linalg.norm([r - near[n] for r, n in zip(root.readings, names, strict=True)]))


def preferred(
    roots: Sequence[Root],
    names: Sequence[str],
    near: Mapping[str, float],
) -> list[int]:
    """Root indices in the default order: weak-regime roots (outside the extinction floor)
    first, each group nearest to ``near`` first."""
    return sorted(
        range(len(roots)), key=lambda k: (roots[k].inner, _distance(roots[k], names, near))
    )
