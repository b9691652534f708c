"""What the bench can show and why: targets beyond the combined limit (plan, sweep), infeasible
targets with numbers, the floor a null search leaves (never the analyzer's extinction), the
folding of ideal half-wave plates, the bench keys new with the measurement physics and the
README's table of every key."""

from __future__ import annotations

import copy
import math
import re
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from aligner.bench import DEMO_BENCH, load_bench, parse_bench
from aligner.errors import BenchFileError, InfeasibleTarget
from aligner.fit.csvdata import CountScan
from aligner.fit.null import fit_null
from aligner.fit.scanmodel import detected_rate, null_reading_deg, post_probability
from aligner.nulls import mount_period_deg
from aligner.planning import plan
from aligner.prediction import beyond_limit, limits, predict
from aligner.prediction.advice import dark_count_rate_for
from aligner.run.schedule import parse_schedule
from aligner.run.sweep import plan_warnings

ROOT = Path(__file__).resolve().parents[2]


def cube_bench(analyzer_er: float = 1000.0, source_er: float = 1e5) -> object:
    """Source H at the given extinction, ideal half-wave plate to D, analyzer near crossed."""
    return parse_bench(
        {
            "wavelength_nm": 800.0,
            "imbalance_mount": "analyzer",
            "source": {"photon_rate": 1e6, "extinction_ratio": source_er},
            "pre": [{"type": "hwp", "angle_deg": 22.5}],
            "coupling": {"pointer_sigma": 1.0, "strength": 1e-4},
            "analyzer": {"mount": "analyzer", "extinction_ratio": analyzer_er},
            "detector": {},
            "mounts": {
                "analyzer": {
                    "reading_deg": 136.0,
                    "resolution_deg": 1e-6,
                    "travel_deg": [0.0, 350.0],
                }
            },
        }
    )


# -- targets beyond the bench's limits ----------------------------------------------------------


def test_infeasible_extinction_targets_say_how_much():
    # issue example: target 30 with a cube analyzer of extinction 1000 needs about 3,730
    # (3,736 exact, test_measurement.py); for 200 the source polarizer alone caps at 158.
    with pytest.raises(InfeasibleTarget) as info:
        plan(cube_bench(), 30.0, samples=0)
    text = str(info.value)
    assert "analyzer of extinction ratio at least 3,736 (now 1,000)" in text
    assert "the analyzer caps first" in text
    with pytest.raises(InfeasibleTarget) as info:
        plan(cube_bench(analyzer_er=1e7), 200.0, samples=0)
    text = str(info.value)
    assert "the source polarizer caps first" in text and "158.1" in text
    assert "source polarizer of extinction ratio at least" in text


def test_plan_warns_beyond_the_combined_limit_and_names_dark_counts():
    # issue: the demo's limit with dark counts is 52; a plan for 80 went through silently.
    bench = load_bench("demo")
    lim = limits(bench)
    assert lim.max_amplification == pytest.approx(52.07, abs=0.05)
    p = plan(bench, 80.0, samples=0)
    assert p.warnings[0].startswith("Warning: an amplification of 80 lies beyond")
    assert "What eats the gain: dark counts" in p.warnings[0]
    assert p.to_dict()["warnings"][0] == p.warnings[0]
    assert plan(bench, 40.0, samples=0).warnings == ()


def test_photon_rate_advice_lifts_the_dark_count_limit():
    # Derived (advice.py): the dark-count cap R/(2 sqrt(D (R + D))) grows with the photon rate;
    # at the rate the advice names, the limits' own scan (brute force) reaches the target.
    bench = load_bench("demo")
    cap = limits(bench).mechanisms["dark counts"].max_amplification
    rate = dark_count_rate_for(80.0, cap, bench.source.photon_rate)
    brighter = replace(bench, source=replace(bench.source, photon_rate=rate))
    assert limits(brighter).mechanisms["dark counts"].max_amplification == pytest.approx(
        80.0, rel=1e-3
    )
    text = beyond_limit(bench, limits(bench), 80.0)
    assert f"{rate:.3g}/s" in text


def test_sweep_names_targets_beyond_the_limit_before_it_starts():
    bench = load_bench("demo")
    beyond = plan_warnings(bench, parse_schedule("amplification:20:80:3"))
    assert len(beyond) == 1 and beyond[0].startswith("amplification:20:80:3: ")
    assert "an amplification of 80 lies beyond" in beyond[0] and "measures it," in beyond[0]
    assert "dark counts" in beyond[0]
    two = plan_warnings(bench, parse_schedule("amplification:55:80:2"))[0]
    assert "of 80 lies beyond" in two and "So does 55." in two and "measures them," in two
    assert plan_warnings(bench, parse_schedule("amplification:5:40:4")) == ()
    assert plan_warnings(bench, parse_schedule("linear:0.2:2.0:4")) == ()


