"""Calibration fits: honest error bars (coverage), recovery on the simulated demo bench,
CSV errors, the leak measurement and the coupling fit."""

import math

import numpy as np
import pytest

from aligner.bench import load_bench
from aligner.errors import DataFileError
from aligner.fit.counts import Channel, Gating, measure_leak
from aligner.fit.coupling import fit_coupling
from aligner.fit.csvdata import CountScan, PointerScan, load_count_scan
from aligner.fit.leakcurve import fit_leak_curve
from aligner.fit.null import fit_null
from aligner.fit.scanmodel import (
    detected_rate,
    null_reading_deg,
    plate_element,
    with_analyzer_extinction,
    with_offset,
    with_retardance,
)
from aligner.fit.waveplate import fit_waveplate
from aligner.model import coupling_observable, forward
from aligner.physics.detection import measured_rate
from aligner.physics.weak import pointer_response
from aligner.run.simbench import true_bench

BENCH = load_bench("demo")
TRUTH = true_bench(BENCH)


def _scans(truth, mount, readings, dwell, trials, seed):
    """``trials`` Poisson scans of the true bench, drawn at once (vectorized)."""
    mu = detected_rate(truth, {mount: readings}, truth.source.photon_rate) * dwell
    return np.random.default_rng(seed).poisson(mu, size=(trials, readings.size)).astype(float)


def _coverage():
    # Coverage of +/- 1 standard error from the observed information: 68.3 % for a regular
    # maximum-likelihood problem (Wilks/Cramer-Rao asymptotics; common practice, no source);
    # 200 trials give a binomial spread of 3.3 %, so 68 % +/- 6 % is a ~2 sigma band.
    # the truth differs from the file only in what the fit is free to find
    truth = with_analyzer_extinction(with_offset(BENCH, "analyzer", 0.042), 3.0e4)
    readings = np.linspace(133.0, 137.0, 41)
    counts = _scans(truth, "analyzer", readings, 2e-2, 200, seed=11)
    true_null = null_reading_deg(truth, "analyzer", 135.0)
    true_ln_er = math.log(3.0e4)
    hit_null = hit_er = ok = 0
    for row in counts:
        fit = fit_null(BENCH, CountScan(readings, row, None, None, "sim"), dwell_s=2e-2)
        if not fit.fit.success:
            continue
        ok += 1
        hit_null += abs(fit.null_reading_deg - true_null) <= fit.null_reading_err_deg
        hit_er += abs(math.log(fit.extinction_ratio) - true_ln_er) <= fit.log_extinction_err
    return ok, hit_null / ok, hit_er / ok


def test_null_fit_coverage_of_the_null_reading():
    ok, null_cover, _ = _coverage()
    assert ok >= 180
    assert 0.62 <= null_cover <= 0.74


@pytest.mark.xfail(
    reason="open: ln ER interval over-covers (about 83 % on this design); "
    "strict, so a fix shows up as a failure to remove this mark",
    strict=True,
)
def test_null_fit_coverage_of_log_extinction():
    _, _, er_cover = _coverage()
    assert 0.62 <= er_cover <= 0.74


def test_null_fit_recovers_demo_truth():
    readings = np.linspace(131.0, 139.0, 161)
    row = _scans(TRUTH, "analyzer", readings, 0.05, 1, seed=3)[0]
    fit = fit_null(BENCH, CountScan(readings, row, None, None, "sim"), dwell_s=0.05)
    assert fit.fit.success
    true_null = null_reading_deg(TRUTH, "analyzer", 135.0)
    assert abs(fit.null_reading_deg - true_null) < 4 * fit.null_reading_err_deg
    # the file's null is off by more than the error: the fit has found something
    file_null = null_reading_deg(BENCH, "analyzer", 135.0)
    assert abs(file_null - true_null) > 5 * fit.null_reading_err_deg
    assert fit.fit.p_value > 1e-3


def test_waveplate_fit_recovers_offset_and_retardance_and_states_ambiguity():
    # truth: the plate's offset and retardance differ from the file (the fit's parameters)
    waves = plate_element(BENCH, "pre_qwp").retardance_waves + 0.004
    truth = with_retardance(with_offset(BENCH, "pre_qwp", -0.3), "pre_qwp", waves)
    readings = np.arange(0.0, 180.0, 1.0)
    row = _scans(truth, "pre_qwp", readings, 0.02, 1, seed=5)[0]
    fit = fit_waveplate(BENCH, CountScan(readings, row, None, None, "sim"), dwell_s=0.02)
    assert fit.fit.success
    assert abs(fit.fast_axis_reading_deg + 0.3) < 4 * fit.fast_axis_err_deg
    assert abs(fit.retardance_waves - waves) < 4 * fit.retardance_err_waves
    assert "90" in fit.ambiguity and "slow axis" in fit.ambiguity


def test_leak_curve_fit_finds_offset_and_floor():
    readings = np.linspace(132.0, 138.0, 121)
    row = _scans(TRUTH, "analyzer", readings, 0.05, 1, seed=8)[0]
    fit = fit_leak_curve(BENCH, CountScan(readings, row, None, None, "sim"), dwell_s=0.05)
    assert fit.fit.success
    # the true null, seen through the file's imbalance scale (same mount, sense +1)
    true_null = null_reading_deg(TRUTH, "analyzer", 135.0)
    file_null = null_reading_deg(BENCH, "analyzer", 135.0)
    shift = true_null - file_null
    assert abs(fit.imbalance_offset_deg - shift) < 4 * fit.imbalance_offset_err_deg
    assert fit.leak_floor > fit.predicted_floor  # the true bench is leakier than the file
    assert fit.verdict.status == "high"


