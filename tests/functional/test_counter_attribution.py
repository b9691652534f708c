"""Counts belong to their gate: replies that come late (the emulator's late-reply fault) are
discarded and reported, never returned for a later gate; every logged count is checked.

Each emulated gate is numbered and its counts carry the number, so a count can be traced to the
gate that made it: when that gate was started, and where the analyzer stood.
"""

from __future__ import annotations

import dataclasses
import sys
import threading
import time

import pytest

from aligner.bench import load_bench
from aligner.errors import DeviceError
from aligner.run.devices import DeviceSet
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule, plan_points
from aligner.run.simbench import SimBench
from aligner.run.station import Station
from aligner.run.sweep import run_sweep, start_run
from aligner_drivers.emulator import Emulator, Faults
from aligner_drivers.lineproto import load_profile
from aligner_drivers.open import open_counter, open_mount, open_shutter

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="pty emulator is POSIX only")


class NumberedGates:
    """counts_fn for the emulator: gate n counts (n, 1000); when and where each was taken."""

    def __init__(self, where=lambda: 0.0) -> None:
        self.where = where
        self.gates: dict[int, tuple[float, float]] = {}
        self.lock = threading.Lock()

    def __call__(self, dwell_s: float) -> tuple[int, int]:
        with self.lock:
            n = len(self.gates) + 1
            self.gates[n] = (time.monotonic(), self.where())
        return n, 1000


def counter_profile(late_reply_s: float):
    profile = load_profile("example-counter")
    link = dataclasses.replace(profile.link, reply_timeout_s=0.08, late_reply_s=late_reply_s)
    return dataclasses.replace(profile, link=link)


def test_every_count_returned_comes_from_a_gate_started_by_that_call():
    numbered = NumberedGates()
    faults = Faults(late=0.35, late_s=0.25, only=frozenset({"GATE"}))
    calls: list[tuple[float, float, tuple[int, ...] | None]] = []
    with Emulator(faults=faults, counts_fn=numbered, seed=16) as emu:
        counter = open_counter(emu.port, profile=counter_profile(0.4))
        notices: list[str] = []
        for _ in range(40):
            started = time.monotonic()
            try:
                counts = counter.count(0.01)
            except DeviceError:  # a fault, not a point: fine, as long as it is said
                counts = None
            calls.append((started, time.monotonic(), counts))
            notices += counter.take_notices()
        counter.close()
    returned = [(t0, t1, c) for t0, t1, c in calls if c is not None]
    assert len(returned) >= 25
    numbers = [c[0] for _, _, c in returned]
    assert len(set(numbers)) == len(numbers), "a gate's counts were returned twice"
    for t0, t1, counts in returned:
        gate_started, _ = numbered.gates[counts[0]]
        assert t0 <= gate_started <= t1, "counts of a gate started before this call"
    late = [n for n in numbered.gates if n not in numbers]
    assert late, "the fault plan made no reply late"
    assert any("discarded" in text for text in notices)


def test_a_start_then_read_counter_never_returns_the_previous_gates_counts():
    """The gate runs 60 ms longer than set: a driver that read at the set time would get the
    previous gate's counts; this one waits until the counter says the gate has ended."""
    numbered = NumberedGates()
    with Emulator("gated-counter", counts_fn=numbered) as emu:
        emu.device.gate_lag_s = 0.06
        counter = open_counter(emu.port, profile="gated-counter")
        counts = [counter.count(0.02) for _ in range(4)]
        counter.close()
    assert [c[0] for c in counts] == [1, 2, 3, 4]


@pytest.fixture(scope="module")
def bench():
    b = load_bench("demo")
    mounts = {
        **b.mounts,
        "analyzer": dataclasses.replace(b.mounts["analyzer"], travel_deg=(-170.0, 170.0)),
    }
    return dataclasses.replace(b, mounts=mounts)


def test_every_logged_count_is_from_a_gate_at_that_points_reading(tmp_path, bench):
    """A sweep whose counter answers late again and again (issue 16 saw 7 of 30 points logged
    with the previous gate's counts): each logged count must come from a gate taken with the
    analyzer at that point's read-back."""
    schedule = parse_schedule("linear:0.3:1.8:30", dwell_s=0.01)
    plan = plan_points(bench, schedule)
    sim = SimBench(bench, seed=5)
    rounds, checked = 0, set()
    with RunLog(tmp_path / "runs.sqlite") as log:
        run = None
        while True:
            rounds += 1
            assert rounds < 20, "the sweep does not finish"
            with Emulator(seed=rounds) as mount_emu:
                numbered = NumberedGates(lambda emu=mount_emu: emu.position_steps / 1000.0)
                faults = Faults(late=0.3, late_s=0.2, only=frozenset({"GATE"}))
                with Emulator(faults=faults, counts_fn=numbered, seed=rounds) as counter_emu:
                    options = {"timeout": 0.08, "retries": 0}
                    mount = open_mount(
                        mount_emu.port, profile="example-mount", name="analyzer", **options
                    )
                    counter = open_counter(counter_emu.port, profile=counter_profile(0.3))
                    shutter = open_shutter(counter_emu.port, profile="example-counter")
                    devices = DeviceSet(
                        {**sim.mounts, "analyzer": mount}, counter, shutter, None, None
                    )
                    station = Station(bench, devices)
                    try:
                        if run is None:
                            run = start_run(log, station, schedule, plan)
                        result = run_sweep(station, log, run, plan, dwell_s=0.01)
                    finally:
                        devices.close()
            for point in log.points(run):
                if point.idx in checked:
                    continue
                _, where = numbered.gates[point.counts]
                assert where == pytest.approx(point.reading_deg, abs=1e-9), point.idx
                checked.add(point.idx)
            if result.status == "complete":
                break
        assert [p.idx for p in log.points(run)] == list(range(30))
        faults_logged = [e for e in log.events(run) if e.kind == "fault"]
    assert faults_logged, "no reply came late enough to fail an attempt"
