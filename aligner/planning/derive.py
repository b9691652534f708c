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
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..bench import Bench, Element
from ..errors import InputError
from .targets import mounts_in_play

__all__ = ["Derivation", "derive"]

# Stokes axis and eigenvalues of every named observable (project convention: S1 = HV,
# S2 = DA, S3 = RL).
_NAMED = {
    "HV": ((1, 0, 0), (1, -1)),
    "DA": ((0, 1, 0), (1, -1)),
    "RL": ((0, 0, 1), (1, -1)),
    "H": ((1, 0, 0), (1, 0)),
    "V": ((-1, 0, 0), (1, 0)),
    "D": ((0, 1, 0), (1, 0)),
    "A": ((0, -1, 0), (1, 0)),
    "R": ((0, 0, 1), (1, 0)),
    "L": ((0, 0, -1), (1, 0)),
}


@dataclass(frozen=True)
class Derivation:
    """Closed forms (sympy expressions) and what their symbols mean.

    ``meaning``: symbol name -> description with its value on this bench; ``values``: the
    numeric value of every constant symbol (leaks ``d``, transmissions ``T``, ``kappa``,
    ``eta``); ``null_deg``: element angles (deg) of the null the series is taken around;
    ``latex_names``: symbol -> its LaTeX form (``\\theta_{\\mathrm{pre\\_qwp}}``).
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
    latex_names: Mapping[Any, str] = field(default_factory=dict)

    def _formulas(self) -> list[tuple[str, str, str, Any]]:
        """(key, plain name, LaTeX name, expression) of every result."""
        return [
            ("numerator", "N", "N", self.numerator),
            ("denominator", "D", "D", self.denominator),
            ("leak_rate", "P", "P", self.leak_rate),
            ("weak_value_series", "A_w ~", r"A_w \simeq", self.weak_value_series),
            ("leak_rate_series", "P   ~", r"P \simeq", self.leak_rate_series),
            ("floor", "floor (P at the null) =", r"P_{\mathrm{floor}} =", self.floor),
        ]

    def latex(self, expr: Any) -> str:
        """``expr`` in LaTeX with the bench's symbol names."""
        import sympy as sp

        return sp.latex(expr, symbol_names=dict(self.latex_names))

    def _symbol_latex(self, name: str) -> str:
        return next((v for k, v in self.latex_names.items() if str(k) == name), name)

    def _null_text(self, latex: bool) -> str:
        if latex:
            return ", ".join(
                f"{self._symbol_latex(str(self.angles[m]))} = "
                f"{self.null_deg[m]:.6g}^\\circ + {self._symbol_latex(str(e))}"
                for m, e in self.offsets.items()
            )
        return ", ".join(
            f"{self.angles[m]} = {self.null_deg[m]:.6g} deg + {e}" for m, e in self.offsets.items()
        )

    def text(self, latex: bool = False) -> str:
        """Readable (or LaTeX) rendering for a notebook: the symbol table, A_w = N/D, the leak
        rate, and the leading order around the null."""
        import sympy as sp

        forms = {key: (plain, tex, expr) for key, plain, tex, expr in self._formulas()}
        series = ("weak_value_series", "leak_rate_series", "floor")
        if latex:
            rows = [
                f"  {self._symbol_latex(n)} & \\text{{{_latex_text(t)}}} \\\\"
                for n, t in self.meaning.items()
            ]
            out = [
                "% symbols",
                r"\begin{array}{ll}",
                *rows,
                r"\end{array}",
                "",
                r"% weak value A_w = N / D, leak rate P per source photon",
                r"A_w = \frac{N}{D}",
            ]
            out += [
                f"{forms[k][1]} = {self.latex(forms[k][2])}"
                for k in ("numerator", "denominator", "leak_rate")
            ]
            out += ["", f"% around the null {self._null_text(True)}, to leading order"]
            out += [f"{forms[k][1]} {self.latex(forms[k][2])}" for k in series]
            return "\n".join(out)
        show = sp.sstr
        lines = ["Symbols:"]
        lines += [f"  {name}: {text}" for name, text in self.meaning.items()]
        lines += [
            "",
            "Weak value A_w = N / D with",
            f"  N = {show(self.numerator)}",
            f"  D = {show(self.denominator)}",
            "",
            "Leak rate (per source photon):",
            f"  P = {show(self.leak_rate)}",
            "",
            f"Around the null {self._null_text(False)}, to leading order:",
        ]
        lines += [f"  {forms[k][0]} {show(forms[k][2])}" for k in series]
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """The JSON document of ``aligner derive --json``: every expression as a plain string
        (sympy syntax) and as LaTeX, and the symbol table (meaning, LaTeX, value)."""
        import sympy as sp

        values = {str(k): v for k, v in self.values.items()}
        return {
            "symbols": {
                name: {
                    "meaning": text,
                    "latex": self._symbol_latex(name),
                    "value": values.get(name),
                }
                for name, text in self.meaning.items()
            },
            "angles": {m: str(s) for m, s in self.angles.items()},
            "offsets": {m: str(s) for m, s in self.offsets.items()},
            "null_deg": dict(self.null_deg),
            "expressions": {
                key: {"text": sp.sstr(expr), "latex": self.latex(expr)}
                for key, _, _, expr in [("weak_value", "", "", self.weak_value), *self._formulas()]
            },
        }


