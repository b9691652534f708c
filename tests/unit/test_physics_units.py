"""Unit table: SI prefixes (BIPM, The International System of Units, 9th ed. (2019)) and the
refusal of unknown names."""

from __future__ import annotations

import numpy as np
import pytest

from aligner.physics.units import READOUT_QUANTITY, UNITS, convert, unit_factor


def test_prefixes():
    # BIPM SI Brochure, 9th ed. (2019): nano 1e-9, micro 1e-6, milli 1e-3.
    assert [unit_factor(u, "length") for u in ("nm", "um", "mm", "m")] == [1e-9, 1e-6, 1e-3, 1.0]
    assert [unit_factor(u, "angle") for u in ("nrad", "urad", "mrad", "rad")] == [
        1e-9, 1e-6, 1e-3, 1.0,
    ]  # fmt: skip
    assert convert([2.5, 40.0], "mrad", "urad", "angle") == pytest.approx([2500.0, 40000.0])
    assert convert(1.0, "um", "nm", "length") == pytest.approx(1000.0)


def test_phase_readout_strength_in_mrad_is_scaled_to_the_rad_width():
    # The defect: a strength given in mrad against the 1/(2 sqrt N) rad width. 2 mrad with
    # N = 1e6 photons (width 0.5 mrad) is g/sigma = 4, whatever unit the strength came in.
    width_rad = 1 / (2 * np.sqrt(1e6))
    factor = unit_factor("mrad", READOUT_QUANTITY["phase"])
    assert 2.0 * factor / width_rad == pytest.approx(4.0)
    assert 2000.0 * unit_factor("urad", "angle") / width_rad == pytest.approx(4.0)


@pytest.mark.parametrize(
    ("unit", "quantity", "allowed"),
    [("mm", "angle", "nrad, urad, mrad, rad"), ("furlong", "length", "nm, um, mm, m"),
     ("µm", "length", "nm, um, mm, m"), ("deg", "angle", "nrad, urad, mrad, rad")],
)  # fmt: skip
def test_unknown_units_are_refused_with_the_allowed_names(unit, quantity, allowed):
    with pytest.raises(ValueError, match=f"unknown {quantity} unit {unit!r}; allowed: {allowed}"):
        unit_factor(unit, quantity)


def test_every_readout_has_a_unit_table():
    assert set(READOUT_QUANTITY.values()) <= set(UNITS)
    with pytest.raises(ValueError, match="allowed: length, angle"):
        unit_factor("m", "time")
