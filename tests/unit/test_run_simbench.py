"""The simulated bench: the hidden truth, counts from the physics model, the device factory."""

import numpy as np
import pytest

from aligner.bench import load_bench
from aligner.physics.detection import measured_rate
from aligner.prediction import predict
from aligner.run.devices import open_devices
from aligner.run.simbench import SimBench, true_bench
from aligner.run.sweep import measured_leak


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


def test_true_bench_applies_the_simulation_table(bench):
    truth = true_bench(bench)
    sim = bench.simulation
    for name, offset in sim.true_offset_deg.items():
        assert truth.mounts[name].offset_deg == offset
    assert truth.analyzer.extinction_ratio == sim.true_extinction["analyzer"]
    assert truth.source.extinction_ratio == sim.true_extinction["source"]
    assert truth.pre[0].retardance_waves == pytest.approx(
        bench.pre[0].retardance_waves + sim.retardance_error_waves
    )


def test_writing_a_calibration_does_not_move_the_truth(bench, tmp_path):
    from aligner.bench import write_values

    copy = tmp_path / "bench.toml"
    copy.write_text(bench.path.read_text(encoding="utf-8"), encoding="utf-8")
    write_values(
        copy,
        {
            "mounts.analyzer.offset_deg": -0.16,
            "analyzer.extinction_ratio": 8e3,
            "pre[1].retardance_waves": 0.26,
        },
    )
    before, after = true_bench(bench), true_bench(load_bench(copy))
    assert after.mounts == before.mounts
    assert after.analyzer == before.analyzer
    assert after.pre[0] == before.pre[0]
    # the file now says 0.26 waves, the simulated plate keeps its true retardance
    assert load_bench(copy).pre[1].retardance_waves == 0.26
    assert after.pre[1].retardance_waves == before.pre[1].retardance_waves


def test_counts_follow_the_model_at_the_true_angles(bench):
    from scipy import stats

    sim = SimBench(bench, seed=3)
    sim.mounts["analyzer"].move_to(136.5)
    sim.shutter.open()
    mean = float(predict(true_bench(bench), sim.true_readings()).measured_rate)
    draws = np.array([sim.draw_counts(0.01)[0] for _ in range(400)])
    # Poisson mean test on the sum (scipy.stats reference): sum of 400 draws ~ Poisson(400 m t)
    total = draws.sum()
    p = 2 * min(
        stats.poisson.cdf(total, 400 * mean * 0.01), stats.poisson.sf(total - 1, 400 * mean * 0.01)
    )
    assert p > 1e-3
    assert sim.clock_s == pytest.approx(4.0)  # simulated time, nothing slept
    # with the shutter shut only dark counts (dead time from Knoll, 4th ed., non-paralyzable)
    sim.shutter.shut()
    dark = np.array([sim.draw_counts(1.0)[0] for _ in range(50)]).mean()
    d = bench.detector
    expected = float(measured_rate(d.dark_rate, d.dead_time_ns * 1e-9))
    assert abs(dark - expected) < 5 * np.sqrt(expected / 50)


def test_backlash_shifts_the_true_angle_and_the_counts(bench):
    sim = SimBench(bench, seed=1)
    mount = sim.mounts["analyzer"]
    mount.move_to(136.0)  # from the file reading 136 downward-free: no motion
    mount.move_to(137.0)
    mount.move_to(136.0)  # approached from above: the element stays high by the play
    assert mount.true_angle_deg() - 136.0 == pytest.approx(
        bench.mounts["analyzer"].backlash_deg, abs=0.005
    )


def test_measured_leak_interval_matches_garwood(bench):
    from scipy import stats

    # Garwood, Biometrika 28, 437 (1936): [chi2(a/2; 2k)/2, chi2(1-a/2; 2k+2)/2]; scipy.stats
    # chi2 as the reference, at the 68.3 % level the sweep uses
    k, t = 900, 1.0
    a = (1 - 0.683) / 2
    lo, hi = stats.chi2.ppf(a, 2 * k) / 2, stats.chi2.ppf(1 - a, 2 * k + 2) / 2
    d = bench.detector
    tau = d.dead_time_ns * 1e-9

    def leak(c):
        return (c / t / (1 - c / t * tau) - d.dark_rate) / (bench.source.photon_rate * d.efficiency)

    got = measured_leak(bench, k, t)
    assert (got.leak, got.low, got.high) == pytest.approx((leak(k), leak(lo), leak(hi)), rel=1e-6)
    assert measured_leak(bench, 0, t).leak == 0.0  # below the dark rate: clipped at zero


def test_open_devices_all_sim(bench):
    devices = open_devices(bench)
    assert set(devices.mounts) == set(bench.mounts)
    assert devices.counter.channels == 2 and devices.sim is not None
    assert devices.simulated_time and not devices.shutter.is_open()
    devices.wait(2.5)
    assert devices.sim.clock_s == pytest.approx(2.5)
    none = ("none", None)
    assert open_devices(bench, overrides={"pointer": none, "shutter": none}).pointer is None
    assert [r.kind for r in devices.records] == ["simulated"] * 6
    devices.close()
