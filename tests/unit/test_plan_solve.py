"""Planner core: readings for a target imbalance or amplification on the full bench model."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest

from aligner.bench import load_bench, parse_bench
from aligner.errors import InfeasibleTarget, InputError
from aligner.model import imbalance_deg
from aligner.planning import readings_for_amplification, readings_for_imbalance
from aligner.planning.observe import observe
from aligner.planning.roots import solve
from aligner.planning.targets import Target


def crossed_bench(
    *,
    extinction: float = math.inf,
    travel: tuple[float, float] = (-10.0, 350.0),
    reading: float = 136.0,
) -> object:
    """Ideal crossed linear case: H source, half-wave plate at 22.5 deg (-> D), A = HV,
    analyzer crossed at 135 deg (an invented test bench)."""
    doc = {
        "wavelength_nm": 800.0,
        "imbalance_mount": "ana",
        "source": {"angle_deg": 0.0, "photon_rate": 1e6, "extinction_ratio": extinction},
        "pre": [{"type": "hwp", "angle_deg": 22.5}],
        "coupling": {"observable": "HV", "pointer_sigma": 100.0, "strength": 0.01},
        "analyzer": {"mount": "ana", "extinction_ratio": extinction},
        "detector": {},
        "mounts": {
            "ana": {"reading_deg": reading, "travel_deg": list(travel), "resolution_deg": 1e-4}
        },
    }
    return parse_bench(doc)


@pytest.mark.parametrize("bench_name", ["demo", "crossed"])
def test_imbalance_round_trip(bench_name: str) -> None:
    """Internal consistency with aligner.model.imbalance_deg (the definition the sweep uses)."""
    bench = load_bench("demo") if bench_name == "demo" else crossed_bench(extinction=1e5)
    rng = np.random.default_rng(4)
    for target in rng.uniform(-60, 60, 12):
        r = readings_for_imbalance(bench, float(target))
        assert list(r) == [bench.imbalance_mount]
        got = float(imbalance_deg(bench, r))
        assert got == pytest.approx(target, abs=1e-8)


def test_imbalance_picks_the_null_nearest_near() -> None:
    bench = crossed_bench()
    assert readings_for_imbalance(bench, 0.5)["ana"] == pytest.approx(135.5, abs=1e-9)
    assert readings_for_imbalance(bench, 0.5, near=300.0)["ana"] == pytest.approx(315.5, abs=1e-9)
    assert readings_for_imbalance(bench, -0.5, near=300.0)["ana"] == pytest.approx(314.5, abs=1e-9)


def test_imbalance_errors() -> None:
    bench = crossed_bench(travel=(134.0, 136.0), reading=135.0)
    with pytest.raises(InputError, match="imbalance_deg"):
        readings_for_imbalance(bench, 95.0)
    with pytest.raises(InfeasibleTarget, match="travel") as err:
        readings_for_imbalance(bench, 3.0)
    assert err.value.limit == "travel"


@pytest.mark.parametrize("x", [2.0, 10.0, 40.0, 300.0])
def test_textbook_crossed_case_arccot(x: float) -> None:
    """Pre-selection D (45 deg), analyzer at -45 deg + eps, A = HV: A_w = cot(eps), so the
    planned imbalance for amplification X is arccot(X). Textbook worked case of
    A_w = <f|A|i>/<f|i> (Aharonov, Albert & Vaidman, Phys. Rev. Lett. 60, 1351 (1988));
    cot(eps) worked out by hand (physics.md, "Worked case")."""
    bench = crossed_bench()
    r = readings_for_amplification(bench, x)
    eps = r["ana"] - 135.0
    assert eps == pytest.approx(math.degrees(math.atan(1.0 / x)), abs=1e-9)


def test_amplification_arrays_and_roots_hit_target() -> None:
    bench = load_bench("demo")
    xs = np.array([5.0, 20.0, 60.0])
    r = readings_for_amplification(bench, xs)
    assert set(r) == {"analyzer", "pre_qwp"}
    obs = observe(bench, r)
    np.testing.assert_allclose(obs.weak_value.real, xs, rtol=1e-10)
    np.testing.assert_allclose(obs.weak_value.imag, 0.0, atol=1e-8)
    for target in (Target("amplification", 30.0, "im", True), Target("weak_value", 12 - 25j)):
        sol = solve(bench, target)
        assert sol.roots
        for root in sol.roots:
            o = observe(bench, dict(zip(sol.unknowns, root.readings, strict=True)))
            w = o.response(target.exact)
            assert min(abs(w - v) for v in target.signed_values()) < 1e-8 * abs(target.value)


def test_extinction_cap_is_infeasible() -> None:
    """The leak floor caps |A_w| near 1/(2 sqrt(d_a + d_s)) (physics.md, derived; related: Knee,
    Briggs, Benjamin & Gauger, Phys. Rev. A 87, 012115 (2013))."""
    bench = crossed_bench(extinction=1e5)
    with pytest.raises(InfeasibleTarget) as err:
        readings_for_amplification(bench, 200.0)
    assert err.value.limit == "extinction"
    # source and analyzer both 1e5: combined leak d_a + d_s = 2e-5 -> cap 1/(2 sqrt(2e-5)) = 111.8
    assert err.value.achievable == pytest.approx(0.5 / math.sqrt(2e-5), rel=0.02)
    assert "d_a + d_s = 2e-05" in str(err.value) and "source polarizer" in str(err.value)


def test_other_readings_untouched() -> None:
    bench = load_bench("demo")
    moved = replace(
        bench,
        mounts={**bench.mounts, "pre_hwp": replace(bench.mounts["pre_hwp"], reading_deg=22.0)},
    )
    # pre-selection at 44 deg through the QWP at 45 deg is elliptical: the analyzer alone
    # cannot cross it, the imbalance never falls below 1 deg
    r = readings_for_imbalance(moved, 3.0)
    assert float(imbalance_deg(moved, r)) == pytest.approx(3.0, abs=1e-8)
    with pytest.raises(InfeasibleTarget, match="smallest imbalance") as err:
        readings_for_imbalance(moved, 0.5)
    assert err.value.achievable == pytest.approx(1.0, abs=1e-3)
