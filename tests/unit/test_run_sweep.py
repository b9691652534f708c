"""The sweep loop on a station: pauses on guard trips, device faults, bad input, Ctrl-C and
signals, internal errors and a full log, always with the shutter shut; bounded retries; resume."""

import dataclasses

import pytest

from aligner.bench import load_bench
from aligner.errors import DeviceTimeout, Disconnected, GuardTrip, InputError, SignalInterrupt
from aligner.run.log import RunLog
from aligner.run.schedule import PlannedPoint, parse_schedule, plan_points
from aligner.run.station import Station, StationOptions
from aligner.run.sweep import run_sweep, start_run
from aligner_drivers.sim import FunctionCounter


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


@pytest.fixture(scope="module")
def plan(bench):
    return plan_points(bench, parse_schedule("linear:0.3:1.5:6", dwell_s=0.5))


def _open(bench, retries=2, **overrides):
    return Station.open(
        bench, overrides=overrides, seed=11, options=StationOptions(retries=retries)
    )


def _start(tmp_path, station, plan):
    tmp_path.mkdir(exist_ok=True)
    log = RunLog(tmp_path / "runs.sqlite")
    return log, start_run(log, station, parse_schedule("linear:0.3:1.5:6", dwell_s=0.5), plan)


class Flaky:
    """Wraps a device method: raises ``error`` for the calls numbered in ``fail_on``."""

    def __init__(self, fn, fail_on, error):
        self.fn, self.fail_on, self.error, self.calls = fn, set(fail_on), error, 0

    def __call__(self, *args):
        self.calls += 1
        if self.calls in self.fail_on:
            raise self.error
        return self.fn(*args)


def test_complete_run_logs_every_point(tmp_path, bench, plan):
    station = _open(bench)
    devices = station.devices
    log, run = _start(tmp_path, station, plan)
    seen = []
    result = run_sweep(
        station,
        log,
        run,
        plan,
        dwell_s=0.5,
        on_point=lambda p, done, total: seen.append((p.idx, done, total)),
    )
    assert result.status == "complete" and result.points_done == 6
    assert result.shutter_shut and result.exit_code == 0
    assert seen == [(i, i + 1, 6) for i in range(6)]
    points = log.points(run)
    assert [p.idx for p in points] == list(range(6))
    assert all(p.reference is not None and p.pointer is not None for p in points)
    assert all(p.leak_lo <= p.leak <= p.leak_hi for p in points)
    assert not devices.shutter.is_open()  # left shut
    assert log.run(run).status == "complete"


def test_bright_count_trips_the_guard_then_resumes(tmp_path, bench, plan):
    station = _open(bench)
    devices = station.devices
    log, run = _start(tmp_path, station, plan)
    real = devices.counter
    calls = []

    def count(dwell):
        calls.append(dwell)
        # each point counts a 10 ms probe gate, then the rest of the dwell; the beam turns
        # bright at the third point's probe
        return (10**5, 0) if len(calls) == 5 else real.count(dwell)

    devices.counter = FunctionCounter(count, channels=2)
    result = run_sweep(station, log, run, plan, dwell_s=0.5)
    assert (result.status, result.reason, result.points_done) == ("interrupted", "guard", 2)
    assert result.exit_code == 3 and result.shutter_shut
    assert calls[:4] == pytest.approx([0.01, 0.49, 0.01, 0.49])
    assert len(calls) == 5  # stopped after the 10 ms probe: exposed for 10 ms, not the dwell
    assert not devices.shutter.is_open()
    assert "safe_rate" in log.run(run).message
    assert [e.kind for e in log.events(run)][-1] == "guard"
    devices.counter = real
    again = station.resume_sweep(log, run)
    assert again.status == "complete"
    assert [p.idx for p in log.points(run)] == list(range(6))
    assert any(e.kind == "resume" for e in log.events(run))


def test_timeouts_are_retried_then_pause(tmp_path, bench, plan):
    station = _open(bench, retries=2)
    log, run = _start(tmp_path, station, plan)
    mount = station.devices.mounts["analyzer"]
    mount.move_to = Flaky(mount.move_to, {2, 3}, DeviceTimeout("analyzer: no reply"))
    result = run_sweep(station, log, run, plan, dwell_s=0.5)
    assert result.status == "complete"
    faults = [e for e in log.events(run) if e.kind == "fault"]
    assert len(faults) == 2 and "no reply" in faults[0].message and faults[0].idx is not None

    station = _open(bench, retries=1)
    log2, run2 = _start(tmp_path / "b", station, plan)
    mount = station.devices.mounts["analyzer"]
    mount.move_to = Flaky(mount.move_to, set(range(5, 100)), DeviceTimeout("analyzer: silent"))
    result = run_sweep(station, log2, run2, plan, dwell_s=0.5)
    assert (result.status, result.reason) == ("interrupted", "device")
    assert "silent" in result.message and not station.devices.shutter.is_open()
    assert len([e for e in log2.events(run2) if e.kind == "fault"]) == 2  # 1 try + 1 retry


