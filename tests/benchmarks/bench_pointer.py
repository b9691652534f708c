"""Benchmark: the exact pointer response, vectorized over 1e6 (rho, E) pairs, against the
brute-force grid integration of the pointer wave function (fewer pairs, scaled per pair), and
the time of ``predict`` on 1e6 readings and the wall time of ``aligner predict demo --json``.

Run: ``python tests/benchmarks/bench_pointer.py``. Prints times and ratios; asserts nothing.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "unit"))

from test_weak import grid_response, random_hermitian, random_psd

from aligner.bench import load_bench
from aligner.physics.weak import pointer_response
from aligner.prediction import predict

PAIRS = 1_000_000
GRID_PAIRS = 20


def main() -> None:
    rng = np.random.default_rng(0)
    m = rng.normal(size=(PAIRS, 2, 2)) + 1j * rng.normal(size=(PAIRS, 2, 2))
    rho = m @ np.conj(np.swapaxes(m, -1, -2))
    rho /= np.trace(rho, axis1=-2, axis2=-1).real[:, None, None]
    e = rng.normal(size=(PAIRS, 2, 2)) + 1j * rng.normal(size=(PAIRS, 2, 2))
    effect = e @ np.conj(np.swapaxes(e, -1, -2))
    a = random_hermitian(rng)

    start = time.perf_counter()
    pointer_response(rho, effect, a, 0.3, 1.0)
    exact = (time.perf_counter() - start) / PAIRS

    start = time.perf_counter()
    for _ in range(GRID_PAIRS):
        grid_response(random_psd(rng), random_psd(rng), a, 0.3, 1.0)
    grid = (time.perf_counter() - start) / GRID_PAIRS

    print(f"exact response: {PAIRS:.0e} pairs, {exact * 1e9:.1f} ns per pair")
    print(f"grid integration: {GRID_PAIRS} pairs, {grid * 1e6:.0f} us per pair")
    print(f"ratio grid/exact per pair: {grid / exact:.3g}")

    bench = load_bench("demo")
    readings = np.linspace(130.0, 140.0, PAIRS)
    start = time.perf_counter()
    predict(bench, {"analyzer": readings})
    print(f"predict(demo) on {PAIRS:.0e} analyzer readings: {time.perf_counter() - start:.2f} s")

    runs = []
    for _ in range(3):
        start = time.perf_counter()
        subprocess.run(
            [sys.executable, "-m", "aligner", "predict", "demo", "--json"],
            check=True,
            capture_output=True,
        )
        runs.append(time.perf_counter() - start)
    print(f"aligner predict demo --json: best of 3 {min(runs):.3f} s wall time")


if __name__ == "__main__":
    main()
