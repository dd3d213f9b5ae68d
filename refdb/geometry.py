"""Diffractometer geometry: Lorentz–polarisation, zero shift and sample displacement.

All angles are 2θ in degrees unless a name says otherwise.
"""

from __future__ import annotations

import numpy as np


def lorentz_polarisation(
    two_theta: np.ndarray | float, *, monochromator_two_theta: float | None = None
) -> np.ndarray:
    """Lorentz–polarisation factor of a Bragg–Brentano powder diffractometer.

    ``LP = (1 + cos²2θ_M · cos²2θ) / (sin²θ · cos θ)`` with an unpolarised source; without a
    monochromator cos²2θ_M = 1. With a monochromator the factor is divided by
    ``(1 + cos²2θ_M)`` so that the Thomson factor stays normalised (Azároff 1955,
    Acta Cryst. 8, 701; as restated by N. Popa on rietveld_l, 2009). Only relative values
    matter for powder intensities.

    Parameters
    ----------
    two_theta : array_like
        Scattering angles 2θ in degrees, in (0, 180).
    monochromator_two_theta : float, optional
        2θ_M of a diffracted-beam monochromator in degrees.
    """
    tt = np.radians(np.asarray(two_theta, dtype=float))
    theta = tt / 2.0
    c2 = np.cos(tt) ** 2
    if monochromator_two_theta is None:
        pol = 1.0 + c2
    else:
        cm = np.cos(np.radians(monochromator_two_theta)) ** 2
        pol = (1.0 + cm * c2) / (1.0 + cm)
    with np.errstate(divide="ignore", invalid="ignore"):
        return pol / (np.sin(theta) ** 2 * np.cos(theta))


def lorentz_polarisation_slope(
    two_theta: np.ndarray | float, *, monochromator_two_theta: float | None = None
) -> np.ndarray:
    """d ln LP / d2θ of :func:`lorentz_polarisation`, per degree 2θ.

    With φ = 2θ, c_M = cos²2θ_M (1 without a monochromator) and
    ln LP = ln(1 + c_M cos²φ) − 2 ln sin θ − ln cos θ + const:
    d ln LP/dφ = −c_M sin 2φ / (1 + c_M cos²φ) − cot θ + ½ tan θ (per radian of φ).
    """
    tt = np.radians(np.asarray(two_theta, dtype=float))
    theta = tt / 2.0
    cm = 1.0 if monochromator_two_theta is None else np.cos(np.radians(monochromator_two_theta)) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        per_radian = -cm * np.sin(2.0 * tt) / (1.0 + cm * np.cos(tt) ** 2) - 1.0 / np.tan(theta) + 0.5 * np.tan(theta)
    return per_radian * (np.pi / 180.0)


def peak_shift(
    two_theta: np.ndarray | float, *, zero_shift: float = 0.0, displacement: float = 0.0
) -> np.ndarray:
    """Observed minus true 2θ (degrees) for a zero-point error and a sample displacement.

    ``Δ2θ = zero_shift + displacement · cos θ`` where ``displacement`` is the amplitude in
    degrees 2θ, equal to −(360/π)·s/R for a specimen surface displaced by s below the focusing
    circle of a goniometer of radius R (Klug & Alexander, 1974, X-ray Diffraction Procedures,
    2nd ed., ch. 5; from memory). Keeping the amplitude in degrees makes it independent of
    the goniometer radius, which a scan file does not state.
    """
    tt = np.asarray(two_theta, dtype=float)
    return zero_shift + displacement * np.cos(np.radians(tt) / 2.0)


def displacement_mm(displacement_deg: float, goniometer_radius_mm: float = 240.0) -> float:
    """Convert a displacement amplitude (degrees 2θ, see :func:`peak_shift`) to millimetres.

    Positive millimetres mean the specimen surface sits below the focusing circle.
    """
    return float(-np.radians(displacement_deg) * goniometer_radius_mm / 2.0)
