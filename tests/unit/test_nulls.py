"""The one definition of the null (aligner.nulls): prediction, planner and fits agree."""

from __future__ import annotations

import math

import numpy as np
import pytest

from aligner.bench import load_bench, parse_bench
from aligner.fit.scanmodel import null_reading_deg
from aligner.model import pure_overlap
from aligner.nulls import find_null, nearest_null, segments
from aligner.prediction import limits


def crossed(strength: float, extinction: float) -> object:
    """Invented bench: H source, half-wave plate at 22.5 deg (-> D), A = HV, analyzer mount."""
    return parse_bench(
        {
            "wavelength_nm": 800.0,
            "imbalance_mount": "ana",
            "source": {"angle_deg": 0.0, "photon_rate": 1e6, "extinction_ratio": extinction},
            "pre": [{"type": "hwp", "angle_deg": 22.5}],
            "coupling": {"observable": "HV", "pointer_sigma": 1.0, "strength": strength},
            "analyzer": {"mount": "ana", "extinction_ratio": extinction},
            "detector": {},
            "mounts": {"ana": {"reading_deg": 136.0, "travel_deg": [-10.0, 350.0]}},
        }
    )


@pytest.mark.parametrize(("strength", "extinction"), [(1e-3, math.inf), (0.8, 1e3)])
def test_null_is_the_crossed_analyzer(strength: float, extinction: float) -> None:
    """D light against an analyzer at 135 deg (A) is crossed: the textbook worked case
    (physics.md; Dressel et al., Rev. Mod. Phys. 86, 307 (2014)), whatever the pointer and the
    extinction do to the post-selection probability."""
    bench = crossed(strength, extinction)
    assert find_null(bench) == pytest.approx(135.0, abs=1e-9)
    nulls = [s.null for s in segments(bench, "ana") if s.null is not None]
    assert nulls == pytest.approx([135.0, 315.0], abs=1e-9)
    assert nearest_null(bench, "ana", near=300.0) == pytest.approx(315.0, abs=1e-9)
    assert float(pure_overlap(bench, {"ana": 135.0})) == pytest.approx(0.0, abs=1e-12)


def test_prediction_planner_and_fits_share_the_null() -> None:
    bench = load_bench("demo")
    here = bench.mounts["analyzer"].reading_deg
    planner = min(
        (s.null for s in segments(bench, "analyzer") if s.null is not None),
        key=lambda r: abs(r - here),
    )
    assert find_null(bench) == planner
    assert limits(bench).null_reading_deg == planner
    assert null_reading_deg(bench, "analyzer", here) == pytest.approx(planner, abs=1e-9)
    # and the overlap really vanishes there
    assert float(pure_overlap(bench, {"analyzer": planner})) < 1e-12


def test_closest_approach_when_no_null_is_reachable() -> None:
    """A quarter-wave plate at 30 deg makes the pre-selection elliptical: a linear analyzer can
    only come closest, where the overlap is least (its minimum over a fine grid)."""
    bench = parse_bench(
        {
            "wavelength_nm": 800.0,
            "imbalance_mount": "ana",
            "source": {"angle_deg": 0.0, "photon_rate": 1e6},
            "pre": [{"type": "qwp", "angle_deg": 30.0}],
            "coupling": {"observable": "HV", "pointer_sigma": 1.0, "strength": 1e-3},
            "analyzer": {"mount": "ana"},
            "detector": {},
            "mounts": {"ana": {"reading_deg": 100.0, "travel_deg": [0.0, 180.0]}},
        }
    )
    found = find_null(bench)
    grid = np.linspace(found - 1, found + 1, 20001)
    gap = pure_overlap(bench, {"ana": grid})
    assert float(pure_overlap(bench, {"ana": found})) <= gap.min() + 1e-12
    assert gap.min() > 0.1
