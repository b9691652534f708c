"""Report benchmark (prints times next to their goals; not collected by pytest).

1. ``aligner log report RUN`` with the plot, wall time of the whole command as a user runs it
   (a fresh process: imports, the run's stored bench, the result with its fits, the SVG), on a
   12-point and a 40-point simulated run of the demo bench. Goal: <= 2 s.
2. Inside one process: the result alone (:func:`aligner.run.result.run_result`: predictions,
   coupling fit, leak-curve fit with its likelihood-ratio verdict, information, limits) and the
   plot alone, each after a first call that pays the imports.

Run: python tests/benchmarks/bench_report.py
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

GOAL_S = 2.0
REPEATS = 5


def command(*args: str) -> float:
    """Wall time (s) of ``aligner ARGS`` in a fresh process."""
    start = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "aligner", *args], capture_output=True, text=True, check=False
    )
    elapsed = time.perf_counter() - start
    if done.returncode != 0:
        raise SystemExit(f"aligner {' '.join(args)} failed:\n{done.stderr}")
    return elapsed


def median_s(fn, repeats: int = REPEATS) -> float:
    fn()
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    from aligner.run.log import read_run
    from aligner.run.report import _plot
    from aligner.run.result import run_result

    with tempfile.TemporaryDirectory() as folder:
        db = str(Path(folder) / "runs.sqlite")
        for run, points in ((1, 12), (2, 40)):
            command(
                "sweep", "demo", "--schedule", f"linear:0.2:2.0:{points}", "--dwell", "0.5",
                "--seed", "1", "--db", db,
            )  # fmt: skip
            out = str(Path(folder) / f"report-{run}")
            walls = [
                command("log", "report", str(run), "--db", db, "--out", out, "--force")
                for _ in range(REPEATS)
            ]
            wall = statistics.median(walls)
            print(
                f"aligner log report ({points} points, with the plot): median {wall:.2f} s "
                f"(goal <= {GOAL_S:g} s; ratio {wall / GOAL_S:.2f}); "
                f"slowest of {REPEATS} {max(walls):.2f} s"
            )
            record, logged = read_run(run, db)
            result = run_result(record, logged)
            inside = median_s(lambda r=record, p=logged: run_result(r, p))
            svg = Path(folder) / f"plot-{run}.svg"
            drawing = median_s(lambda r=record, res=result, s=svg: _plot(r, res, s))
            print(f"  in one process: result {inside * 1e3:.0f} ms, plot {drawing * 1e3:.0f} ms")


if __name__ == "__main__":
    main()
