"""Synthetic scans for the scan tests, made without refdb's own profile or Bragg code.

The oracle must be independent of the code under test, so the pseudo-Voigt, the Kα2 position
and the Bragg conversion are written out again here from their textbook definitions.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Cu Kα1 / Kα2 (Å): ITC Vol. C (2006) Table 4.2.2.6 and Hölzer et al. (1997), Phys. Rev. A 56,
# 4554 — the values listed in check-values.md section 1.
CU_KA1 = 1.54059292
CU_KA2 = 1.5444274


def pseudo_voigt(x: np.ndarray, center: float, fwhm: float, eta: float) -> np.ndarray:
    """Area-normalised pseudo-Voigt, eta·Lorentzian + (1 − eta)·Gaussian with a common FWHM."""
    sigma = fwhm / (2.0 * np.sqrt(2.0 * np.log(2.0)))
    gauss = np.exp(-0.5 * ((x - center) / sigma) ** 2) / (sigma * np.sqrt(2.0 * np.pi))
    gamma = fwhm / 2.0
    lorentz = gamma / (np.pi * ((x - center) ** 2 + gamma**2))
    return eta * lorentz + (1.0 - eta) * gauss


def ka2_position(two_theta_ka1: float, ka1: float = CU_KA1, ka2: float = CU_KA2) -> float:
    """Kα2 2θ of the reflection whose Kα1 lies at ``two_theta_ka1`` (Bragg's law, same d)."""
    d = ka1 / (2.0 * np.sin(np.radians(two_theta_ka1 / 2.0)))
    return float(2.0 * np.degrees(np.arcsin(ka2 / (2.0 * d))))


@dataclass(frozen=True, eq=False)
class SyntheticScan:
    two_theta: np.ndarray
    counts: np.ndarray
    centers: np.ndarray  # Kα1 positions, degrees
    areas: np.ndarray  # Kα1 areas, counts·degrees
    fwhm: np.ndarray
    eta: np.ndarray
    background: np.ndarray  # true background


def make_scan(
    centers,
    areas,
    *,
    fwhm=0.08,
    eta=0.4,
    start=10.0,
    stop=80.0,
    step=0.01,
    background=(200.0, -1.0),
    ka2_ratio=0.5,
    seed=0,
) -> SyntheticScan:
    """Poisson counts of pseudo-Voigt peaks (with Kα2 at ``ka2_ratio``) on a sloping background.

    ``background`` is (level at ``start``, slope per degree).
    """
    rng = np.random.default_rng(seed)
    x = np.arange(start, stop + step / 2, step)
    centers = np.atleast_1d(np.asarray(centers, dtype=float))
    areas = np.broadcast_to(np.asarray(areas, dtype=float), centers.shape).copy()
    fwhm = np.broadcast_to(np.asarray(fwhm, dtype=float), centers.shape).copy()
    eta = np.broadcast_to(np.asarray(eta, dtype=float), centers.shape).copy()
    bkg = background[0] + background[1] * (x - start)
    mean = bkg.copy()
    for c, a, w, e in zip(centers, areas, fwhm, eta, strict=True):
        mean += a * pseudo_voigt(x, c, w, e)
        if ka2_ratio:
            mean += ka2_ratio * a * pseudo_voigt(x, ka2_position(c), w, e)
    counts = rng.poisson(mean).astype(float)
    return SyntheticScan(x, counts, centers, areas, fwhm, eta, bkg)


def pv_height(area: float, fwhm: float, eta: float) -> float:
    """Peak height of an area-normalised pseudo-Voigt times ``area``."""
    return float(area * pseudo_voigt(np.array([0.0]), 0.0, fwhm, eta)[0])
