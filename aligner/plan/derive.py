"""Closed forms of a bench with sympy: the weak value and the leak rate as functions of the free
mounts' element angles, and their leading order around the null.

Everything is built from the parsed bench (numbers and the element list), never from user
text: no ``sympify`` or ``parse_expr`` of strings. Conventions as the numeric core: Jones
matrices of retarders are sympy's ``phase_retarder(theta, delta)``; a polarizer passes
``T (|p><p| + d |p_perp><p_perp|)`` with ``d = 1/ER`` (incoherent leak); the source state is
``(|s><s| + d_s |s_perp><s_perp|)/(1 + d_s)``; the post-selection is carried back to the
coupling plane, ``E_c = J^dagger E J``.

* weak value ``A_w = Tr(E A rho) / Tr(E rho)``;
* leak rate (exact, per source photon) ``P = kappa Tr(E rho) + (1 - kappa) sum_j
  Tr(E Pi_j rho Pi_j)``, ``Pi_j`` the eigenprojectors of ``A`` and
  ``kappa = exp(-g^2 (a_0 - a_1)^2 / (8 sigma^2))`` the overlap of the two displaced pointers;
* near the null, every free element angle is ``theta_0 + eps`` and the small parameters are
  scaled together, ``eps ~ t``, ``d ~ t^2``, ``1 - kappa = eta ~ t^2``: to leading order
  ``A_w ~ N_1(eps) / D_2(eps, d, eta)`` and ``P ~ P_2(eps, d, eta)``. ``D_2`` at ``eps = 0`` is
  the extinction (and pointer) floor that keeps ``A_w`` finite.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..bench import Bench, Element
from ..errors import InputError

__all__ = ["Derivation", "derive"]

# Stokes axis and eigenvalues of every named observable (project convention: S1 = HV,
# S2 = DA, S3 = RL).
_NAMED = {
    "HV": ((1, 0, 0), (1, -1)), "DA": ((0, 1, 0), (1, -1)), "RL": ((0, 0, 1), (1, -1)),
    "H": ((1, 0, 0), (1, 0)), "V": ((-1, 0, 0), (1, 0)), "D": ((0, 1, 0), (1, 0)),
    "A": ((0, -1, 0), (1, 0)), "R": ((0, 0, 1), (1, 0)), "L": ((0, 0, -1), (1, 0)),
}


@dataclass(frozen=True)
class Derivation:
    """Closed forms (sympy expressions) and what their symbols mean.

    ``meaning``: symbol name -> description with its value on this bench; ``values``: the
    numeric value of every constant symbol; ``null_deg``: element angles (deg) of the null the
    series is taken around.
    """

    angles: Mapping[str, Any]  # mount -> element-angle symbol (rad)
    offsets: Mapping[str, Any]  # mount -> small offset symbol from the null (rad)
    meaning: Mapping[str, str]
    values: Mapping[Any, float]
    numerator: Any
    denominator: Any
    weak_value: Any
    leak_rate: Any
    weak_value_series: Any
    leak_rate_series: Any
    floor: Any
    null_deg: Mapping[str, float]

    def text(self, latex: bool = False) -> str:
        """Readable (or LaTeX) rendering for a notebook."""
        import sympy as sp

        show = sp.latex if latex else sp.sstr
        eq = " = "
        lines = ["Symbols:"]
        lines += [f"  {name}: {text}" for name, text in self.meaning.items()]
        lines += ["", "Weak value A_w = N / D with",
                  f"  N{eq}{show(self.numerator)}", f"  D{eq}{show(self.denominator)}",
                  "", "Leak rate (per source photon):", f"  P{eq}{show(self.leak_rate)}",
                  "", "Around the null "
                  + ", ".join(f"{self.angles[m]} = {self.null_deg[m]:.6g} deg + {e}"
                              for m, e in self.offsets.items()) + ", to leading order:",
                  f"  A_w ~ {show(self.weak_value_series)}",
                  f"  P   ~ {show(self.leak_rate_series)}",
                  f"  floor (P at the null){eq}{show(self.floor)}"]
        return "\n".join(lines)


def _exact_angle(deg: float) -> Any:
    """Degrees -> radians: exact (a multiple of 22.5 deg, e.g. 22.5 or 135) when the angle is
    one, else a float (exact values of other angles only bloat the expressions)."""
    import sympy as sp

    frac = sp.Rational(deg / 180.0).limit_denominator(8)
    if abs(float(frac) * 180.0 - deg) < 1e-10:
        return sp.pi * frac
    return sp.Float(math.radians(deg), 17)


def _exact_number(x: float, denominator: int = 8) -> Any:
    """A simple fraction (denominator up to ``denominator``: a quarter or half wave; 0.92
    transmission with 100) stays exact, anything else is a float."""
    import sympy as sp

    frac = sp.Rational(x).limit_denominator(denominator)
    return frac if abs(float(frac) - x) < 1e-12 else sp.Float(x, 17)


def _safe_name(text: str) -> str:
    return "".join(c if c.isalnum() else "_" for c in text)


class _Builder:
    """Builds the sympy matrices of one bench."""

    def __init__(self, bench: Bench, free: Sequence[str]) -> None:
        import sympy as sp

        self.sp = sp
        self.bench = bench
        self.free = tuple(free)
        self.readings = bench.readings()
        self.angles = {m: sp.Symbol(f"theta_{_safe_name(m)}", real=True) for m in self.free}
        # Matrices are multiplied as polynomials in cos/sin of the free angles (and of twice
        # them): products of trigonometric functions never get expanded symbolically.
        self.to_poly: dict[Any, Any] = {}
        for m, th in self.angles.items():
            for fn, arg, tag in ((sp.cos, 2 * th, "C"), (sp.sin, 2 * th, "S"),
                                 (sp.cos, th, "c"), (sp.sin, th, "s")):
                self.to_poly[fn(arg)] = sp.Symbol(f"{tag}_{_safe_name(m)}", real=True)
        self.from_poly = {v: k for k, v in self.to_poly.items()}
        self.meaning: dict[str, str] = {}
        self.values: dict[Any, float] = {}
        self.small: list[Any] = []  # extinction symbols d (scale as t^2)
        for m, sym in self.angles.items():
            mount = bench.mounts[m]
            self.meaning[str(sym)] = (f"element angle (rad) of mount {m!r} = "
                                      f"{mount.sense:+d} x (reading - {mount.offset_deg:g} deg)")

    def angle(self, angle_deg: float, mount: str | None) -> Any:
        """The free angle's symbol, or the exact fixed angle (rad)."""
        if mount in self.angles:
            return self.angles[mount]
        deg = angle_deg if mount is None else float(
            self.bench.mounts[mount].element_angle_deg(self.readings[mount]))
        return _exact_angle(deg)

    def leak(self, name: str, extinction_ratio: float, what: str) -> Any:
        if math.isinf(extinction_ratio):
            return 0
        sym = self.sp.Symbol(f"d_{name}", positive=True)
        self.small.append(sym)
        self.values[sym] = 1.0 / extinction_ratio
        self.meaning[str(sym)] = f"1/extinction ratio of the {what} = {1.0 / extinction_ratio:.6g}"
        return sym

    def poly(self, matrix: Any) -> Any:
        """A matrix of trigonometric entries as polynomials in the cos/sin symbols."""
        from sympy.simplify.fu import TR7, TR8

        sp = self.sp
        return matrix.applyfunc(
            lambda x: sp.expand(sp.expand(TR8(TR7(sp.expand(x)))).xreplace(self.to_poly)))

    def product(self, *factors: Any) -> Any:
        out = factors[0]
        for f in factors[1:]:
            out = (out * f).applyfunc(self.sp.expand)
        return out

    def projector(self, theta: Any) -> Any:
        v = self.sp.Matrix([self.sp.cos(theta), self.sp.sin(theta)])
        return self.poly(v * v.T)

    def element(self, element: Element) -> tuple[str, Any, Any]:
        """("unitary", J) or ("polarizer", (P, Q), factor) for one element."""
        sp = self.sp
        theta = self.angle(element.angle_deg, element.mount)
        if element.type == "polarizer":
            d = self.leak(_safe_name(element.key), element.extinction_ratio,
                          f"polarizer {element.key}")
            p = self.projector(theta)
            return "polarizer", (p, sp.eye(2) - p), (_exact_number(element.transmission, 1000), d)
        if element.type == "rotator":
            c, s = sp.cos(theta), sp.sin(theta)
            return "unitary", self.poly(sp.Matrix([[c, -s], [s, c]])), None
        from sympy.physics.optics.polarization import phase_retarder

        waves = _exact_number(float(np.mod(element.retardance_waves, 1.0)))
        return "unitary", self.poly(phase_retarder(theta, 2 * sp.pi * waves)), None

    def state(self) -> Any:
        """Unnormalized pre-selected state at the coupling plane (divide by 1 + d_s)."""
        src = self.bench.source
        theta = self.angle(src.angle_deg, src.mount)
        d = self.leak("s", src.extinction_ratio, "source polarizer")
        p = self.projector(theta)
        rho = p + d * (self.sp.eye(2) - p)
        for element in self.bench.pre:
            kind, m, extra = self.element(element)
            if kind == "unitary":
                rho = self.product(m, rho, m.H)
            else:
                t, dd = extra
                rho = t * (self.product(m[0], rho, m[0]) + dd * self.product(m[1], rho, m[1]))
        return rho, d

    def effect(self) -> Any:
        an = self.bench.analyzer
        theta = self.angle(an.angle_deg, an.mount)
        d = self.leak("a", an.extinction_ratio, "analyzer")
        p = self.projector(theta)
        e = _exact_number(an.transmission, 1000) * (p + d * (self.sp.eye(2) - p))
        for element in reversed(self.bench.post):
            kind, m, extra = self.element(element)
            if kind == "unitary":
                e = self.product(m.H, e, m)
            else:
                t, dd = extra
                e = t * (self.product(m[0], e, m[0]) + dd * self.product(m[1], e, m[1]))
        return e

    def observable(self) -> tuple[Any, tuple[Any, Any], tuple[Any, Any]]:
        """A, its eigenprojectors, its eigenvalues."""
        sp = self.sp
        c = self.bench.coupling
        if c.observable == "axis":
            raw = [_exact_number(x, 1000) for x in c.axis]
            length = sp.sqrt(sum(x**2 for x in raw))
            axis = [x / length for x in raw]
            eig = tuple(_exact_number(x) for x in c.eigenvalues)
        else:
            axis, eig = _NAMED[c.observable]
        sigma = (axis[0] * sp.Matrix([[1, 0], [0, -1]]) + axis[1] * sp.Matrix([[0, 1], [1, 0]])
                 + axis[2] * sp.Matrix([[0, -sp.I], [sp.I, 0]]))
        pi0 = (sp.eye(2) + sigma) / 2
        pi1 = (sp.eye(2) - sigma) / 2
        return eig[0] * pi0 + eig[1] * pi1, (pi0, pi1), (eig[0], eig[1])


