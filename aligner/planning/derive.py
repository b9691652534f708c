"""Closed forms of a bench with sympy: the weak value and the leak rate as functions of the free
mounts' element angles, and their leading order around the null.

Everything is built from the parsed bench (numbers and the element list), never from user
text: no ``sympify`` or ``parse_expr`` of strings. The elements act on Stokes vectors as in the
numeric core (:mod:`aligner.physics.channels`; retarders as sympy's ``phase_retarder``, a
polarizer passes ``T (|p><p| + d |p_perp><p_perp|)`` with ``d = 1/ER``, incoherently); the
source state is ``(|s><s| + d_s |s_perp><s_perp|)/(1 + d_s)``; the post-selection is carried
back to the coupling plane. Fixed angles and retardances that are not multiples of 22.5 deg and
1/8 wave enter as evaluated numbers. When the solved mounts cannot reach a null, the first other
mount that lets them is freed too, and :attr:`Derivation.notes` says so.

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
from ..model import coupling_scale
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
    ``latex_names``: symbol -> its LaTeX form (``\\theta_{\\mathrm{pre\\_qwp}}``);
    ``notes``: what the reader must know, such as a mount freed because the others could not
    reach a null. Without a reachable null the series, the floor and ``null_deg`` are empty
    (None, None, None, {}).
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
    notes: tuple[str, ...] = ()

    def _formulas(self) -> list[tuple[str, str, str, Any]]:
        """(key, plain name, LaTeX name, expression) of every result that exists."""
        rows = [
            ("numerator", "N", "N", self.numerator),
            ("denominator", "D", "D", self.denominator),
            ("leak_rate", "P", "P", self.leak_rate),
            ("weak_value_series", "A_w ~", r"A_w \simeq", self.weak_value_series),
            ("leak_rate_series", "P   ~", r"P \simeq", self.leak_rate_series),
            ("floor", "floor (P at the null) =", r"P_{\mathrm{floor}} =", self.floor),
        ]
        return [row for row in rows if row[3] is not None]

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
        """Readable text, or LaTeX for a document with amsmath: the symbol table, A_w = N/D,
        the leak rate, and the leading order around the null."""
        return self._latex() if latex else self._plain()

    def _plain(self) -> str:
        import sympy as sp

        show = sp.sstr
        forms = {key: (plain, expr) for key, plain, _, expr in self._formulas()}
        lines = [f"Note: {note}." for note in self.notes]
        lines += ["Symbols:"]
        lines += [f"  {name}: {text}" for name, text in self.meaning.items()]
        lines += [
            "",
            "Weak value A_w = N / D with",
            f"  N = {show(self.numerator)}",
            f"  D = {show(self.denominator)}",
            "",
            "Leak rate (per source photon):",
            f"  P = {show(self.leak_rate)}",
        ]
        if self.floor is not None:
            lines += ["", f"Around the null {self._null_text(False)}, to leading order:"]
            lines += [f"  {forms[k][0]} {show(forms[k][1])}" for k in _SERIES]
        return "\n".join(lines)

    def _latex(self) -> str:
        forms = {key: (tex, expr) for key, _, tex, expr in self._formulas()}
        rows = [
            f"  {self._symbol_latex(n)} & \\text{{{_latex_text(t)}}} \\\\"
            for n, t in self.meaning.items()
        ]
        out = [f"% {_latex_text(note)}" for note in self.notes]
        out += [
            "% aligner derive: paste into a LaTeX document that loads amsmath",
            "% symbols",
            r"\[",
            r"\begin{array}{ll}",
            *rows,
            r"\end{array}",
            r"\]",
            r"% weak value A_w = N / D, leak rate P per source photon",
            r"\begin{align*}",
            r"A_w &= \frac{N}{D} \\",
        ]
        body = [
            f"{forms[k][0]} &= {self.latex(forms[k][1])}"
            for k in ("numerator", "denominator", "leak_rate")
        ]
        out += [line + r" \\" for line in body[:-1]] + [body[-1], r"\end{align*}"]
        if self.floor is not None:
            out += [f"% around the null {self._null_text(True)}, to leading order"]
            body = [f"{forms[k][0]} &{self.latex(forms[k][1])}" for k in _SERIES]
            out += [r"\begin{align*}"]
            out += [line + r" \\" for line in body[:-1]] + [body[-1], r"\end{align*}"]
        return "\n".join(out)

    def to_dict(self) -> dict[str, Any]:
        """The JSON document of ``aligner derive --json``: every expression as a plain string
        (sympy syntax) and as LaTeX (null where there is no series), the symbol table
        (meaning, LaTeX, value) and the notes."""
        import sympy as sp

        values = {str(k): v for k, v in self.values.items()}
        everything = [
            ("weak_value", self.weak_value),
            ("numerator", self.numerator),
            ("denominator", self.denominator),
            ("leak", self.leak_rate),
            ("weak_value_series", self.weak_value_series),
            ("leak_series", self.leak_rate_series),
            ("floor", self.floor),
        ]
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
                key: None if expr is None else {"text": sp.sstr(expr), "latex": self.latex(expr)}
                for key, expr in everything
            },
            "notes": list(self.notes),
        }


#: The results around the null, in the order shown.
_SERIES = ("weak_value_series", "leak_rate_series", "floor")


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
    """Builds the Stokes vectors of one bench at the coupling plane, symbolically.

    Every element acts on Stokes vectors as a real 4x4 matrix (:mod:`aligner.physics.channels`)
    whose entries are polynomials in ``C_m = cos 2 theta_m`` and ``S_m = sin 2 theta_m`` of a
    free angle, or numbers for a fixed one: exact in Q(sqrt 2) when the angle is a multiple of
    22.5 deg and the retardance a multiple of 1/8 wave, else evaluated floats. So the products
    stay polynomials with numeric coefficients, and no trigonometry of numbers (such as
    ``cos(2.4 - 0.98 pi)``) is left for sympy to expand.
    """

    def __init__(self, bench: Bench, free: Sequence[str]) -> None:
        import sympy as sp

        self.sp = sp
        self.bench = bench
        self.readings = bench.readings()
        self.angles = {m: sp.Symbol(f"theta_{_safe_name(m)}", real=True) for m in free}
        self.latex: dict[Any, str] = {
            th: rf"\theta_{{{_latex_name(m)}}}" for m, th in self.angles.items()
        }
        self.to_poly: dict[Any, Any] = {}
        self.double: dict[str, tuple[Any, Any]] = {}  # mount -> (C, S) symbols
        for m, th in self.angles.items():
            c = sp.Symbol(f"C_{_safe_name(m)}", real=True)
            t = sp.Symbol(f"S_{_safe_name(m)}", real=True)
            self.double[m] = (c, t)
            self.to_poly[sp.cos(2 * th)] = c
            self.to_poly[sp.sin(2 * th)] = t
        self.from_poly = {v: k for k, v in self.to_poly.items()}
        self.meaning: dict[str, str] = {}
        self.values: dict[Any, float] = {}
        self.small: list[Any] = []  # extinction symbols d (scale as t^2)
        for m, sym in self.angles.items():
            mount = bench.mounts[m]
            self.meaning[str(sym)] = (
                f"element angle (rad) of mount {m!r} = "
                f"{mount.sense:+d} x (reading - {mount.offset_deg:g} deg)"
            )

    def axis(self, angle_deg: float, mount: str | None) -> tuple[Any, Any]:
        """``(cos 2 theta, sin 2 theta)``: the free angle's symbols, or numbers."""
        if mount in self.double:
            return self.double[mount]
        deg = (
            angle_deg
            if mount is None
            else float(self.bench.mounts[mount].element_angle_deg(self.readings[mount]))
        )
        return self.cos_sin(2 * _exact_angle(deg))

    def cos_sin(self, x: Any) -> tuple[Any, Any]:
        """Exact cosine and sine of an exact angle; floats of a float."""
        sp = self.sp
        if isinstance(x, sp.Float):
            return sp.Float(math.cos(float(x)), 17), sp.Float(math.sin(float(x)), 17)
        return sp.cos(x), sp.sin(x)

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

    def through(self, x: list[Any], element: Element, backward: bool) -> list[Any]:
        """Stokes components ``x`` carried through one element: forward (a state) or backward
        (an effect), as the channels of :mod:`aligner.physics.channels`."""
        sp = self.sp
        c, t = self.axis(element.angle_deg, element.mount)
        s0, s1, s2, s3 = x
        if element.type == "polarizer":
            key = _safe_name(element.key)
            d = self.leak(key, element.extinction_ratio, f"polarizer {element.key}")
            tr = self.transmission(key, element.transmission, f"polarizer {element.key}")
            along = c * s1 + t * s2
            polarized = tr * ((1 - d) * s0 + (1 + d) * along) / 2
            out = [tr * ((1 + d) * s0 + (1 - d) * along) / 2, c * polarized, t * polarized, 0]
        elif element.type == "rotator":
            t = -t if backward else t
            out = [s0, c * s1 - t * s2, t * s1 + c * s2, s3]
        else:
            frac = _exact_number(float(np.mod(element.retardance_waves, 1.0)))
            cd, sd = self.cos_sin(
                2 * sp.pi * frac if not isinstance(frac, sp.Float) else sp.Float(2 * math.pi * frac)
            )
            sd = -sd if backward else sd
            along = (c * s1 + t * s2) * (1 - cd)
            out = [
                s0,
                s1 * cd + t * s3 * sd + c * along,
                s2 * cd - c * s3 * sd + t * along,
                s3 * cd + (c * s2 - t * s1) * sd,
            ]
        return [sp.expand(v) for v in out]

    def start(self, angle_deg: float, mount: str | None, d: Any, scale: Any) -> list[Any]:
        """``scale (1 + d, (1 - d) cos 2a, (1 - d) sin 2a, 0)``: a polarizer's POVM element
        with leak ``d``, or (``scale`` 1) the unnormalized state it prepares."""
        c, t = self.axis(angle_deg, mount)
        return [
            self.sp.expand(v)
            for v in (scale * (1 + d), scale * (1 - d) * c, scale * (1 - d) * t, 0)
        ]

    def state(self) -> tuple[list[Any], Any]:
        """Unnormalized Stokes vector of the state at the coupling plane (divide by 1 + d_s)."""
        src = self.bench.source
        d = self.leak("s", src.extinction_ratio, "source polarizer")
        s = self.start(src.angle_deg, src.mount, d, 1)
        for element in self.bench.pre:
            s = self.through(s, element, backward=False)
        return s, d

    def effect(self) -> list[Any]:
        an = self.bench.analyzer
        d = self.leak("a", an.extinction_ratio, "analyzer")
        t = self.transmission("a", an.transmission, "analyzer")
        e = self.start(an.angle_deg, an.mount, d, t)
        if an.unexplained_leak:
            floor = self.constant(
                "l_a",
                "l_{a}",
                an.unexplained_leak,
                "unexplained leak at the analyzer (from a null search), unpolarized",
                small=True,
            )
            e[0] = self.sp.expand(e[0] + 2 * floor)
        for element in reversed(self.bench.post):
            e = self.through(e, element, backward=True)
        return e

    def observable(self) -> tuple[Any, list[Any], list[Any], tuple[Any, Any]]:
        """``alpha``, ``v`` (``A = alpha + v.sigma``), the unit axis ``n`` of A and its
        eigenvalues."""
        sp = self.sp
        c = self.bench.coupling
        axis: Sequence[Any]
        eig: tuple[Any, Any]
        if c.observable == "axis" and c.axis is not None:
            raw = [_exact_number(x, 1000) for x in c.axis]
            length = sp.sqrt(sum(x**2 for x in raw))
            axis = [x / length for x in raw]
            eig = (_exact_number(c.eigenvalues[0]), _exact_number(c.eigenvalues[1]))
        else:
            axis, eig = _NAMED[c.observable]
        beta = sp.Rational(1, 2) * (eig[0] - eig[1])
        return (eig[0] + eig[1]) / 2, [beta * n for n in axis], list(axis), eig


