"""aligner.planning: round trips through the prediction engine, limits, branches, tolerance
budget."""

from __future__ import annotations

import importlib
import math
from typing import Any

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

import aligner
from aligner.bench import load_bench, parse_bench
from aligner.errors import InfeasibleTarget, InputError
from aligner.planning import plan, readings_for_amplification
from aligner.prediction import predict


def make_bench(
    *,
    hwp: float = 22.5,
    qwp: float | None = None,
    ana_er: float = 1e5,
    src_er: float = 1e6,
    sigma: float = 100.0,
    g: float = 0.01,
    resolution: float = 1e-4,
    offset: float = 0.0,
    travel: tuple[float, float] = (-10.0, 350.0),
    readout: str = "position",
    repeatability: float = 0.0,
    retardance_tol: float = 0.0,
    offset_err: float = 0.0,
) -> Any:
    """An invented test bench: H source, half-wave plate (fixed, at ``hwp``), optional
    quarter-wave plate on mount ``qwp`` (the phase mount), HV coupling, analyzer on a mount."""
    pre: list[dict[str, Any]] = [
        {"type": "hwp", "angle_deg": hwp, "retardance_tol_waves": retardance_tol}
    ]
    mounts: dict[str, Any] = {
        "ana": {  # 1 deg past crossed
            "reading_deg": min(max(2 * hwp + 91.0 + offset, travel[0]), travel[1]),
            "offset_deg": offset,
            "travel_deg": list(travel),
            "resolution_deg": resolution,
            "repeatability_deg": repeatability,
            "offset_err_deg": offset_err,
        }
    }
    doc: dict[str, Any] = {
        "wavelength_nm": 800.0,
        "imbalance_mount": "ana",
        "source": {"angle_deg": 0.0, "photon_rate": 1e6, "extinction_ratio": src_er},
        "pre": pre,
        "coupling": {"observable": "HV", "pointer_sigma": sigma, "strength": g, "readout": readout},
        "analyzer": {"mount": "ana", "extinction_ratio": ana_er, "transmission": 0.9},
        "detector": {"efficiency": 0.6, "dark_rate": 10.0},
        "mounts": mounts,
    }
    if qwp is not None:
        pre.append({"type": "qwp", "mount": "qwp", "retardance_tol_waves": retardance_tol})
        mounts["qwp"] = {
            "reading_deg": qwp,
            "resolution_deg": resolution,
            "repeatability_deg": repeatability,
        }
        doc["phase_mount"] = "qwp"
    return parse_bench(doc)


def test_notebook_api_functions_stay_functions() -> None:
    """``aligner.plan`` and ``aligner.predict`` keep naming the functions after the engine's
    modules are imported (module names differ from the API names)."""
    bench = load_bench("demo")
    a = aligner.plan(bench, 30, samples=0, predict=False)
    importlib.import_module("aligner.planning")
    importlib.import_module("aligner.prediction")

    b = aligner.plan(bench, 30, samples=0, predict=False)
    assert callable(aligner.predict) and not isinstance(aligner.predict, type(aligner))
    assert float(aligner.predict(bench, a.settings).amplification_linear) == pytest.approx(
        30, rel=0.01
    )
    assert isinstance(a, aligner.Plan)
    assert a.settings == b.settings


