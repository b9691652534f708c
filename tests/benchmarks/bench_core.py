"""Benchmark of the optics core (foundation issue): prints timings and ratios against targets.

Run: ``python tests/benchmarks/bench_core.py [--settings 1000000] [--profile]``

* ``aligner.model.forward`` on the demo bench (density matrices, extinction, the whole chain)
  for N random settings of its two stepped mounts (imbalance and phase mounts);
* py-pol 1.3 on the same chain (Mueller calculus, incoherent finite-extinction analyzer,
  vectorized over settings; and a per-setting loop), fewer settings, scaled per setting;
* a sympy-lambdified (numpy backend) expression of the ideal transmitted intensity of the same
  chain (pure source, ideal analyzer), both simplified and as built;
* ``aligner --help`` wall time against ``python -c pass``.

Targets: forward >= 1000x faster per setting than py-pol; forward <= 2x the lambdified time;
``aligner --help`` < 5x ``python -c pass``. Timings are the best of several repeats.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats
import shutil
import subprocess
import sys
import time
from collections.abc import Callable

import numpy as np


def best_time(fn: Callable[[], object], repeats: int) -> float:
    """Shortest wall time (s) of ``repeats`` calls."""
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def pypol_chain(bench, readings: dict[str, np.ndarray]) -> np.ndarray:
    """Post-selection probability of the demo chain with py-pol Mueller matrices, vectorized.

    py-pol's retarder turns the other way from sympy's (see tests/unit/test_channels.py), so
    each fast axis is given to py-pol at theta + 90 deg.
    """
    from py_pol.mueller import Mueller
    from py_pol.stokes import Stokes

    from aligner.model import element_angles_deg

    angles = {k: np.deg2rad(v) for k, v in element_angles_deg(bench, readings).items()}
    n = np.broadcast(*angles.values()).size

    def angle(item) -> np.ndarray:
        a = angles[item.mount] if item.mount else np.deg2rad(item.angle_deg)
        return np.broadcast_to(a, (n,))

    src = bench.source
    d_s = 1 / src.extinction_ratio
    light = Stokes("source")
    light.general_azimuth_ellipticity(
        azimuth=angle(src), ellipticity=0, degree_pol=(1 - d_s) / (1 + d_s), intensity=1
    )
    for element in (*bench.pre, *bench.post):
        m = Mueller(element.key)
        if element.type == "rotator":
            m.retarder_circular(R=2 * angle(element))  # rotation by theta = circular R of 2 theta
        else:
            m.retarder_linear(
                R=2 * np.pi * (element.retardance_waves % 1.0), azimuth=angle(element) + np.pi / 2
            )
        light = m * light
    an = bench.analyzer
    passed, blocked = Mueller("pass"), Mueller("block")
    passed.diattenuator_perfect(azimuth=angle(an))
    blocked.diattenuator_perfect(azimuth=angle(an) + np.pi / 2)
    analyzer = passed * an.transmission + blocked * (an.transmission / an.extinction_ratio)
    return (analyzer * light).parameters.intensity()


def lambdified_ideal(bench) -> tuple[Callable, Callable, Callable]:
    """Ideal transmitted intensity T |<a| J_post J_pre |s>|^2 of the demo chain as functions of
    the analyzer and phase-mount element angles (rad), other mounts at their file readings:
    (compact, simplify() once, as built)."""
    import sympy as sp
    from sympy.physics.optics import polarization as spol

    t_a, t_q = sp.symbols("theta_a theta_q", real=True)
    symbols = {bench.imbalance_mount: t_a, bench.phase_mount: t_q}

    def angle(item):
        if item.mount in symbols:
            return symbols[item.mount]
        fixed = (
            bench.mounts[item.mount].element_angle_deg(bench.mounts[item.mount].reading_deg)
            if item.mount
            else item.angle_deg
        )
        return sp.rad(sp.nsimplify(fixed))

    def matrix(element):
        if element.type == "rotator":
            a = angle(element)
            return sp.Matrix([[sp.cos(a), -sp.sin(a)], [sp.sin(a), sp.cos(a)]])
        return spol.phase_retarder(
            angle(element), 2 * sp.pi * sp.nsimplify(element.retardance_waves)
        )

    vector = spol.jones_vector(angle(bench.source), 0)
    for element in (*bench.pre, *bench.post):
        vector = matrix(element) * vector
    vector = spol.linear_polarizer(angle(bench.analyzer)) * vector
    intensity = sp.nsimplify(bench.analyzer.transmission) * sp.expand_complex(
        (vector.H * vector)[0]
    )
    # what a notebook user gets from one simplify(), and the most compact form found by hand:
    # simplify, expand the trigonometry, simplify again
    once = sp.simplify(intensity)
    compact = sp.simplify(sp.expand_trig(once))
    return (
        sp.lambdify((t_a, t_q), compact, "numpy"),
        sp.lambdify((t_a, t_q), once, "numpy"),
        sp.lambdify((t_a, t_q), intensity, "numpy"),
    )


def wall_time(cmd: list[str], repeats: int) -> float:
    return best_time(lambda: subprocess.run(cmd, capture_output=True, check=True), repeats)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--settings", type=int, default=1_000_000)
    parser.add_argument("--pypol-settings", type=int, default=10_000)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--profile", action="store_true", help="cProfile one forward call")
    args = parser.parse_args()

    from aligner import model
    from aligner.bench import load_bench
    from aligner.model import forward

    bench = load_bench("demo")
    a_name, q_name = bench.imbalance_mount, bench.phase_mount
    rng = np.random.default_rng(2026)
    n = args.settings
    readings = {a_name: rng.uniform(0, 180, n), q_name: rng.uniform(0, 180, n)}
    print(
        f"demo bench, {n} random settings of {a_name!r} and {q_name!r}; "
        f"best of {args.repeats} repeats"
    )

    t_forward = best_time(lambda: forward(bench, readings), args.repeats)
    probability = forward(bench, readings).probability
    print(
        f"  aligner.model.forward      {t_forward:9.4f} s   {t_forward / n * 1e9:10.1f} ns/setting"
    )
    stokes_path = getattr(model, "forward_stokes", None)
    if stokes_path is not None:  # the Stokes fast path under forward, without the 2x2 matrices
        t_stokes = best_time(lambda: stokes_path(bench, readings), args.repeats)
        print(
            f"    of which forward_stokes  {t_stokes:9.4f} s   {t_stokes / n * 1e9:10.1f} "
            "ns/setting"
        )

    m = args.pypol_settings
    small = {k: v[:m] for k, v in readings.items()}
    t_pypol = best_time(lambda: pypol_chain(bench, small), max(1, args.repeats // 2))
    agree = np.max(np.abs(pypol_chain(bench, small) - probability[:m]))
    print(
        f"  py-pol, vectorized ({m})  {t_pypol:9.4f} s   {t_pypol / m * 1e9:10.1f} ns/setting"
        f"   (max |diff| vs forward {agree:.1e})"
    )
    k = 200
    few = [{name: v[i] for name, v in readings.items()} for i in range(k)]
    t_loop = best_time(lambda: [pypol_chain(bench, r) for r in few], 1)
    print(f"  py-pol, one call/setting ({k}) {t_loop:6.4f} s   {t_loop / k * 1e9:10.1f} ns/setting")

    simplified, once, as_built = lambdified_ideal(bench)
    mounts = bench.mounts
    ta = np.deg2rad(mounts[a_name].element_angle_deg(readings[a_name]))
    tq = np.deg2rad(mounts[q_name].element_angle_deg(readings[q_name]))
    t_simple = best_time(lambda: simplified(ta, tq), args.repeats)
    t_once = best_time(lambda: once(ta, tq), args.repeats)
    t_built = best_time(lambda: as_built(ta, tq), args.repeats)
    ideal_gap = np.max(np.abs(simplified(ta, tq) - probability))
    print(
        f"  sympy lambdified, compact    {t_simple:7.4f} s   "
        f"{t_simple / n * 1e9:10.1f} ns/setting"
        f"   (ideal; max |diff| vs forward {ideal_gap:.1e}, the extinction floor)"
    )
    print(f"  sympy lambdified, simplify() {t_once:7.4f} s   {t_once / n * 1e9:10.1f} ns/setting")
    print(f"  sympy lambdified, as built   {t_built:7.4f} s   {t_built / n * 1e9:10.1f} ns/setting")

    speedup = (t_pypol / m) / (t_forward / n)
    print("ratios")
    print(
        f"  py-pol (vectorized) / forward, per setting: {speedup:10.0f}x   target >= 1000x  "
        f"{'PASS' if speedup >= 1000 else 'MISS'}"
    )
    loop_speedup = (t_loop / k) / (t_forward / n)
    print(
        f"  py-pol (per setting) / forward, per setting: {loop_speedup:9.0f}x   target >= 1000x  "
        f"{'PASS' if loop_speedup >= 1000 else 'MISS'}"
    )
    for label, t_ref in (("compact", t_simple), ("simplify() once", t_once), ("as built", t_built)):
        ratio = t_forward / t_ref
        print(
            f"  forward / lambdified ({label}): {ratio:8.2f}x   target <= 2x  "
            f"{'PASS' if ratio <= 2 else 'MISS'}"
        )

    exe = shutil.which("aligner")
    base = wall_time([sys.executable, "-c", "pass"], 7)
    helps = [("python -m aligner --help", [sys.executable, "-m", "aligner", "--help"])]
    if exe:
        helps.append(("aligner --help", [exe, "--help"]))
    for label, cmd in helps:
        t_help = wall_time(cmd, 7)
        ratio = t_help / base
        print(
            f"  {label} / python -c pass: {t_help * 1e3:6.1f} ms / {base * 1e3:5.1f} ms = "
            f"{ratio:5.2f}x   target < 5x  {'PASS' if ratio < 5 else 'MISS'}"
        )

    if args.profile:
        profiler = cProfile.Profile()
        profiler.enable()
        forward(bench, readings)
        profiler.disable()
        pstats.Stats(profiler).sort_stats("tottime").print_stats(15)
    return 0


if __name__ == "__main__":
    sys.exit(main())
