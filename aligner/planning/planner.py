"""Planner: where to set the mounts for a target amplification, weak value or leak rate,
and how precisely they must sit.

Conventions: readings in degrees; "amplification" as in :mod:`aligner.prediction` (linear:
``Re``/``Im A_w``; exact: all-orders pointer response); an amplification target is a size,
and both signs (the two sides of a null) are branches. For a weak-value target the
sensitivity and tolerance are about ``|A_w|``; for a leak-rate target about the leak rate.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..bench import Bench
from ..errors import InfeasibleTarget, InputError
from ..model import imbalance_deg
from ..nulls import mount_period_deg
from ..prediction import readout_axis
from .infeasible import infeasible, pointer_cap
from .observe import observe
from .roots import Root, preferred, solve
from .targets import Target, make_target
from .tolerance import Tolerance, tolerance_budget

__all__ = ["Branch", "Plan", "Quantized", "Sensitivity", "plan"]

#: One resolution step of the imbalance mount may change the target quantity by at most this
#: fraction before the target counts as beyond the resolution limit (common practice, no source).
STEP_LIMIT = 0.05
_SENS_STEP_DEG = 1e-5


@dataclass(frozen=True)
class Branch:
    """One solution: readings (deg) of the solved mounts and what the bench does there.

    ``side``: ``high``/``low`` side of the imbalance mount's null (sign of the imbalance);
    ``regime``: ``weak`` (the usual working point) or ``extinction floor`` (between the null
    and the amplification peak, where leaked light dominates and the setting is touchy).
    ``value`` is the target quantity (signed amplification, ``|A_w|`` or leak rate).

    One branch is one distinct optical setting: readings of a mount that differ by its period
    (180 deg for polarizers, waveplates and rotators, 90 deg for a half-wave plate of exactly
    half a wave, :func:`aligner.nulls.mount_period_deg`) set the same optics and are one
    branch. ``settings`` (``readings`` in JSON) is the equivalent reading nearest the current
    readings; ``equivalent_readings`` lists every equivalent reading inside the travel, that
    one first, nearest first.
    """

    index: int
    settings: Mapping[str, float]
    side: str
    regime: str
    null_deg: Mapping[str, float]
    imbalance_deg: float
    weak_value: complex
    amplification_linear: float
    amplification_exact: float
    leak_rate: float
    value: float
    distance_deg: float
    equivalent_readings: tuple[Mapping[str, float], ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {
            "index": self.index,
            "readings": dict(self.settings),
            "side": self.side,
            "regime": self.regime,
            "null_deg": dict(self.null_deg),
            "imbalance_deg": self.imbalance_deg,
            "weak_value": self.weak_value,
            "amplification": {
                "linear": self.amplification_linear,
                "exact": self.amplification_exact,
            },
            "leak": self.leak_rate,
            "value": self.value,
            "distance_deg": self.distance_deg,
            "equivalent_readings": [dict(r) for r in self.equivalent_readings],
        }


@dataclass(frozen=True)
class Quantized:
    """The chosen readings rounded to each mount's resolution grid (multiples of
    ``resolution_deg``), the best of the neighbouring grid points."""

    settings: Mapping[str, float]
    value: float  # target quantity reached at the rounded readings
    relative_error: float  # value / exact value - 1
    step_change: float  # relative change of the value for one step of the imbalance mount


@dataclass(frozen=True)
class Sensitivity:
    """``derivative``: d(value)/d(reading) per deg; ``reading_for_1pct_deg``: the reading change
    that moves the value by 1 % (inf when the mount has no effect)."""

    mount: str
    derivative: float
    reading_for_1pct_deg: float


@dataclass(frozen=True)
class Plan:
    """A planned setting with its alternatives, rounding, sensitivity and tolerance budget."""

    target: Target
    quantity: str  # what ``value`` fields measure, in words
    unknowns: tuple[str, ...]
    settings: Mapping[str, float]
    branches: tuple[Branch, ...]
    chosen: int
    reason: str
    quantized: Quantized
    sensitivity: tuple[Sensitivity, ...]
    tolerance: Tolerance | None
    predict: Mapping[str, Any] | None
    warnings: tuple[str, ...] = field(default=())
    message: str = ""

    @property
    def branch(self) -> Branch:
        """The chosen branch."""
        return self.branches[self.chosen]

    def to_dict(self) -> dict[str, Any]:
        """The JSON document of ``aligner plan --json`` (stable keys, docs/json.md; the mount
        readings are under ``readings``)."""
        t = self.target
        amplification = t.kind == "amplification"
        target = {
            "kind": t.kind,
            "quantity": self.quantity,
            "value": t.value if t.kind == "weak_value" else t.value.real,
            "axis": t.axis if amplification else None,
            "exact": t.exact if amplification else None,
        }
        q = self.quantized
        return {
            "target": target,
            "unknowns": list(self.unknowns),
            "readings": dict(self.settings),
            "chosen": {"index": self.chosen, "reason": self.reason},
            "branches": [b.to_dict() for b in self.branches],
            "quantized": {
                "readings": dict(q.settings),
                "value": q.value,
                "relative_error": q.relative_error,
                "step_change": q.step_change,
            },
            "predict": None if self.predict is None else dict(self.predict),
            "sensitivity": {
                s.mount: {
                    "derivative_per_deg": s.derivative,
                    "reading_for_1pct_deg": s.reading_for_1pct_deg,
                }
                for s in self.sensitivity
            },
            "tolerance": None if self.tolerance is None else self.tolerance.to_dict(),
            "warnings": list(self.warnings),
            "message": self.message,
        }


def _quantity(target: Target) -> str:
    if target.kind == "leak_rate":
        return "leak rate (per source photon)"
    if target.kind == "weak_value":
        return "|A_w|"
    return f"{'exact' if target.exact else 'linear'} amplification ({target.axis} axis)"


def _branches(
    bench: Bench,
    target: Target,
    unknowns: Sequence[str],
    roots: Sequence[Root],
    order: Sequence[int],
) -> tuple[tuple[Branch, ...], tuple[int, ...]]:
    """One branch per distinct optical setting, in the default order, and the index of each
    branch's root (its reading nearest the current readings).

    ``order`` lists the roots in the default order (weak regime first, nearest first), so the
    first root met of each setting is its nearest reading. Readings count as one setting only
    when they agree modulo every unknown mount's period and the model gives the same weak value
    and leak rate there (1e-6 relative: roots solved apart agree to about 1e-7 deg, where a
    weak value near the null moves by ~1e-7 of itself): a guard should an element ever not
    repeat."""
    current = bench.readings()
    full = {
        n: np.array([dict(zip(unknowns, roots[k].readings, strict=True)).get(n, v) for k in order])
        for n, v in current.items()
    }
    obs = observe(bench, full)
    axis_part = np.real if target.axis == "re" else np.imag
    lin = axis_part(obs.weak_value)
    ex = axis_part(obs.exact)
    imb = np.asarray(imbalance_deg(bench, full))
    value = np.asarray(target.figure(obs))
    periods = np.array([mount_period_deg(bench, n) for n in unknowns])
    x = np.array([roots[k].readings for k in order])  # (r, n)
    inner = np.array([roots[k].inner for k in order])
    diff = x[:, None, :] - x[None, :, :]
    same = (
        np.all(np.abs(np.mod(diff + periods / 2, periods) - periods / 2) < 1e-6, axis=-1)
        & (inner[:, None] == inner[None, :])
        & np.isclose(obs.weak_value[:, None], obs.weak_value[None, :], rtol=1e-6, atol=0)
        & np.isclose(obs.leak_rate[:, None], obs.leak_rate[None, :], rtol=1e-6, atol=0)
    )
    groups: list[list[int]] = []  # positions in ``order``, nearest reading first
    free = np.ones(len(order), bool)
    for i in range(len(order)):
        if free[i]:
            members = np.nonzero(same[i] & free)[0]
            free[members] = False
            groups.append([int(j) for j in members])
    out = []
    for index, g in enumerate(groups):
        i = g[0]
        root = roots[order[i]]
        settings = dict(zip(unknowns, root.readings, strict=True))
        out.append(
            Branch(
                index=index,
                settings=settings,
                side="high" if imb[i] > 0 else "low",
                regime="extinction floor" if root.inner else "weak",
                null_deg=dict(zip(unknowns, root.null, strict=True)),
                imbalance_deg=float(imb[i]),
                weak_value=complex(obs.weak_value[i]),
                amplification_linear=float(lin[i]),
                amplification_exact=float(ex[i]),
                leak_rate=float(obs.leak_rate[i]),
                value=float(value[i]),
                distance_deg=math.dist(
                    [settings[n] for n in unknowns], [current[n] for n in unknowns]
                ),
                equivalent_readings=tuple(
                    dict(zip(unknowns, roots[order[j]].readings, strict=True)) for j in g
                ),
            )
        )
    return tuple(out), tuple(order[g[0]] for g in groups)


def _mismatch(target: Target, value: complex, obs: Any, n: int) -> np.ndarray:
    """How far observations are from a root's signed target (for picking rounded readings)."""
    if target.kind == "leak_rate":
        return np.abs(np.log(obs.leak_rate / value.real))
    w = obs.response(target.exact)
    if n == 1:
        return (
            np.abs(np.real(w) - value.real) if value.imag == 0 else np.abs(np.imag(w) - value.imag)
        )
    return np.abs(w - value)


