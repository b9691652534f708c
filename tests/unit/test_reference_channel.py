"""The reference channel as a bench choice: the [reference] table, the analyzer's other port as
reference (simulated counts, the sweep's leak, ``aligner leak``), and honest leak-curve fits
(both channels' counts in the likelihood, verdicts at their nominal false-alarm rate)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.optimize import minimize_scalar
from scipy.stats import norm, poisson

from aligner.bench import DEMO_BENCH, load_bench
from aligner.cli import main
from aligner.errors import BenchFileError
from aligner.fit.counts import CONSISTENT_SIGMA
from aligner.fit.csvdata import CountScan
from aligner.fit.leakcurve import fit_leak_curve
from aligner.fit.likelihood import PoissonPair
from aligner.fit.scanmodel import analyzer_input
from aligner.prediction import predict
from aligner.run.simbench import SimBench
from aligner.run.sweep import measured_leak

PORT_TABLE = """[reference]
kind = "port"
efficiency = 0.55
dead_time_ns = 45.0
dark_rate = 300.0
safe_rate = 5.0e6             # the other port sees nearly the whole beam

"""


def _bench_text(reference: str | None, truth: bool = False) -> str:
    """The demo bench with another [reference] table, without its hidden truth unless
    ``truth``."""
    text = DEMO_BENCH.read_text()
    if reference is not None:
        start, end = text.index("[reference]"), text.index("# Every device")
        text = text[:start] + reference + text[end:]
    return text if truth else text[: text.index("[simulation]")]


@pytest.fixture(scope="module")
def port_bench(tmp_path_factory):
    path = tmp_path_factory.mktemp("port") / "port.toml"
    path.write_text(_bench_text(PORT_TABLE))
    return load_bench(path)


@pytest.fixture(scope="module")
def monitor_bench(tmp_path_factory):
    path = tmp_path_factory.mktemp("monitor") / "monitor.toml"
    path.write_text(_bench_text(None))
    return load_bench(path)


@pytest.mark.parametrize(
    ("table", "key", "words"),
    [
        ('kind = "port"\ndead_time_ns = 40.0\n', "reference.efficiency", "is required"),
        ('kind = "port"\nefficiency = 0.5\n', "reference.dead_time_ns", "its dead time matters"),
        (
            'kind = "port"\nefficiency = 0.5\ndead_time_ns = 40.0\nfraction = 1e-3\n',
            "reference.fraction",
            "belongs to kind = 'monitor'",
        ),
        ('kind = "monitor"\nfraction = 1e-3\nefficiency = 0.5\n', "reference.efficiency", "'port'"),
        ('kind = "none"\ndark_rate = 5.0\n', "reference.dark_rate", "does not apply"),
        ('kind = "port"\nefficiency = 1.5\ndead_time_ns = 40.0\n', "reference.efficiency", "1"),
        ('kind = "pot"\n', "reference.kind", "did you mean 'port'"),
    ],
)
def test_the_reference_table_names_the_key_and_what_is_allowed(tmp_path, table, key, words):
    path = tmp_path / "b.toml"
    path.write_text(_bench_text(f"[reference]\n{table}\n"))
    with pytest.raises(BenchFileError) as err:
        load_bench(path)
    assert err.value.key == key and words in str(err.value)


def test_a_port_reference_is_read_with_its_own_detector(port_bench):
    ref = port_bench.reference
    assert (ref.kind, ref.efficiency, ref.dead_time_ns, ref.dark_rate) == ("port", 0.55, 45, 300)
    # both ports of a lossless splitter after the analyzer's transmission take all the light
    # reaching it: the demo's waveplates lose none, so the share is the transmission
    assert float(analyzer_input(port_bench)) == pytest.approx(port_bench.analyzer.transmission)


def _port_truth(bench, reading):
    """The leak per source photon and per photon leaving the analyzer at an analyzer
    reading, and the simulated bench's two mean count rates there."""
    sim = SimBench(bench, seed=0)
    at = {**bench.readings(), "analyzer": reading}
    p = float(predict(bench, at).leak_rate)
    rates = (float(sim.expected(at).measured_rate), sim.reference_rate(at))
    return at, p, p / float(analyzer_input(bench, at)), rates