def _tidy(expr: Any, small: Sequence[Any], from_poly: Mapping[Any, Any]) -> Any:
    """Tidy a polynomial in the cos/sin symbols: back to trigonometric functions, products of
    sines and cosines become sums over combined angles (``TR8``), numeric factors are simplified
    on their own, and the terms are grouped by powers of the small symbols. Linear in the size
    of the expression, unlike ``simplify``."""
    import sympy as sp
    from sympy.simplify.fu import TR7, TR8

    expr = sp.expand(sp.expand(expr).xreplace(from_poly))
    expr = sp.expand(TR8(TR7(expr)))
    free = sorted(expr.free_symbols, key=str)
    grouped: dict[Any, Any] = {}
    for term in sp.Add.make_args(expr):
        number, rest = term.as_independent(*free, as_Add=False)
        grouped[rest] = grouped.get(rest, 0) + number
    terms = [_number(n) * rest for rest, n in grouped.items()]
    out = sp.Add(*terms)
    return sp.collect(out, small) if small else out


def _number(n: Any) -> Any:
    """Simplify a pure number (exact radicals, or a float rounded to 15 digits)."""
    import sympy as sp

    if n.has(sp.Float):
        value = complex(n)
        return sp.Float(value.real, 15) + sp.I * sp.Float(value.imag, 15) if value.imag else \
            sp.Float(value.real, 15)
    return sp.nsimplify(sp.simplify(n)) if n.has(sp.Pow) else n