def _tidy(expr: Any, small: Sequence[Any], from_poly: Mapping[Any, Any]) -> Any:
    """Tidy a polynomial in the cos/sin symbols: each monomial of them becomes a sum of sines
    and cosines of combined angles (``TR8``, once per monomial, not on the whole expression),
    numeric factors are simplified on their own, and the terms are grouped by powers of the
    small symbols. Linear in the size of the expression, unlike ``simplify``."""
    import sympy as sp
    from sympy.simplify.fu import TR7, TR8

    expr = sp.expand(expr)
    gens = list(from_poly)
    grouped: dict[Any, Any] = {}
    monomials = sp.Poly(expr, *gens).terms() if gens else [((), expr)]
    for powers, coefficient in monomials:
        product = sp.Mul(*(g**k for g, k in zip(gens, powers, strict=True)))
        trig = sp.expand(TR8(TR7(product.xreplace(from_poly))))
        for part in sp.Add.make_args(sp.expand(trig * coefficient)):
            number, rest = part.as_independent(*part.free_symbols, as_Add=False)
            grouped[rest] = grouped.get(rest, 0) + number
    out = sp.Add(*(_number(n) * rest for rest, n in grouped.items()))
    # grouped by powers of the leaks, common factors (transmissions, numbers) in front
    return sp.factor_terms(sp.collect(out, small) if small else out)