def _latex_text(text: str) -> str:
    """Plain text escaped for ``\\text{...}``."""
    out = text.replace("\\", "\0")
    for char, esc in (
        ("{", r"\{"),
        ("}", r"\}"),
        ("_", r"\_"),
        ("^", r"\^{}"),
        ("%", r"\%"),
        ("&", r"\&"),
        ("#", r"\#"),
        ("$", r"\$"),
        ("~", r"\~{}"),
    ):
        out = out.replace(char, esc)
    return out.replace("\0", r"\textbackslash{}")


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


def _latex_name(text: str) -> str:
    """A name as a LaTeX subscript: a single character as is, a word upright with its
    underscores escaped (``pre_qwp`` -> ``\\mathrm{pre\\_qwp}``)."""
    safe = _safe_name(text)
    return safe if len(safe) == 1 else r"\mathrm{" + safe.replace("_", r"\_") + "}"


class _Builder:
    """Builds the sympy matrices of one bench.

    Entries are polynomials in the cos/sin symbols of the free angles (``C_m = cos 2 theta_m``,
    ``S_m = sin 2 theta_m``, and ``c_m``, ``s_m`` of the single angle), the leak symbols ``d``
    and the transmission symbols ``T``, with exact numeric coefficients in Q(sqrt 2, i) when the
    fixed angles are multiples of 22.5 deg and the retardances multiples of 1/8 wave: a fixed
    element is built at a placeholder angle, brought to double angles (``TR7``/``TR8``) and only
    then given its value, so no nested radical such as ``cos(pi/8)`` enters the products.
    """

    def __init__(self, bench: Bench, free: Sequence[str]) -> None:
        import sympy as sp

        self.sp = sp
        self.bench = bench
        self.free = tuple(free)
        self.readings = bench.readings()
        self.angles = {m: sp.Symbol(f"theta_{_safe_name(m)}", real=True) for m in self.free}
        self.latex: dict[Any, str] = {
            th: rf"\theta_{{{_latex_name(m)}}}" for m, th in self.angles.items()
        }
        # Matrices are multiplied as polynomials in cos/sin of the free angles (and of twice
        # them): products of trigonometric functions never get expanded symbolically.
        self.to_poly: dict[Any, Any] = {}
        for m, th in self.angles.items():
            for fn, arg, tag in (
                (sp.cos, 2 * th, "C"),
                (sp.sin, 2 * th, "S"),
                (sp.cos, th, "c"),
                (sp.sin, th, "s"),
            ):
                self.to_poly[fn(arg)] = sp.Symbol(f"{tag}_{_safe_name(m)}", real=True)
        self.from_poly = {v: k for k, v in self.to_poly.items()}
        self.fixed: dict[Any, Any] = {}  # placeholder angle -> exact fixed angle (rad)
        self.meaning: dict[str, str] = {}
        self.values: dict[Any, float] = {}
        self.small: list[Any] = []  # extinction symbols d (scale as t^2)
        for m, sym in self.angles.items():
            mount = bench.mounts[m]
            self.meaning[str(sym)] = (
                f"element angle (rad) of mount {m!r} = "
                f"{mount.sense:+d} x (reading - {mount.offset_deg:g} deg)"
            )

    def angle(self, angle_deg: float, mount: str | None) -> Any:
        """The free angle's symbol, or a placeholder for the exact fixed angle (rad)."""
        if mount in self.angles:
            return self.angles[mount]
        deg = (
            angle_deg
            if mount is None
            else float(self.bench.mounts[mount].element_angle_deg(self.readings[mount]))
        )
        phi = self.sp.Dummy("phi", real=True)
        self.fixed[phi] = _exact_angle(deg)
        return phi

    def constant(self, name: str, latex: str, value: float, text: str, *, small: bool) -> Any:
        """A named bench number (a leak ``d`` or a transmission ``T``) with its value listed."""
        sym = self.sp.Symbol(name, positive=True)
        self.values[sym] = value
        self.latex[sym] = latex
        self.meaning[name] = f"{text} = {value:.6g}"
        if small:
            self.small.append(sym)
        return sym

    def leak(self, name: str, extinction_ratio: float, what: str) -> Any:
        if math.isinf(extinction_ratio):
            return 0
        return self.constant(
            f"d_{name}",
            f"d_{{{_latex_name(name)}}}",
            1.0 / extinction_ratio,
            f"leak of the {what}, 1/extinction ratio",
            small=True,
        )

    def transmission(self, name: str, value: float, what: str) -> Any:
        if value == 1.0:
            return 1
        return self.constant(
            f"T_{name}",
            f"T_{{{_latex_name(name)}}}",
            value,
            f"transmission of the {what} along its pass axis",
            small=False,
        )

    def poly(self, matrix: Any) -> Any:
        """A matrix of trigonometric entries as polynomials in the cos/sin symbols: double
        angles first, then the fixed angles' values, then ``exp(i x)`` of a number as
        ``cos x + i sin x`` (exact for multiples of 45 deg)."""
        from sympy.simplify.fu import TR7, TR8

        sp = self.sp

        def entry(x: Any) -> Any:
            x = sp.expand(TR8(TR7(sp.expand(x)))).xreplace(self.fixed)
            x = x.xreplace(
                {
                    e: sp.cos(-sp.I * e.exp) + sp.I * sp.sin(-sp.I * e.exp)
                    for e in x.atoms(sp.exp)
                    if e.exp.is_number
                }
            )
            return sp.expand(x).xreplace(self.to_poly)

        return matrix.applyfunc(entry)

    def product(self, *factors: Any) -> Any:
        out = factors[0]
        for f in factors[1:]:
            out = (out * f).applyfunc(self.sp.expand)
        return out

    def projector(self, theta: Any) -> Any:
        v = self.sp.Matrix([self.sp.cos(theta), self.sp.sin(theta)])
        return self.poly(v * v.T)

    def element(self, element: Element) -> tuple[str, Any, Any]:
        """("unitary", J, None), ("rotator", (cos 2 phi, sin 2 phi), None) or ("polarizer",
        (P, Q), (T, d)) for one element."""
        sp = self.sp
        theta = self.angle(element.angle_deg, element.mount)
        if element.type == "polarizer":
            key = _safe_name(element.key)
            d = self.leak(key, element.extinction_ratio, f"polarizer {element.key}")
            t = self.transmission(key, element.transmission, f"polarizer {element.key}")
            p = self.projector(theta)
            return "polarizer", (p, sp.eye(2) - p), (t, d)
        if element.type == "rotator":
            cs = self.poly(sp.Matrix([sp.cos(2 * theta), sp.sin(2 * theta)]))
            return "rotator", (cs[0], cs[1]), None
        from sympy.physics.optics.polarization import phase_retarder

        delta = 2 * sp.pi * _exact_number(float(np.mod(element.retardance_waves, 1.0)))
        # sympy's retarder carries a global phase exp(-i delta/2); it cancels in J X J^dagger
        return "unitary", self.poly(phase_retarder(theta, delta) * sp.exp(sp.I * delta / 2)), None

    def rotate(self, x: Any, cos2: Any, sin2: Any) -> Any:
        """``R X R^T`` for a rotator ``R`` of angle phi (a rotation by 2 phi of the S1-S2 part of
        ``X``; ``sin2`` -> ``-sin2`` gives ``R^T X R``)."""
        sp = self.sp
        s0, s3 = (x[0, 0] + x[1, 1]) / 2, sp.I * (x[0, 1] - x[1, 0]) / 2
        s1, s2 = (x[0, 0] - x[1, 1]) / 2, (x[0, 1] + x[1, 0]) / 2
        r1, r2 = cos2 * s1 - sin2 * s2, sin2 * s1 + cos2 * s2
        return sp.Matrix([[s0 + r1, r2 - sp.I * s3], [r2 + sp.I * s3, s0 - r1]]).applyfunc(
            sp.expand
        )

    def through(self, x: Any, element: Element, backward: bool) -> Any:
        """``x`` carried through one element: forward (a state) or backward (an effect)."""
        kind, m, extra = self.element(element)
        if kind == "rotator":
            return self.rotate(x, m[0], -m[1] if backward else m[1])
        if kind == "unitary":
            return self.product(m.H, x, m) if backward else self.product(m, x, m.H)
        t, dd = extra
        return t * (self.product(m[0], x, m[0]) + dd * self.product(m[1], x, m[1]))

    def state(self) -> Any:
        """Unnormalized pre-selected state at the coupling plane (divide by 1 + d_s)."""
        src = self.bench.source
        theta = self.angle(src.angle_deg, src.mount)
        d = self.leak("s", src.extinction_ratio, "source polarizer")
        p = self.projector(theta)
        rho = (p + d * (self.sp.eye(2) - p)).applyfunc(self.sp.expand)
        for element in self.bench.pre:
            rho = self.through(rho, element, backward=False)
        return rho, d

    def effect(self) -> Any:
        an = self.bench.analyzer
        theta = self.angle(an.angle_deg, an.mount)
        d = self.leak("a", an.extinction_ratio, "analyzer")
        t = self.transmission("a", an.transmission, "analyzer")
        p = self.projector(theta)
        e = (t * (p + d * (self.sp.eye(2) - p))).applyfunc(self.sp.expand)
        for element in reversed(self.bench.post):
            e = self.through(e, element, backward=True)
        return e

    def trace(self, x: Any, y: Any) -> Any:
        """``Tr(X Y)`` from the entries, without forming the product matrix."""
        return self.sp.expand(sum(x[i, j] * y[j, i] for i in range(2) for j in range(2)))

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
        sigma = (
            axis[0] * sp.Matrix([[1, 0], [0, -1]])
            + axis[1] * sp.Matrix([[0, 1], [1, 0]])
            + axis[2] * sp.Matrix([[0, -sp.I], [sp.I, 0]])
        )
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
    # grouped by powers of the leaks, common factors (transmissions, numbers) in front
    return sp.factor_terms(sp.collect(out, small) if small else out)


