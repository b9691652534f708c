"""Sweeps through the real serial drivers and the pseudo-terminal emulator: a 50-point schedule
(backlash approach read from the emulator's move log) and a drill of 200 injected faults."""

import dataclasses
import sys

import numpy as np
import pytest

from aligner.bench import load_bench
from aligner.run.devices import DeviceSet
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule, plan_points
from aligner.run.simbench import SimBench
from aligner.run.station import Station
from aligner.run.sweep import run_sweep, start_run
from aligner_drivers.emulator import Emulator, Faults
from aligner_drivers.open import open_counter, open_mount, open_shutter

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="pty emulator is POSIX only")

STEPS_PER_DEG = 1000  # drivers/profiles/example-mount.toml


@pytest.fixture(scope="module")
def bench():
    b = load_bench("demo")
    # the example profile's travel is [-170, 170] deg; the analyzer works near 135 deg
    mounts = {
        **b.mounts,
        "analyzer": dataclasses.replace(b.mounts["analyzer"], travel_deg=(-170.0, 170.0)),
    }
    return dataclasses.replace(b, mounts=mounts)


class Rig:
    """Analyzer on a mount emulator; counter and shutter on a counter emulator whose counts
    come from the simulated bench at the emulated analyzer's position."""

    def __init__(self, bench, mount_faults=None, counter_faults=None, timeout=0.5, retries=2):
        self.sim = SimBench(bench, seed=5)
        self.mount_emu = Emulator(faults=mount_faults, seed=1).__enter__()
        self.counter_emu = Emulator(
            faults=counter_faults, counts_fn=self.counts, seed=2
        ).__enter__()
        options = {"timeout": timeout, "retries": retries}
        try:
            self.mount = open_mount(
                self.mount_emu.port, profile="example-mount", name="analyzer", **options
            )
            self.counter = open_counter(self.counter_emu.port, profile="example-counter", **options)
            self.shutter = open_shutter(self.counter_emu.port, profile="example-counter", **options)
        except BaseException:
            self.close()
            raise
        mounts = {**self.sim.mounts, "analyzer": self.mount}
        self.devices = DeviceSet(
            mounts, self.counter, self.shutter, None, None, simulated_time=True
        )
        self.station = Station(bench, self.devices)

    def counts(self, dwell_s):
        readings = {n: m.true_angle_deg() for n, m in self.sim.mounts.items() if n != "analyzer"}
        readings["analyzer"] = self.mount_emu.position_steps / STEPS_PER_DEG
        return self.sim.draw_counts(dwell_s, readings, exposed=self.counter_emu.beam_on)

    def close(self):
        for emu in (self.mount_emu, self.counter_emu):
            emu.close()


def test_fifty_points_through_the_emulator(tmp_path, bench):
    # the emulated counter answers when its gate has ended: short dwells keep the test quick
    schedule = parse_schedule("outback:0.3:1.8:25", dwell_s=0.02)
    plan = plan_points(bench, schedule)
    rig = Rig(bench)
    try:
        with RunLog(tmp_path / "runs.sqlite") as log:
            run = start_run(log, rig.station, schedule, plan)
            result = run_sweep(rig.station, log, run, plan, dwell_s=0.02)
            points = log.points(run)
        moves = list(rig.mount_emu.move_log)
    finally:
        rig.devices.close()
        rig.close()
    assert result.status == "complete" and len(points) == 50
    planned = np.array([p.readings["analyzer"] for p in plan])
    steps = np.round(planned * STEPS_PER_DEG).astype(int)
    assert np.allclose([p.reading_deg for p in points], steps / STEPS_PER_DEG)
    # the emulator's move log: each point's target step is reached by a move from below
    i = 0
    for target in steps:
        if moves[i:] and moves[i] != target and i and moves[i - 1] == target:
            continue  # the same target twice in a row: no move needed
        while moves[i] != target:
            i += 1
        previous = moves[i - 1] if i else 0
        assert previous < target, (i, moves[max(0, i - 3) : i + 1])
        i += 1
    assert i == len(moves)