def _number(n: Any) -> Any:
    """Tidy a pure number: exact numbers (in Q(sqrt 2, i), see :class:`_Builder`) are expanded,
    which is canonical for them; a float is rounded to 15 digits."""
    import sympy as sp

    if n.has(sp.Float):
        value = complex(n)
        return _real(value.real) + sp.I * _real(value.imag) if value.imag else _real(value.real)
    return sp.expand(n)


def _real(x: float) -> Any:
    """A float as a simple fraction when it is one to rounding (a 1.0 left by sums of floats),
    else to 15 digits."""
    import sympy as sp

    frac = sp.Rational(x).limit_denominator(8)
    if abs(float(frac) - x) <= 1e-13 * max(1.0, abs(x)):
        return frac
    return sp.Float(x, 15)


def _chop(expr: Any, tol: float = 1e-12) -> Any:
    """Drop floating-point dust (|number| < tol) left where an exact cancellation happened, and
    tidy the other floats (:func:`_real`)."""
    import sympy as sp

    return expr.xreplace({n: 0 if abs(n) < tol else _real(float(n)) for n in expr.atoms(sp.Float)})


def _nulls_of(bench: Bench, names: Sequence[str]) -> dict[str, float] | None:
    """Readings (deg) of the null nearest the file readings in the mounts ``names`` (others at
    their readings), or None when they cannot reach one (:mod:`aligner.nulls`)."""
    from ..errors import InfeasibleTarget
    from ..nulls import nulls, segments

    readings = bench.readings()
    fixed = {k: v for k, v in readings.items() if k not in names}
    if len(names) == 1:
        try:
            found = [s.null for s in segments(bench, names[0], fixed) if s.null is not None]
        except InfeasibleTarget:
            return None
        if not found:
            return None
        return {names[0]: min(found, key=lambda r: abs(r - readings[names[0]]))}
    pts = nulls(bench, names, fixed)
    if len(pts) == 0:
        return None
    here = np.array([readings[m] for m in names])
    best = pts[np.argmin(np.linalg.norm(np.mod(pts - here + 90.0, 180.0) - 90.0, axis=1))]
    best = here + np.mod(best - here + 90.0, 180.0) - 90.0
    return dict(zip(names, (float(x) for x in best), strict=True))


