"""Units of pointer quantities: one table of known length and angle units, refusing others.

Base units: metre for lengths, radian for angles. A position or momentum readout reads lengths
(momenta in the inverse unit); a phase readout reads angles, whose natural pointer width is the
shot-noise spread ``1/(2 sqrt N)`` in rad. Unknown names raise ``ValueError`` listing the allowed
ones (the bench loader names the file and key).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["READOUT_QUANTITY", "UNITS", "convert", "unit_factor"]

#: Factor to the base unit (m, rad) of each known unit, by quantity.
UNITS: dict[str, dict[str, float]] = {
    "length": {"nm": 1e-9, "um": 1e-6, "mm": 1e-3, "m": 1.0},
    "angle": {"nrad": 1e-9, "urad": 1e-6, "mrad": 1e-3, "rad": 1.0},
}

#: The quantity each pointer readout is read in.
READOUT_QUANTITY: dict[str, str] = {"position": "length", "momentum": "length", "phase": "angle"}


def unit_factor(unit: str, quantity: str) -> float:
    """Factor converting ``unit`` to the base unit of ``quantity`` (``"length"``: m, ``"angle"``:
    rad); ``ValueError`` naming the allowed units otherwise."""
    if quantity not in UNITS:
        raise ValueError(f"unknown quantity {quantity!r}; allowed: {', '.join(UNITS)}")
    table = UNITS[quantity]
    if unit not in table:
        raise ValueError(f"unknown {quantity} unit {unit!r}; allowed: {', '.join(table)}")
    return table[unit]


def convert(value: ArrayLike, unit: str, to_unit: str, quantity: str) -> NDArray[np.float64]:
    """``value`` in ``unit`` expressed in ``to_unit`` (both units of ``quantity``)."""
    return np.asarray(value, float) * (unit_factor(unit, quantity) / unit_factor(to_unit, quantity))
