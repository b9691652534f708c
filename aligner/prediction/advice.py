"""What a bench would need to reach a target amplification, in numbers: the extinction ratio of
each polarizer, the photon rate, the pointer width, the mount step.

Each figure inverts the closed form of one mechanism alone (ideal otherwise), as in
:mod:`.limits`; they are what to change, not a plan (the planner checks the whole bench).

* Extinction (derived; the single-leak case is physics.md's, Knee et al., PRA 87, 012115
  (2013) related): source leak ``d_s = 1/ER_s``, analyzer leak ``d_a = 1/ER_a``, ideal states at
  45 deg and an imbalance ``eps``: ``A_w = (1 - d_a)(1 + d_s) t / ((1 + d_a d_s) t^2 + d_a + d_s)``,
  ``t = tan(eps)``, largest ``(1 - d_a)(1 + d_s) / (2 sqrt((d_a + d_s)(1 + d_a d_s)))``. Setting
  it to ``T`` and squaring gives ``a d^2 + b d + a = 0`` in either leak, with
  ``a = (1 + d_s)^2 - 4 T^2 d_s``, ``b = -2 (1 + d_s)^2 - 4 T^2 (1 + d_s^2)`` for ``d = d_a`` and
  ``a = (1 - d_a)^2 - 4 T^2 d_a``, ``b = 2 (1 - d_a)^2 - 4 T^2 (1 + d_a^2)`` for ``d = d_s``; the
  root in (0, 1) is the leak needed (none when ``a <= 0``: the other polarizer alone caps the
  bench below ``T``).
* Dark counts (derived): signal ``S = R sin^2(eps)`` counts/s of which the shift is diluted by
  ``D`` dark counts/s: the seen amplification peaks at ``R / (2 sqrt(D (R + D)))``, so ``T``
  needs ``R = 2 T^2 D (1 + sqrt(1 + 1/T^2))``; the photon rate scales with ``R``.
* Pointer (physics.md, all-orders response): the exact amplification of a real weak value
  peaks at ``1 / sqrt(1 - exp(-g^2/sigma^2))``, so ``T`` needs
  ``sigma >= g / sqrt(-ln(1 - 1/T^2))``.
* Mount step: the amplification one step from the null is about ``1/eps``, so the step scales
  as ``1/T``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = [
    "ExtinctionNeed",
    "dark_count_rate_for",
    "equal_extinction",
    "extinction_cap",
    "extinction_need",
    "pointer_width_for",
]


def extinction_cap(analyzer_er: float, source_er: float) -> float:
    """Largest ``|A_w|`` of ideal states with these two extinction ratios (module doc)."""
    da, ds = 1.0 / analyzer_er, 1.0 / source_er
    if da + ds == 0:
        return math.inf
    return (1 - da) * (1 + ds) / (2 * math.sqrt((da + ds) * (1 + da * ds)))


def _leak_needed(a: float, b: float) -> float | None:
    """The root of ``a d^2 + b d + a = 0`` in (0, 1), or None."""
    if a <= 0:
        return None
    root = math.sqrt(max(b * b - 4 * a * a, 0.0))
    d = (-b - root) / (2 * a)
    return d if 0 < d < 1 else None


@dataclass(frozen=True)
class ExtinctionNeed:
    """The extinction ratios a target needs (ideal states, module doc).

    ``analyzer``: the analyzer's, with the source polarizer as it is (None: the source alone
    caps below the target); ``source``: the source polarizer's, with the analyzer as it is;
    ``analyzer_alone`` and ``source_alone``: the largest amplification each allows with the
    other perfect; ``caps_first``: ``"analyzer"`` or ``"source polarizer"``, the one whose
    leak alone caps lower.
    """

    target: float
    analyzer: float | None
    source: float | None
    analyzer_alone: float
    source_alone: float

    @property
    def caps_first(self) -> str:
        return "analyzer" if self.analyzer_alone <= self.source_alone else "source polarizer"

    def sentence(self, analyzer_er: float, source_er: float) -> str:
        """The advice in words, with the polarizers' extinction ratios now."""
        t = f"{self.target:.4g}"
        caps = {"analyzer": self.analyzer_alone, "source polarizer": self.source_alone}
        first = self.caps_first
        second = "source polarizer" if first == "analyzer" else "analyzer"
        out = (
            f"the {first} caps first: alone (the other polarizer perfect) it allows at most "
            f"{caps[first]:.4g}, the {second} alone {caps[second]:.4g}"
        )
        options = []
        if self.analyzer is not None:
            options.append(
                f"an analyzer of extinction ratio at least {_count(self.analyzer)} (now "
                f"{_count(analyzer_er)}) with the source polarizer as it is"
            )
        if self.source is not None:
            options.append(
                f"a source polarizer of extinction ratio at least {_count(self.source)} (now "
                f"{_count(source_er)}) with the analyzer as it is"
            )
        if options:
            return f"{out}; reaching {t} takes " + ", or ".join(options)
        return (
            f"{out}, below {t} too: improving one is not enough, both need a higher "
            f"extinction ratio, e.g. {_count(equal_extinction(self.target))} each"
        )


def equal_extinction(target: float) -> float:
    """The extinction ratio both polarizers need, if equal, to reach ``target`` (bisection on
    :func:`extinction_cap`, which falls as the leaks grow)."""
    low, high = 1.0, 1e15
    for _ in range(200):
        mid = math.sqrt(low * high)
        low, high = (mid, high) if extinction_cap(mid, mid) < target else (low, mid)
    return high


def _count(x: float) -> str:
    """An extinction ratio for people: 3,737 or 1.2e+05."""
    if not math.isfinite(x):
        return "perfect"
    return f"{x:,.0f}" if x < 1e5 else f"{x:.3g}"


def extinction_need(target: float, analyzer_er: float, source_er: float) -> ExtinctionNeed:
    """The extinction ratios that reach ``target`` (module doc)."""
    t2 = 4 * target * target
    da, ds = 1.0 / analyzer_er, 1.0 / source_er
    need_a = _leak_needed((1 + ds) ** 2 - t2 * ds, -2 * (1 + ds) ** 2 - t2 * (1 + ds * ds))
    need_s = _leak_needed((1 - da) ** 2 - t2 * da, 2 * (1 - da) ** 2 - t2 * (1 + da * da))
    return ExtinctionNeed(
        target,
        None if need_a is None else 1.0 / need_a,
        None if need_s is None else 1.0 / need_s,
        extinction_cap(analyzer_er, math.inf),
        extinction_cap(math.inf, source_er),
    )


def dark_count_rate_for(target: float, cap_now: float, photon_rate: float) -> float:
    """Photon rate (photons/s) at which dark counts alone allow ``target``, from the cap they
    set now at ``photon_rate`` (module doc)."""

    def signal_over_dark(cap: float) -> float:  # R / D at which the cap is reached
        return 2 * cap * cap * (1 + math.sqrt(1 + 1 / (cap * cap)))

    return photon_rate * signal_over_dark(target) / signal_over_dark(cap_now)


def pointer_width_for(target: float, strength: float) -> float:
    """Smallest pointer width (the strength's units) whose exact response reaches ``target``."""
    if target <= 1:
        return 0.0
    return strength / math.sqrt(-math.log1p(-1 / (target * target)))
