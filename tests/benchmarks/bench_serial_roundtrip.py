"""Benchmark: a LineMount move + position query through the pty emulator, against a bare
write / read of one query line on the same pty.

The two are interleaved, so drifts of the machine's load hit both alike. A driver round trip
is four line exchanges (GO, one BUSY? poll, AT? to verify, AT? for position()), so a ratio
near 4 (per-exchange ratio near 1) means the driver adds little to the exchanges themselves.
Run: python tests/benchmarks/bench_serial_roundtrip.py [repeats]
"""

from __future__ import annotations

import statistics
import sys
import time

import serial

from aligner_drivers import open_mount
from aligner_drivers.emulator import Emulator

EXCHANGES = 4


def main(repeats: int = 500) -> None:
    bare, driver = [], []
    with Emulator() as emu, serial.Serial(emu.port, timeout=1.0) as link:
        mount = open_mount(emu.port, profile="example-mount", timeout=1.0)
        try:
            for i in range(repeats):
                t0 = time.perf_counter()
                link.write(b"AT?\r\n")
                reply = link.read_until(b"\r\n")
                t1 = time.perf_counter()
                mount.move_to(1.0 + (i % 2))
                mount.position()
                t2 = time.perf_counter()
                if not reply.startswith(b"AT "):
                    raise SystemExit(f"unexpected bare reply {reply!r}")
                bare.append(t1 - t0)
                driver.append(t2 - t1)
        finally:
            mount.close()
    b, d = statistics.median(bare), statistics.median(driver)
    print(f"repeats: {repeats}")
    print(f"bare write/readline round trip: median {b * 1e3:.3f} ms")
    print(f"LineMount move_to + position:   median {d * 1e3:.3f} ms ({EXCHANGES} exchanges)")
    print(f"ratio driver / bare: {d / b:.2f}")
    print(f"ratio per exchange:  {d / EXCHANGES / b:.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 500)