def test_the_simulated_other_port_sees_the_rest_of_the_light(port_bench):
    at, p, _, (_, other) = _port_truth(port_bench, 136.0)
    ref = port_bench.reference
    light = port_bench.source.photon_rate * (float(analyzer_input(port_bench, at)) - p)
    true = light * ref.efficiency + ref.dark_rate
    # non-paralyzable dead time (Knoll, Radiation Detection and Measurement, 4th ed.)
    assert other == pytest.approx(true / (1 + true * ref.dead_time_s), rel=1e-12)
    sim = SimBench(port_bench, seed=0)
    assert sim.reference_rate(at, exposed=False) == pytest.approx(ref.dark_rate, rel=1e-3)


def test_the_port_leak_covers_the_prediction_on_simulated_counts(port_bench):
    """The sweep's leak per source photon from the two ports: its 68.3 % interval covers the
    simulated truth in 68 +/- 3.5 % of 300 draws (binomial spread 2.7 %; common practice, no
    source)."""
    at, p, _, rates = _port_truth(port_bench, 135.6)
    draws = np.random.default_rng(5).poisson(np.array(rates) * 0.5, size=(300, 2))
    hits = 0
    for k, r in draws:
        m = measured_leak(port_bench, int(k), 0.5, int(r), at)
        hits += m.low <= p <= m.high
    assert 0.645 <= hits / 300 <= 0.715


def test_aligner_leak_with_a_port_reference_matches_the_prediction(port_bench, capsys):
    _, _, per_analyzer, rates = _port_truth(port_bench, 136.2)
    residuals = []
    for k, r in np.random.default_rng(3).poisson(np.array(rates) * 2.0, size=(8, 2)):
        args = ["leak", "--counts", str(k), "--dwell", "2", "--reference", str(r)]
        assert (
            main([*args, "--bench", str(port_bench.path), "--set", "analyzer=136.2", "--json"]) == 0
        )
        doc = json.loads(capsys.readouterr().out)
        assert doc["predicted_leak"] == pytest.approx(per_analyzer, rel=1e-12)
        assert doc["reference_text"].startswith("port reference")
        assert doc["leak_verdict"] == doc["verdict"]
        residuals.append(doc["verdict"]["residual_sigma"])
    # eight draws of a standard normal (the verdict's residual): all within 3.5 sigma, and
    # their mean within 3.5 / sqrt(8) of zero (common practice, no source)
    assert max(map(abs, residuals)) < 3.5 and abs(np.mean(residuals)) < 3.5 / math.sqrt(8)
    # the other port's dead time is its own: with the signal detector's, the leak moves
    args = ["leak", "--counts", str(k), "--dwell", "2", "--reference", str(r), "--json"]
    assert main([*args, "--bench", str(port_bench.path), "--reference-dead-time-ns", "22"]) == 0
    assert json.loads(capsys.readouterr().out)["leak"] != pytest.approx(doc["leak"], rel=1e-3)


def test_aligner_leak_refuses_a_reference_kind_the_bench_does_not_describe(capsys):
    args = ["leak", "--counts", "100", "--dwell", "1", "--reference", "1000"]
    assert main([*args, "--bench", "demo", "--reference-kind", "port"]) == 2
    err = capsys.readouterr().err
    assert "--reference-kind port" in err and "kind = 'monitor'" in err


def test_engine_errors_are_named_by_the_option_that_gave_the_value(capsys):
    # 5e7 counts in 1 s leave no live time with a 50 ns dead time (the counter cannot show it)
    assert main(["leak", "--counts", "50000000", "--dwell", "1", "--dead-time-ns", "50"]) == 2
    err = capsys.readouterr().err
    assert "--counts leaves no live time" in err and "50 ns" in err