def test_limit_explanation_uses_the_combined_leak():
    bench = cube_bench(analyzer_er=3e4, source_er=1e5)
    text = limits(bench).explanation
    assert "1/(2 sqrt(d_a + d_s))" in text
    assert f"{0.5 / math.sqrt(1 / 3e4 + 1 / 1e5):.4g}" in text


# -- the floor at the null ---------------------------------------------------------------------


def test_null_fit_keeps_the_floor_apart_from_the_analyzer():
    # Truth: the analyzer is as the file says, but the source polarizer leaks 20 times more and
    # a plate is off by 0.01 wave. One analyzer scan sees only the total floor: the fit must
    # report it, bound the analyzer from below, and write no extinction ratio.
    bench = load_bench("demo")
    truth = replace(bench, source=replace(bench.source, extinction_ratio=1e4))
    truth = replace(
        truth, pre=tuple(replace(e, retardance_waves=e.retardance_waves + 0.01) for e in truth.pre)
    )
    readings = np.linspace(134.0, 136.0, 81)
    mu = detected_rate(truth, {"analyzer": readings}, truth.source.photon_rate) * 0.5
    counts = np.random.default_rng(7).poisson(mu).astype(float)
    fit = fit_null(bench, CountScan(readings, counts, None, None, "sim"), dwell_s=0.5)
    assert fit.fit.success
    null = null_reading_deg(truth, "analyzer", 135.0)
    true_floor = float(post_probability(truth, {"analyzer": np.array([null])})[0])
    assert fit.floor == pytest.approx(true_floor, rel=0.1)
    assert abs(fit.floor - true_floor) < 4 * fit.floor_err + 0.02 * true_floor
    assert fit.effective_extinction_ratio < bench.analyzer.extinction_ratio
    updates = fit.bench_updates()
    assert "analyzer.extinction_ratio" not in updates
    assert set(updates) == {
        "mounts.analyzer.offset_deg",
        "mounts.analyzer.offset_err_deg",
        "analyzer.unexplained_leak",
    }
    assert "cannot tell the analyzer's leak" in fit.attribution
    # with the unexplained leak stored, the file's model leaves the fitted floor at the null
    stored = replace(
        bench,
        analyzer=replace(bench.analyzer, unexplained_leak=updates["analyzer.unexplained_leak"]),
    )
    stored = stored.with_mounts(
        analyzer=replace(stored.mounts["analyzer"], offset_deg=fit.offset_deg)
    )
    at = {"analyzer": np.array([fit.null_reading_deg])}
    assert float(post_probability(stored, at)[0]) == pytest.approx(fit.floor, rel=1e-3)
    doc = fit.to_json()
    assert doc["floor"] == fit.floor and doc["unexplained_leak"] == fit.unexplained_leak


def test_unexplained_leak_enters_the_model_as_unpolarized_light():
    # E -> E + l 1 (derived): the leak rate grows by l Tr(rho) at any setting, and for |+>,
    # A = HV, |A_w| = sin(eps) cos(eps) / (sin^2(eps) + l) peaks near 1/(2 sqrt(l)).
    bench = cube_bench(analyzer_er=math.inf, source_er=math.inf)
    leaky = replace(bench, analyzer=replace(bench.analyzer, unexplained_leak=2e-5))
    x = {"analyzer": np.array([135.0, 140.0, 180.0])}
    grow = predict(leaky, x).leak_rate - predict(bench, x).leak_rate
    np.testing.assert_allclose(grow, 2e-5, rtol=1e-6)
    cap = limits(leaky).mechanisms["extinction"].max_amplification
    assert cap == pytest.approx(1 / (2 * math.sqrt(2e-5)), rel=1e-4)


# -- same optics folded ------------------------------------------------------------------------


