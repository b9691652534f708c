"""A bench with real devices (pseudo-terminal emulators): declarations, provenance, safe_rate,
and the fault drill -- every ending leaves the emulated shutter's own state shut and the run
resumable."""

from __future__ import annotations

import hashlib
import json
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

from aligner.bench import DEMO_BENCH, load_bench
from aligner.errors import GuardTrip
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule
from aligner.run.simbench import SimBench
from aligner.run.station import Station, StationOptions
from aligner_drivers.emulator import Emulator, Faults
from aligner_drivers.open import profile_file

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="pty emulator is POSIX only")

STEPS_PER_DEG = 1000  # drivers/profiles/example-mount.toml


def _cli(*args: str, timeout: float = 60) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "aligner", *args], capture_output=True, text=True, timeout=timeout
    )


def _bench_text(analyzer: str, devices: str) -> str:
    """The demo bench with the analyzer on ``analyzer`` (a spec line block) and the
    ``[devices.*]`` tables replaced by ``devices``."""
    text = DEMO_BENCH.read_text(encoding="utf-8")
    head, _, tail = text.partition("[devices.counter]")
    tail = tail[tail.index("[mounts.pre_hwp]") :]
    text = head + devices + "\n" + tail
    old = 'driver = "sim"\nreading_deg = 136.0'
    return text.replace(old, analyzer + "\nreading_deg = 136.0").replace(
        "travel_deg = [-10.0, 350.0]", "travel_deg = [-170.0, 170.0]"
    )


@dataclass
class EmulatedBench:
    """The analyzer on a mount emulator; the counter and the shutter on a counter emulator
    whose counts come from the simulated bench at the emulated analyzer's position."""

    path: Path
    mount: Emulator
    counter: Emulator
    sim: SimBench
    realtime: bool = False
    reference_dark: bool = False

    def counts(self, dwell_s: float) -> tuple[int, int]:
        readings = {n: m.true_angle_deg() for n, m in self.sim.mounts.items() if n != "analyzer"}
        readings["analyzer"] = self.mount.position_steps / STEPS_PER_DEG
        post, ref = self.sim.draw_counts(dwell_s, readings, exposed=self.counter.beam_on)
        if self.realtime:
            time.sleep(dwell_s)
        return post, 0 if self.reference_dark else ref


@pytest.fixture
def emulated(tmp_path: Path) -> Iterator[EmulatedBench]:
    mount = Emulator(seed=1).__enter__()
    sim = SimBench(load_bench("demo"), seed=3)
    bench = EmulatedBench(tmp_path / "bench.toml", mount, None, sim)  # type: ignore[arg-type]
    bench.counter = Emulator(counts_fn=bench.counts, seed=2).__enter__()
    analyzer = f'driver = "{mount.port}"\nprofile = "example-mount"'
    # the example counter profile with a short reply timeout and no retries, beside the bench
    quick = profile_file("example-counter").read_text(encoding="utf-8")
    quick = quick.replace("reply_timeout_s = 0.5", "reply_timeout_s = 0.05")
    (tmp_path / "quick-counter.toml").write_text(
        quick.replace("retries = 1 ", "retries = 0 "), encoding="utf-8"
    )
    devices = (
        f'[devices.counter]\ndriver = "{bench.counter.port}"\nprofile = "quick-counter.toml"\n'
        f'[devices.shutter]\ndriver = "{bench.counter.port}"\nprofile = "example-counter"\n'
        '[devices.pointer]\ndriver = "none"\n'
    )
    bench.path.write_text(_bench_text(analyzer, devices), encoding="utf-8")
    try:
        yield bench
    finally:
        mount.close()
        bench.counter.close()


def test_a_real_mount_with_an_undeclared_counter_is_refused_before_anything_moves(tmp_path):
    with Emulator(seed=1) as mount:
        path = tmp_path / "bench.toml"
        analyzer = f'driver = "{mount.port}"\nprofile = "example-mount"'
        path.write_text(_bench_text(analyzer, ""), encoding="utf-8")
        out = _cli("sweep", str(path), "--schedule", "list:0.5", "--db", str(tmp_path / "r.db"))
        assert mount.move_log == [] and mount.received == []  # the port was never spoken to
    assert out.returncode == 2 and "Traceback" not in out.stderr
    assert "devices.counter.driver is not declared" in out.stderr
    assert f"mounts.analyzer.driver = '{mount.port}'" in out.stderr  # the real device named
    assert 'driver = "sim" to simulate it on purpose' in out.stderr


