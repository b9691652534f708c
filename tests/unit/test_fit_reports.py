"""What the fits and the leak measurement report: upper limits below the dark, safety
warnings, the dead-time row, clean sigma text, goodness-of-fit warnings, the scan's mount,
the coupling against the bench file and the null search's option errors."""

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy import integrate
from scipy.stats import chi2, poisson

from aligner.bench import load_bench
from aligner.errors import DataFileError, InputError
from aligner.fit.counts import (
    Channel,
    CountedReference,
    DarkCounts,
    Gating,
    RateReference,
    compare,
    format_sigma,
    measure_leak,
)
from aligner.fit.coupling import fit_coupling
from aligner.fit.csvdata import CountScan, PointerScan, load_count_scan
from aligner.fit.null import fit_null
from aligner.fit.scanmodel import detected_rate, mount_statement
from aligner.fit.waveplate import fit_waveplate
from aligner.model import coupling_observable, forward
from aligner.physics.weak import pointer_response
from aligner.run.nullsearch import search_null
from aligner.run.simbench import true_bench
from aligner.run.station import Station

BENCH = load_bench("demo")
TRUTH = true_bench(BENCH)


def _null_counts(seed=4, dwell=0.05):
    readings = np.linspace(131.0, 139.0, 81)
    mu = detected_rate(TRUTH, {"analyzer": readings}, TRUTH.source.photon_rate) * dwell
    return readings, np.random.default_rng(seed).poisson(mu).astype(float)


def test_counts_below_the_dark_give_an_upper_limit_not_a_zero_interval():
    m = measure_leak(50, 1.0, reference=RateReference(2.28e6), dark=DarkCounts(140, 1.0))
    assert m.upper_limit and m.signal_rate == 0.0 and m.signal_rate_high > 0
    assert m.leak_high == pytest.approx(m.signal_rate_high / 2.28e6)
    # Independent check: the flat-prior posterior (Helene, Nucl. Instrum. Methods 212, 319
    # (1983); from memory) over the dark at its lower Garwood bound (Garwood, Biometrika 28,
    # 437 (1936), chi2(a; 2k)/2 from scipy.stats.chi2) integrates to 84.15 % below the limit.
    b = chi2.ppf((1 - 0.683) / 2, 2 * 140) / 2
    below = integrate.quad(lambda s: poisson.pmf(50, s + b), 0, m.signal_rate_high)[0]
    total = integrate.quad(lambda s: poisson.pmf(50, s + b), 0, 200)[0]
    assert below / total == pytest.approx(1 - (1 - 0.683) / 2, abs=1e-6)
    assert any("improbably few" in n for n in m.notes)


def test_counts_above_the_dark_keep_the_garwood_interval():
    # Garwood (1936) 68.3 % bounds for k = 500 from scipy.stats.chi2, minus the known dark.
    m = measure_leak(500, 1.0, detector=Channel(dark_rate=140.0))
    a = (1 - 0.683) / 2
    assert not m.upper_limit
    assert m.signal_rate_low == pytest.approx(chi2.ppf(a, 1000) / 2 - 140, rel=1e-9)
    assert m.signal_rate_high == pytest.approx(chi2.ppf(1 - a, 1002) / 2 - 140, rel=1e-9)


def test_pulsed_counts_below_the_dark_give_an_upper_limit():
    m = measure_leak(
        50, 1.0, dark=DarkCounts(140), gating=Gating(1e6), detector=Channel(efficiency=0.6)
    )
    assert m.upper_limit and m.signal_rate_high > 0


def test_dead_time_correction_is_reported():
    # Knoll, Radiation Detection and Measurement (4th ed.): non-paralyzable n = m / (1 - m tau).
    m = measure_leak(1_000_000, 1.0, detector=Channel(dead_time_s=50e-9))
    assert m.raw_rate == 1e6
    assert m.dead_time_corrected_rate == pytest.approx(1.0526316e6, rel=1e-7)
    assert m.to_json()["dead_time_corrected_rate"] == m.dead_time_corrected_rate


def test_rates_above_the_safe_rate_warn():
    guarded = Channel(safe_rate=1.5e6)
    bright = CountedReference("bright", 4_000_000, 1.0)  # the same detector, turned
    m = measure_leak(300, 1.0, detector=guarded, reference=bright)
    assert len(m.warnings) == 1 and "reference" in m.warnings[0]
    assert "laser safety officer" in m.warnings[0] and "attenuation" in m.warnings[0]
    computed = measure_leak(
        300, 1.0, detector=guarded, reference=RateReference(4e6, measured=False)
    )
    assert computed.warnings == ()
    dim = CountedReference("bright", 1000)
    assert measure_leak(300, 1.0, detector=guarded, reference=dim).warnings == ()


def test_sigma_text_has_no_signed_zero():
    assert format_sigma(-1e-5) == "0.0 sigma" and format_sigma(0.0) == "0.0 sigma"
    assert format_sigma(-0.04) == "0.0 sigma" and format_sigma(1.26) == "+1.3 sigma"
    assert format_sigma(math.nan) == "unknown sigma"
    assert "-0.0" not in compare(99.9999, 10.0, 100.0).text


