"""Benchmark: a LineMount move + position query through the pty emulator, against a bare
write / read of one query line on the same pty.

The move costs three exchanges (GO, one BUSY? poll, AT?) plus the read-back, so a ratio of
roughly 4 (a per-exchange ratio near 1) means the driver adds little to the exchanges.
Run: python tests/benchmarks/bench_serial_roundtrip.py [repeats]
"""

from __future__ import annotations

import statistics
import sys
import time

import serial

from drivers import open_mount
from drivers.emulator import Emulator


def bare_roundtrips(port: str, repeats: int) -> list[float]:
    with serial.Serial(port, timeout=1.0) as link:
        times = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            link.write(b"AT?\r\n")
            reply = link.read_until(b"\r\n")
            times.append(time.perf_counter() - t0)
            assert reply.startswith(b"AT "), reply
    return times


def driver_roundtrips(port: str, repeats: int) -> list[float]:
    mount = open_mount(port, profile="example-mount", timeout=1.0)
    times = []
    try:
        for i in range(repeats):
            reading = 1.0 + (i % 2)
            t0 = time.perf_counter()
            mount.move_to(reading)
            mount.position()
            times.append(time.perf_counter() - t0)
    finally:
        mount.close()
    return times


def main(repeats: int = 200) -> None:
    with Emulator() as emu:
        bare = statistics.median(bare_roundtrips(emu.port, repeats))
        driver = statistics.median(driver_roundtrips(emu.port, repeats))
    print(f"repeats: {repeats}")
    print(f"bare write/readline round trip: median {bare * 1e3:.3f} ms")
    print(f"LineMount move_to + position:   median {driver * 1e3:.3f} ms")
    print(f"ratio driver / bare: {driver / bare:.2f} (4 exchanges per driver round trip)")
    print(f"ratio per exchange: {driver / 4 / bare:.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 200)
