"""Technical pointer noise with a spectrum: white plus 1/f, dwell-time averages and the SNR of a
switched (on/off) measurement.

Units: readings in any unit ``u`` (a position, a beam angle in rad, a phase); frequencies in Hz,
times in s. Spectra are one-sided: ``S(f) = h0 + h_1 / f`` with ``h0`` (u^2/Hz) the white
density and ``h_1`` (u^2) the 1/f level; the corner frequency, where both parts are equal, is
``h_1 / h0``. A white density ``h0`` gives a 1-s mean reading of rms ``sqrt(h0 / 2)``.

Formulas (``x = pi f T``, ``Si``/``Ci`` the sine and cosine integrals):

* Mean over a dwell ``T`` (transfer ``sinc^2(pi f T)``), the 1/f part cut at ``f_low``:
  ``Var = h0/(pi T) [pi/2 - Si(2 x_l) + sin^2(x_l)/x_l] + h_1 [sin^2(x_l)/(2 x_l^2) +
  sin(2 x_l)/(2 x_l) - Ci(2 x_l)]``, ``x_l = pi f_low T``.
* Structure function of two dwell means whose starts are ``D >= T`` apart,
  ``E[(m2 - m1)^2] = 2 int S sinc^2(pi f T) (1 - cos 2 pi f D) df =
  h0/T + h_1 [(r+1)^2 ln(r+1) + (r-1)^2 ln|r-1| - 2 r^2 ln r]``, ``r = D/T``; the Allan variance
  is half of it at ``D = T``: ``h0/(2T) + 2 ln2 h_1`` (Barnes et al., IEEE Trans. Instrum. Meas.
  IM-20, 105 (1971), from memory).
* Switched measurement: ``n`` cycles of an "on" and an "off" dwell ``T``, each followed by a
  settle time ``T_s`` (dwell starts ``tau = T + T_s`` apart), estimate = mean(on) - mean(off).
  Since the signs sum to zero, ``Var = -(1/n^2) sum_{d=1}^{2n-1} (2n - d) (-1)^d D(d tau)``
  (exact for this spectrum; no low cut-off needed).

Beam-pointing noise is an angle spectrum (rad) carried to the detector by the lever arm of the
train after its pivot (``ray_matrix(train)[0, 1]`` of :mod:`aligner.physics.propagation`, or the
focal length in a focal plane): :meth:`NoiseSpectrum.scaled`. Independent noises add.
Technical noise is not amplified by post-selection, so an amplified shift beats it: in the
technical-noise limit the post-selected SNR over the standard one is the amplification, in the
shot-noise limit at most ``cos(eps)`` (Jordan et al., PRX 4, 011031 (2014)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "NoiseSpectrum",
    "allan_variance",
    "dwell_snr",
    "mean_variance",
    "structure_function",
    "switched_variance",
]

Real = NDArray[np.float64]


@dataclass(frozen=True)
class NoiseSpectrum:
    """One-sided spectrum ``S(f) = white + flicker / f`` (``white`` in u^2/Hz, ``flicker`` in
    u^2)."""

    white: float = 0.0
    flicker: float = 0.0

    @classmethod
    def from_rms(cls, rms_1s: float, corner_hz: float = 0.0) -> NoiseSpectrum:
        """From the rms of a 1-s mean of the white part and the 1/f corner frequency."""
        white = 2.0 * rms_1s**2
        return cls(white, white * corner_hz)

    def psd(self, frequency_hz: ArrayLike) -> Real:
        """``S(f)`` in u^2/Hz."""
        return self.white + self.flicker / np.asarray(frequency_hz, float)

    def __add__(self, other: NoiseSpectrum) -> NoiseSpectrum:
        return NoiseSpectrum(self.white + other.white, self.flicker + other.flicker)

    def scaled(self, gain: float) -> NoiseSpectrum:
        """The spectrum of ``gain`` times the reading (e.g. a lever arm: rad -> length)."""
        return NoiseSpectrum(self.white * gain**2, self.flicker * gain**2)


def mean_variance(spectrum: NoiseSpectrum, dwell_s: ArrayLike, low_hz: ArrayLike) -> Real:
    """Variance of one mean over ``dwell_s``, the spectrum cut below ``low_hz`` (> 0 when there
    is 1/f noise: its variance grows without bound as the cut-off falls)."""
    from scipy.special import sici

    t = np.asarray(dwell_s, float)
    xl = np.pi * np.asarray(low_hz, float) * t
    si, ci = sici(2 * xl)
    positive = xl > 0
    x = np.where(positive, xl, 1.0)
    sin2_x = np.where(positive, np.sin(x) ** 2 / x, 0.0)
    white = spectrum.white / (np.pi * t) * (np.pi / 2 - si + sin2_x)
    if spectrum.flicker == 0:
        return white
    flicker = np.where(positive, sin2_x / (2 * x) + np.sin(2 * x) / (2 * x) - ci, np.inf)
    return white + spectrum.flicker * flicker


def structure_function(spectrum: NoiseSpectrum, dwell_s: ArrayLike, lag_s: ArrayLike) -> Real:
    """``E[(m2 - m1)^2]`` of two means over ``dwell_s`` whose starts are ``lag_s >= dwell_s``
    apart (see module)."""
    t = np.asarray(dwell_s, float)
    r = np.asarray(lag_s, float) / t
    if np.any(r < 1):
        raise ValueError("lag_s must be at least dwell_s (the two dwells must not overlap)")
    # x^2 ln x -> 0 as x -> 0 (adjacent dwells, r = 1).
    gap = np.abs(r - 1)
    gap_term = np.where(gap > 0, gap**2 * np.log(np.where(gap > 0, gap, 1)), 0.0)
    shape = (r + 1) ** 2 * np.log(r + 1) + gap_term - 2 * r**2 * np.log(r)
    return spectrum.white / t + spectrum.flicker * shape


def allan_variance(spectrum: NoiseSpectrum, dwell_s: ArrayLike) -> Real:
    """Allan variance, half the mean squared difference of adjacent means:
    ``h0/(2T) + 2 ln2 h_1``."""
    return 0.5 * structure_function(spectrum, dwell_s, dwell_s)


def switched_variance(
    spectrum: NoiseSpectrum, dwell_s: float, settle_s: float, cycles: int
) -> float:
    """Variance of mean(on) - mean(off) over ``cycles`` on/off pairs (see module)."""
    if cycles < 1:
        raise ValueError(f"cycles must be >= 1, got {cycles}")
    d = np.arange(1, 2 * cycles)
    lags = structure_function(spectrum, dwell_s, d * (dwell_s + settle_s))
    return float(-np.sum((2 * cycles - d) * (-1.0) ** d * lags) / cycles**2)


def dwell_snr(
    shift: ArrayLike,
    shot_variance: ArrayLike,
    spectrum: NoiseSpectrum,
    dwell_s: float,
    settle_s: float,
    total_s: float,
) -> Real:
    """SNR of an on/off shift measured in ``total_s`` with dwells ``dwell_s`` and settle times
    ``settle_s``: ``|shift| / sqrt(2 shot / (n T) + switched_variance)``.

    ``shift``: mean reading on minus off (u). ``shot_variance``: counting noise as the variance
    of a 1-s mean reading (the pointer variance over the detected rate, u^2 s). ``n`` =
    ``floor(total / (2 (T + T_s)))`` cycles; zero SNR when not even one fits.
    """
    cycles = int(total_s // (2 * (dwell_s + settle_s)))
    if cycles < 1:
        return np.zeros(np.broadcast_shapes(np.shape(shift), np.shape(shot_variance)))
    shot = 2 * np.asarray(shot_variance, float) / (cycles * dwell_s)
    noise = np.sqrt(shot + switched_variance(spectrum, dwell_s, settle_s, cycles))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.abs(np.asarray(shift, float)) / noise
