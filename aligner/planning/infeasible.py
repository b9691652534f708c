"""Why a target cannot be reached, in words and numbers: travel, geometry, pointer, extinction."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace

import numpy as np
from numpy.typing import ArrayLike

from ..bench import Bench
from ..errors import InfeasibleTarget
from ..nulls import nulls, segments
from .observe import observe
from .roots import Solution
from .targets import Target

__all__ = ["infeasible", "pointer_cap"]


def _with(fixed: Mapping[str, float], name: str, values: ArrayLike) -> dict[str, ArrayLike]:
    return {**fixed, name: values}


def pointer_cap(bench: Bench) -> float:
    """Largest exact amplification a Gaussian pointer allows for a real weak value,
    ``1/sqrt(1 - exp(-g^2/sigma^2))`` (about ``sigma/g``; physics.md, all-orders response)."""
    c = bench.coupling
    return float(1.0 / np.sqrt(-np.expm1(-((c.strength / c.pointer_sigma) ** 2))))


def infeasible(bench: Bench, target: Target, solution: Solution) -> InfeasibleTarget:
    """The error for a target with no root in travel: what limits it and what to change."""
    names = ", ".join(solution.unknowns)
    if solution.nulls == 0 and _null_beyond_travel(bench, solution.unknowns):
        best = _best_in_travel(bench, target, solution.unknowns)
        return InfeasibleTarget(
            f"the null (crossed setting) of mounts {names} lies outside their travel, so "
            f"{target.describe()} cannot be reached"
            + ("" if best is None else f" (at most {best:.4g} inside the travel)")
            + "; widen travel_deg in the bench file or re-mount the optic",
            limit="travel",
            achievable=best,
        )
    if solution.nulls == 0:
        return InfeasibleTarget(
            f"mounts {names} cannot bring the post-selection orthogonal to the pre-selection "
            "(no null inside their travel), so no amplification can be planned; check the "
            "element angles and the travel limits in the bench file",
            limit="geometry",
        )
    if target.kind == "leak_rate":
        return _leak_infeasible(bench, target, solution.unknowns[0])
    wanted = abs(target.value)
    if solution.peak >= wanted:
        return InfeasibleTarget(
            f"{target.describe()} is reachable only with mounts {names} outside their travel; "
            "widen travel_deg in the bench file or re-mount the optic",
            limit="travel",
            achievable=solution.peak,
        )
    an, src = bench.analyzer.extinction_ratio, bench.source.extinction_ratio
    d_a, d_s = 1.0 / an, 1.0 / src  # leak of each polarizer (0 for a perfect one)
    with np.errstate(divide="ignore"):
        ideal_cap = 0.5 / np.sqrt(np.float64(d_a + d_s))
    cap = pointer_cap(bench)
    if target.exact and cap < 1.2 * solution.peak:
        return InfeasibleTarget(
            f"{target.describe()} is beyond the pointer limit: the mean pointer shift cannot "
            f"exceed about one pointer width, so the exact amplification peaks near "
            f"{solution.peak:.4g} here (sigma/g = "
            f"{bench.coupling.pointer_sigma / bench.coupling.strength:.4g}); use a wider "
            "pointer (larger pointer_sigma) or a weaker coupling",
            limit="pointer",
            achievable=solution.peak,
        )
    worse = "analyzer" if d_a >= d_s else "source polarizer"
    arm = [
        e.key
        for e in (*bench.pre, *bench.post)
        if e.type == "polarizer" and np.isfinite(e.extinction_ratio)
    ]
    also = (
        f"; the leak of the polarizer(s) {', '.join(arm)} in the arms adds to the floor and "
        "is not in that estimate"
        if arm
        else ""
    )
    return InfeasibleTarget(
        f"{target.describe()} is beyond the extinction limit: light leaking through the source "
        f"polarizer (extinction ratio {src:.3g}, leak d_s = 1/ER = {d_s:.3g}) and the analyzer "
        f"(extinction ratio {an:.3g}, leak d_a = {d_a:.3g}) sets a floor under the "
        f"post-selection, which caps the amplification at {solution.peak:.4g} on this bench "
        f"(for ideal states about 1/(2 sqrt(d_a + d_s)) = {ideal_cap:.4g}, with the combined "
        f"leak d_a + d_s = {d_a + d_s:.3g}){also}; the {worse} leaks more: use one with a "
        "higher extinction ratio",
        limit="extinction",
        achievable=solution.peak,
    )


def _null_beyond_travel(bench: Bench, names: Sequence[str]) -> bool:
    """Would the mounts reach a null if their travel were a full turn?"""
    wide = {
        n: replace(
            bench.mounts[n],
            travel_deg=(bench.mounts[n].reading_deg - 180.0, bench.mounts[n].reading_deg + 180.0),
        )
        for n in names
    }
    fixed = {k: v for k, v in bench.readings().items() if k not in names}
    free_bench = bench.with_mounts(**wide)
    if len(names) == 1:
        return any(s.null is not None for s in segments(free_bench, names[0], fixed))
    return len(nulls(free_bench, names, fixed)) > 0


def _best_in_travel(bench: Bench, target: Target, names: Sequence[str]) -> float | None:
    """Largest |target quantity| over one mount's travel (None for several mounts)."""
    if len(names) != 1:
        return None
    lo, hi = bench.mounts[names[0]].travel_deg
    fixed = {k: v for k, v in bench.readings().items() if k != names[0]}
    grid = np.linspace(lo, hi, 4001)
    return float(np.nanmax(np.abs(target.figure(observe(bench, _with(fixed, names[0], grid))))))


def _leak_infeasible(bench: Bench, target: Target, name: str) -> InfeasibleTarget:
    fixed = {k: v for k, v in bench.readings().items() if k != name}
    segs = segments(bench, name, fixed)
    grid = np.concatenate([np.linspace(s.low, s.high, 721) for s in segs])
    leak = observe(bench, _with(fixed, name, grid)).leak_rate
    lo, hi = float(np.min(leak)), float(np.max(leak))
    if target.value.real < lo:
        return InfeasibleTarget(
            f"a leak rate of {target.value.real:.3g} is below the floor of {lo:.3g} per photon "
            "set by the extinction of the analyzer and source polarizer; use polarizers with a "
            "higher extinction ratio",
            limit="extinction",
            achievable=lo,
        )
    return InfeasibleTarget(
        f"a leak rate of {target.value.real:.3g} is above the largest reachable, {hi:.3g} per "
        "photon (analyzer transmission and the optics' losses); lower the target",
        limit="transmission",
        achievable=hi,
    )