def test_round_trip_random_benches() -> None:
    """Predicting (aligner.prediction, the engine) at the planned rounded readings reproduces the
    target within the rounding error the plan reports."""
    rng = np.random.default_rng(11)
    for _ in range(6):
        bench = make_bench(
            hwp=float(rng.uniform(15, 30)),
            ana_er=10 ** rng.uniform(4.5, 6),
            src_er=10 ** rng.uniform(4.5, 7),
            offset=float(rng.uniform(-3, 3)),
            resolution=float(rng.choice([1e-4, 1e-3])),
            qwp=None if rng.random() < 0.5 else 45.0,
        )
        for exact in (False, True):
            x = float(rng.uniform(3, 25))  # well inside the extinction cap
            p = plan(bench, x, exact=exact, samples=0, predict=False)
            pred = predict(bench, p.quantized.settings)
            got = float(pred.amplification_exact if exact else pred.amplification_linear)
            assert got == pytest.approx(p.quantized.value, rel=1e-9)
            assert abs(abs(got) / x - 1) <= p.quantized.step_change + 1e-9
            assert abs(p.quantized.relative_error) <= p.quantized.step_change + 1e-9
            exact_pred = predict(bench, p.settings)
            value = exact_pred.amplification_exact if exact else exact_pred.amplification_linear
            assert abs(float(value)) == pytest.approx(x, rel=1e-9)


def test_exact_target_matches_published_all_orders_formula() -> None:
    """Pure states, A^2 = 1: <q> = g Re A_w / D, D = (1+|A_w|^2)/2 + (1-|A_w|^2)/2 e^{-g^2/(2
    sigma^2)} (non-perturbative response; Kofman, Ashhab & Nori, Phys. Rep. 520, 43 (2012)).
    With A_w = cot(eps) in the crossed case, the planned eps must give <q>/g = X."""
    g, sigma = 1.0, 20.0
    bench = make_bench(ana_er=math.inf, src_er=math.inf, sigma=sigma, g=g)
    for x in (3.0, 8.0, 15.0):  # the pointer caps <q>/g near sigma/g = 20
        r = readings_for_amplification(bench, x, exact=True)
        aw = 1.0 / math.tan(math.radians(r["ana"] - 135.0))
        e = math.exp(-(g**2) / (2 * sigma**2))
        d = (1 + aw**2) / 2 + (1 - aw**2) / 2 * e
        assert aw / d == pytest.approx(x, rel=1e-9)


def test_weak_value_and_imaginary_targets_on_demo() -> None:
    bench = load_bench("demo")
    p = plan(bench, weak_value=15 - 20j, samples=0, predict=False)
    w = complex(predict(bench, p.settings).weak_value)
    assert w == pytest.approx(15 - 20j, rel=1e-9)
    p = plan(bench, 25, axis="im", samples=0, predict=False)
    w = complex(predict(bench, p.settings).weak_value)
    assert abs(w.imag) == pytest.approx(25, rel=1e-9)
    assert abs(w.real) < 1e-7


def test_branches_default_nearest_and_choice() -> None:
    bench = make_bench()  # analyzer at 136 deg, null at 135 deg and 315 deg
    p = plan(bench, 10, samples=0, predict=False)
    weak = [b for b in p.branches if b.regime == "weak"]
    # both sides of the null: the nulls at 135 and 315 deg are one optical setting
    assert len(weak) == 2
    assert all(len(b.equivalent_readings) == 2 for b in weak)
    assert p.chosen == 0 and p.branch.side == "high"
    assert p.branch.distance_deg == min(b.distance_deg for b in weak)
    assert "nearest" in p.reason
    other = plan(bench, 10, branch=1, samples=0, predict=False)
    assert other.settings != p.settings and "requested" in other.reason
    with pytest.raises(InputError, match="branch"):
        plan(bench, 10, branch=99, samples=0, predict=False)
    inner = [b for b in p.branches if b.regime == "extinction floor"]
    assert inner and all(abs(b.imbalance_deg) < 0.1 for b in inner)


def test_sensitivity_one_percent() -> None:
    bench = make_bench()
    p = plan(bench, 20, samples=0, predict=False)
    s = {x.mount: x for x in p.sensitivity}["ana"]
    moved = predict(
        bench, {"ana": p.settings["ana"] + math.copysign(s.reading_for_1pct_deg, s.derivative)}
    )
    assert float(moved.amplification_linear) == pytest.approx(20 * 1.01, rel=2e-4)