def _quantize(
    bench: Bench, target: Target, unknowns: Sequence[str], root: Root, exact_value: float
) -> Quantized:
    options = []
    for name, r in zip(unknowns, root.readings, strict=True):
        res = bench.mounts[name].resolution_deg
        lo, hi = bench.mounts[name].travel_deg
        cands = {round(np.floor(r / res) * res, 12), round(np.ceil(r / res) * res, 12)}
        options.append(sorted(c for c in cands if lo <= c <= hi) or [r])
    combos = np.array(list(itertools.product(*options)))  # (c, n)
    readings = {n: combos[:, k] for k, n in enumerate(unknowns)}
    obs = observe(bench, readings)
    best = int(np.argmin(_mismatch(target, root.value, obs, len(unknowns))))
    value = float(np.asarray(target.figure(obs))[best])
    settings = {n: float(combos[best, k]) for k, n in enumerate(unknowns)}
    # one step of the imbalance mount either way from the exact root
    name = bench.imbalance_mount
    step = bench.mounts[name].resolution_deg
    base = dict(zip(unknowns, root.readings, strict=True))
    stepped = observe(bench, {**base, name: base[name] + np.array([step, -step])})
    change = float(np.max(np.abs(np.asarray(target.figure(stepped)) / exact_value - 1.0)))
    return Quantized(settings, value, value / exact_value - 1.0, change)


