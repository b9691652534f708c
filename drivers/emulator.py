"""A simulated controller behind a pseudo-terminal, for driving the real line drivers.

``Emulator`` opens a pty pair (POSIX only), serves the master end from a background thread
and hands out the slave's path as ``port``, so ``open_mount(emu.port, profile=...)`` goes
through pyserial and a real tty. It speaks both shipped examples,
``profiles/example-mount.toml`` and ``profiles/example-counter.toml``:

==============  ==============================  ===========================================
command         reply                           effect
==============  ==============================  ===========================================
``GO n``        ``OK``                          start a move to step ``n``
``AT?``         ``AT n``                        position in steps
``BUSY?``       ``BUSY 1`` / ``BUSY 0``         is a move running
``REF``         ``OK``                          move to step 0
``HALT``        ``OK``                          stop where it is
``GATE ms``     ``COUNTS a b``                  counts of a gate of ``ms`` milliseconds
``BEAM ON|OFF`` ``BEAM ON`` / ``BEAM OFF``      shutter output
anything else   ``ERR 1 unknown command``
==============  ==============================  ===========================================

Faults (``Faults``): each received command may be hit by one fault, first from ``script``
(one entry per command, ``None`` for none), then at random with the given probabilities;
``only`` restricts faults to some command words (``{"AT?"}``). Kinds:

- ``garbage``: the command is carried out but the reply is replaced by random bytes;
- ``partial``: the command is carried out, half the reply is sent without its terminator;
- ``stall``: the controller hangs for ``stall_s`` and the command is lost;
- ``error``: an error reply (``ERR 7 ...``) instead of the command;
- ``disconnect``: the master end is closed (the port vanishes) and the emulator ends;
- ``offset``: a ``GO`` ends ``offset_steps`` away from its target (a stalled motor).
"""

from __future__ import annotations

import os
import select
import threading
import time
import tty
from collections.abc import Callable
from dataclasses import dataclass, field
from types import TracebackType

import numpy as np

from aligner.errors import InputError

__all__ = ["FAULT_KINDS", "Emulator", "Faults"]

FAULT_KINDS = ("disconnect", "error", "garbage", "offset", "partial", "stall")


@dataclass(frozen=True)
class Faults:
    """Fault injection plan; probabilities are per received command (0..1)."""

    script: tuple[str | None, ...] = ()
    garbage: float = 0.0
    partial: float = 0.0
    stall: float = 0.0
    error: float = 0.0
    disconnect: float = 0.0
    offset: float = 0.0
    only: frozenset[str] | None = None
    stall_s: float = 0.3
    offset_steps: int = 50
    rates: dict[str, float] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        bad = [kind for kind in self.script if kind is not None and kind not in FAULT_KINDS]
        if bad:
            raise InputError(f"Faults.script: unknown fault {bad[0]!r}; allowed: {FAULT_KINDS}")
        rates = {kind: float(getattr(self, kind)) for kind in FAULT_KINDS}
        if any(not 0.0 <= r <= 1.0 for r in rates.values()) or sum(rates.values()) > 1.0:
            raise InputError(f"Faults: probabilities must be in 0..1 and add up to <= 1: {rates}")
        object.__setattr__(self, "rates", rates)