@pytest.mark.parametrize(
    ("bench_kw", "target", "limit"),
    [
        ({"ana_er": 1e4, "src_er": 1e8}, {"amplification": 80.0}, "extinction"),
        (
            {"ana_er": 1e9, "src_er": 1e9, "sigma": 20.0, "g": 1.0},
            {"amplification": 30.0, "exact": True},
            "pointer",
        ),
        ({"resolution": 0.2}, {"amplification": 40.0}, "resolution"),
        ({"travel": (136.5, 137.5)}, {"amplification": 10.0}, "travel"),
        ({"ana_er": 1e4}, {"leak_rate": 1e-7}, "extinction"),
        ({}, {"leak_rate": 0.99}, "transmission"),
    ],
)
def test_infeasible_targets_name_the_limit(
    bench_kw: dict[str, Any], target: dict[str, Any], limit: str
) -> None:
    bench = make_bench(**bench_kw)
    with pytest.raises(InfeasibleTarget) as err:
        plan(bench, samples=0, predict=False, **target)
    assert err.value.limit == limit
    assert limit in str(err.value)
    assert err.value.achievable is not None


def test_pointer_limit_value() -> None:
    """<q>max = g / sqrt(1 - e^{-g^2/sigma^2}) for real A_w (physics.md, from the all-orders
    response; Kofman, Ashhab & Nori, Phys. Rep. 520, 43 (2012))."""
    bench = make_bench(ana_er=1e12, src_er=1e12, sigma=20.0, g=1.0)
    with pytest.raises(InfeasibleTarget) as err:
        plan(bench, 30.0, exact=True, samples=0, predict=False)
    assert err.value.achievable == pytest.approx(1 / math.sqrt(-math.expm1(-1 / 400)), rel=1e-3)


def test_bad_arguments() -> None:
    bench = make_bench()
    with pytest.raises(InputError, match="exactly one target"):
        plan(bench, 10, leak_rate=1e-3)
    with pytest.raises(InputError, match="amplification"):
        plan(bench, -5)
    with pytest.raises(InputError, match="axis"):
        plan(bench, 5, axis="x")
    with pytest.raises(InputError, match="two mounts"):
        plan(bench, weak_value=3 + 4j)
    with pytest.raises(InputError, match="unknown mount"):
        plan(bench, 5, free=("nope",))


def test_monte_carlo_agrees_with_first_order_for_small_errors() -> None:
    """For small errors the Monte Carlo standard deviation equals linear propagation of
    uncertainty (JCGM 100:2008, Guide to the expression of uncertainty in measurement, law of
    propagation of uncertainty; a uniform error of half-width a has variance a^2/3)."""
    bench = make_bench(
        qwp=45.0, repeatability=2e-4, offset_err=1e-4, retardance_tol=2e-5, resolution=1e-5
    )
    p = plan(bench, 20, samples=100_000, predict=False)
    tol = p.tolerance
    assert tol is not None
    assert tol.figure.std == pytest.approx(tol.first_order_std, rel=0.02)
    assert tol.figure.median == pytest.approx(p.branch.value, rel=1e-3)
    assert set(tol.by_source) == {
        "ana repeatability",
        "ana offset",
        "qwp repeatability",
        "pre[0] plate retardance",
        "qwp plate retardance",
    }
    assert tol.dominant == max(tol.by_source, key=tol.by_source.get)
    assert tol.figure.low95 < tol.figure.low68 < tol.figure.median < tol.figure.high68
    assert tol.figure.high68 < tol.figure.high95


def test_gaussian_errors_68_percent_half_width_is_one_sigma() -> None:
    """Normal distribution: the central 68.27 % interval is +-1 sigma (any statistics text;
    scipy.stats.norm.cdf(1) - norm.cdf(-1) = 0.6827)."""
    bench = make_bench(repeatability=3e-4, offset_err=2e-4, resolution=1e-5)
    p = plan(bench, 15, samples=100_000, predict=False)
    tol = p.tolerance
    assert tol is not None
    assert tol.figure.half_width68 == pytest.approx(tol.first_order_std, rel=0.02)