def _null(
    bench: Bench, names: tuple[str, ...]
) -> tuple[tuple[str, ...], dict[str, float] | None, tuple[str, ...]]:
    """The mounts to solve for, the null to expand around and notes for the reader: when
    ``names`` cannot reach a null, the first other mount (in the file's order) that lets them
    is freed as well; when none does, there is no null and no series."""
    found = _nulls_of(bench, names)
    if found is not None:
        return names, found, ()
    which = f"mount {names[0]!r}" if len(names) == 1 else f"mounts {', '.join(names)}"
    for extra in (m for m in bench.mounts if m not in names):
        found = _nulls_of(bench, (*names, extra))
        if found is not None:
            note = (
                f"{which} cannot reach a null (pre- and post-selection crossed) with the other "
                f"mounts at their readings, so mount {extra!r} is freed as well: its element "
                "angle is a symbol too (choose another with --free MOUNT)"
            )
            return (*names, extra), found, (note,)
    note = (
        f"{which} cannot reach a null with the other mounts at their readings, and freeing "
        "one more mount does not help, so there is no series around a null; free the mounts "
        "that set the pre-selection's ellipticity with --free MOUNT"
    )
    return names, None, (note,)


def derive(bench: Bench, free: Sequence[str] = ()) -> Derivation:
    """Closed forms of the weak value and leak rate, with the imbalance mount, the phase mount
    (if any) and ``free`` mounts as symbols (element angles, rad), and their leading order
    around the null nearest the file readings. When those mounts cannot reach a null, another
    mount is freed (see :attr:`Derivation.notes`)."""
    import sympy as sp

    names, null, notes = _null(bench, tuple(mounts_in_play(bench, free)))
    b = _Builder(bench, names)
    s, d_s = b.state()
    e = b.effect()
    alpha, v, n, (a0, a1) = b.observable()
    c = bench.coupling
    g, sigma = coupling_scale(bench)
    kappa = sp.Symbol("kappa", positive=True)
    b.values[kappa] = float(np.exp(-((g * float(a0 - a1)) ** 2) / (8 * sigma**2)))
    unit = c.units if c.kind == "shift" else f"1/{c.units}"
    b.meaning["kappa"] = (
        f"exp(-g^2 (a0 - a1)^2 / (8 sigma^2)) = {b.values[kappa]:.12g}, the "
        f"overlap of the two displaced pointers (g = {g:g}, sigma = {sigma:g} {unit})"
    )
    small = list(dict.fromkeys(b.small))
    back = b.from_poly

    def dot(x: Sequence[Any], y: Sequence[Any]) -> Any:
        """``x . y`` of a 3-vector and the vector part of Stokes components ``y``."""
        return sum(x[k] * y[k + 1] for k in range(3))

    # the Stokes closed forms of aligner.physics.weak: Tr(E rho) = (s0 e0 + s.e)/2,
    # Tr(E A rho) = alpha T + (X + i Y)/2, dephased trace (s0 e0 + (n.s)(n.e))/2
    plain = (s[0] * e[0] + dot(s[1:], e)) / 2
    cross = [s[2] * e[3] - s[3] * e[2], s[3] * e[1] - s[1] * e[3], s[1] * e[2] - s[2] * e[1]]
    x = s[0] * dot(v, e) + e[0] * dot(v, s)
    y = sum(v[k] * cross[k] for k in range(3))
    raw = (alpha * plain + (x + sp.I * y) / 2, plain, (s[0] * e[0] + dot(n, s) * dot(n, e)) / 2)
    numerator, denominator, decohered = (_tidy(r, small, back) for r in raw)
    leak = (kappa * denominator + (1 - kappa) * decohered) / (1 + d_s)
    eta = sp.Symbol("eta", positive=True)
    b.meaning["eta"] = "1 - kappa (pointer decoherence; small)"
    offsets = {m: sp.Symbol(f"epsilon_{_safe_name(m)}", real=True) for m in names}
    latex = {
        **b.latex,
        kappa: r"\kappa",
        eta: r"\eta",
        **{e: rf"\epsilon_{{{_latex_name(m)}}}" for m, e in offsets.items()},
    }
    values = dict(b.values)
    values[eta] = 1.0 - values[kappa]
    series: tuple[Any, Any, Any] = (None, None, None)
    null_deg: dict[str, float] = {}
    if null is not None:
        null_deg = {m: float(bench.mounts[m].element_angle_deg(r)) for m, r in null.items()}
        for m, eps in offsets.items():
            b.meaning[str(eps)] = (
                f"offset (rad) of {b.angles[m]} from the null at {null_deg[m]:.6g} deg"
            )
        series = _series(raw, d_s, eta, small, b, offsets, null_deg)
    return Derivation(
        b.angles,
        offsets,
        b.meaning,
        values,
        numerator,
        denominator,
        numerator / denominator,
        leak,
        *series,
        null_deg,
        latex,
        notes,
    )


