"""aligner.planning.derive: sympy closed forms against the numeric core and textbook cases."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
import sympy as sp

from aligner.bench import load_bench, parse_bench
from aligner.errors import InputError
from aligner.planning.derive import derive
from aligner.prediction import predict


def crossed(*, ana_er: float = math.inf, src_er: float = math.inf, mount: str = "ana") -> Any:
    """Invented test bench: H source, HWP at 22.5 deg (-> D), A = HV, analyzer on a mount."""
    return parse_bench(
        {
            "wavelength_nm": 800.0,
            "imbalance_mount": mount,
            "source": {"angle_deg": 0.0, "photon_rate": 1e6, "extinction_ratio": src_er},
            "pre": [{"type": "hwp", "angle_deg": 22.5}],
            "coupling": {"observable": "HV", "pointer_sigma": 50.0, "strength": 2.0},
            "analyzer": {"mount": mount, "extinction_ratio": ana_er},
            "detector": {},
            "mounts": {mount: {"reading_deg": 136.0, "travel_deg": [-10.0, 350.0]}},
        }
    )


def mixed_bench() -> Any:
    """Invented test bench with every element kind: a leaky polarizer, a plate on a mount and a
    free retarder of odd retardance before the coupling, a rotator after it, an axis observable
    with unequal eigenvalues, offsets and a reversed mount."""
    return parse_bench(
        {
            "wavelength_nm": 633.0,
            "imbalance_mount": "ana",
            "phase_mount": "ret",
            "source": {"angle_deg": 0.0, "photon_rate": 1e6, "extinction_ratio": 3e4},
            "pre": [
                {
                    "type": "polarizer",
                    "angle_deg": 0.0,
                    "extinction_ratio": 2e3,
                    "transmission": 0.8,
                },
                {"type": "hwp", "mount": "hwp"},
                {"type": "retarder", "mount": "ret", "retardance_waves": 0.375},
            ],
            "coupling": {
                "observable": "axis",
                "axis": [0.0, 0.0, 1.0],
                "eigenvalues": [1.0, -0.5],
                "pointer_sigma": 3.0,
                "strength": 0.4,
            },
            "post": [{"type": "rotator", "angle_deg": 22.5}],
            "analyzer": {"mount": "ana", "extinction_ratio": 5e4, "transmission": 0.93},
            "detector": {},
            "mounts": {
                "ana": {
                    "reading_deg": 140.0,
                    "offset_deg": 2.5,
                    "sense": -1,
                    "travel_deg": [-200.0, 200.0],
                },
                "hwp": {"reading_deg": 21.5, "offset_deg": -1.0},
                "ret": {"reading_deg": 40.0},
            },
        }
    )


def _evaluate(d: Any, bench: Any, angles: dict[str, float]) -> tuple[complex, float]:
    subs = {**d.values, **{d.angles[m]: a for m, a in angles.items()}}
    wv = complex(sp.N(d.weak_value.subs(subs), 30))
    leak = complex(sp.N(d.leak_rate.subs(subs), 30))
    assert abs(leak.imag) < 1e-15
    return wv, leak.real


@pytest.mark.parametrize("which", ["demo", "mixed"])
def test_closed_forms_equal_numeric_core(which: str) -> None:
    """sympy expressions (built from the elements' Stokes matrices, which test_channels checks
    against sympy.physics.optics and py-pol) evaluated at random angles equal the numeric
    engine to 1e-10."""
    bench = load_bench("demo") if which == "demo" else mixed_bench()
    d = derive(bench)
    rng = np.random.default_rng(3)
    for _ in range(5):
        readings = {m: float(rng.uniform(-90, 90)) for m in d.angles}
        angles = {
            m: math.radians(bench.mounts[m].element_angle_deg(r)) for m, r in readings.items()
        }
        wv, leak = _evaluate(d, bench, angles)
        p = predict(bench, readings)
        assert wv == pytest.approx(complex(p.weak_value), rel=1e-10, abs=1e-12)
        assert leak == pytest.approx(float(p.leak_rate), rel=1e-10)


def test_textbook_series_is_one_over_eps() -> None:
    """Crossed linear case, ideal polarizers: A_w = cot(eps) ~ 1/eps and P = sin^2(eps) ~ eps^2
    (textbook worked case of A_w = <f|A|i>/<f|i>, Aharonov, Albert & Vaidman, Phys. Rev. Lett.
    60, 1351 (1988); cot(eps) worked out by hand, physics.md)."""
    d = derive(crossed())
    eps = d.offsets["ana"]
    assert sp.simplify(d.weak_value_series - 1 / eps) == 0
    eta = sp.Symbol("eta", positive=True)
    assert sp.simplify(d.leak_rate_series - (eps**2 + eta / 2)) == 0
    assert d.null_deg["ana"] == pytest.approx(135.0, abs=1e-9)
    # the exact closed form is cot(eps) at the null + eps
    theta = d.angles["ana"]
    exact = d.weak_value.subs(theta, 3 * sp.pi / 4 + eps)
    assert sp.simplify(exact - sp.cot(eps)) == 0


def test_extinction_floor_term() -> None:
    """Analyzer leakage d: A_w = (1 - d) tan(eps) / (tan^2(eps) + d) (physics.md, derived;
    related: Knee, Briggs, Benjamin & Gauger, Phys. Rev. A 87, 012115 (2013)), so to leading
    order A_w ~ eps / (eps^2 + d); the floor of P at the null is d."""
    d = derive(crossed(ana_er=1e4))
    eps = d.offsets["ana"]
    d_a = sp.Symbol("d_a", positive=True)
    eta = sp.Symbol("eta", positive=True)
    assert sp.simplify(d.weak_value_series - eps / (eps**2 + d_a)) == 0
    assert sp.simplify(d.floor - (d_a + eta / 2)) == 0
    theta = d.angles["ana"]
    full = sp.simplify(d.weak_value.subs(theta, 3 * sp.pi / 4 + eps))
    for e in (0.002, 0.01, 0.3):
        want = (1 - 1e-4) * math.tan(e) / (math.tan(e) ** 2 + 1e-4)
        got = complex(sp.N(full.subs({eps: e, d_a: 1e-4}), 20))
        assert got.real == pytest.approx(want, rel=1e-12)


def test_series_close_to_exact_near_the_null() -> None:
    bench = load_bench("demo")
    d = derive(bench)
    eps = d.offsets["analyzer"]
    for e in (2e-3, 5e-3):
        series = complex(
            sp.N(d.weak_value_series.subs({**d.values, eps: e, d.offsets["pre_qwp"]: 0}), 20)
        )
        angle = d.null_deg["analyzer"] + math.degrees(e)
        exact = complex(predict(bench, {"analyzer": angle, "pre_qwp": 45.0}).weak_value)
        assert series == pytest.approx(exact, rel=5 * e)


def test_names_never_evaluated() -> None:
    """Mount names go into symbol names only after sanitizing; nothing is parsed as code."""
    bench = crossed(mount="__import__('os').getcwd()")
    d = derive(bench)
    (sym,) = d.angles.values()
    assert sym.name.isidentifier()
    assert "(" not in sym.name


def test_text_and_latex() -> None:
    d = derive(crossed(ana_er=1e4))
    text = d.text()
    assert "A_w ~" in text and "d_a" in text and "1/extinction ratio" in text
    assert "\\frac" in d.text(latex=True)


def test_latex_safe_names_and_symbol_table() -> None:
    """Mount names with underscores render as upright subscripts, in the formulas and in the
    symbol table; the plain text keeps the plain names."""
    d = derive(load_bench("demo"))
    latex = d.text(latex=True)
    assert r"\theta_{\mathrm{pre\_qwp}}" in latex and r"\epsilon_{\mathrm{pre\_qwp}}" in latex
    assert "pre qwp" not in latex and "{pre_qwp}" not in latex
    assert r"\begin{array}{ll}" in latex and r"T_{a} & \text{transmission" in latex
    assert "theta_pre_qwp" in d.text()


def test_bench_numbers_are_named_symbols() -> None:
    """Transmission and leaks stay symbols with their values listed: at the null only the leaks
    pass, so the floor is T_a (d_a + d_s + eta/2) (physics.md, extinction and decoherence,
    derived), and no 23/100-style constant from T_a = 0.92 is left in the formulas."""
    bench = load_bench("demo")
    d = derive(bench)
    names = {str(k): v for k, v in d.values.items()}
    assert names["T_a"] == pytest.approx(bench.analyzer.transmission)
    assert names["d_a"] == pytest.approx(1 / bench.analyzer.extinction_ratio)
    assert names["d_s"] == pytest.approx(1 / bench.source.extinction_ratio)
    t_a, d_a, d_s, eta = (sp.Symbol(n, positive=True) for n in ("T_a", "d_a", "d_s", "eta"))
    assert sp.expand(d.floor - t_a * (d_a + d_s + eta / 2)) == 0
    assert "23" not in sp.sstr(d.denominator) and "23" not in sp.sstr(d.leak_rate)


def test_exact_constants_without_nested_radicals() -> None:
    """Fixed angles at multiples of 22.5 deg and 3/8-wave retardance give constants in
    Q(sqrt 2, i): no cos(pi/8)-style nested radical and no unevaluated exp survives."""
    d = derive(mixed_bench())
    for expr in (d.numerator, d.denominator, d.leak_rate):
        text = sp.sstr(expr)
        assert "sqrt(2 " not in text and "sqrt(1/2" not in text and "exp(" not in text


def test_json_document() -> None:
    d = derive(load_bench("demo"))
    doc = d.to_dict()
    assert set(doc) == {"symbols", "angles", "offsets", "null_deg", "expressions", "notes"}
    assert doc["notes"] == []
    assert doc["symbols"]["T_a"]["value"] == pytest.approx(0.92)
    assert doc["symbols"]["theta_pre_qwp"]["latex"] == r"\theta_{\mathrm{pre\_qwp}}"
    for key in (
        "weak_value",
        "numerator",
        "denominator",
        "leak",
        "weak_value_series",
        "leak_series",
        "floor",
    ):
        assert doc["expressions"][key]["text"] and doc["expressions"][key]["latex"]
    assert doc["expressions"]["floor"]["text"] == sp.sstr(d.floor)


def test_unknown_free_mount() -> None:
    with pytest.raises(InputError, match="unknown mount"):
        derive(crossed(), free=("nope",))


def no_phase_bench() -> Any:
    """Invented deflection bench without a phase mount, with numbers that are not multiples of
    anything: an elliptical pre-selection that the analyzer alone cannot cross."""
    return parse_bench(
        {
            "wavelength_nm": 780.0,
            "imbalance_mount": "analyzer",
            "source": {"angle_deg": 12.3, "photon_rate": 2e6, "extinction_ratio": 1e5},
            "pre": [
                {"type": "hwp", "mount": "pre_hwp", "retardance_waves": 0.4937},
                {"type": "qwp", "angle_deg": 31.7, "retardance_waves": 0.2437},
            ],
            "coupling": {
                "observable": "HV",
                "pointer_sigma": 300.0,
                "strength": 0.8,
                "units": "um",
            },
            "analyzer": {"mount": "analyzer", "extinction_ratio": 1e3, "transmission": 0.95},
            "detector": {},
            "mounts": {
                "pre_hwp": {"reading_deg": 28.9},
                "analyzer": {"reading_deg": 128.3, "travel_deg": [-10.0, 350.0]},
            },
        }
    )


def test_bench_without_a_phase_mount_frees_a_mount_and_says_so() -> None:
    d = derive(no_phase_bench())
    assert set(d.angles) == {"analyzer", "pre_hwp"}
    assert len(d.notes) == 1 and "'pre_hwp' is freed" in d.notes[0] and "--free" in d.notes[0]
    assert "Note:" in d.text() and "pre\\_hwp" in d.text(latex=True)
    # numbers are evaluated: no pi times a float, no trigonometry of a number left over
    for key, item in d.to_dict()["expressions"].items():
        text = item["text"]
        assert "pi" not in text and "cos(0." not in text and "sin(0." not in text, key


@pytest.mark.parametrize("which", ["demo", "no phase mount"])
def test_pasted_text_parses_back_and_agrees_with_predict(which: str) -> None:
    """The --json text of A_w and P, parsed by sympy as a user would paste it, with the listed
    symbol values, equals the numeric engine to 1e-12 at random readings."""
    bench = load_bench("demo") if which == "demo" else no_phase_bench()
    doc = derive(bench).to_dict()
    names = {name: sp.Symbol(name) for name in doc["symbols"]}
    values = {names[k]: v["value"] for k, v in doc["symbols"].items() if v["value"] is not None}
    wv = sp.parse_expr(doc["expressions"]["weak_value"]["text"], local_dict=names)
    leak = sp.parse_expr(doc["expressions"]["leak"]["text"], local_dict=names)
    rng = np.random.default_rng(7)
    for _ in range(4):
        readings = {m: float(rng.uniform(-90, 90)) for m in doc["angles"]}
        at = dict(values)
        for m, symbol in doc["angles"].items():
            at[names[symbol]] = math.radians(bench.mounts[m].element_angle_deg(readings[m]))
        p = predict(bench, readings)
        assert complex(wv.evalf(30, subs=at)) == pytest.approx(
            complex(p.weak_value), rel=1e-12, abs=1e-12
        )
        assert float(leak.evalf(30, subs=at)) == pytest.approx(float(p.leak_rate), rel=1e-12)


def test_latex_is_a_complete_amsmath_fragment() -> None:
    """No TeX engine here to compile it, so the structure a compiler needs: every environment
    and display opened is closed, braces balance, rows end with a line break."""
    latex = derive(no_phase_bench()).text(latex=True)
    code = "\n".join(line for line in latex.splitlines() if not line.startswith("%"))
    for env in ("array", "align*"):
        assert code.count(f"\\begin{{{env}}}") == code.count(f"\\end{{{env}}}") > 0
    assert code.count("\\[") == code.count("\\]") == 1
    depth = 0
    for char in code.replace("\\{", "").replace("\\}", ""):
        depth += {"{": 1, "}": -1}.get(char, 0)
        assert depth >= 0
    assert depth == 0
    assert "\\frac{N}{D}" in code and "&=" in code
