"""Benchmark: per-command overhead of the profile driver against a bare pyserial write/read on
the same emulator, for each protocol shape that answers a query.

For each shape, one query goes out as a bare write and a read up to the end marker (or the
prompt) on the driver's own port object, then the same query through the driver (template,
framing, bus lock, attribution checks, decoding). The two are interleaved, so drifts of the
machine's load hit both alike. A ratio near 1 means the driver adds little to the exchange
itself. The byte-driven shutter (no replies) and the free-running counter (no commands) have no
query to time. The last line times a whole example-mount move (four exchanges) the same way.
Run: python tests/benchmarks/bench_serial_roundtrip.py [repeats]
"""

from __future__ import annotations

import statistics
import sys
import time
from collections.abc import Callable
from typing import Any

from aligner_drivers.emulator import Emulator
from aligner_drivers.open import open_counter, open_mount, open_pointer, open_shutter

#: shape -> (opener, the driver's one-exchange call, the bare query, the end of its answer)
CASES: dict[str, tuple[Callable[..., Any], Callable[[Any], Any], bytes, bytes]] = {
    "hex-addressed-mount": (open_mount, lambda d: d.position(), b"1gp", b"\r\n"),
    "silent-set-mount": (open_mount, lambda d: d.position(), b"1TP\r\n", b"\r\n"),
    "slash-request-mount": (open_mount, lambda d: d.position(), b"/01 1 get pos\n", b"\r\n"),
    "mnemonic-servo-mount": (open_mount, lambda d: d.position(), b"POS? 1\n", b"\n"),
    "bitfield-status-mount": (open_mount, lambda d: d.position(), b"X1:POS?\r", b"\r\n"),
    "echo-prompt-shutter": (open_shutter, lambda d: d.is_open(), b"ens?\r", b"> "),
    "gated-counter": (
        open_counter,
        lambda d: d.channel.read("counting"),
        b"ST?\r\n",
        b"\r\n",
    ),
    "query-pointer": (open_pointer, lambda d: d.channel.read("pointer"), b"READ?\n", b"\n"),
    "tcp-call-mount": (open_mount, lambda d: d.position(), b"where(1)\n", b"\r\nEND\r\n"),
    "chained-open-loop-mount": (open_mount, lambda d: d.position(), b"1TP?\r", b"\r\n"),
    "example-mount (basic)": (open_mount, lambda d: d.position(), b"AT?\r\n", b"\r\n"),
}


def bare_exchange(port: Any, query: bytes, end: bytes) -> bytes:
    """Write ``query`` and read up to ``end`` with pyserial alone."""
    port.write(query)
    reply = b""
    while not reply.endswith(end):
        reply += port.read_until(end)
    return reply


def measure(shape: str, repeats: int) -> tuple[float, float]:
    """Median bare and driver round trips (s) for one shape."""
    opener, call, query, end = CASES[shape]
    name = shape.split(" ")[0]
    emulator_shape = "basic" if name == "example-mount" else name
    with Emulator(emulator_shape) as emu:
        device = opener(emu.port, profile=name)
        port = device.channel.bus.port
        bare, driver = [], []
        try:
            for _ in range(repeats):
                t0 = time.perf_counter()
                bare_exchange(port, query, end)
                t1 = time.perf_counter()
                call(device)
                t2 = time.perf_counter()
                bare.append(t1 - t0)
                driver.append(t2 - t1)
        finally:
            device.close()
    return statistics.median(bare), statistics.median(driver)


def measure_move(repeats: int) -> tuple[float, float]:
    """A whole example-mount move + position (GO, BUSY?, AT?, AT?) against one bare query."""
    with Emulator() as emu:
        mount = open_mount(emu.port, profile="example-mount")
        port = mount.channel.bus.port
        bare, driver = [], []
        try:
            for i in range(repeats):
                t0 = time.perf_counter()
                bare_exchange(port, b"AT?\r\n", b"\r\n")
                t1 = time.perf_counter()
                mount.move_to(1.0 + (i % 2))
                mount.position()
                t2 = time.perf_counter()
                bare.append(t1 - t0)
                driver.append(t2 - t1)
        finally:
            mount.close()
    return statistics.median(bare), statistics.median(driver)


def main(repeats: int = 300) -> None:
    print(f"repeats per shape: {repeats}")
    print(f"{'shape':<26} {'bare ms':>9} {'driver ms':>10} {'ratio':>7}")
    for shape in CASES:
        bare, driver = measure(shape, repeats)
        print(f"{shape:<26} {bare * 1e3:9.3f} {driver * 1e3:10.3f} {driver / bare:7.2f}")
    bare, driver = measure_move(repeats)
    print(
        f"example-mount move_to + position (4 exchanges): driver {driver * 1e3:.3f} ms, "
        f"bare query {bare * 1e3:.3f} ms, ratio per exchange {driver / 4 / bare:.2f}"
    )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 300)
