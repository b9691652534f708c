"""What the readout sees: which part of the weak value, in which units, and the amplification
of an evaluated :class:`aligner.model.Forward` (conventions: :mod:`aligner.prediction`)."""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from ..bench import Bench
from ..errors import InputError
from ..model import Forward, coupling_observable
from ..physics.weak import StokesResponse

__all__ = [
    "READOUT_AXIS",
    "amplification",
    "check_axis",
    "format_weak_value",
    "readout_axis",
    "readout_units",
    "response",
]

Real = NDArray[np.float64]

#: Which part of the weak value each readout measures (Jozsa 2007).
READOUT_AXIS = {"position": "re", "phase": "re", "momentum": "im"}


def readout_axis(bench: Bench) -> str:
    """``"re"`` for a position or phase readout, ``"im"`` for a momentum readout."""
    return READOUT_AXIS[bench.coupling.readout]


def readout_units(bench: Bench) -> str:
    """Units of ``pointer_shift``: the bench's (1/units for a momentum readout)."""
    c = bench.coupling
    return f"1/{c.units}" if c.readout == "momentum" else c.units


def check_axis(axis: str) -> None:
    """:class:`InputError` unless ``axis`` is ``"re"`` or ``"im"``."""
    if axis not in ("re", "im"):
        raise InputError(f"amplification axis {axis!r}: allowed are 're' and 'im'")


def response(bench: Bench, fwd: Forward, g: float | None = None) -> StokesResponse:
    """Weak value and exact pointer response of a Forward at coupling ``g`` (default the
    bench's strength)."""
    c = bench.coupling
    return StokesResponse(
        fwd.state_parts,
        fwd.effect_parts,
        coupling_observable(bench),
        c.strength if g is None else g,
        c.pointer_sigma,
    )


def amplification(bench: Bench, fwd: Forward, axis: str | None = None, exact: bool = True) -> Real:
    """Amplification of a Forward (``model.forward``) along ``axis`` (default: the readout's).

    ``exact=False``: ``Re A_w`` or ``Im A_w``. ``exact=True``: ``<q>/g`` or
    ``<p>/(g/(2 sigma^2))`` from the all-orders Gaussian-pointer response.
    """
    axis = axis or readout_axis(bench)
    check_axis(axis)
    resp = response(bench, fwd)
    if not exact:
        wv = resp.weak_value
        return np.real(wv) if axis == "re" else np.imag(wv)
    return resp.shift(axis) / bench.coupling.strength


def format_weak_value(value: complex, digits: int = 6) -> str:
    """``A_w`` for people: parts below 1e-9 of ``|A_w|`` are rounding noise and show as 0."""
    z = complex(value)
    tiny = 1e-9 * abs(z)
    re, im = (0.0 if abs(x) <= tiny else x for x in (z.real, z.imag))
    sign = "-" if im < 0 else "+"
    return f"{re:.{digits}g} {sign} {abs(im):.{digits}g}i"
