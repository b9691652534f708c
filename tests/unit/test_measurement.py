"""The measurement physics inside predictions: units, the pointer as its sensor reads it, the
SNR figures and the Fisher information, readout geometry, split detectors, detectors, heralded
sources, the exact phase readout, and what a target beyond the bench's limits would need.

The physics functions have their own tests against published formulas; these check that the
prediction wires them to the bench correctly, against the physics functions called directly,
closed forms and brute-force grids (tests/unit/physics_reference.py)."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from physics_reference import (
    fisher,
    intensity,
    lens,
    post_selected_fields,
    propagate,
    trapezoid,
)

from aligner.bench import parse_bench
from aligner.errors import BenchFileError
from aligner.model import coupling_observable, forward
from aligner.physics.branches import moments
from aligner.physics.heralded import pulsed_pair_clicks
from aligner.physics.information import readout_branches
from aligner.physics.phase import back_action, phase_moments
from aligner.physics.weak import pointer_response
from aligner.prediction import limits, predict, prediction_block
from aligner.prediction.advice import extinction_cap, extinction_need
from aligner.prediction.pointer import exact_phase, is_plain
from aligner.prediction.snr import information_rate

# Source H, half-wave plate at 22.5 deg (-> D), a quarter-wave plate on a phase mount (fast
# axis at 45 deg leaves D alone), coupling A = HV, analyzer crossed at 135 deg.
BASE = {
    "name": "measurement test bench",
    "wavelength_nm": 800.0,
    "imbalance_mount": "analyzer",
    "phase_mount": "qwp",
    "source": {"angle_deg": 0.0, "photon_rate": 1.0e6},
    "pre": [
        {"type": "hwp", "mount": "hwp", "retardance_waves": 0.5},
        {"type": "qwp", "mount": "qwp", "retardance_waves": 0.25},
    ],
    "coupling": {"observable": "HV", "pointer_sigma": 1.0, "strength": 1e-3, "units": "um"},
    "analyzer": {"mount": "analyzer"},
    "detector": {"efficiency": 0.5},
    "mounts": {
        "hwp": {"reading_deg": 22.5},
        "qwp": {"reading_deg": 45.0},
        "analyzer": {"reading_deg": 136.0, "resolution_deg": 1e-7, "travel_deg": [0.0, 350.0]},
    },
}


def make_bench(**changes):
    """BASE with dotted-key changes (a value of None removes the key)."""
    doc = copy.deepcopy(BASE)
    for dotted, value in changes.items():
        node = doc
        *path, leaf = dotted.split(".")
        for key in path:
            node = node.setdefault(key, {})
        if value is None:
            node.pop(leaf, None)
        else:
            node[leaf] = value
    return parse_bench(doc)


def states(bench, readings=None):
    fwd = forward(bench, readings)
    return fwd.rho, fwd.effect, coupling_observable(bench)


# -- units ------------------------------------------------------------------------------------


def test_phase_units_give_the_same_amplification():
    # The defect: the probe's spread 1/(2 sqrt N) is in rad while strength was read in `units`,
    # so mrad gave another amplification. The same coupling in rad and in mrad must agree.
    phase = {
        "coupling.readout": "phase",
        "coupling.probe_photons": 4e6,
        "coupling.pointer_sigma": None,
    }
    rad = make_bench(**phase, **{"coupling.units": "rad", "coupling.strength": 1e-4})
    mrad = make_bench(
        **phase,
        **{"coupling.units": "mrad", "coupling.strength": 0.1, "coupling.jitter_rms": 2e-3},
    )
    with_jitter = make_bench(
        **phase,
        **{"coupling.units": "rad", "coupling.strength": 1e-4, "coupling.jitter_rms": 2e-6},
    )
    a, b, c = predict(rad), predict(mrad), predict(with_jitter)
    assert b.amplification_exact == pytest.approx(a.amplification_exact, rel=1e-12)
    assert b.pointer_shift == pytest.approx(1e3 * a.pointer_shift, rel=1e-12)
    assert b.snr_per_sqrt_s == pytest.approx(c.snr_per_sqrt_s, rel=1e-12)
    assert mrad.coupling.pointer_sigma == pytest.approx(1e3 / (2 * math.sqrt(4e6)))
    # Gaussian limit (N > 1000): the all-orders response of physics.md with sigma = 1/(2 sqrt N)
    resp = pointer_response(*states(rad), 1e-4, 1 / (2 * math.sqrt(4e6)))
    assert a.amplification_exact == pytest.approx(resp.position / 1e-4, rel=1e-9)


@pytest.mark.parametrize(
    ("readout", "units", "allowed"),
    [
        ("position", "mrad", "nm, um, mm, m"),
        ("phase", "um", "nrad, urad, mrad, rad"),
        ("position", "furlong", "nm, um"),
    ],
)
def test_unknown_units_are_refused_naming_the_key(readout, units, allowed):
    changes = {"coupling.readout": readout, "coupling.units": units}
    if readout == "phase":
        changes.update({"coupling.probe_photons": 100.0, "coupling.pointer_sigma": None})
    with pytest.raises(BenchFileError, match=r"coupling\.units") as info:
        make_bench(**changes)
    assert allowed in str(info.value)


def test_length_units_and_geometry_in_mm_agree():
    # The same deflection bench in um and in mm: distances in mm and the wavelength in nm are
    # converted into the pointer's units, so the practical amplification is the same and the
    # shift scales by 1000.
    geometry = {
        "coupling.kind": "kick",
        "coupling.strength": 0.01,
        "readout.lens_distance_mm": 80.0,
        "readout.lens_focal_mm": 150.0,
        "readout.detector_distance_mm": 120.0,
    }
    um = make_bench(**geometry, **{"coupling.pointer_sigma": 600.0, "coupling.units": "um"})
    mm = make_bench(**geometry, **{"coupling.pointer_sigma": 0.6, "coupling.units": "mm"})
    p_um, p_mm = predict(um), predict(mm)
    assert p_mm.pointer_shift == pytest.approx(1e-3 * p_um.pointer_shift, rel=1e-10)
    assert p_mm.practical_amplification == pytest.approx(p_um.practical_amplification, rel=1e-10)
    assert p_mm.leak_rate == pytest.approx(p_um.leak_rate, rel=1e-12)


# -- the pointer as read ------------------------------------------------------------------------


@pytest.mark.parametrize("readout", ["position", "momentum"])
@pytest.mark.parametrize("qwp", [45.0, 52.0])
def test_closed_form_spread_matches_the_gaussian_branches(readout, qwp):
    # The closed-form post-selected mean, spread and slope of a plain bench against the branch
    # sums of aligner.physics.branches (exact to all orders), beyond the linear regime.
    bench = make_bench(
        **{
            "coupling.readout": readout,
            "coupling.strength": 0.4,
            "analyzer.extinction_ratio": 3e3,
            "source.extinction_ratio": 1e4,
        }
    )
    assert is_plain(bench)
    readings = {"analyzer": np.array([135.3, 136.0, 140.0, 160.0]), "qwp": qwp}
    p = predict(bench, readings)
    rho, effect, a = states(bench, readings)
    m = moments(readout_branches(rho, effect, a, 0.4, 1.0, readout))
    np.testing.assert_allclose(p.pointer_shift, m.mean, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(p.pointer_spread**2, m.variance, rtol=1e-9)
    np.testing.assert_allclose(p.leak_rate, m.probability, rtol=1e-10)


def test_spread_is_the_post_selected_one_not_the_prepared_one():
    # The old model used the prepared width; near the amplification peak the post-selected
    # spread differs by tens of percent (all-orders response, physics.md; Kofman et al. 2012).
    bench = make_bench(**{"coupling.strength": 0.3})
    eps = np.deg2rad(np.array([0.05, 0.3, 1.0, 5.0, 40.0]))
    p = predict(bench, {"analyzer": 135.0 + np.rad2deg(eps)})
    assert np.max(np.abs(p.pointer_spread - 1.0)) > 0.2
    assert p.pointer_spread[-1] == pytest.approx(1.0, abs=0.03)  # far from the null


def test_centroid_snr_by_brute_force():
    # SNR = |g d<x>/dg| f / sqrt(Var_post/m + j^2): the slope by central differences of the
    # density-matrix pointer response, the spread from a grid of the post-selected intensity.
    bench = make_bench(
        **{
            "coupling.strength": 0.2,
            "coupling.jitter_rms": 0.01,
            "detector.dark_rate": 300.0,
            "detector.dead_time_ns": 50.0,
        }
    )
    reading = 135.4
    p = predict(bench, {"analyzer": reading})
    rho, effect, a = states(bench, {"analyzer": reading})
    h = 1e-5
    up, down = (pointer_response(rho, effect, a, 0.2 * (1 + s * h), 1.0) for s in (1, -1))
    slope = (up.position - down.position) / (2 * 0.2 * h)
    x = np.linspace(-30, 30, 2**12, endpoint=False)
    weights, fields = post_selected_fields(rho, effect, a, 0.2, 1.0, "shift", x)
    f = intensity(weights, fields)
    mean = trapezoid(x * f, x) / trapezoid(f, x)
    var = trapezoid((x - mean) ** 2 * f, x) / trapezoid(f, x)
    share = float(p.signal_fraction)
    m = float(p.measured_rate)
    expected = abs(0.2 * slope) * share / math.sqrt(var / m + 0.01**2)
    assert float(p.snr_per_sqrt_s) == pytest.approx(expected, rel=1e-6)


def test_fisher_information_against_a_numerical_derivative():
    # Fisher information of the post-selected events (count and readings) against a central
    # difference in g of the exact post-selected intensity on a grid (physics.md: check any
    # Fisher information against a numerical derivative of the exact distribution).
    bench = make_bench(**{"coupling.strength": 0.3, "analyzer.extinction_ratio": 2e3, "qwp": None})
    for reading in (135.2, 136.5, 150.0):
        p = predict(bench, {"analyzer": reading, "qwp": 48.0})
        rho, effect, a = states(bench, {"analyzer": reading, "qwp": 48.0})
        x = np.linspace(-30, 30, 2**12, endpoint=False)

        def density(g, rho=rho, effect=effect, a=a, x=x):
            return intensity(*post_selected_fields(rho, effect, a, g, 1.0, "shift", x))

        info = fisher(density, 0.3, x)
        got = (float(p.information_snr_per_sqrt_s) / 0.3) ** 2 / information_rate(bench)
        assert got == pytest.approx(info, rel=1e-5)


def test_both_ports_keep_the_quantum_fisher_information():
    # Pure states with real amplitudes, lossless analyzer: post-selected plus rejected events
    # carry <A^2>/sigma^2 per photon at every g (Combes, Ferrie, Jiang, Caves, PRA 89, 052117
    # (2014)); the post-selected events alone reach cos^2(eps) of the standard measurement's in
    # the linear regime (Ferrie & Combes, PRL 112, 040406 (2014)).
    bench = make_bench(**{"coupling.strength": 1e-3})
    eps_deg = np.array([0.5, 2.0, 10.0, 40.0])
    p = predict(bench, {"analyzer": 135.0 + eps_deg})
    rate = information_rate(bench)
    standard = 1e-3 * math.sqrt(rate)  # g sqrt(R <A^2>/sigma^2), sigma = 1
    np.testing.assert_allclose(p.both_ports_snr_per_sqrt_s, standard, rtol=1e-6)
    np.testing.assert_allclose(
        p.information_snr_per_sqrt_s, standard * np.cos(np.deg2rad(eps_deg)), rtol=1e-4
    )
    block = prediction_block(bench, {"analyzer": 136.0})
    assert block["snr"]["standard_information_per_sqrt_s"] == pytest.approx(standard, rel=1e-9)


def test_centroid_snr_vanishes_at_the_peak_but_the_information_does_not():
    # Beyond the linear regime the mean reading stops responding at the amplification peak:
    # the centroid's SNR falls to ~0 there while the Fisher information does not.
    bench = make_bench(**{"coupling.strength": 0.05})
    x = 135.0 + np.geomspace(1e-3, 5, 2000)
    p = predict(bench, {"analyzer": x})
    peak = int(np.argmax(p.amplification_exact))
    assert p.snr_per_sqrt_s[peak] < 0.02 * np.max(p.snr_per_sqrt_s)
    assert p.information_snr_per_sqrt_s[peak] > 0.2 * np.max(p.information_snr_per_sqrt_s)


def test_switched_snr_with_white_noise_is_the_root_second_figure_scaled():
    # White noise only (noise.py; Barnes et al. 1971 for the spectrum): n on/off cycles of dwell
    # T give shift / sqrt(2 (shot + j^2) / (n T)), the SNR per root second times sqrt(n T / 2)
    # in the linear regime.
    weak = {"coupling.strength": 1e-5, "readout.dwell_s": 0.5, "readout.measure_s": 20.0}
    bench = make_bench(**weak, **{"coupling.jitter_rms": 0.02})
    p = predict(bench)
    cycles = 20
    assert float(p.switched_snr) == pytest.approx(
        float(p.snr_per_sqrt_s) * math.sqrt(cycles * 0.5 / 2), rel=1e-6
    )
    flicker = make_bench(
        **{
            "coupling.strength": 1e-5,
            "coupling.jitter_rms": 0.02,
            "coupling.jitter_corner_hz": 5.0,
            "readout.dwell_s": 0.5,
            "readout.measure_s": 20.0,
        }
    )
    assert float(predict(flicker).switched_snr) < float(p.switched_snr)
    assert float(predict(flicker).snr_per_sqrt_s) == pytest.approx(float(p.snr_per_sqrt_s))


# -- how the pointer is read -----------------------------------------------------------------


def test_camera_read_bench_shows_no_dark_count_dilution():
    dark = {"detector.dark_rate": 2000.0, "coupling.jitter_rms": 0.0}
    counter = make_bench(**dark)
    camera = make_bench(**dark, **{"readout.sensor": "camera", "readout.sensor_efficiency": 0.5})
    x = {"analyzer": 135.0 + np.array([0.05, 0.3, 1.0])}
    pc, pm = predict(counter, x), predict(camera, x)
    assert np.all(pc.reading_fraction < 0.99)
    np.testing.assert_array_equal(pm.reading_fraction, 1.0)
    # a camera's events: photon_rate x leak x its efficiency, no dead time, no dark counts
    np.testing.assert_allclose(pm.reading_rate, 1e6 * pm.leak_rate * 0.5, rtol=1e-12)
    dark_free = predict(
        make_bench(**{"readout.sensor": "camera", "readout.sensor_efficiency": 0.5}), x
    )
    np.testing.assert_allclose(pm.snr_per_sqrt_s, dark_free.snr_per_sqrt_s, rtol=1e-12)
    assert np.all(pm.snr_per_sqrt_s > pc.snr_per_sqrt_s)
    assert "dark counts" in limits(counter).mechanisms
    assert "dark counts" not in limits(camera).mechanisms


def test_camera_noise_adds_to_the_technical_noise():
    plain = make_bench(**{"readout.sensor": "camera"})
    noisy = make_bench(**{"readout.sensor": "camera", "readout.sensor_noise_rms": 0.05})
    a, b = predict(plain), predict(noisy)
    expected = float(a.snr_per_sqrt_s) / math.sqrt(
        1 + 0.05**2 / (float(a.pointer_spread) ** 2 / float(a.reading_rate))
    )
    assert float(b.snr_per_sqrt_s) == pytest.approx(expected, rel=1e-9)


# -- readout geometry and split detectors ---------------------------------------------------------


def kick_bench(**changes):
    base = {
        "coupling.kind": "kick",
        "coupling.pointer_sigma": 600.0,
        "coupling.strength": 0.01,  # urad of tilt per unit eigenvalue
    }
    return make_bench(**{**base, **changes})


def test_kick_read_in_a_focal_plane_reads_the_momentum_exactly():
    # physics.md: in the focal plane of a lens, x = f p / k0; the kick shifts the momentum, so
    # the reading is f k <p>/k0 with the all-orders response of the kick picture, and the
    # practical amplification (Dixon et al. 2009) equals the exact amplification.
    bench = kick_bench(**{"readout.lens_distance_mm": 50.0, "readout.lens_focal_mm": 200.0})
    assert not is_plain(bench)
    p = predict(bench, {"analyzer": np.array([135.05, 136.0, 140.0])})
    k0 = 2 * np.pi / 0.8
    k = k0 * 0.01e-6
    np.testing.assert_allclose(p.pointer_shift, 200e3 * k * p.amplification_exact / k0, rtol=1e-9)
    np.testing.assert_allclose(p.practical_amplification, p.amplification_exact, rtol=1e-9)
    assert p.axis == "re"


def test_kick_at_the_waist_read_after_free_space_is_dixons_factor():
    # physics.md (derived; Dixon et al., PRL 102, 173601 (2009)): a kick at
    # the waist read after z of free space gives d<x> = -2 k sigma^2 Im A_w + (z/k0) k Re A_w,
    # against (z/k0) k without post-selection.
    z_mm = 1500.0
    bench = kick_bench(**{"readout.detector_distance_mm": z_mm})
    readings = {"analyzer": np.array([135.5, 137.0]), "qwp": np.array([60.0, 80.0])}
    p = predict(bench, readings)
    k0 = 2 * np.pi / 0.8
    aw = p.weak_value
    expected = aw.real - 2 * k0 * 600.0**2 * aw.imag / (z_mm * 1e3)
    np.testing.assert_allclose(p.practical_amplification, expected, rtol=1e-4)


def test_geometry_against_an_angular_spectrum_grid():
    # Brute force (physics_reference): the post-selected fields kicked on a grid, carried
    # 80 mm, through a 150 mm lens and 120 mm on by FFT; the mean position at the detector.
    bench = kick_bench(
        **{
            "coupling.strength": 2.0,
            "readout.lens_distance_mm": 80.0,
            "readout.lens_focal_mm": 150.0,
            "readout.detector_distance_mm": 120.0,
        }
    )
    readings = {"analyzer": 135.3, "qwp": 55.0}
    p = predict(bench, readings)
    rho, effect, a = states(bench, readings)
    k0 = 2 * np.pi / 0.8
    x = np.linspace(-6000.0, 6000.0, 2**14, endpoint=False)
    weights, fields = post_selected_fields(rho, effect, a, k0 * 2e-6, 600.0, "kick", x)
    fields = propagate(fields, x, 80e3, k0, paraxial=True)
    fields = lens(fields, x, 150e3, k0)
    fields = propagate(fields, x, 120e3, k0, paraxial=True)
    f = intensity(weights, fields)
    assert float(p.pointer_shift) == pytest.approx(trapezoid(x * f, x) / trapezoid(f, x), rel=1e-6)
    assert float(p.leak_rate) == pytest.approx(trapezoid(f, x), rel=1e-9)


def test_split_detector_reading_against_a_grid():
    # Difference over sum of the exact post-selected intensity on the two halves of a split
    # detector with a gap, calibrated with the slope at the centre of the undeflected spot,
    # sqrt(2/pi) exp(-a^2) / (w erfc(a)) with a = gap/(2 sqrt2 w) (splitdetector.py, derived).
    from scipy.special import erfc

    gap_um = 0.4
    bench = make_bench(
        **{"coupling.strength": 0.3, "readout.method": "split", "readout.split_gap_um": gap_um}
    )
    readings = {"analyzer": 135.6, "qwp": 50.0}
    p = predict(bench, readings)
    rho, effect, a = states(bench, readings)
    x = np.linspace(-30, 30, 2**14, endpoint=False)
    f = intensity(*post_selected_fields(rho, effect, a, 0.3, 1.0, "shift", x))
    right = trapezoid(np.where(x > gap_um / 2, f, 0.0), x)
    left = trapezoid(np.where(x < -gap_um / 2, f, 0.0), x)
    signal = (right - left) / (right + left)
    arg = gap_um / (2 * math.sqrt(2))
    slope = math.sqrt(2 / math.pi) * math.exp(-(arg**2)) / erfc(arg)
    assert float(p.pointer_shift) == pytest.approx(signal / slope, rel=2e-3)
    assert float(p.reading_rate) < float(p.measured_rate)  # the gap loses photons


# -- detectors and heralded sources ------------------------------------------------------------


def test_paralyzable_dead_time_afterpulsing_and_background():
    # Knoll, Radiation Detection and Measurement: paralyzable m = n exp(-n tau); afterpulses add
    # counts / (1 - p) (common practice); background light is detected with the efficiency and
    # carries no shift, like dark counts.
    bench = make_bench(
        **{
            "detector.dead_time_ns": 100.0,
            "detector.dead_time_model": "paralyzable",
            "detector.afterpulse_probability": 0.02,
            "detector.background_rate": 4000.0,
            "detector.dark_rate": 100.0,
        }
    )
    p = predict(bench, {"analyzer": 150.0})
    signal = 1e6 * float(p.leak_rate) * 0.5
    n = signal + 0.5 * 4000.0 + 100.0
    m = n * math.exp(-n * 100e-9) / (1 - 0.02)
    assert float(p.measured_rate) == pytest.approx(m, rel=1e-12)
    assert float(p.signal_fraction) == pytest.approx(signal / n * (1 - 0.02), rel=1e-12)
    assert float(bench.detector.primary_rate(m)) == pytest.approx(n, rel=1e-9)


def test_heralded_source_reads_the_pointer_from_coincidences():
    # Accidentals R_h R_d T_c (common practice); true coincidences R eta_h eta_s P eta.
    bench = make_bench(
        **{
            "source.photon_rate": None,
            "source.type": "heralded",
            "source.pair_rate": 2e6,
            "source.herald_efficiency": 0.3,
            "source.signal_efficiency": 0.4,
            "source.coincidence_window_ns": 2.0,
            "source.herald_dark_rate": 500.0,
            "detector.dark_rate": 200.0,
        }
    )
    assert bench.source.photon_rate == pytest.approx(8e5)
    p = predict(bench)
    true = 2e6 * 0.3 * 0.4 * float(p.leak_rate) * 0.5
    accidental = (2e6 * 0.3 + 500.0) * float(p.measured_rate) * 2e-9
    assert float(p.reading_rate) == pytest.approx(true + accidental, rel=1e-12)
    assert float(p.reading_fraction) == pytest.approx(true / (true + accidental), rel=1e-12)
    assert float(p.reading_fraction) > float(p.signal_fraction)  # heralding beats the dark counts
    assert information_rate(bench) == pytest.approx(8e5 * 0.5 * 0.3)
    # the source's heralded g2 (Grangier, Roger, Aspect, Europhys. Lett. 1, 173 (1986)) from
    # pulsed_pair_clicks with each window a pulse: Poisson pairs of mean R T_c, darks per window
    heralded = prediction_block(bench)["heralded"]
    clicks = pulsed_pair_clicks(2e6 * 2e-9, 0.3, 0.1, 0.1, 500 * 2e-9, 200 * 2e-9, 200 * 2e-9)
    assert heralded["g2"] == pytest.approx(float(clicks.g2), rel=1e-12)
    assert heralded["g2"] < 0.05  # single photons: far below 1
    assert heralded["true_coincidence_rate"] == pytest.approx(true, rel=1e-12)


# -- the exact phase readout ---------------------------------------------------------------------


def test_small_probe_is_read_exactly_with_the_cross_phase_compensated():
    # Below MAX_PHOTONS the probe's canonical phase in the photon-number basis (phase.py), of
    # the pre-selection with the mean cross-phase N sin(g (a_max - a_min)) cancelled; the
    # Gaussian approximation errs by more than 0.3 % near N ~ 9 with g/sigma ~ 1 (phase.py).
    changes = {
        "coupling.readout": "phase",
        "coupling.probe_photons": 9.0,
        "coupling.strength": 0.1,
        "coupling.units": "rad",
        "coupling.pointer_sigma": None,
    }
    bench = make_bench(**changes)
    assert exact_phase(bench)
    readings = {"analyzer": np.array([137.0, 150.0])}
    p = predict(bench, readings)
    rho, effect, a = states(bench, readings)
    exact = phase_moments(back_action(rho, a, -0.1, 9.0), effect, a, 0.1, 9.0)
    np.testing.assert_allclose(p.pointer_shift, exact.mean, rtol=1e-12)
    np.testing.assert_allclose(p.amplification_exact, exact.mean / 0.1, rtol=1e-12)
    gaussian = pointer_response(rho, effect, a, 0.1, 1 / 6)
    assert np.max(np.abs(exact.mean / gaussian.position - 1)) > 3e-3
    block = prediction_block(bench, {"analyzer": 137.0})
    assert block["pointer"]["cross_phase_rad"] == pytest.approx(9 * math.sin(0.2))


# -- advice with numbers ---------------------------------------------------------------------------


def model_peak(analyzer_er, source_er):
    """Brute force: the largest |Re A_w| of the ideal bench over a dense scan of the analyzer."""
    bench = make_bench(
        **{"analyzer.extinction_ratio": analyzer_er, "source.extinction_ratio": source_er}
    )
    x = 135.0 + np.geomspace(1e-4, 10.0, 200_001)
    return float(np.max(np.abs(predict(bench, {"analyzer": x}).amplification_linear)))


def test_advice_numbers_for_a_cube_analyzer():
    # A target of 30 with an analyzer of extinction 1000 (source 1e5) needs about 3,730 (the
    # first-order 1/(2 sqrt(d_a + d_s)) gives 3,734; the exact two-leak form 3,736): checked on
    # the model itself. For 200 the source polarizer alone caps the bench at 158 (physics.md:
    # ER = 1e5 -> 158.1123 for the analyzer's leak; (1 + d_s)/(2 sqrt(d_s)) = 158.1155 for the
    # source's), whatever the analyzer.
    need = extinction_need(30.0, 1000.0, 1e5)
    assert need.analyzer == pytest.approx(3730, rel=2e-3)
    assert model_peak(need.analyzer, 1e5) == pytest.approx(30.0, rel=1e-5)
    assert need.source is None and need.caps_first == "analyzer"
    high = extinction_need(200.0, 1e7, 1e5)
    assert high.caps_first == "source polarizer"
    assert high.source_alone == pytest.approx(model_peak(math.inf, 1e5), rel=1e-6)
    assert f"{high.source_alone:.4g}" == "158.1"
    assert high.analyzer is None
    assert model_peak(1e7, high.source) == pytest.approx(200.0, rel=1e-4)
    assert extinction_cap(1e5, math.inf) == pytest.approx(158.1123, rel=1e-6)


def test_lazy_fields_of_many_blocks_match_one_block(monkeypatch):
    # Many blocks evaluate the fields computed on first access block by block again; they must
    # equal the evaluation of one block.
    import aligner.prediction.core as core

    bench = make_bench(
        **{"coupling.strength": 0.2, "detector.dark_rate": 50.0, "coupling.jitter_rms": 0.01}
    )
    x = {"analyzer": np.linspace(135.1, 150.0, 11), "qwp": 47.0}
    one = predict(bench, x)
    monkeypatch.setattr(core, "BLOCK", 4)
    many = predict(bench, x)
    for name in (
        "imbalance_deg",
        "snr_per_sqrt_s",
        "pointer_spread",
        "reading_rate",
        "reading_fraction",
        "information_snr_per_sqrt_s",
        "switched_snr",
        "practical_amplification",
    ):
        np.testing.assert_allclose(getattr(many, name), getattr(one, name), rtol=1e-12)