def _series(
    raw: tuple[Any, Any, Any],
    d_s: Any,
    eta: Any,
    small: Sequence[Any],
    b: _Builder,
    offsets: Mapping[str, Any],
    null_deg: Mapping[str, float],
) -> tuple[Any, Any, Any]:
    """Leading order around the null from the polynomial forms ``raw`` (numerator,
    denominator, dephased trace, in the cos/sin symbols): every free angle is
    ``theta_0 + eps`` and the small parameters scale together, ``eps ~ t``, ``d ~ t^2``,
    ``eta ~ t^2`` (module docstring); ``cos 2 theta`` and ``sin 2 theta`` are expanded to
    second order in ``t``."""
    import sympy as sp

    t = sp.Symbol("t", positive=True)
    scale: dict[Any, Any] = {s: t**2 * s for s in small}
    for m, eps in offsets.items():
        c0, s0 = b.cos_sin(2 * _exact_angle(null_deg[m]))
        h = 2 * t * eps
        cos_sym, sin_sym = b.double[m]
        scale[cos_sym] = c0 - h * s0 - h**2 / 2 * c0
        scale[sin_sym] = s0 + h * c0 - h**2 / 2 * s0
    numerator, denominator, decohered = (sp.expand(r.xreplace(scale)) for r in raw)

    def coefficient(expr: Any, order: int) -> Any:
        return _chop(sp.expand(expr.coeff(t, order)))

    n1 = coefficient(numerator, 1)
    d0 = coefficient(denominator, 0)
    d2 = coefficient(denominator, 2)
    # P = [(1 - eta t^2) D + eta t^2 Dec] / (1 + d_s t^2): the t^2 coefficient from those of
    # D and Dec, exactly, without expanding the whole leak rate
    dec0 = coefficient(decohered, 0)
    p2 = _chop(sp.expand(d2 + eta * (dec0 - d0) - d_s * d0))
    weak_series = _chop(sp.factor_terms(sp.cancel(n1 / d2)))
    floor = sp.factor_terms(p2.subs({e: 0 for e in offsets.values()}))
    return weak_series, sp.factor_terms(p2), floor
