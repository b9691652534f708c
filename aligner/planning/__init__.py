"""Planner: mount readings for a target amplification, weak value, leak rate or imbalance, with
the rounding to the mounts' resolution, the sensitivity and a Monte Carlo tolerance budget.

``plan(bench, amplification=40, axis="re")`` returns a frozen :class:`Plan`;
``readings_for_imbalance`` and ``readings_for_amplification`` are the light-weight inverses
used by sweeps. scipy and sympy are imported inside the functions that need them.
``aligner.plan`` (the notebook API) is :func:`plan` from this package.

Modules: :mod:`.planner` (:func:`plan`: branches, rounding, sensitivity, messages),
:mod:`.targets` (what to solve for, the unknown mounts), :mod:`.observe` (the model at trial
readings), :mod:`.roots` (every root in travel), :mod:`.infeasible` (why a target cannot be
reached), :mod:`.readings` (one-call inverses for sweeps), :mod:`.tolerance` (Monte Carlo
budget), :mod:`.derive` (sympy closed forms). The null is defined in :mod:`aligner.nulls`.

Everything here evaluates the *full imperfect* bench (offsets, sense, plate retardance at the
working wavelength, extinction of source and analyzer, exact pointer response) through
:func:`aligner.model.forward`, vectorized over many trial readings per call. Conventions
(degrees for readings, radians only inside physics):

* Amplification: ``linear`` = ``Re A_w`` (axis ``re``) or ``Im A_w`` (axis ``im``); ``exact`` =
  ``<q>/g`` (axis ``re``) or ``<p>/(g/(2 sigma^2))`` (axis ``im``) from the all-orders
  Gaussian-pointer response. Both are combined into one complex "response" ``w``: the weak value
  (linear) or ``<q>/g + i <p>/(g/(2 sigma^2))`` (exact).
* Leak rate: the exact post-selection probability per source photon (pointer overlap,
  analyzer transmission and extinction included, detector efficiency excluded).
* Null and signed imbalance: :mod:`aligner.nulls`, :func:`aligner.model.imbalance_deg`
  (positive on the high-reading side of the null).
"""

from __future__ import annotations

from .planner import Branch, Plan, Quantized, Sensitivity, plan
from .readings import readings_for_amplification, readings_for_imbalance
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
