"""The speed table in one run: each figure next to its goal, as a time or a ratio.

Run: ``python tests/benchmarks/bench_speed.py [--settings 1000000] [--quick]``

* ``aligner.predict`` with every field (weak value, leak, linear and exact amplification,
  imbalance, detector, SNR) per setting, on random settings of the demo bench's two stepped
  mounts, against a sympy-lambdified ideal intensity of the same chain timed in the same run
  (goal <= 2x; the compact form, the form one ``simplify()`` gives, and the form as built),
  against the density-matrix definitions the closed form replaced
  (``aligner.prediction.reference``, the path before it; stretch goal 10x faster), and against
  py-pol (goal >= 1000x faster per setting);
* ``aligner.plan`` with its default tolerance budget (1e5 Monte Carlo samples), median;
* ``aligner predict demo --json`` and ``aligner derive demo`` wall times (fresh processes), and
  ``derive`` of a bench with odd numbers and no phase mount.

Times are the best (per-setting figures) or the median (whole commands) of several repeats;
the machine may be shared, so every ratio compares figures taken in the same run. Asserts
nothing.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_core import best_time, lambdified_ideal, pypol_chain

NO_PHASE_BENCH = """
name = "odd numbers, no phase mount"
wavelength_nm = 780.0
imbalance_mount = "analyzer"
[source]
angle_deg = 12.3
extinction_ratio = 1.0e5
photon_rate = 2.0e6
[[pre]]
type = "hwp"
mount = "pre_hwp"
retardance_waves = 0.4937
[[pre]]
type = "qwp"
angle_deg = 31.7
retardance_waves = 0.2437
[coupling]
observable = "HV"
pointer_sigma = 300.0
strength = 0.8
units = "um"
[analyzer]
mount = "analyzer"
extinction_ratio = 1.0e3
transmission = 0.95
[detector]
efficiency = 0.6
[mounts.pre_hwp]
reading_deg = 28.9
[mounts.analyzer]
reading_deg = 128.3
travel_deg = [-10.0, 350.0]
"""


def row(label: str, value: str, goal: str, ok: bool | None) -> None:
    verdict = "" if ok is None else ("PASS" if ok else "MISS")
    print(f"  {label:<58} {value:>16}   goal {goal:<18} {verdict}")


def median_wall(cmd: list[str], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        subprocess.run(cmd, capture_output=True, check=True)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def full_prediction(bench, readings) -> Callable[[], object]:
    from aligner.prediction import predict

    def run() -> object:
        p = predict(bench, readings)
        return p.imbalance_deg, p.snr_per_sqrt_s  # the fields computed on first access

    return run


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--settings", type=int, default=1_000_000)
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    args = parser.parse_args()
    repeats = 2 if args.quick else 5

    from aligner.bench import load_bench
    from aligner.planning import plan
    from aligner.prediction.reference import reference_prediction

    bench = load_bench("demo")
    a_name, q_name = bench.imbalance_mount, bench.phase_mount
    rng = np.random.default_rng(2026)
    n = args.settings
    readings = {a_name: rng.uniform(0, 180, n), q_name: rng.uniform(0, 180, n)}
    print(f"demo bench, {n} random settings of {a_name!r} and {q_name!r}")

    t_predict = best_time(full_prediction(bench, readings), repeats) / n
    one = {a_name: 136.2, q_name: 45.0}
    t_one = best_time(full_prediction(bench, one), 50)
    t_ref = best_time(lambda: reference_prediction(bench, readings), 1) / n
    m = max(n // 10, 1)
    k = 10_000
    pypol = {k_: v[:k] for k_, v in readings.items()}
    t_pypol = best_time(lambda: pypol_chain(bench, pypol), 1) / k
    compact, once, as_built = lambdified_ideal(bench)
    ta = np.deg2rad(bench.mounts[a_name].element_angle_deg(readings[a_name]))
    tq = np.deg2rad(bench.mounts[q_name].element_angle_deg(readings[q_name]))
    lam = {
        "compact": best_time(lambda: compact(ta, tq), repeats) / n,
        "simplify() once": best_time(lambda: once(ta, tq), repeats) / n,
        "as built": best_time(lambda: as_built(ta[:m], tq[:m]), 1) / m,
    }

    print("predict, per setting")
    row("every field (imbalance and SNR included)", f"{t_predict * 1e9:.0f} ns", "", None)
    row("one setting (a keystroke on the desk), every field", f"{t_one * 1e6:.0f} us", "", None)
    for label, t in lam.items():
        row(f"lambdified ideal intensity, {label}", f"{t * 1e9:.0f} ns", "", None)
        ratio = t_predict / t
        row(f"  predict / lambdified ({label})", f"{ratio:.2f}x", "<= 2x", ratio <= 2)
    speedup = t_ref / t_predict
    row(
        "density-matrix definitions (the path before), per setting",
        f"{t_ref * 1e9:.0f} ns",
        "",
        None,
    )
    row("  speed-up of predict over it", f"{speedup:.1f}x", ">= 10x (stretch)", speedup >= 10)
    ratio = t_pypol / t_predict
    row("py-pol (vectorized Mueller), per setting", f"{t_pypol * 1e9:.0f} ns", "", None)
    row("  py-pol / predict", f"{ratio:.0f}x", ">= 1000x", ratio >= 1000)

    plan(bench, 40.0)  # imports and the null caches
    times = []
    for _ in range(3 if args.quick else 11):
        start = time.perf_counter()
        plan(bench, 40.0)
        times.append(time.perf_counter() - start)
    t_plan = statistics.median(times)
    print("plan, demo bench, amplification 40, default tolerance budget (1e5 samples)")
    row("median", f"{t_plan * 1e3:.1f} ms", "<= 25 ms", t_plan <= 0.025)

    exe = [sys.executable, "-m", "aligner"]
    print("commands (fresh processes, median)")
    t_json = median_wall([*exe, "predict", "demo", "--json"], repeats)
    row("aligner predict demo --json", f"{t_json:.2f} s", "<= 0.5 s", t_json <= 0.5)
    t_derive = median_wall([*exe, "derive", "demo"], 3)
    row("aligner derive demo", f"{t_derive:.2f} s", "<= 2 s", t_derive <= 2.0)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "odd.toml"
        path.write_text(NO_PHASE_BENCH, encoding="utf-8")
        t_odd = median_wall([*exe, "derive", str(path)], 3)
    row("aligner derive, odd numbers, no phase mount", f"{t_odd:.2f} s", "<= 2 s", t_odd <= 2.0)
    return 0


if __name__ == "__main__":
    sys.exit(main())
