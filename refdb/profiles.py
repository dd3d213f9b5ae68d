"""Peak profile functions shared by peak fitting, pattern drawing and mixture refinement.

All functions broadcast with numpy rules, so ``pseudo_voigt(x[None, :], c[:, None], …)``
draws one row per peak without a Python loop. Angles are degrees 2θ.
"""

from __future__ import annotations

import numpy as np

_LN2 = np.log(2.0)
_G_NORM = 2.0 * np.sqrt(_LN2 / np.pi)


def gaussian(x: np.ndarray, center: np.ndarray | float, fwhm: np.ndarray | float) -> np.ndarray:
    """Area-normalised Gaussian with the given FWHM."""
    dx = (np.asarray(x) - center) / fwhm
    return (_G_NORM / fwhm) * np.exp(-4.0 * _LN2 * dx * dx)


def lorentzian(x: np.ndarray, center: np.ndarray | float, fwhm: np.ndarray | float) -> np.ndarray:
    """Area-normalised Lorentzian (Cauchy) with the given FWHM."""
    dx = (np.asarray(x) - center) / fwhm
    return (2.0 / (np.pi * fwhm)) / (1.0 + 4.0 * dx * dx)


def pseudo_voigt(
    x: np.ndarray, center: np.ndarray | float, fwhm: np.ndarray | float, eta: np.ndarray | float
) -> np.ndarray:
    """Area-normalised pseudo-Voigt: ``eta·L + (1 − eta)·G`` with a common FWHM.

    Parameters
    ----------
    x : array_like
        Positions (degrees 2θ).
    center, fwhm : array_like
        Peak position and full width at half maximum (degrees), broadcast against ``x``.
    eta : array_like
        Lorentzian fraction, 0 (Gaussian) to 1 (Lorentzian).

    Notes
    -----
    The height of the profile is ``(eta·2/π + (1 − eta)·2√(ln2/π)) / fwhm``; see
    :func:`pv_height_factor`.
    """
    return eta * lorentzian(x, center, fwhm) + (1.0 - eta) * gaussian(x, center, fwhm)


def pv_height_factor(fwhm: np.ndarray | float, eta: np.ndarray | float) -> np.ndarray:
    """Height of an area-normalised pseudo-Voigt (area = height × 1/factor)."""
    return (eta * (2.0 / np.pi) + (1.0 - eta) * _G_NORM) / np.asarray(fwhm, dtype=float)


def caglioti_fwhm(two_theta: np.ndarray | float, u: float, v: float, w: float) -> np.ndarray:
    """Caglioti, Paoletti & Ricci (1958), Nucl. Instrum. 3, 223: FWHM² = U tan²θ + V tanθ + W.

    Negative FWHM² (possible for poor U, V, W) is clipped to a tiny positive width.
    """
    t = np.tan(np.radians(np.asarray(two_theta, dtype=float)) / 2.0)
    return np.sqrt(np.clip(u * t * t + v * t + w, 1e-8, None))


def scherrer_fwhm(
    two_theta: np.ndarray | float, wavelength: float, size_nm: float, *, k: float = 0.9
) -> np.ndarray:
    """Size broadening (degrees 2θ) from the Scherrer equation β = Kλ / (τ cos θ).

    Scherrer (1918), Nachr. Ges. Wiss. Göttingen 26, 98; K = 0.9 for FWHM of roughly
    spherical crystallites (Langford & Wilson 1978, J. Appl. Cryst. 11, 102).
    """
    theta = np.radians(np.asarray(two_theta, dtype=float)) / 2.0
    beta = k * wavelength / (size_nm * 10.0 * np.cos(theta))
    return np.degrees(beta)