def test_disconnect_pauses_at_once_and_ctrl_c_pauses(tmp_path, bench, plan):
    station = _open(bench)
    log, run = _start(tmp_path, station, plan)
    devices = station.devices
    # each point counts two gates (a 10 ms probe, then the rest): call 3 is point 1's probe
    devices.counter.count = Flaky(devices.counter.count, {3}, Disconnected("counter gone"))
    result = run_sweep(station, log, run, plan, dwell_s=0.5)
    assert (result.reason, result.points_done) == ("device", 1)
    station = _open(bench)
    station.devices.counter.count = Flaky(station.devices.counter.count, {1}, KeyboardInterrupt())
    result = run_sweep(station, log, run, plan, dwell_s=0.5)
    assert (result.reason, result.points_done, result.exit_code) == ("interrupt", 1, 130)
    assert log.run(run).status == "interrupted" and "Ctrl-C" in log.run(run).message
    assert _open(bench).resume_sweep(log, run).status == "complete"
    assert len(log.points(run)) == 6


def test_a_bright_point_is_refused_before_anything_moves_or_is_logged(tmp_path, bench, plan):
    station = _open(bench)
    bad = (*plan, PlannedPoint(6, 0, 45.0, {**plan[0].readings, "analyzer": 180.0}))
    log = RunLog(tmp_path / "runs.sqlite")
    schedule = parse_schedule("linear:0.3:1.5:6", dwell_s=0.5)
    with pytest.raises(GuardTrip, match="point 6"):
        station.start_sweep(log, schedule, plan=bad)
    assert station.devices.mounts["analyzer"].move_log == []
    assert log.runs() == []  # no run that could never finish


def test_without_shutter_the_guard_keeps_far_moves_dark(tmp_path, bench):
    # start the simulated analyzer half a turn away: without a shutter the guard must route
    # the move to the equivalent reading or refuse; the counter never sees a bright gate
    far = dataclasses.replace(
        bench,
        mounts={
            **bench.mounts,
            "analyzer": dataclasses.replace(bench.mounts["analyzer"], reading_deg=316.0),
        },
    )
    plan = plan_points(bench, parse_schedule("list:0.5", dwell_s=0.5))
    station = _open(far, shutter=("none", None))
    station.use_bench(bench)
    log, run = _start(tmp_path, station, plan)
    result = run_sweep(station, log, run, plan, dwell_s=0.5)
    assert result.status == "complete" and not result.shutter_shut
    point = log.points(run)[0]
    assert point.reading_deg == pytest.approx(plan[0].readings["analyzer"] + 180.0, abs=0.01)
    assert point.commanded["analyzer"] == pytest.approx(plan[0].readings["analyzer"] + 180.0)
    assert any("instead of" in e.message for e in log.events(run))


def test_stop_request_pauses_before_the_next_point_and_resumes(tmp_path, bench, plan):
    station = _open(bench)
    log, run = _start(tmp_path, station, plan)

    def after(point, done, total):
        if done == 2:  # e.g. the desk's pause key, pressed during the second point
            station.request_stop()

    result = run_sweep(station, log, run, plan, dwell_s=0.5, on_point=after)
    assert result.status == "interrupted" and result.reason == "operator"
    assert result.points_done == 2
    assert not station.devices.shutter.is_open()
    assert "operator" in log.run(run).message
    again = station.resume_sweep(log, run)
    assert again.status == "complete"
    assert [p.idx for p in log.points(run)] == list(range(6))


def test_run_snapshot_keeps_in_memory_readings(tmp_path, bench, plan):
    from aligner.bench import with_values
    from aligner.run.sweep import resume_plan

    moved = with_values(
        bench, {"mounts.pre_qwp.reading_deg": 45.25, "mounts.analyzer.offset_deg": 0.04}
    )
    log = RunLog(tmp_path / "runs.sqlite")
    station = _open(moved)
    run = start_run(log, station, parse_schedule("linear:0.3:1.5:6", dwell_s=0.5), plan)
    snapshot, _ = resume_plan(log.run(run))
    assert snapshot.mounts["pre_qwp"].reading_deg == 45.25
    assert snapshot.mounts["analyzer"].offset_deg == 0.04
    assert "# Demo bench" in log.run(run).bench_toml  # comments kept


