"""Controller emulators behind a pseudo-terminal (or a TCP socket), for driving the real drivers.

``Emulator(shape)`` serves one protocol shape (:mod:`.emulator_shapes`) from a background
thread: on a pty pair (POSIX only) whose slave path is ``port``, or on a local TCP socket whose
``port`` is ``socket://127.0.0.1:N``. ``open_mount(emu.port, profile=...)`` then goes through
pyserial, a real tty or socket, and the real framing. The default shape, ``basic``, speaks the
shipped ``example-mount`` and ``example-counter`` profiles.

The shape's state is open to tests through ``emu.device`` (a test-only back door: force a
position, a state, a refusal); ``received`` lists every command received.

Faults (``Faults``): each received command may be hit by one fault, first from ``script`` (one
entry per command, ``None`` for none), then at random with the given probabilities; ``only``
restricts faults to some command words (``{"AT?"}``). Kinds:

- ``garbage``: the command is carried out but the reply is replaced by random bytes;
- ``partial``: the command is carried out, half the reply is sent without its end marker;
- ``stall``: the controller hangs for ``stall_s`` and the command is lost;
- ``error``: the command is refused, in the shape's own way, with the reason "injected fault";
- ``disconnect``: the port vanishes and the emulator ends;
- ``offset``: a move ends ``offset_steps`` device units away from its target (a stalled motor);
- ``late``: the command is carried out, its reply comes ``late_s`` later than it should.
"""

from __future__ import annotations

import contextlib
import fcntl
import heapq
import os
import select
import socket
import threading
import time
import tty
from dataclasses import dataclass, field
from types import TracebackType
from typing import Any, Self

import numpy as np

from aligner.errors import InputError

from .emulator_shapes import SHAPES, Answer, Shape

__all__ = ["FAULT_KINDS", "Emulator", "Faults"]

FAULT_KINDS = ("disconnect", "error", "garbage", "late", "offset", "partial", "stall")
_TICK_S = 0.002


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
    late: float = 0.0
    only: frozenset[str] | None = None
    stall_s: float = 0.3
    offset_steps: int = 50
    late_s: float = 0.3
    rates: dict[str, float] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        bad = [kind for kind in self.script if kind is not None and kind not in FAULT_KINDS]
        if bad:
            raise InputError(f"Faults.script: unknown fault {bad[0]!r}; allowed: {FAULT_KINDS}")
        rates = {kind: float(getattr(self, kind)) for kind in FAULT_KINDS}
        if any(not 0.0 <= r <= 1.0 for r in rates.values()) or sum(rates.values()) > 1.0:
            raise InputError(f"Faults: probabilities must be in 0..1 and add up to <= 1: {rates}")
        object.__setattr__(self, "rates", rates)


class _Pty:
    """The master end of a pty pair; the slave's path is the port."""

    def __init__(self) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        flags = fcntl.fcntl(self.master, fcntl.F_GETFL)
        fcntl.fcntl(self.master, fcntl.F_SETFL, flags | os.O_NONBLOCK)
        self.port = os.ttyname(self.slave)

    def read(self, wait_s: float) -> bytes | None:
        """Bytes received (b"" for none yet); None once the link is gone."""
        if self.master < 0:
            return None
        ready, _, _ = select.select([self.master], [], [], wait_s)
        if not ready:
            return b""
        try:
            return os.read(self.master, 4096)
        except BlockingIOError:
            return b""
        except OSError:  # no reader on the slave side yet
            time.sleep(0.01)
            return b""

    def write(self, data: bytes) -> None:
        # a full buffer drops bytes, as a real line would lose them
        with contextlib.suppress(OSError):
            os.write(self.master, data)

    def hang_up(self) -> None:
        if self.master >= 0:
            os.close(self.master)
            self.master = -1

    def close(self) -> None:
        self.hang_up()
        if self.slave >= 0:
            os.close(self.slave)
            self.slave = -1


class _Tcp:
    """A listening socket on 127.0.0.1 serving one client at a time."""

    def __init__(self) -> None:
        self.server = socket.create_server(("127.0.0.1", 0))
        self.server.setblocking(False)
        self.client: socket.socket | None = None
        self.port = f"socket://127.0.0.1:{self.server.getsockname()[1]}"
        self.gone = False

    def read(self, wait_s: float) -> bytes | None:
        if self.gone:
            return None
        ready, _, _ = select.select([self.client or self.server], [], [], wait_s)
        if not ready:
            return b""
        if self.client is None:
            self.client, _ = self.server.accept()
            self.client.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            return b""
        try:
            data = self.client.recv(4096)
        except OSError:
            data = b""
        if not data:  # the client closed: wait for the next one
            self.client.close()
            self.client = None
        return data

    def write(self, data: bytes) -> None:
        if self.client is not None:
            with contextlib.suppress(OSError):
                self.client.sendall(data)

    def hang_up(self) -> None:
        self.gone = True
        if self.client is not None:
            self.client.close()
            self.client = None

    def close(self) -> None:
        self.hang_up()
        self.server.close()


class Served:
    """The serving thread of an emulator and its context-manager life cycle: ``with`` starts
    ``_serve`` on a daemon thread, leaving stops it and calls :meth:`release`."""

    def __init__(self, name: str) -> None:
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._serve, name=name, daemon=True)

    def _serve(self) -> None:
        raise NotImplementedError

    def release(self) -> None:
        """Close what the emulator holds (its link) once the thread has stopped."""
        raise NotImplementedError

    def __enter__(self) -> Self:
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
        """Stop serving and release the link."""
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout=5.0)
        self.release()


