"""The detector guard: whole-path prediction, shutter / dark route / refusal, count checks."""

import dataclasses
import itertools

import numpy as np
import pytest

from aligner.bench import load_bench
from aligner.errors import GuardTrip, InputError
from aligner.prediction import predict
from aligner.run.guard import DetectorGuard


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


def _samples(waypoints, step):
    return np.concatenate(
        [
            np.linspace(a, b, max(2, int(abs(b - a) / step) + 2))
            for a, b in itertools.pairwise(waypoints)
        ]
    )


def _dense_peak(bench, readings, mount, waypoints, step=0.01):
    """Independent check: the prediction on a 10x finer sampling of the executed path."""
    rates = predict(bench, {**readings, mount: _samples(waypoints, step)}).detector_rate
    return float(np.max(rates))


def test_far_move_is_bright_on_the_way_not_at_the_end(bench):
    guard = DetectorGuard(bench, has_shutter=True)
    readings = bench.readings()
    # from one null (135) to the same element angle half a turn on (315): both ends dark,
    # the analyzer passes full transmission at 225 on the way
    ends = predict(bench, {"analyzer": np.array([135.5, 315.5])}).detector_rate
    assert np.all(ends < guard.limit)
    plan = guard.plan_move({**readings, "analyzer": 135.5}, "analyzer", 315.5)
    assert plan.shut_for_move and plan.peak_rate > bench.detector.safe_rate


def test_without_shutter_takes_the_dark_equivalent_or_refuses(bench):
    guard = DetectorGuard(bench, has_shutter=False)
    readings = {**bench.readings(), "analyzer": 135.5}
    plan = guard.plan_move(readings, "analyzer", 315.5)
    assert not plan.shut_for_move and plan.target == pytest.approx(135.5)
    assert "instead of" in plan.note
    assert _dense_peak(bench, readings, "analyzer", plan.waypoints) <= bench.detector.safe_rate
    # a bright target has no dark equivalent: refused with a message that says what to do
    with pytest.raises(GuardTrip, match="no shutter"):
        guard.plan_move(readings, "analyzer", 180.0)


def test_approach_always_ends_upwards(bench):
    guard = DetectorGuard(bench, has_shutter=True)
    readings = bench.readings()
    down = guard.route("analyzer", 136.0, 135.0)
    assert down[1] < 135.0 and down[-1] == 135.0  # overshoot below, then up
    guard.moved("analyzer", 135.0)
    assert guard.route("analyzer", 135.0, 135.2) == (135.0, 135.2)
    assert guard.route("analyzer", 135.0, 135.0) == (135.0,)
    guard.forget()
    assert len(guard.route("analyzer", 135.0, 135.2)) == 3
    with pytest.raises(InputError, match="travel"):
        guard.plan_move(readings, "analyzer", 400.0)


def test_count_check_uses_the_dead_time_corrected_rate(bench):
    guard = DetectorGuard(bench, has_shutter=True)
    tau = bench.detector.dead_time_ns * 1e-9
    safe = bench.detector.safe_rate
    # measured m = n / (1 + n tau) for n = 1.01 safe_rate: Knoll, Radiation Detection and
    # Measurement (4th ed.), non-paralyzable dead time
    measured = 1.01 * safe / (1 + 1.01 * safe * tau)
    assert measured < safe  # the raw count rate alone would pass
    with pytest.raises(GuardTrip, match="safe_rate"):
        guard.check_counts(int(measured * 0.1), 0.1)
    assert guard.check_counts(int(0.5 * safe * 0.1), 0.1) == pytest.approx(
        0.5 * safe / (1 - 0.5 * safe * tau), rel=1e-4
    )


def test_no_planned_path_exposes_the_detector(bench):
    """Property: over 10^4 random moves (random starts, targets, settings of the other mounts,
    with and without a shutter), the detector is never exposed above safe_rate on the path that
    would be executed, checked on a 5x finer sampling than the guard's."""
    rng = np.random.default_rng(11)
    low, high = bench.mounts["analyzer"].travel_deg
    exposed_checked = refused = shut = 0
    for setting in range(40):
        others = {"pre_hwp": 22.5 + rng.normal(0, 2), "pre_qwp": 45 + rng.normal(0, 5)}
        guard = DetectorGuard(bench, has_shutter=bool(setting % 2))
        paths = []
        for _ in range(250):
            # half the moves near a null (dark paths), half anywhere in travel
            near = rng.random() < 0.5
            start, target = (
                rng.normal(rng.choice([135.0, 315.0]), 3, 2).clip(low + 1, high)
                if near
                else rng.uniform(low + 1, high, 2)
            )
            readings = {**bench.readings(), **others, "analyzer": float(start)}
            try:
                plan = guard.plan_move(readings, "analyzer", float(target))
            except GuardTrip:
                refused += 1
                continue
            if plan.shut_for_move:
                shut += 1
                continue
            paths.append((readings, plan.waypoints))
        if not paths:
            continue
        # one vectorized prediction over every exposed path of this setting, 0.02 deg apart
        samples = [_samples(w, 0.02) for _, w in paths]
        rates = predict(bench, {**paths[0][0], "analyzer": np.concatenate(samples)}).detector_rate
        bounds = np.cumsum([0] + [len(x) for x in samples])
        for (_, waypoints), a, b in zip(paths, bounds[:-1], bounds[1:], strict=True):
            peak = float(rates[a:b].max())
            assert peak <= bench.detector.safe_rate, (others, waypoints, peak)
            exposed_checked += 1
    assert exposed_checked + refused + shut == 10_000
    assert exposed_checked > 1000 and shut > 1000 and refused > 100  # every branch exercised