def test_leak_is_normalised_by_the_reference_monitor(bench):
    """With a monitor reference the leak is S / (R / f) per source photon: a source that dims
    by half halves both channels and leaves the leak alone."""
    from aligner.run.sweep import measured_leak

    d = bench.detector
    f = bench.reference.fraction
    dwell, leak_true = 1.0, 4e-4
    for photon_rate in (4.0e6, 2.0e6):  # the file says 4e6; the source dims to 2e6
        post = round(photon_rate * leak_true * d.efficiency + d.dark_rate)  # no dead time here
        ref = round(photon_rate * f + bench.reference.dark_rate)
        m = measured_leak(
            dataclasses.replace(bench, detector=dataclasses.replace(d, dead_time_ns=0.0)),
            post,
            dwell,
            ref,
        )
        assert m.low < leak_true < m.high
        assert m.leak == pytest.approx(leak_true, rel=0.01)
    nominal = measured_leak(bench, post, dwell)  # without the reference: the file's photon rate
    assert nominal.leak == pytest.approx(leak_true / 2, rel=0.05)


def _sweep_with_counter_fault(tmp_path, bench, plan, error):
    """A sweep whose counter raises ``error`` at the second point's probe gate."""
    station = _open(bench)
    log, run = _start(tmp_path, station, plan)
    station.devices.counter.count = Flaky(station.devices.counter.count, {3}, error)
    return station, log, run


@pytest.mark.parametrize(
    ("error", "reason", "code"),
    [
        (SignalInterrupt(15), "interrupt", 143),
        (InputError("dwell below the counter's 1 ms step"), "input", 2),
        (DeviceTimeout("counter: no reply"), "device", 3),
    ],
)
def test_every_ending_shuts_the_shutter_and_leaves_the_run_resumable(
    tmp_path, bench, plan, error, reason, code
):
    station, log, run = _sweep_with_counter_fault(tmp_path, bench, plan, error)
    if isinstance(error, DeviceTimeout):  # a timeout is retried: make every retry fail too
        station.devices.counter.count = Flaky(station.devices.counter.count, range(3, 99), error)
    result = run_sweep(station, log, run, plan, dwell_s=0.5)
    assert (result.reason, result.exit_code, result.points_done) == (reason, code, 1)
    assert not station.devices.shutter.is_open() and result.shutter_shut
    assert log.run(run).status == "interrupted"
    assert _open(bench).resume_sweep(log, run).status == "complete"


def test_an_internal_error_shuts_the_shutter_and_is_raised_again(tmp_path, bench, plan):
    station, log, run = _sweep_with_counter_fault(tmp_path, bench, plan, ZeroDivisionError("bug"))
    with pytest.raises(ZeroDivisionError):
        run_sweep(station, log, run, plan, dwell_s=0.5)
    assert not station.devices.shutter.is_open()
    assert log.run(run).status == "interrupted" and "internal error" in log.run(run).message
    assert _open(bench).resume_sweep(log, run).status == "complete"


def test_a_log_that_cannot_be_written_pauses_the_sweep(tmp_path, bench, plan):
    """A full disk shows up as a StorageError on commit (the run log's own conversion of the
    SQLite error; a real full disk: tests/functional/test_full_disk.py): shutter shut, the
    points committed kept, the run resumable once there is space again."""
    import sqlite3

    from aligner.run.log import _storage_error

    station = _open(bench)
    log, run = _start(tmp_path, station, plan)
    real = log.add_point
    full = _storage_error(log.path, sqlite3.OperationalError("database or disk is full"))
    log.add_point = Flaky(real, {3}, full)
    result = run_sweep(station, log, run, plan, dwell_s=0.5)
    assert (result.reason, result.exit_code, result.points_done) == ("storage", 3, 2)
    assert not station.devices.shutter.is_open()
    assert "free disk space" in result.message
    log.add_point = real
    assert _open(bench).resume_sweep(log, run).status == "complete"
    assert [p.idx for p in log.points(run)] == list(range(6))


def test_a_reference_below_its_dark_is_a_flagged_point_not_a_crash(tmp_path, bench, plan):
    station = _open(bench)
    log, run = _start(tmp_path, station, plan)
    real = station.devices.counter.count
    station.devices.counter.count = lambda dwell: (real(dwell)[0], 0)  # the monitor went dark
    result = run_sweep(station, log, run, plan, dwell_s=0.5)
    assert result.status == "complete"
    points = log.points(run)
    assert all(p.leak is None and "dark" in p.flag for p in points)


def test_a_resume_keeps_the_stricter_safe_rate_and_says_so(tmp_path, bench, plan):
    station = _open(bench)
    log, run = _start(tmp_path, station, plan)
    station.devices.counter.count = Flaky(station.devices.counter.count, {3}, KeyboardInterrupt())
    run_sweep(station, log, run, plan, dwell_s=0.5)
    edited = tmp_path / "edited.toml"
    edited.write_text(
        log.run(run).bench_toml.replace("safe_rate = 1.5e6", "safe_rate = 1.2e6"),
        encoding="utf-8",
    )
    resumer = _open(load_bench(edited))
    assert resumer.resume_sweep(log, run).status == "complete"
    assert resumer.guard.safe_rate == 1.2e6
    assert any("lower safe_rate" in e.message for e in log.events(run))