def _chop(expr: Any, tol: float = 1e-12) -> Any:
    """Drop floating-point dust (|number| < tol) left where an exact cancellation happened."""
    import sympy as sp

    return expr.xreplace({n: 0 for n in expr.atoms(sp.Float) if abs(n) < tol})


def _null(bench: Bench, free: Sequence[str]) -> dict[str, float]:
    """Readings (deg) of the null nearest the file readings, in the free mounts."""
    from .solve import nulls, segments

    readings = bench.readings()
    fixed = {k: v for k, v in readings.items() if k not in free}
    if len(free) == 1:
        found = [s.null for s in segments(bench, free[0], fixed) if s.null is not None]
        if not found:
            raise InputError(f"mount {free[0]!r} cannot reach a null with the other mounts at "
                             "their readings, so there is no series to expand around")
        best = min(found, key=lambda r: abs(r - readings[free[0]]))
        return {free[0]: best}
    pts = nulls(bench, free, fixed)
    if len(pts) == 0:
        raise InputError(f"mounts {', '.join(free)} cannot reach a null, so there is no series "
                         "to expand around")
    here = np.array([readings[m] for m in free])
    best = pts[np.argmin(np.linalg.norm(np.mod(pts - here + 90.0, 180.0) - 90.0, axis=1))]
    best = here + np.mod(best - here + 90.0, 180.0) - 90.0
    return dict(zip(free, (float(x) for x in best), strict=True))