def test_poisson_pair_profile_and_derivatives_agree_with_numerical_ones():
    # The profile over the intensity, maximised numerically by scipy.optimize, and the first
    # and second derivatives of -ln L_profile by central differences (common practice).
    rng = np.random.default_rng(0)
    u = rng.uniform(50, 500, 6)
    pair = PoissonPair(
        counts=rng.poisson(u * 1.1 + 20).astype(float),
        reference=rng.poisson(1e4 * 1.1 + 30, 6).astype(float),
        b=np.full(6, 20.0),
        c0=np.full(6, 1e4),
        c1=np.full(6, -2.0),
        e=np.full(6, 30.0),
    )

    def nll(ui, i):
        def at(lam):
            mu, nu = ui * lam + 20.0, (1e4 - 2.0 * ui) * lam + 30.0
            return -(poisson.logpmf(pair.counts[i], mu) + poisson.logpmf(pair.reference[i], nu))

        return minimize_scalar(
            at, bounds=(0.0, 5.0), method="bounded", options={"xatol": 1e-12}
        ).fun

    d1, d2 = pair.nll_derivatives(u)
    residuals = pair.residuals(u)
    for i in range(6):
        saturated = -(poisson.logpmf(pair.counts[i], pair.counts[i]) +
                      poisson.logpmf(pair.reference[i], pair.reference[i]))  # fmt: skip
        assert residuals[i] ** 2 == pytest.approx(2 * (nll(u[i], i) - saturated), abs=1e-6)
        h = 1e-3 * u[i]
        up, mid, down = (nll(u[i] + s * h, i) for s in (1, 0, -1))
        assert d1[i] == pytest.approx((up - down) / (2 * h), rel=1e-4, abs=1e-7)
        assert d2[i] == pytest.approx((up - 2 * mid + down) / h**2, rel=2e-3)


def _simulated_scans(bench, seeds, dwell=0.5):
    """Counts of the simulated bench (no hidden errors) along a 12-point schedule from 0.2 to
    2 deg past the null, both channels, one row per seed."""
    sim = SimBench(bench, seed=0)
    readings = 135.0 + np.linspace(0.2, 2.0, 12)
    rates = []
    for r in readings:
        at = {**bench.readings(), "analyzer": float(r)}
        rates.append((float(sim.expected(at).measured_rate), sim.reference_rate(at)))
    draws = np.random.default_rng(seeds).poisson(np.array(rates) * dwell, (seeds, 12, 2))
    return [
        CountScan(readings, d[:, 0].astype(float), np.full(12, dwell), d[:, 1].astype(float), "s")
        for d in draws
    ]


@pytest.mark.parametrize("which", ["monitor", "port"])
def test_leak_curve_verdicts_keep_their_false_alarm_rate(which, monitor_bench, port_bench):
    """200 simulated runs of a bench without hidden errors: the floor verdict says
    'consistent' unless |z| > 2, so its false-alarm rate is 2 (1 - Phi(2)) = 4.55 %
    (scipy.stats.norm); the count over 200 seeds is binomial, and must lie within 3 of its
    standard deviations (2.95) of the expected 9.1. The deviance per degree of freedom
    averages 1 (chi-squared, Wilks' theorem; Cowan, Statistical Data Analysis, 1998, ch. 9)
    within 3 standard errors of the mean (sd of deviance/dof here ~0.5)."""
    bench = monitor_bench if which == "monitor" else port_bench
    fits = [fit_leak_curve(bench, scan) for scan in _simulated_scans(bench, 200)]
    alarms = sum(f.verdict.status != "consistent" for f in fits)
    rate = 2 * norm.sf(CONSISTENT_SIGMA)
    expected, spread = 200 * rate, math.sqrt(200 * rate * (1 - rate))
    assert abs(alarms - expected) <= 3 * spread
    reduced = np.array([f.fit.deviance / f.fit.dof for f in fits])
    assert abs(reduced.mean() - 1) <= 3 * reduced.std() / math.sqrt(200)
    assert "own Poisson noise" in fits[0].reference
