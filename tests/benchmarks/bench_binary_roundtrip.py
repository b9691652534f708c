"""Benchmark: the binary protocol adapter against bare frames on the same pty emulator.

Interleaved, so drifts of the machine's load hit both alike:

- bare: write one STATUS_REQ frame with pyserial, read frames until its STATUS arrives;
- adapter: ``position()`` through the ``py:`` spec (plug-in wrapper, shared link, reader
  thread, STATUS_REQ and the wait for a fresh STATUS).

A ratio near 1 means the adapter, its reader thread and the plug-in wrapper add little to the
exchange itself. Run: python tests/benchmarks/bench_binary_roundtrip.py [repeats]
"""

from __future__ import annotations

import statistics
import sys
import time

import serial

from aligner_drivers import open_mount
from aligner_drivers.adapters.framed import Frame, FrameReader, Msg
from aligner_drivers.binary_emulator import BinaryEmulator


def _bare_status(link: serial.Serial, reader: FrameReader) -> None:
    link.write(Frame(Msg.STATUS_REQ, 1).pack())
    while True:
        frames = reader.feed(link.read(link.in_waiting or 1))
        if any(f.msg == Msg.STATUS for f in frames):
            return


def main(repeats: int = 500) -> None:
    bare, adapter = [], []
    # updates stay off on the bare port (no periodic STATUS to confuse it); the adapter's own
    # port turns them on, so its controller also sends periodic status during the benchmark
    with (
        BinaryEmulator(homed=True, update_period_s=1.0, watchdog_s=10.0) as emu,
        BinaryEmulator(homed=True) as bare_emu,
        serial.Serial(bare_emu.port, timeout=1) as link,
    ):
        spec = f"py:aligner_drivers.adapters.binary:BinaryMount?port={emu.port}&reply_timeout_s=1"
        mount = open_mount(spec)
        reader = FrameReader()
        try:
            for _ in range(repeats):
                t0 = time.perf_counter()
                _bare_status(link, reader)
                t1 = time.perf_counter()
                mount.position()
                t2 = time.perf_counter()
                bare.append(t1 - t0)
                adapter.append(t2 - t1)
        finally:
            mount.close()
    b, a = statistics.median(bare), statistics.median(adapter)
    print(f"repeats: {repeats}")
    print(f"bare STATUS_REQ -> STATUS:       median {b * 1e3:.3f} ms")
    print(f"BinaryMount.position() (py:):   median {a * 1e3:.3f} ms")
    print(f"ratio adapter / bare: {a / b:.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 500)