def _free_mounts(bench: Bench, free: Sequence[str]) -> tuple[str, ...]:
    names = [bench.imbalance_mount]
    if bench.phase_mount and bench.phase_mount not in names:
        names.append(bench.phase_mount)
    for name in free:
        if name not in bench.mounts:
            raise InputError(f"--free {name!r}: unknown mount; the bench has: "
                             f"{', '.join(bench.mounts)}")
        if name not in names:
            names.append(name)
    return tuple(names)


def derive(bench: Bench, free: Sequence[str] = ()) -> Derivation:
    """Closed forms of the weak value and leak rate, with the imbalance mount, the phase mount
    (if any) and ``free`` mounts as symbols (element angles, rad), and their leading order
    around the null nearest the file readings."""
    import sympy as sp

    names = _free_mounts(bench, free)
    b = _Builder(bench, names)
    rho, d_s = b.state()
    effect = b.effect()
    a, (pi0, pi1), (a0, a1) = b.observable()
    c = bench.coupling
    kappa = sp.Symbol("kappa", positive=True)
    b.values[kappa] = float(np.exp(-(c.strength * float(a0 - a1)) ** 2
                                   / (8 * c.pointer_sigma**2)))
    b.meaning["kappa"] = (f"exp(-g^2 (a0 - a1)^2 / (8 sigma^2)) = {b.values[kappa]:.12g}, the "
                          f"overlap of the two displaced pointers (g = {c.strength:g}, sigma = "
                          f"{c.pointer_sigma:g} {c.units})")
    small = list(dict.fromkeys(b.small))
    norm = 1 + d_s
    back = b.from_poly
    numerator = _tidy(b.product(effect, a, rho).trace(), small, back)
    denominator = _tidy(b.product(effect, rho).trace(), small, back)
    decohered = _tidy(b.product(effect, pi0, rho, pi0).trace()
                      + b.product(effect, pi1, rho, pi1).trace(), small, back)
    leak = (kappa * denominator + (1 - kappa) * decohered) / norm

    null = _null(bench, names)
    null_deg = {m: float(bench.mounts[m].element_angle_deg(r)) for m, r in null.items()}
    t = sp.Symbol("t", positive=True)
    eta = sp.Symbol("eta", positive=True)
    b.meaning["eta"] = "1 - kappa (pointer decoherence; small)"
    offsets = {m: sp.Symbol(f"epsilon_{_safe_name(m)}", real=True) for m in names}
    for m, e in offsets.items():
        b.meaning[str(e)] = f"offset (rad) of {b.angles[m]} from the null at {null_deg[m]:.6g} deg"
    scale = {b.angles[m]: _exact_angle(null_deg[m]) + t * offsets[m] for m in names}
    scale.update({s: t**2 * s for s in small})

    def coefficient(expr: Any, order: int) -> Any:
        scaled = expr.subs(scale)
        return _chop(sp.expand(sp.diff(scaled, t, order).subs(t, 0) / math.factorial(order)))

    n1 = coefficient(numerator, 1)
    d2 = coefficient(denominator, 2)
    leak_scaled = leak.subs(kappa, 1 - eta)
    scale_eta = {**scale, eta: t**2 * eta}
    p2 = _chop(sp.expand(sp.diff(leak_scaled.subs(scale_eta), t, 2).subs(t, 0) / 2))
    weak_series = sp.cancel(n1 / d2)
    floor = p2.subs({e: 0 for e in offsets.values()})
    values = dict(b.values)
    values[eta] = 1.0 - values[kappa]
    return Derivation(b.angles, offsets, b.meaning, values, numerator, denominator,
                      numerator / denominator, leak, weak_series, p2, floor,
                      null_deg)