def test_no_declared_errors_gives_no_spread() -> None:
    p = plan(make_bench(), 10, samples=2000, predict=False)
    assert p.tolerance is not None and p.tolerance.dominant is None
    assert p.tolerance.figure.half_width68 == 0.0


def test_plan_document_and_message() -> None:
    bench = load_bench("demo")
    p = plan(bench, 40, samples=5000)
    doc = p.to_dict()
    for key in ("readings", "branches", "predict", "sensitivity", "tolerance"):
        assert key in doc
    assert doc["predict"]["amplification"]["linear"] == pytest.approx(40, rel=1e-9)
    assert set(doc["readings"]) == {"analyzer", "pre_qwp"}
    assert "laser safety officer" in p.message
    assert f"{p.quantized.settings['analyzer']:.6g}" in p.message


def test_branches_fold_readings_180_deg_apart() -> None:
    """Polarizers and waveplates repeat after 180 deg of element angle (a projector and a
    retarder Jones matrix are unchanged by theta -> theta + pi; Hecht, Optics, 5th ed. 2017,
    ch. 8): one branch per optical setting, each equivalent reading predicting the same."""
    bench = make_bench(qwp=45.0, travel=(-170.0, 350.0))
    p = plan(bench, 12, samples=0, predict=False)
    readings = [r for b in p.branches for r in b.equivalent_readings]
    for b in p.branches:
        first = b.equivalent_readings[0]
        assert first == dict(b.settings)
        assert b.distance_deg == min(
            math.dist([r[n] for n in p.unknowns], [bench.mounts[n].reading_deg for n in p.unknowns])
            for r in b.equivalent_readings
        )
        w = complex(predict(bench, first).weak_value)
        for r in b.equivalent_readings[1:]:
            steps = [(r[n] - first[n]) / 180.0 for n in p.unknowns]
            assert all(abs(k - round(k)) < 1e-8 for k in steps) and any(steps)
            assert complex(predict(bench, r).weak_value) == pytest.approx(w, rel=1e-9)
    # a qwp at 45 and at -45 (135) deg are different settings: both stay as branches
    qwp = {round(b.settings["qwp"] % 180.0, 6) for b in p.branches}
    assert qwp == {45.0, 135.0}
    # distinct branches are never 180-deg copies of one another
    keys = {(b.regime, *(round(b.settings[n] % 180.0, 6) for n in p.unknowns)) for b in p.branches}
    assert len(keys) == len(p.branches)
    assert len(readings) > len(p.branches)
    doc = p.to_dict()
    assert len(doc["branches"][0]["equivalent_readings"]) == len(p.branch.equivalent_readings)


def test_mount_period_guard() -> None:
    """Every element type on a mount folds at 180 deg; an unknown type would not be folded."""
    from dataclasses import replace

    from aligner.nulls import mount_period_deg

    bench = make_bench(qwp=45.0)
    assert mount_period_deg(bench, "ana") == 180.0 and mount_period_deg(bench, "qwp") == 180.0
    odd = replace(
        bench, pre=tuple(replace(e, type="mystery") if e.mount == "qwp" else e for e in bench.pre)
    )
    assert mount_period_deg(odd, "qwp") == 360.0


@given(
    st.lists(st.floats(min_value=-1e6, max_value=1e6, allow_nan=False), min_size=1, max_size=300)
)
def test_spread_percentiles_are_numpys(values):
    # The tolerance budget's percentiles from one sort equal numpy.percentile's default
    # (linear) method bit for bit (reference: numpy.percentile, Hyndman & Fan 1996 type 7).
    from aligner.planning.tolerance import _QUANTILES, _percentiles

    v = np.asarray(values)
    assert np.array_equal(_percentiles(np.sort(v)), np.percentile(v, _QUANTILES * 100))
