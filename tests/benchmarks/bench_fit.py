"""Benchmark: 721-point null-scan fit (median time, target < 50 ms; ratio to
scipy.optimize.curve_fit of the same forward model) and null-search counter reads.
Run: python tests/benchmarks/bench_fit.py"""

import statistics
import time

import numpy as np
from scipy.optimize import curve_fit

from aligner.bench import load_bench
from aligner.fit.csvdata import CountScan
from aligner.fit.null import fit_null
from aligner.fit.nullsearch import search_null
from aligner.fit.scanmodel import detected_rate, with_analyzer_extinction, with_offset
from aligner.run.guard import DetectorGuard
from aligner.run.simbench import SimBench, true_bench

bench = load_bench("demo")
truth = true_bench(bench)
r = np.linspace(131.0, 139.0, 721)
dwell = 0.01
counts = (
    np.random.default_rng(0)
    .poisson(detected_rate(truth, {"analyzer": r}, truth.source.photon_rate) * dwell)
    .astype(float)
)
scan = CountScan(r, counts, None, None, "bench")


def curve(x, shift, ln_er, ln_s):
    b = with_analyzer_extinction(with_offset(bench, "analyzer", shift), np.exp(ln_er))
    return detected_rate(b, {"analyzer": x}, bench.source.photon_rate * np.exp(ln_s)) * dwell


def median_ms(fn, repeats=15):
    fn()
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return 1e3 * statistics.median(times)


ml = median_ms(lambda: fit_null(bench, scan, dwell_s=dwell))
start = [0.0, np.log(bench.analyzer.extinction_ratio), 0.0]
ls = median_ms(lambda: curve_fit(curve, r, counts, p0=start, sigma=np.sqrt(np.maximum(counts, 1))))
print(f"721-point null fit (Poisson ML): median {ml:.1f} ms (target < 50 ms)")
print(f"curve_fit of the same model:      median {ls:.1f} ms; ratio ML/curve_fit = {ml / ls:.2f}")

reads = []
for seed in range(5):
    sim = SimBench(bench, seed=seed)
    res = search_null(
        bench,
        sim.mounts["analyzer"],
        sim.counter,
        DetectorGuard(bench, has_shutter=True),
        shutter=sim.shutter,
    )
    reads.append(res.counter_reads)
    print(
        f"null search seed {seed}: {res.counter_reads} counter reads, {res.rounds} rounds, "
        f"converged={res.converged}, error {res.null_reading_err_deg:.4f} deg "
        f"(resolution {bench.mounts['analyzer'].resolution_deg} deg)"
    )
print(f"null search: median {statistics.median(reads)} counter reads")