class Emulator(Served):
    """An emulated controller of one shape (see the module docstring); a context manager.

    ``shape`` names a shape of :data:`~.emulator_shapes.SHAPES` (default ``basic``);
    ``options`` go to the shape (e.g. ``speed_steps_s``, ``counts_fn``). The basic shape's
    state also shows as ``position_steps``, ``move_log`` and ``beam_on``.
    """

    def __init__(
        self,
        shape: str = "basic",
        *,
        faults: Faults | None = None,
        seed: int | None = None,
        **options: Any,
    ) -> None:
        if shape not in SHAPES:
            raise InputError(f"unknown emulator shape {shape!r}; allowed: {', '.join(SHAPES)}")
        self.faults = faults or Faults()
        self.rng = np.random.default_rng(seed)
        self.received: list[str] = []
        self.disconnected = False
        self._script = list(self.faults.script)
        self._queue: list[tuple[float, int, bytes]] = []
        self._sequence = 0
        self.device: Shape = SHAPES[shape](self._send_later, self.rng, **options)
        self._link: _Pty | _Tcp = _Tcp() if self.device.transport == "tcp" else _Pty()
        self.port = self._link.port
        super().__init__(f"emulator-{shape}")

    def release(self) -> None:
        self._link.close()

    # -- the basic shape's state, by its old names -----------------------------------------

    @property
    def position_steps(self) -> int:
        """Where the (first) axis is now, in device units."""
        return round(self.device.axis().position)

    @property
    def move_log(self) -> list[float]:
        """Every move target received by the (first) axis, in device units."""
        return self.device.axis().move_log

    @property
    def beam_on(self) -> bool:
        """True while the emulated shutter is open."""
        return self.device.beam_open

    # -- serving ---------------------------------------------------------------------------

    def _send_later(self, data: bytes, delay_s: float = 0.0) -> None:
        """Queue ``data`` to go out after ``delay_s`` (in order of due time)."""
        self._sequence += 1
        heapq.heappush(self._queue, (time.monotonic() + delay_s, self._sequence, data))

    def _next_fault(self, command: bytes) -> str | None:
        only = self.faults.only
        if only is not None and self.device.word(command) not in only:
            return None
        if self._script:
            return self._script.pop(0)
        draw = self.rng.random()
        for kind, rate in self.faults.rates.items():
            if draw < rate:
                return kind
            draw -= rate
        return None

    def _handle(self, command: bytes) -> None:
        self.received.append(command.decode("latin-1").strip())
        fault = self._next_fault(command)
        if fault == "disconnect":
            self.disconnected = True
            self._link.hang_up()
            return
        if fault == "stall":
            self._stop.wait(self.faults.stall_s)
            return
        if fault == "error":
            answer = self.device.refuse(command, "injected fault")
        else:
            offset = self.faults.offset_steps if fault == "offset" else 0
            answer = self.device.handle(command, offset)
        if answer is None:
            return
        if isinstance(answer, bytes):
            answer = Answer(answer)
        self._answer(answer, fault)

    def _answer(self, answer: Answer, fault: str | None) -> None:
        data = answer.data
        end = self.device.reply_end if answer.end is None else answer.end
        if data is None:  # a command without a reply: only its echo and prompt
            data, end = b"", b""
        if fault == "garbage":
            pool = np.r_[0x20:0x7F, 0x80:0x100]
            data, end = bytes(self.rng.choice(pool, 12).tolist()), self.device.reply_end
        if fault == "partial":
            self._send_later(answer.prefix + data[: max(1, len(data) // 2)], answer.after_s)
            return
        late = self.faults.late_s if fault == "late" else 0.0
        self._send_later(answer.prefix + data + end + answer.suffix, answer.after_s + late)

    def _flush(self) -> None:
        now = time.monotonic()
        while self._queue and self._queue[0][0] <= now:
            self._link.write(heapq.heappop(self._queue)[2])

    def _serve(self) -> None:
        buffer = b""
        while not self._stop.is_set():
            chunk = self._link.read(_TICK_S)
            if chunk is None:
                return
            buffer += chunk
            commands, buffer = self.device.split(buffer)
            for command in commands:
                if self._stop.is_set() or self.disconnected:
                    return
                self._handle(command)
            self.device.tick()
            self._flush()


def main(argv: list[str] | None = None) -> int:
    """``python -m aligner_drivers.emulator [SHAPE]``: serve one shape until Ctrl-C, printing
    the port to give ``aligner device show/try`` (no hardware, no light: for trying a profile)."""
    import argparse
    import signal

    parser = argparse.ArgumentParser(
        prog="python -m aligner_drivers.emulator",
        description="Serve an emulated controller of one protocol shape on a pseudo-terminal "
        "(or a local TCP socket) until Ctrl-C, to try a profile with 'aligner device' without "
        "hardware.",
        allow_abbrev=False,
    )
    parser.add_argument(
        "shape", nargs="?", default="basic", help=f"one of: {', '.join(SHAPES)} (default basic)"
    )
    args = parser.parse_args(argv)
    if args.shape not in SHAPES:
        parser.error(f"unknown shape {args.shape!r}; allowed: {', '.join(SHAPES)}")
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    with Emulator(args.shape) as emu:
        print(f"serving the {args.shape} shape on {emu.port} (Ctrl-C stops)", flush=True)
        try:
            while not stop.wait(0.2) and not emu.disconnected:
                pass
        except KeyboardInterrupt:
            pass
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
