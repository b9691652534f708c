"""Brute-force references shared by the physics tests (no closed forms from the package).

The pointer is a field sampled on a grid. A coupling acts point by point (a kick, in position
space) or through the FFT (a shift, in momentum space); free propagation is the angular
spectrum, exact ``exp(i d (sqrt(k0^2 - p^2) - k0))`` or paraxial ``exp(-i d p^2 / (2 k0))``;
a thin lens multiplies by ``exp(-i k0 x^2 / (2 f))``. Post-selection with a mixed ``rho`` and a
POVM element ``E`` is the sum over their eigen-decompositions of four scalar fields with
weights ``lambda_i mu_j``.
"""

from __future__ import annotations

import numpy as np


def unitary(observable, t):
    """exp(-i t A) for each value of ``t`` (shape (n,)) -> (n, 2, 2)."""
    values, vectors = np.linalg.eigh(np.asarray(observable, complex))
    phases = np.exp(-1j * np.multiply.outer(t, values))  # (n, 2)
    return np.einsum("ij,nj,kj->nik", vectors, phases, np.conj(vectors))


def wavenumbers(x):
    return 2 * np.pi * np.fft.fftfreq(x.size, x[1] - x[0])


def post_selected_fields(rho, effect, observable, strength, sigma, kind, x):
    """Weights (4,) and post-selected pointer fields (4, n) after a ``"shift"``
    (exp(-i g A p)) or ``"kick"`` (exp(+i k A x)) coupling of a Gaussian pointer at its waist."""
    phi = (2 * np.pi * sigma**2) ** -0.25 * np.exp(-(x**2) / (4 * sigma**2))
    lam, vec = np.linalg.eigh(np.asarray(rho, complex))
    mu, evec = np.linalg.eigh(np.asarray(effect, complex))
    weights, fields = [], []
    for i in range(2):
        if kind == "shift":
            u = unitary(observable, strength * wavenumbers(x))  # in momentum space
            two = np.fft.ifft((u @ vec[:, i]) * np.fft.fft(phi)[:, None], axis=0)
        else:
            u = unitary(observable, -strength * x)  # exp(+i k A x)
            two = (u @ vec[:, i]) * phi[:, None]
        for j in range(2):
            weights.append(lam[i] * mu[j])
            fields.append(two @ np.conj(evec[:, j]))
    return np.array(weights), np.array(fields)


def propagate(fields, x, distance, k0, paraxial=False):
    p = wavenumbers(x)
    if paraxial:
        kernel = np.exp(-1j * distance * p**2 / (2 * k0))
    else:
        kernel = np.exp(1j * distance * (np.sqrt(k0**2 - p**2 + 0j) - k0))
    return np.fft.ifft(np.fft.fft(fields, axis=-1) * kernel, axis=-1)


def lens(fields, x, focal_length, k0):
    return fields * np.exp(-1j * k0 * x**2 / (2 * focal_length))


def intensity(weights, fields):
    return np.real(weights @ np.abs(fields) ** 2)


def trapezoid(y, x):
    return float(np.sum(y) * (x[1] - x[0]))  # periodic grid, negligible ends


def tail_from(y, x, i):
    """Integral of ``y`` from the grid point ``x[i]`` to the end of the grid (Simpson)."""
    from scipy.integrate import simpson

    return float(simpson(y[i:], x=x[i:]))


def fisher(density_at, g, x, h=1e-5):
    """int (df/dg)^2 / f dx = 4 int (d sqrt(f)/dg)^2 dx, the second form with a central
    difference in g of ``density_at(g)``: it stays well conditioned where ``f`` vanishes (a
    perfect null), where the first divides zero by zero."""
    root = (np.sqrt(density_at(g * (1 + h))) - np.sqrt(density_at(g * (1 - h)))) / (2 * g * h)
    return 4.0 * trapezoid(root**2, x)