def test_a_bad_fit_is_warned_about():
    readings, counts = _null_counts()
    good = fit_null(BENCH, CountScan(readings, counts, None, None, "sim"), dwell_s=0.05)
    assert good.fit.warning == "" and good.fit.message == "the fit converged"
    assert good.to_json()["optimizer_message"]  # the optimizer's own line kept for JSON
    # every other point doubled (a source jumping in power): the model cannot follow it
    drift = counts * np.where(np.arange(counts.size) % 2, 2.0, 1.0)
    bad = fit_null(BENCH, CountScan(readings, drift, None, None, "sim"), dwell_s=0.05)
    assert bad.fit.p_value < 0.01
    assert "does not describe the data" in bad.fit.warning
    assert bad.fit.warning in bad.to_json()["message"]


def _write_scan(path, header_extra="", row_extra=lambda i: ""):
    readings, counts = _null_counts()
    rows = enumerate(zip(readings, counts, strict=True))
    path.write_text(
        f"reading_deg,counts,dwell_s{header_extra}\n"
        + "".join(f"{r},{int(c)},0.05{row_extra(i)}\n" for i, (r, c) in rows)
    )
    return path


def test_scan_mount_column_is_checked(tmp_path):
    scan = load_count_scan(_write_scan(tmp_path / "s.csv", ",mount", lambda i: ",analyzer"))
    assert scan.mount == "analyzer"
    with pytest.raises(InputError, match="readings are of mount 'analyzer'"):
        fit_waveplate(BENCH, scan, dwell_s=0.05)  # default: the phase mount
    with pytest.raises(InputError, match="--mount 'pre_qwp'"):
        fit_waveplate(BENCH, scan, "pre_qwp", dwell_s=0.05)
    assert fit_null(BENCH, scan).mount == "analyzer"
    assert "mount column" in mount_statement(BENCH, scan, None, "analyzer")


def test_run_export_without_mount_column_is_the_imbalance_mount(tmp_path):
    path = _write_scan(tmp_path / "e.csv", ",run,index,imbalance_deg", lambda i: f",1,{i},0.0")
    scan = load_count_scan(path)
    assert scan.mount is None and scan.run_export
    with pytest.raises(InputError, match="run export"):
        fit_waveplate(BENCH, scan, dwell_s=0.05)


def test_mixed_mount_column_is_refused(tmp_path):
    path = _write_scan(tmp_path / "m.csv", ",mount", lambda i: ",analyzer" if i else ",pre_qwp")
    with pytest.raises(DataFileError, match="row 3, column 'mount'"):
        load_count_scan(path)


def test_plain_scan_states_the_assumed_mount(tmp_path):
    scan = load_count_scan(_write_scan(tmp_path / "p.csv"))
    text = mount_statement(BENCH, scan, None, "analyzer")
    assert "taken to belong to mount 'analyzer'" in text and "--mount" in text


def test_coupling_fit_is_compared_with_the_bench_strength():
    # exact pointer response (pointer_response, checked against physics.md elsewhere) at a
    # strength 10 % above the file's: the difference in sigma is (fit - file) / error.
    camera = replace(BENCH, readout=replace(BENCH.readout, sensor="camera"))  # undiluted reading
    g = BENCH.coupling.strength * 1.1
    readings = np.linspace(135.3, 137.0, 18)
    fwd = forward(camera, {"analyzer": readings})
    c = BENCH.coupling
    q = pointer_response(
        fwd.rho, fwd.effect, coupling_observable(camera), g, c.pointer_sigma
    ).position
    err = np.full(q.shape, 1e-3 * float(np.max(np.abs(q))))
    fit = fit_coupling(camera, PointerScan(readings, q, err, "sim"))
    assert fit.strength == pytest.approx(g, rel=1e-4)
    assert fit.bench_strength == c.strength
    assert fit.bench_difference_sigma == pytest.approx(
        (fit.strength - c.strength) / fit.strength_err
    )
    assert "differ" in fit.bench_comparison
    doc = fit.to_json()
    assert doc["bench_strength"] == c.strength and "bench_difference_sigma" in doc


@pytest.mark.parametrize(
    ("options", "words"),
    [
        ({"span_deg": -1.0}, ("span_deg", "--span", "> 0")),
        ({"points": 2}, ("points", "--points", ">= 5")),
        ({"max_rounds": 0}, ("max_rounds", "--rounds")),
        ({"dwell_s": 0.0}, ("dwell_s", "--dwell")),
    ],
)
def test_null_search_names_the_bad_option(options, words):
    with Station.open(BENCH, seed=1) as station, pytest.raises(InputError) as info:
        search_null(station, None, **options)
    assert all(w in str(info.value) for w in words)
    others = {"span_deg", "points", "max_rounds", "dwell_s"} - set(options)
    assert not any(f"({o}," in str(info.value) or f" {o} (" in str(info.value) for o in others)


def test_coupling_linear_statement_has_no_signed_zero():
    readings = np.linspace(135.3, 137.0, 18)
    bench = replace(BENCH, coupling=replace(BENCH.coupling, strength=1e-3))
    fwd = forward(bench, {"analyzer": readings})
    q = pointer_response(
        fwd.rho, fwd.effect, coupling_observable(bench), 1e-3, bench.coupling.pointer_sigma
    ).position
    fit = fit_coupling(bench, PointerScan(readings, q, np.full(q.shape, 1.0), "sim"))
    assert "-0.0" not in fit.statement
