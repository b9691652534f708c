"""Planner: mount readings for a target amplification, weak value, leak rate or imbalance, with
the rounding to the mounts' resolution, the sensitivity and a Monte Carlo tolerance budget.

``plan(bench, amplification=40, axis="re")`` returns a frozen :class:`Plan`;
``readings_for_imbalance`` and ``readings_for_amplification`` are the light-weight inverses
used by sweeps. scipy and sympy are imported inside the functions that need them.
``aligner.plan`` (the notebook API) is :func:`plan` from this package.
"""

from __future__ import annotations

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
