"""Sweep overhead benchmark (prints figures and ratios to the targets; not collected by pytest).

1. Per-point software overhead of the sweep loop on a 1,000-point schedule with zero-delay
   simulated devices (SimMount, fixed-rate Poisson counter, SimShutter, no pointer): guard,
   read-back, prediction, leak interval and the SQLite commit (WAL; with synchronous=NORMAL
   as for simulated benches, and FULL as with real devices, where the disk sync per point
   depends on the disk) -- everything but motion and dwell, which take no time here.
   Target: < 2 ms per point.
   The same sweep on the physics-driven simulated bench is printed for comparison (its counter
   runs the model for every gate: device time, not loop overhead).
2. Serial round trip through the pseudo-terminal emulator: one position query (AT?) and one
   whole move (GO, BUSY?, AT?) of the line-protocol driver.

Run: python tests/benchmarks/bench_sweep.py
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

from aligner.bench import load_bench
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule, plan_points
from aligner.run.simbench import DeviceSet, open_devices
from aligner.run.sweep import run_sweep, start_run
from aligner_drivers.sim import poisson_counter

TARGET_MS = 2.0
N = 1000


def sweep_ms(physics: bool, durable: bool) -> float:
    bench = load_bench("demo")
    schedule = parse_schedule(f"linear:0.2:2.0:{N}", dwell_s=0.1)
    plan = plan_points(bench, schedule)
    devices = open_devices(bench, pointer="sim" if physics else "none")
    if not physics:
        devices = DeviceSet(
            devices.mounts,
            poisson_counter((300.0, 2500.0), seed=1),
            devices.shutter,
            None,
            None,
            simulated_time=True,
        )
    with (
        tempfile.TemporaryDirectory() as tmp,
        RunLog(Path(tmp) / "bench.sqlite", durable=durable) as log,
    ):
        run = start_run(log, bench, schedule, plan)
        t0 = time.perf_counter()
        result = run_sweep(bench, devices, log, run, plan, dwell_s=schedule.dwell_s)
        elapsed = time.perf_counter() - t0
    assert result.status == "complete", result.message
    return elapsed / N * 1e3


def serial_round_trip_ms(n: int = 300) -> tuple[float, float]:
    from aligner_drivers.emulator import Emulator
    from aligner_drivers.open import open_mount

    with Emulator() as emu:
        mount = open_mount(emu.port, profile="example-mount", name="bench")
        try:
            mount.position()
            t0 = time.perf_counter()
            for _ in range(n):
                mount.position()
            query = (time.perf_counter() - t0) / n * 1e3
            t0 = time.perf_counter()
            for i in range(n):
                mount.move_to(10.0 + 0.01 * (i % 2))
            move = (time.perf_counter() - t0) / n * 1e3
        finally:
            mount.close()
    return query, move


def main() -> None:
    for durable in (False, True):
        plain = sweep_ms(physics=False, durable=durable)
        sync = "FULL (disk sync per point)" if durable else "NORMAL (WAL, crash-safe)"
        print(
            f"sweep loop, zero-delay sim devices, synchronous={sync}: {plain:.3f} ms/point "
            f"(target {TARGET_MS} ms; ratio {plain / TARGET_MS:.2f})"
        )
    full = sweep_ms(physics=True, durable=False)
    print(
        f"sweep on the physics-driven simulated bench (+ model counter and pointer): "
        f"{full:.3f} ms/point (ratio {full / TARGET_MS:.2f} of the loop target)"
    )
    query, move = serial_round_trip_ms()
    print(
        f"serial round trip via pty emulator: query {query:.3f} ms, whole move "
        f"(GO, BUSY?, AT?) {move:.3f} ms; per-point loop overhead / one query = "
        f"{plain / query:.2f}"
    )


if __name__ == "__main__":
    main()