def test_an_ideal_half_wave_plate_folds_at_90_deg():
    # An ideal half-wave plate turned by 90 deg swaps fast and slow axes: for a retardance of pi
    # the Jones matrix only changes sign (sympy's phase_retarder), the same optics.
    from sympy import pi, simplify
    from sympy.physics.optics.polarization import phase_retarder

    theta = 0.3
    a, b = phase_retarder(theta, pi), phase_retarder(theta + pi / 2, pi)
    assert simplify(a + b) == simplify(0 * a)
    doc = {
        "wavelength_nm": 800.0,
        "imbalance_mount": "analyzer",
        "source": {"photon_rate": 1e6},
        "pre": [{"type": "hwp", "mount": "hwp"}],
        "coupling": {"pointer_sigma": 1.0, "strength": 1e-3},
        "analyzer": {"mount": "analyzer"},
        "detector": {},
        "mounts": {
            "hwp": {"reading_deg": 22.5, "travel_deg": [-170.0, 170.0]},
            "analyzer": {"reading_deg": 136.0, "travel_deg": [-10.0, 350.0]},
        },
    }
    ideal = parse_bench(doc)
    assert mount_period_deg(ideal, "hwp") == 90.0
    assert mount_period_deg(ideal, "analyzer") == 180.0
    doc["pre"][0]["retardance_waves"] = 0.49
    assert mount_period_deg(parse_bench(doc), "hwp") == 180.0
    folded = plan(ideal, 20.0, free=("hwp",), samples=0, predict=False)
    for b in folded.branches:  # no two distinct settings are 90-deg copies of one another
        for other in folded.branches:
            if other.index != b.index and other.regime == b.regime:
                d = (b.settings["hwp"] - other.settings["hwp"]) % 90.0
                same_analyzer = abs(b.settings["analyzer"] - other.settings["analyzer"]) % 180
                assert min(d, 90 - d) > 1e-6 or min(same_analyzer, 180 - same_analyzer) > 1e-6


# -- bench files -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("changes", "key", "text"),
    [
        ({"coupling.kind": "kick", "coupling.readout": "momentum"}, "coupling.kind", "position"),
        ({"readout.lens_focal_mm": 100.0}, "readout.lens_distance_mm", "is required"),
        ({"readout.sensor_noise_rms": 0.1}, "readout.sensor_noise_rms", "camera"),
        ({"readout.split_gap_um": 5.0}, "readout.split_gap_um", "split"),
        ({"readout.dwell_s": 10.0, "readout.measure_s": 15.0}, "readout.measure_s", "dwell"),
        (
            {"coupling.readout": "momentum", "readout.detector_distance_mm": 10.0},
            "readout.detector_distance_mm",
            "position",
        ),
        (
            {"detector.mode": "pulsed", "detector.rep_rate_hz": 1e6, "detector.background_rate": 5},
            "detector.background_rate",
            "cw",
        ),
        ({"detector.dead_time_model": "sticky"}, "detector.dead_time_model", "paralyzable"),
        ({"source.type": "heralded"}, "source.photon_rate", "pair_rate x signal_efficiency"),
        ({"source.pair_rate": 1e6}, "source.pair_rate", "heralded"),
        ({"mounts.analyzer.driver": "loop://"}, "mounts.analyzer.reading_deg", "motorized"),
        ({"analyzer.unexplained_leak": -1e-5}, "analyzer.unexplained_leak", "at least 0"),
    ],
)
def test_bad_measurement_keys_name_the_key(changes, key, text):
    doc = {
        "wavelength_nm": 800.0,
        "imbalance_mount": "analyzer",
        "source": {"photon_rate": 1e6},
        "coupling": {"pointer_sigma": 1.0, "strength": 1e-3},
        "analyzer": {"mount": "analyzer"},
        "detector": {},
        "mounts": {"analyzer": {"reading_deg": 136.0}},
    }
    for dotted, value in changes.items():
        node = doc
        *path, leaf = dotted.split(".")
        for name in path:
            node = node.setdefault(name, {})
        node[leaf] = value
    if "mounts.analyzer.driver" in changes:
        del doc["mounts"]["analyzer"]["reading_deg"]
    with pytest.raises(BenchFileError) as info:
        parse_bench(doc)
    assert key in str(info.value) and text in str(info.value)


def _allowed_keys(table: str, doc: dict) -> list[str]:
    """The keys a table accepts, from the loader's own unknown-key message."""
    node = doc
    for name in filter(None, table.split(".")):
        node = node.setdefault(name, {})
    node["zz_not_a_key"] = 1
    with pytest.raises(BenchFileError) as info:
        parse_bench(doc)
    return re.search(r"allowed: ([^)]*)\)", str(info.value)).group(1).split(", ")


def test_readme_table_states_every_bench_key():
    # Bench-file defaults stated or required: every key the loader accepts is in the README's
    # bench-file table.
    import tomllib

    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    table = readme[readme.index("## Bench files") :]
    base = tomllib.loads(DEMO_BENCH.read_text(encoding="utf-8"))
    tables = ("", "source", "coupling", "readout", "analyzer", "detector", "reference")
    keys = {k for t in (*tables, "mounts.analyzer") for k in _allowed_keys(t, copy.deepcopy(base))}
    forms = ("`{}`", " {}`", "[{}]", "[{}.")
    missing = sorted(k for k in keys if not any(f.format(k) in table for f in forms))
    assert not missing, f"README's bench-file table lacks {missing}"
