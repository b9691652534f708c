"""Planner targets: what to solve for and which mounts are the unknowns."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..bench import Bench
from ..errors import InputError
from .observe import Observed

__all__ = ["Target", "make_target", "mounts_in_play", "unknown_mounts"]

Real = NDArray[np.float64]


@dataclass(frozen=True)
class Target:
    """What the planner solves for.

    ``kind``: ``amplification`` (``value`` > 0, the size of the amplification; both signs are
    solution branches), ``weak_value`` (complex ``value``) or ``leak_rate`` (``value`` in
    (0, 1], per source photon). ``axis`` (``re``/``im``) and ``exact`` apply to amplification.
    """

    kind: str
    value: complex
    axis: str = "re"
    exact: bool = False

    def figure(self, obs: Observed) -> Real:
        """The scalar the target is about: the amplification on the axis, ``|A_w|`` for a
        weak-value target, the leak rate for a leak-rate target."""
        if self.kind == "leak_rate":
            return obs.leak_rate
        if self.kind == "weak_value":
            return np.abs(obs.weak_value)
        w = obs.response(self.exact)
        return np.real(w) if self.axis == "re" else np.imag(w)

    def describe(self) -> str:
        if self.kind == "leak_rate":
            return f"leak rate {self.value.real:.4g}"
        if self.kind == "weak_value":
            return f"weak value {self.value.real:+.4g}{self.value.imag:+.4g}i"
        kind = "exact" if self.exact else "linear"
        return f"{kind} amplification {self.value.real:g} on the {self.axis} axis"

    def signed_values(self) -> tuple[complex, ...]:
        """The complex responses to hit: both signs for an amplification, on its axis."""
        if self.kind == "amplification":
            v = self.value.real * (1.0 if self.axis == "re" else 1j)
            return (v, -v)
        return (self.value,)


def mounts_in_play(bench: Bench, free: Sequence[str] = (), *, phase: bool = True) -> list[str]:
    """The imbalance mount, the phase mount (when ``phase``) and the ``free`` mounts, in that
    order and once each; an unknown ``free`` mount is an :class:`InputError`."""
    names = [bench.imbalance_mount]
    if phase and bench.phase_mount and bench.phase_mount not in names:
        names.append(bench.phase_mount)
    for name in free:
        if name not in bench.mounts:
            raise InputError(
                f"--free {name!r}: unknown mount; the bench has: {', '.join(bench.mounts)}"
            )
        if name not in names:
            names.append(name)
    return names


def unknown_mounts(bench: Bench, target: Target, free: Sequence[str] = ()) -> tuple[str, ...]:
    """The mounts a target solves for: the imbalance mount, the phase mount for amplification
    (keeps the weak value on its axis) and weak-value targets, and any ``free`` mounts."""
    names = mounts_in_play(bench, free, phase=target.kind != "leak_rate")
    if target.kind == "leak_rate" and len(names) > 1:
        raise InputError(
            "a leak-rate target is set by the imbalance mount alone; drop --free "
            "(or change imbalance_mount in the bench file)"
        )
    if target.kind == "weak_value" and len(names) < 2:
        raise InputError(
            "a complex weak-value target needs two mounts: set phase_mount in the "
            "bench file or free a waveplate mount with --free MOUNT"
        )
    return tuple(names)


def make_target(
    amplification: float | None = None,
    *,
    axis: str = "re",
    exact: bool = False,
    weak_value: complex | None = None,
    leak_rate: float | None = None,
) -> Target:
    """Validate exactly one target and build it (errors name the argument)."""
    given = [
        k
        for k, v in (
            ("amplification", amplification),
            ("weak_value", weak_value),
            ("leak_rate", leak_rate),
        )
        if v is not None
    ]
    if len(given) != 1:
        raise InputError(
            "give exactly one target: amplification, weak_value or leak_rate"
            + (f" (got {', '.join(given)})" if given else "")
        )
    if axis not in ("re", "im"):
        raise InputError(f"axis {axis!r}: allowed are 're' and 'im'")
    if amplification is not None:
        x = float(amplification)
        if not np.isfinite(x) or x <= 0:
            raise InputError(
                f"amplification must be a finite number > 0 (its size; both signs "
                f"are offered as branches), got {amplification!r}"
            )
        return Target("amplification", complex(x), axis, bool(exact))
    if weak_value is not None:
        w = complex(weak_value)
        if not np.isfinite(w) or w == 0:
            raise InputError(
                f"weak_value must be a finite, non-zero complex number, got {weak_value!r}"
            )
        return Target("weak_value", w)
    p = float(leak_rate)  # type: ignore[arg-type]
    if not np.isfinite(p) or not 0 < p <= 1:
        raise InputError(f"leak_rate must be a probability per photon in (0, 1], got {leak_rate!r}")
    return Target("leak_rate", complex(p))
