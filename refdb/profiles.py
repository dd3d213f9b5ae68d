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


def gaussian_with_derivatives(
    x: np.ndarray, center: np.ndarray | float, fwhm: np.ndarray | float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`gaussian` and its partial derivatives with respect to the centre and the FWHM.

    With u = (x − c)/w and G = (2√(ln2/π)/w)·exp(−4 ln2 u²):
    ∂G/∂c = G · 8 ln2 · u / w and ∂G/∂w = G · (8 ln2 · u² − 1) / w.

    Returns
    -------
    (G, ∂G/∂c, ∂G/∂w) : ndarrays broadcast from the inputs; per degree for the derivatives.
    """
    # In-place steps: every temporary of a window block would otherwise be a fresh allocation.
    inv = 1.0 / np.asarray(fwhm, dtype=float)
    dx = np.asarray((np.asarray(x, dtype=float) - center) * inv)  # full broadcast shape
    dx2 = dx * dx
    value = np.asarray(dx2 * (-4.0 * _LN2))  # an array even for scalar inputs, for out=
    np.exp(value, out=value)
    value *= _G_NORM * inv
    d_center = dx
    d_center *= value
    d_center *= 8.0 * _LN2 * inv
    d_fwhm = dx2
    d_fwhm *= 8.0 * _LN2
    d_fwhm -= 1.0
    d_fwhm *= value
    d_fwhm *= inv
    return value, d_center, d_fwhm


def lorentzian_with_derivatives(
    x: np.ndarray, center: np.ndarray | float, fwhm: np.ndarray | float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`lorentzian` and its partial derivatives with respect to the centre and the FWHM.

    With u = (x − c)/w, q = 1/(1 + 4u²) and L = (2/(πw))·q:
    ∂L/∂c = L · 8u·q / w and ∂L/∂w = L · (4u² − 1)·q / w.

    Returns
    -------
    (L, ∂L/∂c, ∂L/∂w) : ndarrays broadcast from the inputs; per degree for the derivatives.
    """
    inv = 1.0 / np.asarray(fwhm, dtype=float)
    dx = np.asarray((np.asarray(x, dtype=float) - center) * inv)  # full broadcast shape
    q = np.asarray(dx * dx)  # an array even for scalar inputs, for the out= below
    q *= 4.0
    q += 1.0
    np.reciprocal(q, out=q)
    value = q * ((2.0 / np.pi) * inv)
    l_per_w = value * inv
    d_center = dx
    d_center *= l_per_w
    d_center *= q
    d_center *= 8.0
    d_fwhm = q  # (4u² − 1)·q = 1 − 2q
    d_fwhm *= -2.0
    d_fwhm += 1.0
    d_fwhm *= l_per_w
    return value, d_center, d_fwhm


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


def caglioti_fwhm_slope(two_theta: np.ndarray | float, u: float, v: float, w: float) -> np.ndarray:
    """d FWHM / d2θ of :func:`caglioti_fwhm` (dimensionless: degrees per degree).

    With t = tan θ, FWHM = √(U t² + V t + W) and dt/d2θ = (1 + t²)·π/360 per degree 2θ, so
    dFWHM/d2θ = (2U t + V)(1 + t²)·π / (720·FWHM); zero where FWHM² is clipped.
    """
    t = np.tan(np.radians(np.asarray(two_theta, dtype=float)) / 2.0)
    f2 = u * t * t + v * t + w
    slope = (2.0 * u * t + v) * (1.0 + t * t) * (np.pi / 720.0) / np.sqrt(np.clip(f2, 1e-8, None))
    return np.where(f2 > 1e-8, slope, 0.0)


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