def test_a_declared_simulated_counter_runs_and_every_output_says_simulated(tmp_path):
    with Emulator(seed=1) as mount:
        path = tmp_path / "bench.toml"
        analyzer = f'driver = "{mount.port}"\nprofile = "example-mount"'
        devices = (
            '[devices.counter]\ndriver = "sim"\n[devices.shutter]\ndriver = "sim"\n'
            '[devices.pointer]\ndriver = "none"\n'
        )
        path.write_text(_bench_text(analyzer, devices), encoding="utf-8")
        db = str(tmp_path / "runs.sqlite")
        out = _cli("sweep", str(path), "--schedule", "list:0.4,0.8", "--dwell", "0.2", "--db", db)
        assert out.returncode == 0, out.stderr
        assert len(mount.move_log) >= 2  # the real (emulated) mount moved
    assert "SIMULATED (with real devices)" in out.stdout
    listing = _cli("log", "list", "--db", db)
    assert "SIMULATED" in listing.stdout
    doc = json.loads(_cli("log", "show", "1", "--db", db, "--json").stdout)
    assert doc["data"] == "SIMULATED (with real devices)"
    devices = {d["name"]: d for d in doc["provenance"]["devices"]}
    analyzer_record = devices["analyzer"]
    assert analyzer_record["kind"] == "real" and analyzer_record["spec"] == mount.port
    shipped = profile_file("example-mount")
    assert analyzer_record["profile"] == str(shipped)
    assert analyzer_record["profile_sha256"] == hashlib.sha256(shipped.read_bytes()).hexdigest()
    assert analyzer_record["identity"] == "basic line controller 2.1"  # its identity query
    assert devices["counter"]["kind"] == "simulated" and devices["counter"]["identity"]
    assert devices["pointer"]["kind"] == "absent"
    assert doc["provenance"]["seed"] is not None
    assert doc["provenance"]["bench_sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    target = tmp_path / "run.csv"
    assert _cli("log", "export", "1", "--csv", str(target), "--db", db).returncode == 0
    assert target.read_text().startswith("# run 1: SIMULATED (with real devices)")
    report = _cli("log", "report", "1", "--out", str(tmp_path / "rep"), "--db", db)
    assert report.returncode == 0, report.stderr
    assert "SIMULATED (with real devices)" in (tmp_path / "rep" / "run-1.md").read_text()
    assert "SIMULATED" in (tmp_path / "rep" / "run-1-leak.svg").read_text()


def test_without_safe_rate_nothing_exposes_the_detector_but_predict_works(tmp_path):
    path = tmp_path / "bench.toml"
    text = DEMO_BENCH.read_text(encoding="utf-8")
    path.write_text(text.replace("safe_rate = 1.5e6", ""), encoding="utf-8")
    assert _cli("predict", str(path)).returncode == 0
    for args in (
        ["sweep", str(path), "--schedule", "list:0.5", "--db", str(tmp_path / "r.db")],
        ["null", str(path)],
        ["recipe", "run", "cross-analyzer", str(path), "--yes", "--db", str(tmp_path / "r.db")],
    ):
        out = _cli(*args)
        assert out.returncode == 2, (args, out.stderr)
        assert "detector.safe_rate: is required" in out.stderr and "Traceback" not in out.stderr
    assert not (tmp_path / "r.db").exists()


# -- the fault drill: the emulated shutter's own state after every ending -----------------------


def _sweep(emulated: EmulatedBench, tmp_path: Path, **options) -> tuple:
    bench = load_bench(emulated.path)
    station = Station.open(bench, seed=4, options=StationOptions(**options))
    log = RunLog(tmp_path / "runs.sqlite")
    return station, log, parse_schedule("linear:0.3:1.2:4", dwell_s=0.1)


def _resumes(emulated: EmulatedBench, log: RunLog, run_id: int) -> bool:
    with Station.open(load_bench(emulated.path), seed=5) as station:
        return station.resume_sweep(log, run_id).status == "complete"


def test_a_reference_below_its_dark_logs_flagged_points_and_ends_shut(emulated, tmp_path):
    emulated.reference_dark = True
    station, log, schedule = _sweep(emulated, tmp_path)
    with station:
        result = station.start_sweep(log, schedule)
    assert result.status == "complete" and not emulated.counter.beam_on
    assert all(p.leak is None and "dark" in p.flag for p in log.points(result.run_id))


def test_a_counter_timeout_mid_count_pauses_with_the_shutter_shut(emulated, tmp_path):
    station, log, schedule = _sweep(emulated, tmp_path, retries=0)
    emulated.counter.faults = Faults(script=(None, None, "stall"), only=frozenset({"GATE"}))
    emulated.counter._script = list(emulated.counter.faults.script)
    with station:
        result = station.start_sweep(log, schedule)
    assert (result.reason, result.exit_code) == ("device", 3)
    assert not emulated.counter.beam_on
    assert log.run(result.run_id).status == "interrupted"
    assert _resumes(emulated, log, result.run_id)
    assert not emulated.counter.beam_on


def test_a_guard_trip_pauses_with_the_shutter_shut(emulated, tmp_path):
    station, log, schedule = _sweep(emulated, tmp_path)
    calls = []
    real = emulated.counts

    def bright(dwell_s):
        calls.append(dwell_s)
        return (10**6, 0) if len(calls) == 3 else real(dwell_s)

    emulated.counter.device.counts_fn = bright
    with station:
        result = station.start_sweep(log, schedule)
    assert (result.reason, result.exit_code) == ("guard", 3)
    assert not emulated.counter.beam_on
    emulated.counter.device.counts_fn = real
    assert _resumes(emulated, log, result.run_id)


def test_an_exception_in_the_counter_shuts_the_shutter(emulated, tmp_path):
    station, log, schedule = _sweep(emulated, tmp_path)
    real = station.devices.counter.count
    calls = []

    def broken(dwell_s):
        calls.append(dwell_s)
        if len(calls) == 3:
            raise RuntimeError("a bug in a counter driver")
        return real(dwell_s)

    station.devices.counter.count = broken
    with station, pytest.raises(RuntimeError):
        station.start_sweep(log, schedule)
    assert not emulated.counter.beam_on
    (run,) = log.runs()
    assert run.status == "interrupted" and "internal error" in run.message
    assert _resumes(emulated, log, run.id)


def test_a_timeout_is_not_taken_for_a_point(emulated, tmp_path):
    """A counter that stops answering is a fault, never a logged point."""
    station, log, schedule = _sweep(emulated, tmp_path, retries=0)
    emulated.counter.faults = Faults(stall=1.0, only=frozenset({"GATE"}))
    with station:
        result = station.start_sweep(log, schedule)
    assert result.reason == "device" and log.points(result.run_id) == []
    assert "no reply" in result.message and not emulated.counter.beam_on


@pytest.mark.parametrize(
    ("signum", "code"), [(signal.SIGINT, 130), (signal.SIGTERM, 143), (signal.SIGHUP, 129)]
)
def test_a_signal_mid_sweep_shuts_the_shutter_and_the_run_resumes(emulated, tmp_path, signum, code):
    emulated.realtime = True  # real gates, so the signal lands mid-sweep
    db = str(tmp_path / "runs.sqlite")
    args = ["sweep", str(emulated.path), "--schedule", "linear:0.3:1.5:12", "--dwell", "0.2"]
    proc = subprocess.Popen(
        [sys.executable, "-m", "aligner", *args, "--db", db],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    assert proc.stdout is not None
    for line in proc.stdout:  # wait for the first logged point
        if line.startswith("#0"):
            break
    proc.send_signal(signum)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == code, err
    assert "Traceback" not in err
    assert not emulated.counter.beam_on  # the emulated shutter's own state
    with RunLog(db) as log:
        (run,) = log.runs()
        assert run.status == "interrupted" and 0 < run.points < 12
    emulated.realtime = False
    resumed = _cli("sweep", str(emulated.path), "--resume", "1", "--db", db)
    assert resumed.returncode == 0, resumed.stderr
    assert not emulated.counter.beam_on
    with RunLog(db) as log:
        assert [p.idx for p in log.points(1)] == list(range(12))


def test_a_null_search_ends_shut_when_it_converges_and_when_the_guard_trips(emulated, tmp_path):
    bench = load_bench(emulated.path)
    with Station.open(bench, seed=6) as station:
        result = station.null_search("analyzer", dwell_s=0.05, points=9, max_rounds=3)
        assert not emulated.counter.beam_on and result.shutter == "confirmed"
        calls = []
        real = emulated.counts

        def bright(dwell_s):
            calls.append(dwell_s)
            return (10**6, 0) if len(calls) == 4 else real(dwell_s)

        emulated.counter.device.counts_fn = bright
        with pytest.raises(GuardTrip) as trip:
            station.null_search("analyzer", dwell_s=0.05, points=9, max_rounds=3)
        assert not emulated.counter.beam_on  # the emulated shutter's own state
        assert len(trip.value.points) == 1  # each point counts two gates: point 2 tripped
