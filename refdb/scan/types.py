"""The records that scan processing hands to search and mixture decomposition."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from refdb.radiation import Radiation


@dataclass(frozen=True, eq=False)
class Scan:
    """A measured step scan.

    Attributes
    ----------
    two_theta : ndarray, shape (n,)
        Scattering angle 2θ in degrees, strictly increasing (steps may be uneven).
    counts : ndarray, shape (n,)
        Counts (or counts per second scaled to counts), non-negative.
    sigma : ndarray, shape (n,)
        Standard uncertainties of the counts; √max(counts, 1) unless the file gives them.
    radiation : Radiation
        What the scan was measured with.
    source : str
        The file name (no directories) or ``"<stdin>"``.
    warnings : tuple of str
        Things the reader corrected and the user should know (e.g. rows sorted).
    """

    two_theta: np.ndarray
    counts: np.ndarray
    sigma: np.ndarray
    radiation: Radiation
    source: str = ""
    warnings: tuple[str, ...] = ()

    def __len__(self) -> int:
        return int(self.two_theta.shape[0])

    @property
    def d_range(self) -> tuple[float, float]:
        """(d_min, d_max) in Å covered by the scan for the primary wavelength."""
        d = self.radiation.d_spacing(np.array([self.two_theta[-1], self.two_theta[0]]))
        return float(d[0]), float(d[1])


@dataclass(frozen=True, eq=False)
class PeakList:
    """Peaks of a scan, each a Kα1 position (Kα2 is fitted with it, never listed on its own).

    All arrays have shape (n,), sorted by increasing 2θ. Standard uncertainties are NaN where
    unknown (a peak table read from a file).

    Attributes
    ----------
    two_theta : 2θ of the Kα1 (primary) component, degrees.
    d : d-spacing in Å from ``two_theta`` and the primary wavelength.
    height : peak height above background of the primary component, counts.
    area : integrated area of the primary component, counts·degrees.
    fwhm : full width at half maximum, degrees 2θ.
    eta : pseudo-Voigt Lorentzian fraction, 0–1.
    u_two_theta, u_height, u_area, u_fwhm : standard uncertainties.
    significance : height over its standard uncertainty (or a detection significance).
    radiation : the scan's radiation.
    two_theta_range : (start, end) of the scanned range in degrees 2θ.
    source : name of the scan or peak file.
    """

    two_theta: np.ndarray
    d: np.ndarray
    height: np.ndarray
    area: np.ndarray
    fwhm: np.ndarray
    eta: np.ndarray
    u_two_theta: np.ndarray
    u_height: np.ndarray
    u_area: np.ndarray
    u_fwhm: np.ndarray
    significance: np.ndarray
    radiation: Radiation
    two_theta_range: tuple[float, float]
    source: str = ""

    def __len__(self) -> int:
        return int(self.two_theta.shape[0])

    @property
    def relative_intensity(self) -> np.ndarray:
        """Areas scaled so the strongest peak is 100 (heights where areas are unknown)."""
        basis = self.area if np.all(np.isfinite(self.area)) and np.any(self.area > 0) else self.height
        top = float(np.max(basis)) if len(basis) else 0.0
        return basis * (100.0 / top) if top > 0 else np.zeros_like(basis)