def test_fault_drill_200_faults(tmp_path, bench):
    """200 scripted faults on the mount and counter links (driver retries off, so each reaches
    the engine): no point lost or doubled, no traceback, every fault an event, the run
    resumed to the end."""
    # "offset" (a stalled motor) acts only on GO; positional scripts would waste it on others
    kinds = ["garbage", "partial", "stall", "error"]
    rng = np.random.default_rng(4)

    def script(n_faults, gaps, disconnects):
        # random gaps between faults, so no retry pattern lines up with the script
        entries = []
        for k in range(n_faults):
            kind = "disconnect" if k in disconnects else kinds[int(rng.integers(len(kinds)))]
            entries += [kind] + [None] * int(rng.integers(*gaps))
        return entries

    remaining = {"mount": script(140, (3, 9), {40, 90}), "counter": script(60, (1, 3), {30})}
    only = {"mount": frozenset({"GO", "AT?", "BUSY?"}), "counter": frozenset({"GATE"})}
    schedule = parse_schedule("linear:0.3:1.8:40", repeats=3, dwell_s=0.02)
    plan = plan_points(bench, schedule)
    injected, rounds, reasons = 0, 0, []
    with RunLog(tmp_path / "runs.sqlite") as log:
        run = None
        while True:
            rounds += 1
            assert rounds < 60, "the drill does not converge"
            faults = {
                k: Faults(script=tuple(v), only=only[k], stall_s=0.03) for k, v in remaining.items()
            }
            rig = Rig(bench, faults["mount"], faults["counter"], timeout=0.05, retries=0)
            try:
                if run is None:
                    run = start_run(log, rig.station, schedule, plan)
                result = run_sweep(rig.station, log, run, plan, dwell_s=0.02)
            finally:
                rig.devices.close()
                rig.close()
            for key, emu in (("mount", rig.mount_emu), ("counter", rig.counter_emu)):
                used = sum(1 for line in emu.received if line.split(" ")[0] in only[key])
                injected += sum(1 for f in remaining[key][:used] if f is not None)
                remaining[key] = remaining[key][used:]
            reasons.append(result.reason)
            if result.status == "complete":
                break
        points = log.points(run)
        events = log.events(run)
        assert log.integrity_ok()
    assert not any(f for v in remaining.values() for f in v), "some faults were never injected"
    assert injected == 200
    assert [p.idx for p in points] == list(range(120))
    assert np.allclose(
        [p.reading_deg for p in points],
        np.round([p.readings["analyzer"] * STEPS_PER_DEG for p in plan]) / 1000,
    )
    fault_events = [e for e in events if e.kind == "fault"]
    pauses = [e for e in events if e.kind == "pause"]
    # every injected fault reached the engine as one failed attempt (a disconnect pauses)
    assert len(fault_events) + len(pauses) >= injected
    assert all(e.message and "Traceback" not in e.message for e in events)
    assert all(
        any(device in e.message for device in ("analyzer", "counter", "shutter"))
        for e in fault_events
    )
    assert "device" in reasons  # the disconnects paused the run; resume finished it


def test_a_stalled_motor_is_caught_and_the_move_retried(tmp_path, bench):
    schedule = parse_schedule("list:0.5,1.0", dwell_s=0.05)
    plan = plan_points(bench, schedule)
    rig = Rig(
        bench,
        Faults(script=("offset", None, None, "offset"), only=frozenset({"GO"})),
        timeout=0.1,
        retries=0,
    )
    try:
        with RunLog(tmp_path / "runs.sqlite") as log:
            run = start_run(log, rig.station, schedule, plan)
            result = run_sweep(rig.station, log, run, plan, dwell_s=0.05)
            events = log.events(run)
            points = log.points(run)
    finally:
        rig.devices.close()
        rig.close()
    assert result.status == "complete" and len(points) == 2
    offs = [e for e in events if e.kind == "fault" and "off (axis.tolerance_deg" in e.message]
    assert len(offs) == 2
    assert points[1].reading_deg == pytest.approx(round(plan[1].readings["analyzer"], 3))
