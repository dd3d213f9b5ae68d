"""Sticks of a reference phase prepared once for many profile evaluations.

The line intensities themselves come from :func:`refdb.structure.pattern.stick_pattern`:
``m · |F|² · LP · (emission-line weight)`` for computed entries (electrons² per unit cell, so
that a refined scale factor S obeys the Hill & Howard (1987) relation w ∝ S · ZMV; see
:mod:`refdb.match.quant`), or the measured intensity moved to the scan's wavelength for
measured entries. This module keeps what a refinement needs to move the sticks cheaply: each
stick's d-spacing, wavelength and nominal 2θ.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np

from refdb.errors import InputError
from refdb.geometry import lorentz_polarisation
from refdb.radiation import Radiation, two_theta_from_d
from refdb.records import ReferenceData
from refdb.structure.pattern import MarchDollase, march_dollase_average, orientation_cos2, stick_pattern

#: d-scales are refined within ±2 %; sticks are prepared over a range wider by this much.
_RANGE_MARGIN_DEG = 4.0


@dataclass(frozen=True, eq=False)
class PhaseSticks:
    """Sticks of one phase for one radiation at d-scale 1 and random orientation.

    Attributes
    ----------
    reference : ReferenceData
    d : ndarray, shape (n,)
        d-spacing of each stick, Å.
    wavelength : ndarray, shape (n,)
        Emission wavelength of each stick, Å.
    two_theta : ndarray, shape (n,)
        Nominal 2θ, degrees.
    strength : ndarray, shape (n,)
        ``Sticks.absolute``: intensity per unit scale factor, including LP and line weight.
    hkl : ndarray, shape (n, 3) or None
    monochromator_two_theta : float or None
    """

    reference: ReferenceData
    d: np.ndarray
    wavelength: np.ndarray
    two_theta: np.ndarray
    strength: np.ndarray
    hkl: np.ndarray | None
    monochromator_two_theta: float | None
    #: Texture-axis geometry per axis (reading the symmetry is most of a texture factor's cost).
    _cos2: dict = field(default_factory=dict, repr=False)

    def moved(self, d_scale: float) -> tuple[np.ndarray, np.ndarray]:
        """(2θ, strength) after multiplying every d by ``d_scale``; LP follows the new angle."""
        if d_scale == 1.0:
            return self.two_theta, self.strength
        tt = two_theta_from_d(self.d * d_scale, self.wavelength)
        with np.errstate(invalid="ignore", divide="ignore"):
            moved = self._strength_per_lp * lorentz_polarisation(tt, monochromator_two_theta=self.monochromator_two_theta)
        return tt, np.where(np.isfinite(moved), moved, 0.0)

    @functools.cached_property
    def _strength_per_lp(self) -> np.ndarray:
        """Strength without its Lorentz–polarisation factor (made once: refinement moves the
        sticks thousands of times)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            lp = lorentz_polarisation(self.two_theta, monochromator_two_theta=self.monochromator_two_theta)
            return np.where(np.isfinite(lp) & (lp > 0), self.strength / lp, 0.0)

    def texture(self, axis: tuple[int, int, int], ratio: float) -> np.ndarray:
        """March–Dollase factor of each stick (see :func:`refdb.structure.pattern.orientation_factor`)."""
        if self.hkl is None:
            raise InputError(f"texture refinement of {self.reference.name!r} needs Miller indices")
        md = MarchDollase(float(ratio), tuple(int(i) for i in axis))  # checks ratio and axis
        if md.axis not in self._cos2:
            self._cos2[md.axis] = orientation_cos2(self.hkl, self.reference, md.axis)
        return march_dollase_average(self._cos2[md.axis], md.ratio)


def phase_sticks(ref: ReferenceData, radiation: Radiation, two_theta_range: tuple[float, float]) -> PhaseSticks:
    """Prepare the sticks of ``ref`` for ``radiation`` over ``two_theta_range`` (degrees).

    A measured entry without a stated wavelength is taken as measured with the scan's.

    Raises
    ------
    InputError
        The entry has no lines, or neither structure factors nor intensities.
    """
    if len(ref.lines) == 0:
        raise InputError(f"reference {ref.name!r} has no lines", "re-import it from its CIF or data file")
    lo = max(0.5, two_theta_range[0] - _RANGE_MARGIN_DEG)
    hi = min(179.5, two_theta_range[1] + _RANGE_MARGIN_DEG)
    st = stick_pattern(ref, radiation, two_theta_range=(lo, hi), measured_wavelength=ref.wavelength or radiation.wavelength)
    lam_of = dict(zip(radiation.line_names, radiation.wavelengths, strict=True))
    lam = np.array([lam_of[n] for n in st.line_name], dtype=float)
    return PhaseSticks(
        reference=ref,
        d=st.d,
        wavelength=lam,
        two_theta=st.two_theta,
        strength=np.nan_to_num(st.absolute, nan=0.0),
        hkl=st.hkl,
        monochromator_two_theta=radiation.monochromator_two_theta,
    )
