"""Desk benchmark: start-up to the first full frame, and keystroke to the new weak value on
screen (prints the figures next to their goals; not collected by pytest).

The real app runs headless through Textual's test harness (Pilot), on the demo bench with
simulated devices and a temporary run log, at 120x36 cells. A "frame" is the moment the app
hands a screen update to its driver (what a terminal would draw then).

1. Start-up: a fresh interpreter per run; from just before the process starts to the first
   frame in which the bench screen shows the prediction (readings, weak value, detector
   rate). The limits and the working-point curves follow from a thread; the time until they
   are drawn is printed too. Goal: <= 1.5 s to the first full frame.
2. Keystroke: ``up`` on the imbalance mount's reading, sent the way a terminal sends it (a
   key event to the driver), to the first frame that shows the weak value the engine
   predicts at the new reading. Keys one at a time (an operator stepping, 0.15 s apart), and
   in bursts (key repeat, 30 keys/s: the latency of the last key of each burst). Goal: median
   <= 50 ms.

Run: python tests/benchmarks/bench_desk.py [--runs N] [--keys N]
"""

from __future__ import annotations

import argparse
import asyncio
import json
import statistics
import subprocess
import sys
import tempfile
import time

START_GOAL_S = 1.5
KEY_GOAL_S = 0.050
SIZE = (120, 36)

#: The child process: start the desk, print the times (s since ``argv[1]``, a ``time.time``).
_CHILD = r"""
import asyncio, json, sys, tempfile, time
T0 = float(sys.argv[1])
SIZE = (int(sys.argv[2]), int(sys.argv[3]))
from aligner.tui.app import DeskApp, make_app
frames = []
original = DeskApp._display
def display(self, screen, renderable):
    original(self, screen, renderable)
    if renderable is not None:
        frames.append(time.time())
DeskApp._display = display

async def main():
    with tempfile.TemporaryDirectory() as tmp:
        app = make_app("demo", db=f"{tmp}/runs.sqlite")
        async with app.run_test(size=SIZE) as pilot:
            first = limits = None
            for _ in range(4000):
                await asyncio.sleep(0.002)
                screen = app.screen
                try:
                    shown = str(screen.query_one("#prediction-numbers").render()).strip()
                    plots = screen.query_one("#bench-plots")
                except Exception:
                    continue
                if first is None and shown:
                    first = time.time()
                if limits is None and plots.curve is not None:
                    limits = time.time()
                if first and limits and frames and frames[-1] > limits:
                    break
            after = lambda t: min(f for f in frames if f >= t)
            print(json.dumps({"first": after(first) - T0, "limits": after(limits) - T0}))
asyncio.run(main())
"""


def start_up(runs: int) -> tuple[list[float], list[float]]:
    """(first full frame, limits drawn) in s since just before the process started."""
    first, limits = [], []
    for _ in range(runs):
        t0 = time.time()
        out = subprocess.run(
            [sys.executable, "-c", _CHILD, repr(t0), *map(str, SIZE)],
            capture_output=True,
            text=True,
            check=True,
            timeout=120,
        )
        times = json.loads(out.stdout.strip().splitlines()[-1])
        first.append(times["first"])
        limits.append(times["limits"])
    return first, limits


async def keystrokes(n: int, burst: int) -> tuple[list[float], list[float]]:
    """Latencies (s) of single keys and of the last key of bursts of ``burst`` keys."""
    from textual import events

    from aligner.prediction import format_weak_value
    from aligner.tui.app import DeskApp, make_app

    frames: list[float] = []
    original = DeskApp._display

    def display(self: DeskApp, screen: object, renderable: object) -> None:
        original(self, screen, renderable)  # type: ignore[arg-type]
        if renderable is not None:
            frames.append(time.perf_counter())

    DeskApp._display = display  # type: ignore[method-assign]
    with tempfile.TemporaryDirectory() as tmp:
        app = make_app("demo", db=f"{tmp}/runs.sqlite")
        async with app.run_test(size=SIZE) as pilot:
            await pilot.pause(2.0)
            panel = app.screen.query_one("#prediction")
            shown: list[tuple[float, str]] = []  # (when, weak value) of every update
            show = panel.show

            def recorded(p: object) -> None:
                show(p)
                shown.append((time.perf_counter(), format_weak_value(complex(p.weak_value), 5)))

            panel.show = recorded  # type: ignore[method-assign]
            mount = app.backend.bench.imbalance_mount
            step = app.backend.bench.mounts[mount].resolution_deg

            async def press(count: int, gap_s: float) -> float:
                expected_reading = app.readings[mount] + count * step
                p = app.backend.predict({**app.readings, mount: expected_reading})
                wanted = format_weak_value(complex(p.weak_value), 5)
                t0 = 0.0
                for k in range(count):
                    t0 = time.perf_counter()
                    app._driver.send_message(events.Key("up", None))  # type: ignore[union-attr]
                    if k < count - 1:
                        await asyncio.sleep(gap_s)
                for _ in range(20000):
                    at = [t for t, value in shown if t >= t0 and value == wanted]
                    drawn = [f for f in frames if at and f >= at[0]]
                    if drawn:
                        return drawn[0] - t0
                    await asyncio.sleep(0.0005)
                raise RuntimeError("the new weak value never reached the screen")

            single = []
            for _ in range(n):
                single.append(await press(1, 0.0))
                await asyncio.sleep(0.15)
            bursts = []
            for _ in range(max(1, n // 5)):
                bursts.append(await press(burst, 1 / 30))
                await asyncio.sleep(0.4)
    return single, bursts


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5, help="start-ups to time (default 5)")
    parser.add_argument("--keys", type=int, default=40, help="single keys to time (default 40)")
    args = parser.parse_args()

    first, limits = start_up(args.runs)
    med = statistics.median(first)
    print(f"desk start-up to the first full frame ({args.runs} runs, {SIZE[0]}x{SIZE[1]})")
    print(f"  median {med:.3f} s  (min {min(first):.3f}, max {max(first):.3f})")
    print(f"  goal <= {START_GOAL_S} s: ratio {med / START_GOAL_S:.2f} of the goal")
    print(f"  limits and working-point curves drawn: median {statistics.median(limits):.3f} s")

    single, bursts = asyncio.run(keystrokes(args.keys, 10))
    med = statistics.median(single)
    print(f"keystroke (one step of a reading) to the new weak value on screen ({len(single)} keys)")
    print(f"  median {med * 1e3:.1f} ms  (90th percentile {_p90(single) * 1e3:.1f} ms)")
    print(f"  goal <= {KEY_GOAL_S * 1e3:.0f} ms: ratio {med / KEY_GOAL_S:.2f} of the goal")
    print(
        f"  bursts of 10 keys at 30/s, last key: median "
        f"{statistics.median(bursts) * 1e3:.1f} ms ({len(bursts)} bursts)"
    )


def _p90(values: list[float]) -> float:
    return sorted(values)[int(0.9 * (len(values) - 1))]


if __name__ == "__main__":
    main()