def _number(n: Any) -> Any:
    """Tidy a pure number: exact numbers (in Q(sqrt 2, i), see :class:`_Builder`) are expanded,
    which is canonical for them; a float is rounded to 15 digits."""
    import sympy as sp

    if n.has(sp.Float):
        value = complex(n)
        return (
            sp.Float(value.real, 15) + sp.I * sp.Float(value.imag, 15)
            if value.imag
            else sp.Float(value.real, 15)
        )
    return sp.expand(n)


def _chop(expr: Any, tol: float = 1e-12) -> Any:
    """Drop floating-point dust (|number| < tol) left where an exact cancellation happened."""
    import sympy as sp

    return expr.xreplace({n: 0 for n in expr.atoms(sp.Float) if abs(n) < tol})


def _null(bench: Bench, free: Sequence[str]) -> dict[str, float]:
    """Readings (deg) of the null nearest the file readings, in the free mounts."""
    from ..nulls import nulls, segments

    readings = bench.readings()
    fixed = {k: v for k, v in readings.items() if k not in free}
    if len(free) == 1:
        found = [s.null for s in segments(bench, free[0], fixed) if s.null is not None]
        if not found:
            raise InputError(
                f"mount {free[0]!r} cannot reach a null with the other mounts at "
                "their readings, so there is no series to expand around"
            )
        best = min(found, key=lambda r: abs(r - readings[free[0]]))
        return {free[0]: best}
    pts = nulls(bench, free, fixed)
    if len(pts) == 0:
        raise InputError(
            f"mounts {', '.join(free)} cannot reach a null, so there is no series to expand around"
        )
    here = np.array([readings[m] for m in free])
    best = pts[np.argmin(np.linalg.norm(np.mod(pts - here + 90.0, 180.0) - 90.0, axis=1))]
    best = here + np.mod(best - here + 90.0, 180.0) - 90.0
    return dict(zip(free, (float(x) for x in best), strict=True))