class Emulator:
    """A pty-backed controller (see the module docstring). Use it as a context manager.

    ``speed_steps_s`` (steps/s) makes moves take time (``None``: instant);
    ``counts_fn(dwell_s) -> (post, ref)`` gives the gate counts (default: Poisson, 1000/s
    on both channels); ``move_log`` lists every ``GO`` target (steps) in the order received.
    """

    def __init__(
        self,
        *,
        faults: Faults | None = None,
        speed_steps_s: float | None = None,
        counts_fn: Callable[[float], tuple[int, int]] | None = None,
        seed: int | None = None,
    ) -> None:
        self.faults = faults or Faults()
        self.speed_steps_s = speed_steps_s
        self._rng = np.random.default_rng(seed)
        self.counts_fn = counts_fn or (
            lambda dwell_s: tuple(int(c) for c in self._rng.poisson(1000.0 * dwell_s, 2))
        )
        self.move_log: list[int] = []
        self.received: list[str] = []
        self.beam_on = False
        self.disconnected = False
        self._script = list(self.faults.script)
        self._start_steps, self._target, self._t0, self._duration = 0, 0, 0.0, 0.0
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)
        self.port = os.ttyname(self._slave)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._serve, name="pty-emulator", daemon=True)

    # -- life cycle ------------------------------------------------------------------------

    def __enter__(self) -> Emulator:
        self._thread.start()
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    def close(self) -> None:
        """Stop the thread and close both ends of the pty."""
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout=5.0)
        self._close_master()
        if self._slave >= 0:
            os.close(self._slave)
            self._slave = -1

    def _close_master(self) -> None:
        if self._master >= 0:
            os.close(self._master)
            self._master = -1

    # -- motion ----------------------------------------------------------------------------

    @property
    def position_steps(self) -> int:
        """Where the axis is now (steps)."""
        if self._duration <= 0.0:
            return self._target
        done = min(1.0, (time.monotonic() - self._t0) / self._duration)
        return round(self._start_steps + (self._target - self._start_steps) * done)

    def _moving(self) -> bool:
        return self._duration > 0.0 and time.monotonic() - self._t0 < self._duration

    def _start_move(self, target: int) -> None:
        start = self.position_steps
        self._start_steps, self._target, self._t0 = start, target, time.monotonic()
        self._duration = abs(target - start) / self.speed_steps_s if self.speed_steps_s else 0.0

    def _halt(self) -> None:
        here = self.position_steps
        self._start_steps = self._target = here
        self._duration = 0.0

    # -- protocol --------------------------------------------------------------------------

    def _execute(self, line: str, offset: bool) -> str:
        word, _, arg = line.partition(" ")
        if word in ("GO", "GATE"):
            try:
                number = int(arg)
            except ValueError:
                return "ERR 2 bad argument"
            if word == "GATE":
                post, ref = self.counts_fn(number / 1000.0)
                return f"COUNTS {post} {ref}"
            self.move_log.append(number)
            self._start_move(number + (self.faults.offset_steps if offset else 0))
            return "OK"
        match line:
            case "AT?":
                return f"AT {self.position_steps}"
            case "BUSY?":
                return f"BUSY {int(self._moving())}"
            case "REF":
                self._start_move(0)
                return "OK"
            case "HALT":
                self._halt()
                return "OK"
            case "BEAM ON" | "BEAM OFF":
                self.beam_on = line == "BEAM ON"
                return line
        return "ERR 1 unknown command"

    def _next_fault(self, line: str) -> str | None:
        only = self.faults.only
        if only is not None and line.partition(" ")[0] not in only and line not in only:
            return None
        if self._script:
            return self._script.pop(0)
        draw = self._rng.random()
        for kind, rate in self.faults.rates.items():
            if draw < rate:
                return kind
            draw -= rate
        return None

    def _handle(self, line: str) -> None:
        self.received.append(line)
        fault = self._next_fault(line)
        if fault == "disconnect":
            self.disconnected = True
            self._close_master()
            return
        if fault == "stall":
            self._stop.wait(self.faults.stall_s)
            return
        if fault == "error":
            self._send(b"ERR 7 injected fault\r\n")
            return
        reply = self._execute(line, offset=fault == "offset").encode("ascii")
        if fault == "garbage":
            pool = np.r_[0x20:0x7F, 0x80:0x100]
            self._send(bytes(self._rng.choice(pool, 12).tolist()) + b"\r\n")
        elif fault == "partial":
            self._send(reply[: max(1, len(reply) // 2)])
        else:
            self._send(reply + b"\r\n")

    def _send(self, data: bytes) -> None:
        try:
            os.write(self._master, data)
        except OSError:
            self._stop.set()

    def _serve(self) -> None:
        buffer = b""
        while not self._stop.is_set() and self._master >= 0:
            ready, _, _ = select.select([self._master], [], [], 0.02)
            if not ready:
                continue
            try:
                chunk = os.read(self._master, 4096)
            except OSError:
                time.sleep(0.01)  # no reader on the slave side yet
                continue
            buffer += chunk
            while not self._stop.is_set() and self._master >= 0:
                cut = min(
                    (i for i in (buffer.find(b"\r"), buffer.find(b"\n")) if i >= 0), default=-1
                )
                if cut < 0:
                    break
                line, buffer = buffer[:cut], buffer[cut + 1 :]
                text = line.decode("ascii", errors="replace").strip()
                if text:
                    self._handle(text)
