"""Planner: mount readings for a target amplification, weak value, leak rate or imbalance.

Heavy dependencies (scipy, sympy) are imported inside the functions.
"""

from __future__ import annotations

from .solve import readings_for_amplification, readings_for_imbalance

__all__ = ["readings_for_amplification", "readings_for_imbalance"]