def derive(bench: Bench, free: Sequence[str] = ()) -> Derivation:
    """Closed forms of the weak value and leak rate, with the imbalance mount, the phase mount
    (if any) and ``free`` mounts as symbols (element angles, rad), and their leading order
    around the null nearest the file readings."""
    import sympy as sp

    names = tuple(mounts_in_play(bench, free))
    b = _Builder(bench, names)
    rho, d_s = b.state()
    effect = b.effect()
    a, (pi0, pi1), (a0, a1) = b.observable()
    c = bench.coupling
    kappa = sp.Symbol("kappa", positive=True)
    b.values[kappa] = float(
        np.exp(-((c.strength * float(a0 - a1)) ** 2) / (8 * c.pointer_sigma**2))
    )
    b.meaning["kappa"] = (
        f"exp(-g^2 (a0 - a1)^2 / (8 sigma^2)) = {b.values[kappa]:.12g}, the "
        f"overlap of the two displaced pointers (g = {c.strength:g}, sigma = "
        f"{c.pointer_sigma:g} {c.units})"
    )
    small = list(dict.fromkeys(b.small))
    norm = 1 + d_s
    back = b.from_poly
    numerator = _tidy(b.trace(b.product(effect, a), rho), small, back)
    denominator = _tidy(b.trace(effect, rho), small, back)
    dephased = b.product(pi0, effect, pi0) + b.product(pi1, effect, pi1)
    decohered = _tidy(b.trace(dephased, rho), small, back)
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
    d0 = coefficient(denominator, 0)
    d2 = coefficient(denominator, 2)
    # P = [(1 - eta t^2) D + eta t^2 Dec] / (1 + d_s t^2): the t^2 coefficient from those of
    # D and Dec, exactly, without differentiating the whole leak rate
    dec0 = coefficient(decohered, 0)
    p2 = _chop(sp.expand(d2 + eta * (dec0 - d0) - d_s * d0))
    weak_series = sp.factor_terms(sp.cancel(n1 / d2))
    floor = sp.factor_terms(p2.subs({e: 0 for e in offsets.values()}))
    values = dict(b.values)
    values[eta] = 1.0 - values[kappa]
    latex = {
        **b.latex,
        kappa: r"\kappa",
        eta: r"\eta",
        **{e: rf"\epsilon_{{{_latex_name(m)}}}" for m, e in offsets.items()},
    }
    return Derivation(
        b.angles,
        offsets,
        b.meaning,
        values,
        numerator,
        denominator,
        numerator / denominator,
        leak,
        weak_series,
        sp.factor_terms(p2),
        floor,
        null_deg,
        latex,
    )
