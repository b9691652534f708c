"""Quartz dispersion and waveplate retardance against handbook and published values."""

from __future__ import annotations

import numpy as np
import pytest

from aligner.physics.materials import MATERIALS, birefringence, plate_retardance_waves

# Ghosh, Optics Communications 163, 95-102 (1999), crystalline quartz, coefficients as listed in
# physics.md: n^2 = A + B/(1 - C/l^2) + D/(1 - E/l^2), l in um. Evaluated here independently.
GHOSH_QUARTZ = {
    "o": (1.28604141, 1.07044083, 1.00585997e-2, 1.10202242, 100.0),
    "e": (1.28851804, 1.09509924, 1.02101864e-2, 1.15662475, 100.0),
}


def ghosh_index(ray: str, wavelength_nm: np.ndarray) -> np.ndarray:
    a, b, c, d, e = GHOSH_QUARTZ[ray]
    l2 = (np.asarray(wavelength_nm, float) / 1000) ** 2
    return np.sqrt(a + b / (1 - c / l2) + d / (1 - e / l2))


@pytest.mark.parametrize(
    ("wavelength", "n_o", "n_e"),
    [
        (589.3, 1.544206, 1.553306),  # Ghosh 1999, values as listed in physics.md
        (632.8, 1.542606, 1.551651),
    ],
)
def test_quartz_indices_match_ghosh(wavelength, n_o, n_e):
    ordinary, extraordinary = MATERIALS["quartz"]
    assert ordinary.index(wavelength) == pytest.approx(n_o, abs=1e-6)
    assert extraordinary.index(wavelength) == pytest.approx(n_e, abs=1e-6)


def test_quartz_indices_match_handbook():
    # Source: Hecht, Optics, table of refractive indices of uniaxial crystals, quartz at 589.3 nm:
    # n_o = 1.5443, n_e = 1.5534 (from memory), tolerance 2e-4.
    ordinary, extraordinary = MATERIALS["quartz"]
    assert ordinary.index(589.3) == pytest.approx(1.5443, abs=2e-4)
    assert extraordinary.index(589.3) == pytest.approx(1.5534, abs=2e-4)
    assert birefringence("quartz", 589.3) == pytest.approx(0.0091, abs=2e-4)


def test_quartz_dispersion_formula_over_its_range():
    # Source: Ghosh 1999 formula, evaluated independently above, over the fit's 198-2053 nm range.
    lam = np.linspace(200.0, 2050.0, 300)
    ordinary, extraordinary = MATERIALS["quartz"]
    np.testing.assert_allclose(ordinary.index(lam), ghosh_index("o", lam), rtol=1e-14)
    np.testing.assert_allclose(extraordinary.index(lam), ghosh_index("e", lam), rtol=1e-14)


def test_quartz_birefringence_falls_with_wavelength():
    # Source: Ghosh 1999 (positive uniaxial, n_e > n_o; birefringence decreasing through the
    # visible and near infrared; from memory).
    lam = np.linspace(250.0, 2000.0, 200)
    dn = birefringence("quartz", lam)
    assert np.all(dn > 0)
    assert np.all(np.diff(dn) < 0)


def test_zero_order_hwp_off_design_is_a_little_off():
    # Derived from Ghosh 1999: a zero-order plate of thickness 0.5 lambda_d / dn(lambda_d) retards
    # dn(lambda) t / lambda waves at lambda.
    design = 830.0
    lam = np.array([780.0, 808.0, 830.0, 852.0, 880.0])
    ours = plate_retardance_waves(0.5, "quartz", "zero-order", design, lam)
    dn = ghosh_index("e", lam) - ghosh_index("o", lam)
    dn_design = ghosh_index("e", design) - ghosh_index("o", design)
    expected = dn * (0.5 * design / dn_design) / lam
    np.testing.assert_allclose(ours, expected, rtol=1e-12)
    assert ours[2] == pytest.approx(0.5, abs=1e-14)
    # a little off: a few percent of a wave over +-50 nm, more retardance at shorter wavelength
    assert 0.5 < ours[0] < 0.55 and 0.45 < ours[-1] < 0.5
    assert np.all(np.diff(ours) < 0)
    compound = plate_retardance_waves(0.5, "quartz", "compound-zero-order", design, lam)
    np.testing.assert_allclose(compound, ours, rtol=1e-14)


def test_multi_order_plate_disperses_faster():
    # Derived: retardance scales as dn(lambda)/lambda times the plate's total retardance at
    # design, so the detuning of an order-m plate is (m + nominal)/nominal times the zero-order one.
    design, lam = 830.0, np.array([800.0, 815.0, 845.0, 870.0])
    zero = plate_retardance_waves(0.5, "quartz", "zero-order", design, lam) - 0.5
    multi = plate_retardance_waves(0.5, "quartz", "multi-order", design, lam, order=3) - 3.5
    np.testing.assert_allclose(multi, 7 * zero, rtol=1e-12)
    assert np.all(np.abs(multi) > 6 * np.abs(zero))
    at_design = plate_retardance_waves(0.25, "quartz", "multi-order", design, design, order=5)
    assert at_design == pytest.approx(5.25, abs=1e-13)


def test_true_zero_order_qwp_thickness_at_632_8_nm():
    # Derived (physics.md): lambda / (4 dn) = 17.49 um for quartz at 632.8 nm (Ghosh 1999).
    thickness_um = 632.8 / (4 * birefringence("quartz", 632.8)) / 1000
    assert thickness_um == pytest.approx(17.49, abs=0.005)
    waves = plate_retardance_waves(0.25, "quartz", "multi-order", 632.8, 632.8, thickness_um=17.49)
    assert waves == pytest.approx(0.25, abs=0.25 * 0.005 / 17.49)


def test_unknown_plate_kind_is_refused():
    with pytest.raises(ValueError, match="multi-order"):
        plate_retardance_waves(0.5, "quartz", "thin-film", 800.0, 800.0)
