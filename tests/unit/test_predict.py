"""Predictions, limits of amplification and the SNR model on small benches of our own."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from aligner.bench import load_bench, parse_bench
from aligner.errors import InputError
from aligner.model import forward
from aligner.physics.weak import pointer_response
from aligner.prediction import (
    MECHANISMS,
    amplification,
    best_snr_imbalance,
    find_null,
    limits,
    predict,
    prediction_block,
    snr_per_sqrt_s,
    standard_snr_per_sqrt_s,
)

INF = math.inf

# Source H, half-wave plate at 22.5 deg (-> D), coupling A = HV, analyzer crossed at 135 deg.
BASE = {
    "name": "test bench",
    "wavelength_nm": 800.0,
    "imbalance_mount": "analyzer",
    "source": {"angle_deg": 0.0, "photon_rate": 1.0e6},
    "pre": [{"type": "hwp", "mount": "hwp", "retardance_waves": 0.5}],
    "coupling": {
        "observable": "HV",
        "readout": "position",
        "pointer_sigma": 1.0,
        "strength": 1e-5,
        "units": "um",
    },
    "analyzer": {"mount": "analyzer"},
    "detector": {},
    "mounts": {
        "hwp": {"reading_deg": 22.5},
        "analyzer": {"reading_deg": 136.0, "resolution_deg": 1e-7, "travel_deg": [0.0, 350.0]},
    },
}


def make_bench(**changes):
    """BASE with dotted-key changes, e.g. make_bench(**{"analyzer.extinction_ratio": 1e5})."""
    doc = copy.deepcopy(BASE)
    for dotted, value in changes.items():
        node = doc
        *path, leaf = dotted.split(".")
        for key in path:
            node = node.setdefault(key, {})
        node[leaf] = value
    return parse_bench(doc)


def test_textbook_case_through_the_bench():
    # Pre-selection 45 deg, analyzer at -45 deg + eps, A = HV: A_w = cot(eps), leak sin^2(eps)
    # (physics.md worked case; Dressel et al., Rev. Mod. Phys. 86, 307 (2014)).
    bench = make_bench()
    eps_deg = np.array([-2.0, -0.3, 0.01, 0.5, 3.0])
    p = predict(bench, {"analyzer": 135.0 + eps_deg})
    eps = np.deg2rad(eps_deg)
    np.testing.assert_allclose(p.weak_value, 1 / np.tan(eps), rtol=1e-8)
    # the pointer overlap adds a leak of order g^2/sigma^2 = 1e-10
    np.testing.assert_allclose(p.leak_rate, np.sin(eps) ** 2, rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(p.imbalance_deg, eps_deg, rtol=1e-8)
    np.testing.assert_allclose(p.amplification_linear, 1 / np.tan(eps), rtol=1e-8)
    # all-orders pure-state response (physics.md; Kofman et al., Phys. Rep. 520, 43 (2012))
    aw, x = 1 / np.tan(eps), np.exp(-(1e-5**2) / 2)
    d = (1 + aw**2) / 2 + (1 - aw**2) / 2 * x
    np.testing.assert_allclose(p.amplification_exact, aw / d, rtol=1e-6)
    np.testing.assert_allclose(p.pointer_shift, 1e-5 * p.amplification_exact)
    assert p.axis == "re" and p.units == "um"


@settings(max_examples=20, deadline=None)
@given(
    st.lists(st.floats(130.0, 140.0), min_size=1, max_size=5),
    st.lists(st.floats(0.0, 45.0), min_size=1, max_size=4),
)
def test_vectorized_predict_matches_single_readings(analyzer, hwp):
    bench = load_bench("demo")
    a = np.array(analyzer)[:, None]
    h = np.array(hwp)[None, :]
    p = predict(bench, {"analyzer": a, "pre_hwp": h})
    assert p.leak_rate.shape == (len(analyzer), len(hwp))
    for field in (
        "weak_value",
        "leak_rate",
        "amplification_exact",
        "detector_rate",
        "measured_rate",
        "imbalance_deg",
        "snr_per_sqrt_s",
        "saturated",
    ):
        assert getattr(p, field).shape == p.leak_rate.shape, field
    one = predict(bench, {"analyzer": analyzer[-1], "pre_hwp": hwp[0]})
    for field in ("weak_value", "leak_rate", "amplification_exact", "snr_per_sqrt_s"):
        assert getattr(p, field)[-1, 0] == pytest.approx(
            getattr(one, field), rel=1e-9, abs=1e-12
        ), field


def test_detector_rates_and_dead_time():
    # Non-paralyzable dead time m = n/(1 + n tau) (Knoll, Radiation Detection and Measurement).
    bench = make_bench(
        **{
            "detector.efficiency": 0.6,
            "detector.dark_rate": 200.0,
            "detector.dead_time_ns": 40.0,
            "detector.safe_rate": 1e5,
        }
    )
    p = predict(bench, {"analyzer": np.array([135.5, 170.0])})
    expected = 1e6 * p.leak_rate * 0.6 + 200.0
    np.testing.assert_allclose(p.detector_rate, expected)
    np.testing.assert_allclose(p.measured_rate, expected / (1 + expected * 40e-9))
    assert list(p.over_safe_rate) == [False, True]
    assert not p.saturated.any()  # 2.2 % dead-time loss at 5.6e5/s is not saturation
    bright = make_bench(**{"detector.dead_time_ns": 500.0, "source.photon_rate": 1e7})
    assert predict(bright, {"analyzer": 180.0}).saturated  # 83 % loss


def test_pulsed_detector():
    # Threshold detector: P(click) = 1 - (1 - p_d) exp(-eta mu) (physics.md; Lee et al.,
    # J. Mod. Opt. 51, 1517 (2004)).
    bench = make_bench(
        **{
            "detector.mode": "pulsed",
            "detector.rep_rate_hz": 1e6,
            "detector.efficiency": 0.5,
            "detector.gate_dark_probability": 1e-4,
            "source.photon_rate": 2e6,
        }
    )
    p = predict(bench, {"analyzer": np.array([137.0, 200.0])})
    mu = 2.0 * p.leak_rate
    np.testing.assert_allclose(p.detector_rate, 1e6 * (1 - (1 - 1e-4) * np.exp(-0.5 * mu)))
    assert list(p.saturated) == [False, True]


def test_momentum_readout_measures_the_imaginary_part():
    # Momentum readout: <p> = 2 g Var(p) Im A_w in the linear regime (Jozsa, PRA 76, 044103
    # (2007)); exact pure-state form <p> = g/(2 s^2) Im A_w e^{-g^2/2s^2} / D (physics.md).
    g, sigma = 0.2, 1.5
    bench = make_bench(
        **{
            "coupling.readout": "momentum",
            "coupling.strength": g,
            "coupling.pointer_sigma": sigma,
            "post": [{"type": "qwp", "mount": "qwp", "retardance_waves": 0.25}],
            "mounts.qwp": {"reading_deg": 20.0},
        }
    )
    p = predict(bench, {"analyzer": 136.0})
    aw = complex(p.weak_value)
    assert abs(aw.imag) > 1.0
    assert p.amplification_linear == pytest.approx(aw.imag)
    x = np.exp(-(g**2) / (2 * sigma**2))
    d = (1 + abs(aw) ** 2) / 2 + (1 - abs(aw) ** 2) / 2 * x
    assert p.pointer_shift == pytest.approx(g / (2 * sigma**2) * aw.imag * x / d, rel=1e-9)
    assert p.amplification_exact == pytest.approx(aw.imag * x / d, rel=1e-9)
    assert p.units == "1/um" and p.axis == "im"
    fwd = forward(bench, {"analyzer": 136.0})
    assert amplification(bench, fwd, "re", exact=False) == pytest.approx(aw.real)
    r = pointer_response(fwd.rho, fwd.effect, np.diag([1.0, -1.0]), g, sigma)
    assert amplification(bench, fwd, "re") == pytest.approx(r.position / g)
    with pytest.raises(InputError, match="allowed"):
        amplification(bench, fwd, "x")


def test_phase_readout_uses_probe_phase_spread():
    # Phase pointer: coherent probe of N photons, phase spread 1/(2 sqrt N) (common practice).
    n = 1e4
    phase = make_bench(
        **{
            "coupling": {
                "observable": "HV",
                "readout": "phase",
                "probe_photons": n,
                "strength": 2e-3,
            }
        }
    )
    a = predict(phase, {"analyzer": 135.2})
    # the base bench is ideal (pure states, A^2 = 1): the all-orders response with
    # sigma = 1/(2 sqrt N) (physics.md; Kofman et al., Phys. Rep. 520, 43 (2012))
    g, sigma = 2e-3, 1 / (2 * np.sqrt(n))
    aw = 1 / np.tan(np.deg2rad(0.2))  # textbook worked case, cot(eps)
    x = np.exp(-(g**2) / (2 * sigma**2))
    expected = aw / ((1 + aw**2) / 2 + (1 - aw**2) / 2 * x)
    assert float(a.amplification_exact) == pytest.approx(expected, rel=1e-6)
    assert float(a.amplification_exact) < 0.5 * aw  # g/sigma = 0.4: far from linear here
    assert a.units == "rad"


def test_extinction_cap_check_value():
    # |A_w| max = (ER - 1)/(2 sqrt ER) ~ sqrt(ER)/2 at tan(eps) = 1/sqrt(ER); ER = 1e5 ->
    # 158.1123 at 3.1623 mrad (physics.md, derived; related: Knee et al., PRA 87, 012115 (2013)).
    lim = limits(make_bench(**{"analyzer.extinction_ratio": 1e5}))
    ext = lim.mechanisms["extinction"]
    assert ext.max_amplification == pytest.approx(158.1123, abs=2e-4)
    assert np.deg2rad(ext.at_imbalance_deg) == pytest.approx(3.1623e-3, rel=1e-4)
    assert lim.limited_by == "extinction"
    assert "extinction" in lim.explanation


def test_extinction_cap_with_source_and_analyzer_leak():
    # Derived here (same derivation as physics.md's single-leak case): source leak d_s, analyzer
    # leak d_a, pure parts |+> and f at eps from |->, A = sigma_z:
    # A_w = (1-d_a)(1+d_s) t / ((1 + d_a d_s) t^2 + d_a + d_s), t = tan(eps);
    # maximum (1-d_a)(1+d_s) / (2 sqrt((d_a + d_s)(1 + d_a d_s))).
    da, ds = 1 / 3e4, 1 / 1e5
    bench = make_bench(**{"analyzer.extinction_ratio": 3e4, "source.extinction_ratio": 1e5})
    cap = (1 - da) * (1 + ds) / (2 * np.sqrt((da + ds) * (1 + da * ds)))
    ext = limits(bench).mechanisms["extinction"]
    assert ext.max_amplification == pytest.approx(cap, rel=1e-7)
    t = np.sqrt((da + ds) / (1 + da * ds))
    assert ext.at_imbalance_deg == pytest.approx(np.rad2deg(np.arctan(t)), rel=1e-4)


def test_pointer_limited_peak():
    # The shift cannot exceed about one pointer width: <q>max/g = 1/sqrt(1 - exp(-g^2/s^2)),
    # ~ sigma/g (physics.md; Kofman, Ashhab, Nori, Phys. Rep. 520, 43 (2012)).
    g, sigma = 0.02, 1.0
    lim = limits(make_bench(**{"coupling.strength": g}))
    ptr = lim.mechanisms["pointer"]
    assert ptr.max_amplification == pytest.approx(
        1 / np.sqrt(1 - np.exp(-(g**2) / sigma**2)), rel=1e-7
    )
    assert ptr.max_amplification == pytest.approx(sigma / g, rel=1e-3)
    aw_star = np.sqrt(1 / np.tanh(g**2 / (4 * sigma**2)))
    assert np.tan(np.deg2rad(ptr.at_imbalance_deg)) == pytest.approx(1 / aw_star, rel=1e-3)
    assert lim.limited_by == "pointer"
    assert lim.max_amplification == pytest.approx(ptr.max_amplification, rel=1e-6)


def test_dark_count_cap():
    # Derived here, no source: signal S = R sin^2(eps), dark D carries no shift, so the seen
    # shift per unit coupling is cot(eps) S/(S + D), largest R / (2 sqrt(D (R + D))).
    bench = make_bench(**{"detector.dark_rate": 500.0, "detector.efficiency": 0.5})
    rate, dark = 1e6 * 0.5, 500.0
    lim = limits(bench)
    assert lim.mechanisms["dark counts"].max_amplification == pytest.approx(
        rate / (2 * np.sqrt(dark * (rate + dark))), rel=1e-7
    )
    assert lim.limited_by == "dark counts"


def test_resolution_cap():
    # Ideal optics one mount step from the null: cot(step) (textbook case above).
    bench = make_bench(**{"mounts.analyzer.resolution_deg": 0.05})
    lim = limits(bench)
    res = lim.mechanisms["resolution"]
    assert res.max_amplification == pytest.approx(1 / np.tan(np.deg2rad(0.05)), rel=1e-7)
    assert lim.smallest_imbalance_deg == pytest.approx(0.05, rel=1e-6)
    assert lim.limited_by == "resolution"
    assert lim.at_imbalance_deg == pytest.approx(0.05, rel=1e-6)


def test_unreachable_null_is_limited_by_the_setting():
    # An elliptical pre-selection (quarter-wave plate 0.5 deg off 45 deg after D) against a
    # linear analyzer: the closest approach is an imbalance chi = 0.5 deg. Derived here, small
    # angles: A_w ~ 1/(eps + i chi), so Re A_w peaks at 1/(2 chi) = 57.3 where eps = chi, an
    # imbalance of sqrt(2) chi, whatever the optics.
    pre = [
        {"type": "hwp", "mount": "hwp", "retardance_waves": 0.5},
        {"type": "qwp", "mount": "qwp", "retardance_waves": 0.25},
    ]
    bench = make_bench(
        **{"pre": pre, "mounts.qwp": {"reading_deg": 45.5}, "analyzer.extinction_ratio": 1e9}
    )
    lim = limits(bench)
    chi = np.deg2rad(0.5)
    assert lim.limited_by == "setting" and "cannot reach a null" in lim.explanation
    assert lim.mechanisms["setting"].max_amplification == pytest.approx(1 / (2 * chi), rel=1e-3)
    assert abs(lim.at_imbalance_deg) == pytest.approx(np.sqrt(2) * 0.5, rel=1e-3)
    assert "setting" not in limits(make_bench()).mechanisms


def test_demo_limits_are_consistent():
    lim = limits(load_bench("demo"))
    assert set(lim.mechanisms) == set(MECHANISMS)
    smallest = min(m.max_amplification for m in lim.mechanisms.values())
    assert lim.max_amplification <= smallest * (1 + 1e-9)
    assert lim.mechanisms[lim.limited_by].max_amplification == smallest
    assert lim.null_reading_deg == pytest.approx(135.0, abs=1e-6)
    assert lim.step_error > 0


def test_find_null_respects_offsets_and_sense():
    bench = make_bench(
        **{
            "mounts.analyzer.offset_deg": 2.0,
            "mounts.analyzer.sense": -1,
            "mounts.analyzer.reading_deg": 40.0,
        }
    )
    # Element angle -(reading - 2) crossed at -45 deg (mod 180) -> reading 47 deg
    assert find_null(bench) == pytest.approx(47.0, abs=1e-9)


@pytest.mark.parametrize("eps_deg", [0.3, 1.0, 5.0, 20.0])
def test_snr_ratio_is_cos_imbalance(eps_deg):
    # Ideal shot-noise-limited weak regime: P_post |A_w|^2 = |<f|A|i>|^2, so the SNR ratio of
    # post-selection to the standard measurement is cos(eps) <= 1 (Ferrie & Combes, PRL 112,
    # 040406 (2014)).
    bench = make_bench(**{"coupling.strength": 1e-7})
    reading = 135.0 + eps_deg
    fwd = forward(bench, {"analyzer": reading})
    ratio = float(snr_per_sqrt_s(bench, fwd)) / standard_snr_per_sqrt_s(bench)
    assert ratio == pytest.approx(np.cos(np.deg2rad(eps_deg)), rel=1e-6)


def test_snr_independent_of_imbalance_in_weak_regime():
    # Same source (Ferrie & Combes 2014): smaller imbalance, larger amplification, same SNR.
    bench = make_bench(**{"coupling.strength": 1e-7})
    p = predict(bench, {"analyzer": 135.0 + np.array([0.05, 0.1, 0.2, 0.5])})
    assert p.amplification_exact[0] > 9 * p.amplification_exact[3]
    np.testing.assert_allclose(p.snr_per_sqrt_s, p.snr_per_sqrt_s[0], rtol=5e-5)


def test_technical_jitter_favours_post_selection():
    # Technical (unamplified) pointer noise: post-selection wins (Jordan et al.,
    # Phys. Rev. X 4, 011031 (2014)). Closed form of our noise model:
    # SNR = g A / sqrt(s^2/(N P) + j^2) versus g / sqrt(s^2/N + j^2).
    g, sigma, jit = 1e-6, 1.0, 1e-2
    bench = make_bench(**{"coupling.strength": g, "coupling.jitter_rms": jit})
    eps = np.deg2rad(2.0)
    fwd = forward(bench, {"analyzer": 137.0})
    got = float(snr_per_sqrt_s(bench, fwd))
    n, prob, aw = 1e6, np.sin(eps) ** 2, 1 / np.tan(eps)
    assert got == pytest.approx(g * aw / np.sqrt(sigma**2 / (n * prob) + jit**2), rel=1e-5)
    standard = standard_snr_per_sqrt_s(bench)
    assert standard == pytest.approx(g / np.sqrt(sigma**2 / n + jit**2), rel=1e-9)
    assert got / standard > 5


def test_best_snr_imbalance_respects_the_safe_rate():
    bench = make_bench(
        **{
            "coupling.strength": 1e-3,
            "coupling.jitter_rms": 1e-4,
            "detector.safe_rate": 2e4,
            "detector.dark_rate": 50.0,
            "analyzer.extinction_ratio": 1e5,
        }
    )
    choice = best_snr_imbalance(bench)
    assert choice.feasible
    assert choice.detector_rate <= 2e4
    p = predict(bench, {"analyzer": choice.reading_deg})
    assert float(p.snr_per_sqrt_s) == pytest.approx(choice.snr_per_sqrt_s)
    # Without post-selection the full 1e6/s would exceed the safe rate: the limited standard
    # measurement is attenuated and post-selection beats it.
    assert choice.standard_within_limits_snr_per_sqrt_s < choice.standard_snr_per_sqrt_s
    assert choice.ratio_to_standard_within_limits > 1
    assert "times the standard" in choice.message


def test_best_snr_infeasible_when_every_point_is_too_bright():
    bench = make_bench(**{"detector.safe_rate": 1e-3, "analyzer.extinction_ratio": 1e3})
    choice = best_snr_imbalance(bench)
    assert not choice.feasible and "attenuate" in choice.message


def test_prediction_block_keys_and_element_angles():
    bench = make_bench(
        **{
            "mounts.analyzer.offset_deg": 0.5,
            "mounts.analyzer.sense": -1,
            "mounts.analyzer.reading_deg": -134.0,
            "mounts.analyzer.travel_deg": [-350.0, 0.0],
        }
    )
    block = prediction_block(bench, {"analyzer": -134.2})
    assert list(block) == [
        "angles_deg",
        "imbalance_deg",
        "weak_value",
        "leak",
        "amplification",
        "units",
        "detector",
        "limit",
        "pointer",
        "snr",
        "heralded",
    ]
    assert set(block["pointer"]) == {
        "sensor",
        "method",
        "shift",
        "spread",
        "standard_shift",
        "practical_amplification",
        "reading_rate",
        "reading_fraction",
        "cross_phase_rad",
    }
    assert set(block["snr"]) == {
        "centroid_per_sqrt_s",
        "information_per_sqrt_s",
        "both_ports_per_sqrt_s",
        "standard_centroid_per_sqrt_s",
        "standard_information_per_sqrt_s",
        "switched",
        "dwell_s",
        "measure_s",
    }
    p = predict(bench, {"analyzer": -134.2})
    assert block["snr"]["centroid_per_sqrt_s"] == pytest.approx(float(p.snr_per_sqrt_s))
    assert block["pointer"]["shift"] == pytest.approx(float(p.pointer_shift))
    assert set(block["weak_value"]) == {"re", "im"}
    assert set(block["amplification"]) == {"linear", "exact"}
    assert set(block["detector"]) == {"rate", "measured_rate", "saturated", "over_safe_rate"}
    assert set(block["limit"]) == {"max_amplification", "at_imbalance_deg", "limited_by"}
    assert block["angles_deg"] == {"hwp": 22.5, "analyzer": pytest.approx(134.7)}
    # Element angle 134.7 deg is 0.3 deg short of crossed (135). The mount runs backwards, so
    # the side of the null at higher readings is the low-angle side: a positive imbalance.
    assert block["imbalance_deg"] == pytest.approx(0.3, rel=1e-8)
    assert block["limit"]["limited_by"] in MECHANISMS


def test_unknown_mount_is_an_input_error():
    with pytest.raises(InputError, match="unknown mount 'nope'"):
        predict(make_bench(), {"nope": 1.0})
    with pytest.raises(InputError, match="one number"):
        limits(make_bench(), {"analyzer": np.array([1.0, 2.0])})