def test_headroom_and_step_are_checked(bench):
    with pytest.raises(InputError, match="headroom"):
        DetectorGuard(bench, has_shutter=True, headroom=0)
    bright = dataclasses.replace(
        bench, detector=dataclasses.replace(bench.detector, safe_rate=10.0)
    )
    guard = DetectorGuard(bright, has_shutter=True)
    with pytest.raises(GuardTrip, match="refused"):
        guard.check_point(100.0, {"analyzer": 136.0})


def test_pulsed_guard_limits_photons_not_clicks(bench_text, write_bench):
    """In pulsed mode the click rate saturates at the repetition rate however bright the pulses,
    so the guard must compare the photon exposure R (eta mu + p_d) with safe_rate."""
    from aligner.physics.detection import click_probability, pulsed_measured_rate

    text = bench_text.replace(
        "safe_rate = 1.0e6", 'safe_rate = 2.0e6\nmode = "pulsed"\nrep_rate_hz = 1.0e6'
    )
    bench = load_bench(write_bench(text))
    # the analyzer turned to transmission with a 1e8 photons/s source: far above safe_rate
    bright = dataclasses.replace(bench, source=dataclasses.replace(bench.source, photon_rate=1.0e8))
    p = predict(bright, {"ana": 45.0})
    assert float(p.detector_rate) <= 1.0e6  # clicks never exceed the repetition rate
    assert float(p.exposure_rate) > 2.0e6 and bool(p.over_safe_rate)
    guard = DetectorGuard(bright, has_shutter=True)
    # a gate full of clicks (mu >> 1) trips: the inversion of clicks per pulse gives infinity
    clicks = float(pulsed_measured_rate(click_probability(50.0, 0.5), 1.0e6, 20e-9))
    with np.errstate(divide="ignore"), pytest.raises(GuardTrip):
        guard.check_counts(int(clicks * 0.01), 0.01)


def test_the_guard_predicts_the_worst_case_of_the_stated_uncertainties():
    """A bright bench whose file offset is off by its stated error: with the file's values
    alone the guard would let the true detector see up to ~1.3 x safe_rate; at the worst case
    of the stated uncertainties no allowed reading exceeds safe_rate (the simulated truth is
    this test's reference)."""
    from dataclasses import replace

    from aligner.bench import load_bench
    from aligner.prediction import predict
    from aligner.run.guard import DetectorGuard, uncertainty_benches
    from aligner.run.simbench import true_bench

    demo = load_bench("demo")
    err, safe = 0.15, 1500.0
    bench = replace(
        demo.with_mounts(analyzer=replace(demo.mounts["analyzer"], offset_err_deg=err)),
        simulation=replace(demo.simulation, true_offset_deg={"analyzer": -err}),
        detector=replace(demo.detector, safe_rate=safe),
    )
    readings = {**bench.readings(), "analyzer": np.linspace(132.0, 138.0, 600)}
    true = np.asarray(predict(true_bench(bench), readings).exposure_rate)
    guard = DetectorGuard(bench, has_shutter=True)
    nominal = np.asarray(predict(bench, readings).exposure_rate)
    assert np.any((nominal <= guard.limit) & (true > safe))  # the file's values alone fail
    allowed = guard.rates(readings) <= guard.limit
    assert allowed.sum() > 10 and not np.any(allowed & (true > safe))
    # three mounts (offset error or repeatability) and two plate tolerances: every
    # combination of signs
    assert len(uncertainty_benches(bench)) == 2**5
    with pytest.raises(GuardTrip, match="worst case of the bench file's stated uncertainties"):
        guard.check_point(float(guard.rates({**bench.readings(), "analyzer": 138.0})), {})