def _sensitivity(
    bench: Bench,
    target: Target,
    settings: Mapping[str, float],
    value: float,
) -> tuple[Sensitivity, ...]:
    names = list(bench.mounts)
    h = _SENS_STEP_DEG
    readings = {n: np.full(2 * len(names), settings[n]) for n in names}
    for k, n in enumerate(names):
        readings[n][2 * k] += h
        readings[n][2 * k + 1] -= h
    f = np.asarray(target.figure(observe(bench, readings)))
    out = []
    for k, n in enumerate(names):
        d = float((f[2 * k] - f[2 * k + 1]) / (2 * h))
        one = abs(0.01 * value / d) if d != 0 else float("inf")
        out.append(Sensitivity(n, d, one))
    return tuple(out)


def _reason(branches: Sequence[Branch], chosen: int, requested: int | None) -> str:
    b = branches[chosen]
    n = len(branches)
    readings = sum(len(x.equivalent_readings) for x in branches)
    of = f"branch {chosen} of {n} distinct settings"
    if readings > n:
        of += f" ({readings} readings in all, counting those that set the same optics)"
    if requested is not None:
        return f"{of}, as requested with branch={requested}"
    weak = sum(x.regime == "weak" for x in branches)
    if b.regime == "weak":
        others = f"; {n - weak} more inside the extinction floor" if n > weak else ""
        return (
            f"{of}: the weak-regime setting nearest the current readings "
            f"({b.distance_deg:.4g} deg away, {b.side}-reading side of the null){others}"
        )
    return (
        f"{of}: nearest the current readings; every solution lies inside the extinction "
        "floor, where leaked light dominates and the setting is touchy"
    )


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _message(
    bench: Bench,
    p_quantity: str,
    reason: str,
    q: Quantized,
    sens: Sequence[Sensitivity],
    tol: Tolerance | None,
    warnings: Sequence[str],
) -> str:
    lines = [
        "Set " + ", ".join(f"{n} to {_fmt(r)} deg" for n, r in q.settings.items()) + f" ({reason})."
    ]
    lines.append(
        f"At these rounded readings the {p_quantity} is {_fmt(q.value)} "
        f"({100 * q.relative_error:+.3g} % from the exact solution); one step of "
        f"{bench.imbalance_mount} changes it by {100 * q.step_change:.3g} %."
    )
    key = max(sens, key=lambda s: abs(s.derivative))
    lines.append(
        f"Most sensitive mount: {key.mount} ({key.reading_for_1pct_deg:.3g} deg moves "
        "the value by 1 %)."
    )
    if tol is not None:
        f = tol.figure
        lines.append(
            f"Tolerance ({tol.samples} samples): 68 % of setups within "
            f"{_fmt(f.low68)}..{_fmt(f.high68)}, 95 % within "
            f"{_fmt(f.low95)}..{_fmt(f.high95)}"
            + (
                f"; dominant error: {tol.dominant}."
                if tol.dominant
                else "; the bench file declares no mount or plate errors."
            )
        )
        if tol.dominant and "retardance" in tol.dominant:
            lines.append(
                "A plate's retardance error moves the null itself: re-find the null on "
                "the bench before setting the imbalance."
            )
    lines.extend(warnings)
    lines.append(
        "Safety: check the expected detector rate before opening the shutter; follow "
        "your local laser-safety rules and your laser safety officer."
    )
    return "\n".join(lines)


