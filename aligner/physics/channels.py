"""Optical elements as channels on polarization states, computed in Stokes space.

Every element acts on a state as a quantum channel and on a measurement as its dual:

* a retarder or rotator is unitary, ``rho -> J rho J^dagger`` and ``E -> J^dagger E J``; in
  Stokes space it is a rotation of (S1, S2, S3);
* a polarizer with pass axis ``p``, transmission ``T`` and extinction ratio ``ER`` passes ``T``
  along ``p`` and ``T/ER`` along ``p_perp`` *incoherently*:
  ``rho -> T (P rho P + Q rho Q / ER)``, ``P = |p><p|``, ``Q = |p_perp><p_perp|``. The map is its
  own dual, so the analyzer's POVM element is ``E = T (P + Q / ER)``.

States and effects are carried as Stokes 4-vectors (``x0 = Tr X``, ``x_k = Tr(X sigma_k)`` with
sigma = HV, DA, RL; see :mod:`aligner.physics.jones`), which keeps large stacks of settings
cheap: ``Tr(E rho) = (e . s) / 2``. The fast path carries the four components as separate
arrays (:data:`Parts`, the ``*_parts`` functions); the ``(..., 4)`` functions wrap it. The
density-matrix functions :func:`push_forward_state` and
:func:`pull_back_effect` wrap the Stokes ones. Every parameter broadcasts over leading axes.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .jones import density_from_stokes, stokes_from_density

__all__ = [
    "Channel",
    "Parts",
    "Polarizer",
    "Retarder",
    "Rotator",
    "analyzer_effect",
    "analyzer_parts",
    "analyzer_stokes",
    "cos_sin_double",
    "is_zero",
    "join",
    "pull_back_effect",
    "pull_back_parts",
    "pull_back_stokes",
    "push_forward_parts",
    "push_forward_state",
    "push_forward_stokes",
    "source_parts",
    "source_state",
    "source_stokes",
    "split",
    "sum_of_products",
    "turn_rate",
]

Real = NDArray[np.float64]
Complex = NDArray[np.complex128]
#: A Stokes vector as its four components (S0, S1, S2, S3), each an array broadcastable
#: against the others: the fast path's form, which keeps settings-sized arrays contiguous and
#: lets components that do not vary (a fixed element's output) stay scalars.
Parts = tuple[Real, Real, Real, Real]


def is_zero(x: ArrayLike) -> bool:
    """True for a scalar exactly 0 (a Stokes component that no setting changes, such as S3
    after a linear polarizer): products with it can be skipped."""
    return np.ndim(x) == 0 and float(np.asarray(x)) == 0.0


def sum_of_products(terms: Sequence[tuple[float, ArrayLike, ArrayLike]]) -> Real:
    """``sum c a b`` over ``(c, a, b)``, skipping terms with ``c``, ``a`` or ``b`` an exact
    scalar zero (see :func:`is_zero`); a 0-d zero when every term is skipped."""
    out: ArrayLike | None = None
    for c, a, b in terms:
        if c == 0.0 or is_zero(a) or is_zero(b):
            continue
        term = np.multiply(a, b)
        if c != 1.0:
            term = c * term
        out = term if out is None else out + term
    return np.zeros(()) if out is None else np.asarray(out)


def split(stokes: ArrayLike) -> Parts:
    """The four components of Stokes vectors ``(..., 4)`` as separate arrays."""
    s = np.asarray(stokes, float)
    return s[..., 0], s[..., 1], s[..., 2], s[..., 3]


def join(parts: Parts) -> Real:
    """Stokes vectors ``(..., 4)`` from four components (broadcast together)."""
    return np.stack(np.broadcast_arrays(*(np.asarray(x, float) for x in parts)), axis=-1)


def cos_sin_double(angle: ArrayLike) -> tuple[Real, Real]:
    """``(cos 2a, sin 2a)`` from ``t = tan a``: ``((1 - t^2), 2t) / (1 + t^2)``.

    The same values as ``np.cos``/``np.sin`` of ``2a`` to a few units in the last place, but
    numpy evaluates ``tan`` with vector instructions where its double-precision ``cos`` and
    ``sin`` are scalar loops, about ten times slower (they dominate large stacks of settings).
    """
    t = np.tan(np.asarray(angle, float))
    t2 = t * t
    inv = 1.0 / (1.0 + t2)
    return (1.0 - t2) * inv, 2.0 * t * inv


def _axis(angle: ArrayLike) -> tuple[Real, Real]:
    """Stokes direction (cos 2a, sin 2a, 0) of linear polarization at ``angle`` (rad)."""
    return cos_sin_double(angle)


def _rotate(s: Parts, c: Real, t: Real, cos_phi: Real, sin_phi: Real) -> Parts:
    """Rotate the (S1, S2, S3) part of ``s`` by ``phi`` about the in-plane axis (c, t, 0).

    Rodrigues' formula, written out for an axis in the S1-S2 plane.
    """
    s0, s1, s2, s3 = s
    along = (c * s1 + t * s2) * (1 - cos_phi)
    return (
        s0,
        s1 * cos_phi + t * s3 * sin_phi + c * along,
        s2 * cos_phi - c * s3 * sin_phi + t * along,
        s3 * cos_phi + (c * s2 - t * s1) * sin_phi,
    )


def turn_rate(x: Parts, scale: float = 1.0) -> Parts:
    """``d x / d phi`` (times ``scale``) when the light (or the measurement) ``x`` is turned by
    ``phi`` (rad) from H towards V: a rotation of (S1, S2) by ``2 phi``."""
    return np.zeros(()), (-2.0 * scale) * x[2], (2.0 * scale) * x[1], np.zeros(())


def _minus(a: Parts, b: Parts) -> Parts:
    return a[0] - b[0], a[1] - b[1], a[2] - b[2], a[3] - b[3]


class _Channel:
    """``forward`` and ``backward`` on Stokes vectors ``(..., 4)``, from the component forms
    ``forward_parts`` and ``backward_parts`` (tuples of four arrays, the fast path).

    ``turned_forward`` and ``turned_backward``: the derivative of the element's action when
    the element is turned about the beam (per rad), given the input and the output. An element
    turned by ``phi`` is the element conjugated by a turn of the light, ``C(a + phi) = R(phi)
    C(a) R(-phi)``, so the derivative is ``R' C x - C R' x`` (:func:`turn_rate` is ``R'``); for
    a rotator, which looks the same however it is turned, this is zero.
    """

    def forward_parts(self, s: Parts) -> Parts:
        raise NotImplementedError

    def backward_parts(self, e: Parts) -> Parts:
        raise NotImplementedError

    def turned_forward(self, s: Parts, out: Parts) -> Parts:
        """``d forward(s) / d angle`` (per rad); ``out`` is ``forward_parts(s)``."""
        return _minus(turn_rate(out), self.forward_parts(turn_rate(s)))

    def turned_backward(self, e: Parts, out: Parts) -> Parts:
        """``d backward(e) / d angle`` (per rad); ``out`` is ``backward_parts(e)``."""
        return _minus(turn_rate(out), self.backward_parts(turn_rate(e)))

    def forward(self, s: ArrayLike) -> Real:
        """The state after the element (Stokes vectors ``(..., 4)``)."""
        return join(self.forward_parts(split(s)))

    def backward(self, e: ArrayLike) -> Real:
        """A POVM element measured after the element, expressed before it."""
        return join(self.backward_parts(split(e)))


@dataclass(frozen=True)
class Retarder(_Channel):
    """Linear retarder, fast axis ``theta`` (rad), retardance ``delta`` (rad); Jones matrix
    :func:`aligner.physics.jones.retarder`. In Stokes space: a rotation by ``delta`` about the
    fast axis (as ``_rotate`` orients it)."""

    theta: ArrayLike
    delta: ArrayLike

    @cached_property
    def _trig(self) -> tuple[Real, Real, Real, Real]:
        c, t = _axis(self.theta)
        cos_d, sin_d = cos_sin_double(0.5 * np.asarray(self.delta, float))
        return c, t, cos_d, sin_d

    def forward_parts(self, s: Parts) -> Parts:
        c, t, cos_d, sin_d = self._trig
        return _rotate(s, c, t, cos_d, sin_d)

    def backward_parts(self, e: Parts) -> Parts:
        c, t, cos_d, sin_d = self._trig
        return _rotate(e, c, t, cos_d, -sin_d)


@dataclass(frozen=True)
class Rotator(_Channel):
    """Polarization rotator turning light by ``rotation`` (rad) from H towards V; Stokes
    rotation by ``2 rotation`` about S3."""

    rotation: ArrayLike

    @cached_property
    def _trig(self) -> tuple[Real, Real]:
        return _axis(self.rotation)

    def _turn(self, s: Parts, sign: float) -> Parts:
        c, t = self._trig
        t = sign * t
        return s[0], c * s[1] - t * s[2], t * s[1] + c * s[2], s[3]

    def forward_parts(self, s: Parts) -> Parts:
        return self._turn(s, 1.0)

    def backward_parts(self, e: Parts) -> Parts:
        return self._turn(e, -1.0)


@dataclass(frozen=True)
class Polarizer(_Channel):
    """Polarizer with pass axis ``angle`` (rad), ``extinction_ratio`` and ``transmission``;
    the incoherent map ``T (P x P + Q x Q / ER)``, its own dual."""

    angle: ArrayLike
    extinction_ratio: ArrayLike = np.inf
    transmission: ArrayLike = 1.0

    @cached_property
    def _trig(self) -> tuple[Real, Real, Real, Real]:
        c, t = _axis(self.angle)
        leak = 1.0 / np.asarray(self.extinction_ratio, float)
        return c, t, leak, np.asarray(self.transmission, float)

    def forward_parts(self, s: Parts) -> Parts:
        c, t, leak, trans = self._trig
        along = c * s[1] + t * s[2]
        passed = 0.5 * (s[0] + along)
        blocked = 0.5 * (s[0] - along) * leak
        polarized = trans * (passed - blocked)
        return trans * (passed + blocked), polarized * c, polarized * t, np.zeros(())

    def backward_parts(self, e: Parts) -> Parts:
        return self.forward_parts(e)  # the map is its own dual


Channel = Retarder | Rotator | Polarizer


def push_forward_parts(s: Parts, chain: Sequence[Channel]) -> Parts:
    """:func:`push_forward_stokes` on separate components (the fast path)."""
    for element in chain:
        s = element.forward_parts(s)
    return s


def pull_back_parts(e: Parts, chain: Sequence[Channel]) -> Parts:
    """:func:`pull_back_stokes` on separate components (the fast path)."""
    for element in reversed(chain):
        e = element.backward_parts(e)
    return e


def push_forward_stokes(s: Real, chain: Sequence[Channel]) -> Real:
    """Stokes vector after the elements of ``chain`` in beam order (S0 = transmitted fraction)."""
    return join(push_forward_parts(split(s), chain))


def pull_back_stokes(e: Real, chain: Sequence[Channel]) -> Real:
    """Stokes form of a POVM element measured after ``chain``, expressed before it."""
    return join(pull_back_parts(split(e), chain))


def push_forward_state(rho: ArrayLike, chain: Sequence[Channel]) -> Complex:
    """Density matrix after ``chain`` (trace = transmitted fraction)."""
    return density_from_stokes(push_forward_stokes(stokes_from_density(rho), chain))


def pull_back_effect(effect: ArrayLike, chain: Sequence[Channel]) -> Complex:
    """A POVM element measured after ``chain``, expressed before it (Heisenberg picture)."""
    return density_from_stokes(pull_back_stokes(stokes_from_density(effect), chain))


def analyzer_parts(
    angle: ArrayLike, extinction_ratio: ArrayLike = np.inf, transmission: ArrayLike = 1.0
) -> Parts:
    """:func:`analyzer_stokes` as separate components (the fast path)."""
    c, t = _axis(angle)
    leak = 1.0 / np.asarray(extinction_ratio, float)
    trans = np.asarray(transmission, float)
    polarized = trans * (1 - leak)
    return trans * (1 + leak), polarized * c, polarized * t, np.zeros(())


def analyzer_stokes(
    angle: ArrayLike, extinction_ratio: ArrayLike = np.inf, transmission: ArrayLike = 1.0
) -> Real:
    """Stokes form of the analyzer POVM element ``T (|p><p| + |p_perp><p_perp| / ER)``."""
    return join(analyzer_parts(angle, extinction_ratio, transmission))


def analyzer_effect(
    angle: ArrayLike, extinction_ratio: ArrayLike = np.inf, transmission: ArrayLike = 1.0
) -> Complex:
    """POVM element ``T (|p><p| + |p_perp><p_perp| / ER)`` of an analyzer and detector."""
    return density_from_stokes(analyzer_stokes(angle, extinction_ratio, transmission))


def source_parts(angle: ArrayLike, extinction_ratio: ArrayLike = np.inf) -> Parts:
    """:func:`source_stokes` as separate components (the fast path)."""
    e0, e1, e2, e3 = analyzer_parts(angle, extinction_ratio)
    return e0 / e0, e1 / e0, e2 / e0, e3 / e0


def source_stokes(angle: ArrayLike, extinction_ratio: ArrayLike = np.inf) -> Real:
    """Stokes vector of the normalised state a source polarizer prepares (S0 = 1)."""
    return join(source_parts(angle, extinction_ratio))


def source_state(angle: ArrayLike, extinction_ratio: ArrayLike = np.inf) -> Complex:
    """``rho = (|s><s| + |s_perp><s_perp| / ER) / (1 + 1/ER)``; ``ER = inf`` gives the pure
    state."""
    return density_from_stokes(source_stokes(angle, extinction_ratio))
