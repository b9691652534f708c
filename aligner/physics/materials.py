"""Birefringent plate materials and the retardance of real waveplates at the working wavelength.

Retardance is returned in waves (1 wave = 2 pi rad). Wavelengths are in nanometres at the
interface and converted to micrometres for the dispersion formulas.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "MATERIALS",
    "PLATE_KINDS",
    "Sellmeier",
    "birefringence",
    "plate_retardance_waves",
]


@dataclass(frozen=True)
class Sellmeier:
    """Two-term Sellmeier fit ``n^2 = A + B/(1 - C/l^2) + D/(1 - E/l^2)``, ``l`` in um."""

    a: float
    b: float
    c: float
    d: float
    e: float
    valid_um: tuple[float, float]

    def index(self, wavelength_nm: ArrayLike) -> NDArray[np.float64]:
        """Refractive index at ``wavelength_nm``."""
        l2 = (np.asarray(wavelength_nm, float) / 1000.0) ** 2
        return np.sqrt(self.a + self.b / (1 - self.c / l2) + self.d / (1 - self.e / l2))


#: Ordinary and extraordinary dispersion of each plate material.
MATERIALS: dict[str, tuple[Sellmeier, Sellmeier]] = {
    # Crystalline quartz: Ghosh, Optics Communications 163, 95-102 (1999).
    "quartz": (
        Sellmeier(1.28604141, 1.07044083, 1.00585997e-2, 1.10202242, 100.0, (0.198, 2.053)),
        Sellmeier(1.28851804, 1.09509924, 1.02101864e-2, 1.15662475, 100.0, (0.198, 2.053)),
    ),
}

#: Plate constructions understood by :func:`plate_retardance_waves`.
PLATE_KINDS = ("zero-order", "compound-zero-order", "multi-order")


def birefringence(material: str, wavelength_nm: ArrayLike) -> NDArray[np.float64]:
    """``n_e - n_o`` of ``material`` at ``wavelength_nm``."""
    ordinary, extraordinary = MATERIALS[material]
    return extraordinary.index(wavelength_nm) - ordinary.index(wavelength_nm)


def plate_retardance_waves(
    nominal_waves: float,
    material: str,
    kind: str,
    design_nm: float,
    wavelength_nm: ArrayLike,
    *,
    order: int = 0,
    thickness_um: float | None = None,
) -> NDArray[np.float64]:
    """Retardance (waves) at ``wavelength_nm`` of a plate designed for ``nominal_waves`` at
    ``design_nm``.

    * ``zero-order``: a single plate of thickness ``nominal * design / dn(design)``.
    * ``compound-zero-order``: two plates with crossed axes whose thickness difference gives
      ``nominal`` waves at ``design_nm``; it disperses like a true zero-order plate.
    * ``multi-order``: a single plate retarding ``order + nominal`` waves at ``design_nm``, or of
      the given ``thickness_um``; it disperses ``order + nominal`` times faster.

    At ``design_nm`` the result is ``nominal_waves`` (plus ``order`` for multi-order plates,
    which the Jones matrix does not see but the dispersion does).
    """
    dn_design = birefringence(material, design_nm)
    dn = birefringence(material, wavelength_nm)
    lam = np.asarray(wavelength_nm, float)
    if kind in ("zero-order", "compound-zero-order"):
        path_nm = nominal_waves * design_nm / dn_design
    elif kind == "multi-order":
        if thickness_um is not None:
            path_nm = np.asarray(thickness_um * 1000.0)
        else:
            path_nm = (order + nominal_waves) * design_nm / dn_design
    else:
        raise ValueError(f"unknown plate kind {kind!r}; allowed: {', '.join(PLATE_KINDS)}")
    return dn * path_nm / lam