def _warnings(
    bench: Bench, target: Target, branch: Branch, block: Mapping[str, Any] | None
) -> list[str]:
    out = []
    cap = pointer_cap(bench)
    if target.kind != "leak_rate" and not target.exact and abs(branch.amplification_linear) > cap:
        out.append(
            f"Warning: the linear amplification exceeds the pointer limit (about {cap:.4g}"
            f"); the measured shift follows the exact value, "
            f"{branch.amplification_exact:.4g}."
        )
    if block is not None and block["detector"]["over_safe_rate"]:
        out.append(
            f"Warning: the expected detector rate {block['detector']['rate']:.3g}/s is "
            f"above the bench's safe_rate ({bench.detector.safe_rate:.3g}/s); attenuate "
            "the beam or use a branch with a lower leak rate."
        )
    return out


def plan(
    bench: Bench,
    amplification: float | None = None,
    *,
    axis: str | None = None,
    exact: bool = False,
    weak_value: complex | None = None,
    leak_rate: float | None = None,
    free: Sequence[str] = (),
    branch: int | None = None,
    samples: int = 100_000,
    seed: int = 0,
    predict: bool = True,
) -> Plan:
    """Plan the mount readings for exactly one target.

    ``amplification`` (size > 0; ``axis`` ``re``/``im``, default the readout's: position and
    phase read ``re``, momentum ``im``; ``exact`` for the all-orders pointer response),
    ``weak_value`` (complex) or ``leak_rate`` (per source photon). Unknowns: the
    bench's ``imbalance_mount``, its ``phase_mount`` for amplification and weak-value targets,
    and any ``free`` mounts. ``branch`` picks another distinct optical setting (an index into
    :attr:`Plan.branches`) than the default (weak regime, nearest the current readings); the
    readings used are that setting's equivalent reading nearest the current readings.
    ``samples`` = 0 skips the Monte Carlo tolerance budget; ``predict`` = False skips the
    :func:`aligner.prediction.prediction_block` of the setting.

    Raises :class:`InfeasibleTarget` (the limit and the achievable value in the message) and
    :class:`InputError` for bad arguments.
    """
    target = make_target(
        amplification,
        axis=axis or readout_axis(bench),
        exact=exact,
        weak_value=weak_value,
        leak_rate=leak_rate,
    )
    if int(samples) < 0:
        raise InputError(f"samples must be >= 0, got {samples!r}")
    sol = solve(bench, target, free)
    if not sol.roots:
        raise infeasible(bench, target, sol)
    order = preferred(sol.roots, sol.unknowns, bench.readings())
    branches, branch_roots = _branches(bench, target, sol.unknowns, sol.roots, order)
    if branch is not None and not 0 <= branch < len(branches):
        raise InputError(f"branch {branch!r}: this target has branches 0..{len(branches) - 1}")
    chosen = 0 if branch is None else int(branch)
    b = branches[chosen]
    root = sol.roots[branch_roots[chosen]]
    q = _quantize(bench, target, sol.unknowns, root, b.value)
    if q.step_change > STEP_LIMIT:
        reachable = abs(b.value) * STEP_LIMIT / q.step_change
        name = bench.imbalance_mount
        step = bench.mounts[name].resolution_deg
        raise InfeasibleTarget(
            f"{target.describe()} is beyond the resolution limit: one "
            f"{step:g}-deg step of {name} changes it by "
            f"{100 * q.step_change:.3g} % (at most {100 * STEP_LIMIT:g} % allowed), so about "
            f"{reachable:.3g} is the most this mount can set reliably; use a mount that steps "
            f"in at most {step * STEP_LIMIT / q.step_change:.2g} deg (resolution_deg) or a "
            "smaller target",
            limit="resolution",
            achievable=reachable,
        )
    full = {**bench.readings(), **b.settings}
    sens = _sensitivity(bench, target, full, b.value)
    tol = None
    if samples:
        tol = tolerance_budget(bench, target, full, samples=int(samples), seed=seed)
    block, beyond = None, ""
    if predict:
        from ..prediction import beyond_limit, block_of, limits
        from ..prediction import predict as prediction

        lim = limits(bench, full, axis=target.axis if target.kind == "amplification" else None)
        block = block_of(prediction(bench, full), lim)
        if target.kind == "amplification":
            beyond = beyond_limit(bench, lim, target.value.real)
    reason = _reason(branches, chosen, branch)
    warnings = _warnings(bench, target, b, block)
    if beyond:
        warnings.insert(0, f"Warning: {beyond}")
    quantity = _quantity(target)
    return Plan(
        target,
        quantity,
        sol.unknowns,
        dict(b.settings),
        branches,
        chosen,
        reason,
        q,
        sens,
        tol,
        block,
        tuple(warnings),
        _message(bench, quantity, reason, q, sens, tol, warnings),
    )
