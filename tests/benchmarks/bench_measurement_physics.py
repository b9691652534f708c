"""Benchmark: the measurement-physics modules on a prediction-sized scan (240 imbalances, as
``aligner/prediction.py`` scans), against their brute-force references where one exists.

* Fisher information of the post-selected events (closed-form branches on an adaptive grid)
  against the FFT grid with a numerical derivative (per imbalance).
* Exact phase readout (photon-number basis) at N = 25 and 400 against the QuTiP computation
  (per imbalance).
* Exact beam at a detector after a lens (moments) and the split-detector signal.
* Variance of a switched on/off estimate with 1/f noise for 100 and 10 000 cycles.

Run: ``python tests/benchmarks/bench_measurement_physics.py``. Prints times and ratios; asserts
nothing.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "unit"))

from test_physics_information import grid_information
from test_physics_phase import qutip_phase_distribution

from aligner.physics.branches import moments
from aligner.physics.channels import analyzer_effect
from aligner.physics.information import post_selected_information
from aligner.physics.jones import PAULI, density_from_vector, linear_vector
from aligner.physics.noise import NoiseSpectrum, switched_variance
from aligner.physics.phase import phase_moments
from aligner.physics.propagation import detector_branches, focal_plane
from aligner.physics.splitdetector import split_branches

SCAN = 240
Z = PAULI["HV"]


def timed(func, repeat=3):
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    rho = density_from_vector(linear_vector(np.pi / 4))
    eps = np.geomspace(1e-4, 0.7, SCAN)
    effect = analyzer_effect(-np.pi / 4 + eps, 1e5, 0.9)

    info = timed(lambda: post_selected_information(rho, effect, Z, 0.05, 1.0)) / SCAN
    grid = timed(lambda: grid_information(rho, effect[SCAN // 2], Z, 0.05, 1.0, "position"), 1)
    print(f"Fisher information: {info * 1e6:.0f} us per imbalance (scan of {SCAN})")
    print(f"  brute-force grid: {grid * 1e3:.0f} ms per imbalance; ratio {grid / info:.3g}")

    for photons in (25.0, 400.0):
        g = 0.3 / (2 * np.sqrt(photons))
        exact = timed(lambda p=photons, s=g: phase_moments(rho, effect, Z, s, p)) / SCAN
        dim = int(photons + 14 * np.sqrt(photons) + 30)
        qt = timed(lambda p=photons, s=g, d=dim: qutip_phase_distribution(
            rho, effect[SCAN // 2], Z, s, p, d), 1)  # fmt: skip
        print(f"exact phase readout N = {photons:g}: {exact * 1e6:.0f} us per imbalance; "
              f"QuTiP {qt * 1e3:.0f} ms, ratio {qt / exact:.3g}")  # fmt: skip

    def lens_readout():
        beam = detector_branches(rho, effect, Z, 1e-6, 0.5, 633e-6, "kick", 0.0, focal_plane(200.0))
        moments(beam)
        split_branches(beam, 0.01)

    lens = timed(lens_readout) / SCAN
    print(f"beam in a focal plane + split signal: {lens * 1e6:.1f} us per imbalance")

    spectrum = NoiseSpectrum.from_rms(1.0, 0.5)
    for cycles in (100, 10_000):
        t = timed(lambda c=cycles: switched_variance(spectrum, 1.0, 0.3, c))
        print(f"switched variance, {cycles} cycles: {t * 1e3:.2f} ms")


if __name__ == "__main__":
    main()
