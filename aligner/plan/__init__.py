"""Planner: mount readings for a target amplification, weak value, leak rate or imbalance, with
the rounding to the mounts' resolution, the sensitivity and a Monte Carlo tolerance budget.

``plan(bench, amplification=40, axis="re")`` returns a frozen :class:`Plan`;
``readings_for_imbalance`` and ``readings_for_amplification`` are the light-weight inverses
used by sweeps. scipy and sympy are imported inside the functions that need them.

``aligner.plan`` is both this package and the function: once the package is imported it
shadows the lazy export in :mod:`aligner`, so calling the module calls :func:`plan`.
"""

from __future__ import annotations

import sys
import types
from typing import Any

from .planner import Branch, Plan, Quantized, Sensitivity, plan
from .solve import readings_for_amplification, readings_for_imbalance
from .tolerance import Spread, Tolerance

__all__ = [
    "Branch",
    "Plan",
    "Quantized",
    "Sensitivity",
    "Spread",
    "Tolerance",
    "plan",
    "readings_for_amplification",
    "readings_for_imbalance",
]


class _CallablePackage(types.ModuleType):
    """``aligner.plan(...)`` works whether ``aligner.plan`` resolved to the function or to
    this package."""

    def __call__(self, *args: Any, **kwargs: Any) -> Plan:
        return plan(*args, **kwargs)


sys.modules[__name__].__class__ = _CallablePackage
