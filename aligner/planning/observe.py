"""What the planner needs from the forward model at trial readings: weak value, exact
amplification, leak rate and the null gap, each computed on first use from one evaluation of
the full bench (conventions: :mod:`aligner.planning`)."""

from __future__ import annotations

from collections.abc import Mapping
from functools import cached_property
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..model import coupling_observable, forward, pure_overlap_of
from ..physics.weak import StokesResponse

__all__ = ["Observed", "observe"]

Real = NDArray[np.float64]
Cplx = NDArray[np.complex128]


class Observed:
    """What the planner needs from the forward model at some readings (arrays of the readings'
    shape), each computed on first use.

    ``weak_value`` complex; ``exact`` = ``<q>/g + i <p>/(g/(2 sigma^2))``; ``leak_rate`` per
    source photon; ``gap`` = ``|<f|i>|`` of the pure parts (0 at a null).
    """

    def __init__(self, bench: Bench, readings: Mapping[str, ArrayLike] | None) -> None:
        self._bench = bench
        self._fwd = forward(bench, readings)
        shapes = [np.shape(v) for v in (readings or {}).values()]
        self._shape = np.broadcast_shapes(*shapes) if shapes else ()

    @cached_property
    def _response(self) -> StokesResponse:
        c = self._bench.coupling
        with np.errstate(divide="ignore", invalid="ignore"):
            return StokesResponse(
                self._fwd.state_parts,
                self._fwd.effect_parts,
                coupling_observable(self._bench),
                c.strength,
                c.pointer_sigma,
            )

    def _full(self, x: ArrayLike) -> NDArray[Any]:
        return np.broadcast_to(x, np.broadcast_shapes(np.shape(x), self._shape))

    @cached_property
    def weak_value(self) -> Cplx:
        with np.errstate(divide="ignore", invalid="ignore"):
            return self._full(self._response.weak_value)

    @cached_property
    def exact(self) -> Cplx:
        c = self._bench.coupling
        with np.errstate(divide="ignore", invalid="ignore"):
            re = self._response.shift("re") / c.strength
            im = self._response.shift("im") / c.strength
        out = np.empty(np.broadcast_shapes(np.shape(re), np.shape(im), self._shape), complex)
        out.real, out.imag = re, im
        return out

    @cached_property
    def leak_rate(self) -> Real:
        with np.errstate(divide="ignore", invalid="ignore"):
            return self._full(np.asarray(self._response.probability, float))

    @cached_property
    def gap(self) -> Real:
        return self._full(pure_overlap_of(self._fwd.state_parts, self._fwd.effect_parts))

    def response(self, exact: bool) -> Cplx:
        """The complex amplification: exact pointer response or the weak value."""
        return self.exact if exact else self.weak_value


def observe(bench: Bench, readings: Mapping[str, ArrayLike] | None = None) -> Observed:
    """Weak value, exact amplification, leak rate and null gap at ``readings`` (deg)."""
    return Observed(bench, readings)