def test_coupling_fit_exact_versus_linear():
    # A strong coupling (g = 60 um on a 250 um pointer) near the null: the exact response
    # (pointer_response, checked against physics.md values elsewhere) saturates, the linear
    # formula d<q> = g Re A_w (Jozsa, Phys. Rev. A 76, 044103 (2007)) does not.
    from dataclasses import replace

    camera = replace(TRUTH, readout=replace(TRUTH.readout, sensor="camera"))  # undiluted reading
    strong = replace(camera, coupling=replace(TRUTH.coupling, strength=60.0))
    readings = np.linspace(135.3, 137.0, 18)
    fwd = forward(strong, {"analyzer": readings})
    q = pointer_response(fwd.rho, fwd.effect, coupling_observable(strong), 60.0, 250.0).position
    err = np.full(q.shape, 0.5)
    y = q + np.random.default_rng(1).normal(0, 0.5, q.shape)
    bench = replace(camera, coupling=replace(TRUTH.coupling, strength=50.0))
    fit = fit_coupling(bench, PointerScan(readings, y, err, "sim"))
    assert abs(fit.strength - 60.0) < 4 * fit.strength_err
    assert abs(fit.linear_bias_sigma) > 3 and "biased" in fit.statement


def test_coupling_fit_of_a_pointer_read_from_the_counts_undoes_the_dark_count_dilution():
    """Read from the counted events, the mean reading is the signal photons' shift times
    their share S / (S + D) of the events (dark counts carry no shift; common practice, no
    source): S = photon rate x leak x efficiency with no dead time."""
    from dataclasses import replace

    from aligner.prediction import predict

    bench = replace(TRUTH, detector=replace(TRUTH.detector, dead_time_ns=0.0, dark_rate=400.0))
    readings = np.linspace(135.3, 137.0, 18)
    at = {"analyzer": readings}
    fwd = forward(bench, at)
    c = bench.coupling
    q = pointer_response(fwd.rho, fwd.effect, coupling_observable(bench), c.strength, 250.0)
    signal = bench.source.photon_rate * np.asarray(predict(bench, at).leak_rate) * 0.62
    diluted = q.position * signal / (signal + 400.0)
    assert np.all(signal / (signal + 400.0) < 0.95)  # a dilution the fit must see
    fit = fit_coupling(bench, PointerScan(readings, diluted, np.full(18, 1e-4), "sim"))
    assert fit.strength == pytest.approx(c.strength, rel=1e-4)


def test_dead_time_and_pulsed_inversions_round_trip():
    # Knoll, Radiation Detection and Measurement (4th ed.), dead time: n = m / (1 - m tau);
    # physics.md check m = 1e6/s, tau = 50 ns -> n = 1.0526316e6/s.
    true = 1.0526316e6
    m = float(measured_rate(true, 50e-9))
    assert m == pytest.approx(1e6, rel=1e-6)
    cw = measure_leak(round(m * 10.0), 10.0, detector=Channel(dead_time_s=50e-9))
    assert cw.signal_rate == pytest.approx(true, rel=1e-6)
    # pulsed: draw clicks for mu = 0.8 photons/pulse, eta = 0.5, and invert them
    rep, dwell, mu, eta = 1e6, 2.0, 0.8, 0.5
    clicks = np.random.default_rng(2).binomial(int(rep * dwell), 1 - math.exp(-eta * mu))
    pulsed = measure_leak(clicks, dwell, gating=Gating(rep), detector=Channel(efficiency=eta))
    # binomial spread of mu here is about 1e-3
    assert abs(pulsed.mean_photons_per_pulse - mu) < 4e-3


def test_leak_verdicts():
    high = measure_leak(400, 1.0, predicted_rate=200.0)
    assert high.verdict.status == "high" and "null has drifted" in high.verdict.text
    assert measure_leak(205, 1.0, predicted_rate=200.0).verdict.status == "consistent"


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("", "empty"),
        ("reading_deg,dwell_s\n1,2\n", "lacks column(s) counts"),
        ("reading_deg,counts\n1,2\n", "needs at least"),
        ("reading_deg,counts\n1,2\n2,x\n3,4\n4,5\n", "row 3, column 'counts'"),
        ("reading_deg,counts\n1,2\n2,-3\n3,4\n4,5\n", "row 3, column 'counts'"),
        ("reading_deg,counts\n1,2\n2,2.5\n3,4\n4,5\n", "whole numbers"),
        ("reading_deg,counts,dwell_s\n1,2,0.1\n2,3,0\n3,4,1\n4,5,1\n", "column 'dwell_s'"),
        ("reading_deg,counts\n1,2\n2\n3,4\n4,5\n", "row 3, column 'counts': the value is missing"),
    ],
)
def test_malformed_csv_gives_clear_errors(tmp_path, text, fragment):
    path = tmp_path / "scan.csv"
    path.write_text(text)
    with pytest.raises(DataFileError) as info:
        load_count_scan(path)
    assert str(path) in str(info.value) and fragment in str(info.value)
