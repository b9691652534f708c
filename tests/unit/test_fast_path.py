"""The closed-form Stokes path of ``predict`` against the definitions it replaces
(``aligner.prediction.reference``: density matrices, the pointer response summed in the
eigenbasis, the imbalance from stacked evaluations, the SNR by central differences) on random
benches of our own invention."""

from __future__ import annotations

import numpy as np
import pytest

from aligner.bench import parse_bench
from aligner.prediction import predict
from aligner.prediction.reference import reference_prediction

TYPES = ("hwp", "qwp", "retarder", "polarizer", "rotator")


def random_bench(rng: np.random.Generator):
    """A bench with random optics: every element kind, finite and perfect extinction, any
    observable, a mount on each arm, random pointer and detector."""

    def element(mount: str | None, kinds: tuple[str, ...] = TYPES) -> dict:
        # a rotator cannot be mounted (it looks the same however it is turned)
        kind = str(rng.choice([k for k in kinds if mount is None or k != "rotator"]))
        out: dict = {"type": kind, "angle_deg": float(rng.uniform(-90, 90))}
        if kind == "retarder":
            out["retardance_waves"] = float(rng.uniform(0.05, 0.95))
        if kind == "polarizer":
            out["extinction_ratio"] = float(10 ** rng.uniform(2, 6))
            out["transmission"] = float(rng.uniform(0.5, 1.0))
        if mount is not None:
            out["mount"] = mount
            del out["angle_deg"]
        return out

    readout = str(rng.choice(["position", "momentum"]))
    if rng.uniform() < 0.5:
        coupling = {"observable": str(rng.choice(["HV", "DA", "RL", "H", "V", "D", "A", "R"]))}
    else:
        coupling = {
            "observable": "axis",
            "axis": [float(x) for x in rng.normal(size=3)],
            "eigenvalues": [float(x) for x in rng.uniform(-2, 2, 2)],
        }
    coupling.update(
        readout=readout,
        pointer_sigma=float(rng.uniform(0.5, 3.0)),
        strength=float(10 ** rng.uniform(-3, 0)),
        units="um",
        jitter_rms=float(rng.uniform(0, 0.1)),
    )
    pulsed = rng.uniform() < 0.3
    detector = {
        "efficiency": float(rng.uniform(0.3, 1.0)),
        "dark_rate": float(rng.uniform(0, 500)),
        "dead_time_ns": float(rng.uniform(0, 60)),
    }
    if pulsed:
        detector.update(mode="pulsed", rep_rate_hz=1e6, gate_dark_probability=1e-5)
    return parse_bench(
        {
            "wavelength_nm": 800.0,
            "imbalance_mount": "ana",
            "source": {
                "angle_deg": float(rng.uniform(-90, 90)),
                "photon_rate": float(10 ** rng.uniform(4, 7)),
                "extinction_ratio": float(10 ** rng.uniform(3, 6))
                if rng.uniform() < 0.7
                else float("inf"),  # an ideal source polarizer
            },
            "pre": [element(None), element("pre_mount"), element(None)],
            "coupling": coupling,
            # no polarizer after the coupling: it would fix the post-selected direction, and
            # the imbalance mount (the analyzer) could not move the imbalance
            "post": [element(None if rng.uniform() < 0.5 else "post_mount", TYPES[:3] + TYPES[4:])],
            "analyzer": {
                "mount": "ana",
                "extinction_ratio": float(10 ** rng.uniform(3, 6)),
                "transmission": float(rng.uniform(0.5, 1.0)),
            },
            "detector": detector,
            "mounts": {
                "ana": {"reading_deg": 10.0, "sense": int(rng.choice([-1, 1])), "offset_deg": 3.0},
                "pre_mount": {"reading_deg": 0.0},
                "post_mount": {"reading_deg": 0.0},
            },
        }
    )


@pytest.mark.parametrize("seed", range(12))
def test_closed_form_agrees_with_the_definitions(seed, monkeypatch):
    """Relative agreement 1e-12 (the last few bits of double precision, amplified by the
    cancellation in Tr(E rho) where the leak is small: the bound scales with 1/leak). Half the
    seeds evaluate in blocks of 64 settings, as a large prediction does."""
    if seed % 2:
        monkeypatch.setattr("aligner.prediction.core.BLOCK", 64)
    rng = np.random.default_rng(seed)
    bench = random_bench(rng)
    readings = {
        "ana": rng.uniform(-180, 180, 400),
        "pre_mount": rng.uniform(-180, 180, 400),
        "post_mount": rng.uniform(-180, 180, 400),
    }
    fast = predict(bench, readings)
    ref = reference_prediction(bench, readings)
    leak = ref["leak_rate"]
    # rounding in Tr(E rho) is about 1e-16 of the unpolarized sum s0 e0 (at most 4 here)
    amplified = 1e-12 + 4e-16 / leak
    for name, want in ref.items():
        got = np.asarray(getattr(fast, name))
        if want.dtype == bool:
            assert np.array_equal(got, want), name
            continue
        bound = amplified * np.abs(want)
        if name == "imbalance_deg":
            # the sign at an overlap maximum (90 deg) is a convention the two paths may place
            # on either side within the reference's finite-difference step of 1e-3 deg
            keep = np.abs(want) < 89.9
            got, want, bound = got[keep], want[keep], 1e-12 * np.abs(want[keep]) + 1e-12
        if name == "snr_per_sqrt_s":
            # the reference differentiates by central differences (step 1e-4 of g): its own
            # error is the step squared times the curvature of the response (up to 1e-6 here)
            bound = 1e-6 * np.abs(want) + 1e-300
        assert np.all(np.abs(got - want) <= bound), (name, np.max(np.abs(got - want) / bound))
