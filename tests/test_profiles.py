"""Slopes of the Caglioti width and of the Lorentz–polarisation factor against central
differences of the functions themselves."""

from __future__ import annotations

import numpy as np
import pytest

from refdb.geometry import lorentz_polarisation, lorentz_polarisation_slope
from refdb.profiles import caglioti_fwhm, caglioti_fwhm_slope

TT = np.linspace(5.0, 170.0, 400)
#: Step in degrees 2θ. Within 5–170° both functions vary on a scale of at least 0.08 rad
#: (cos θ at 170°), so the truncation error of a central difference is ≲ (h·π/180/0.08)²
#: ≈ 5e-10 of the slope, and rounding adds ε·|f|/h ≈ 1e-11: rtol 1e-6 (atol 1e-9 where
#: the slope passes through zero).
H = 1e-4


@pytest.mark.parametrize("uvw", [(0.01, -0.003, 0.005), (0.0, 0.0, 0.003), (0.02, 0.01, 0.0)])
def test_caglioti_slope(uvw):
    fd = (caglioti_fwhm(TT + H, *uvw) - caglioti_fwhm(TT - H, *uvw)) / (2 * H)
    np.testing.assert_allclose(caglioti_fwhm_slope(TT, *uvw), fd, rtol=1e-6, atol=1e-9)


def test_caglioti_slope_is_zero_where_the_width_is_clipped():
    # U = V = 0 and W < 1e-8: the width is the constant floor √1e-8
    assert not caglioti_fwhm_slope(TT, 0.0, 0.0, -1.0).any()


@pytest.mark.parametrize("mono", [None, 26.6])
def test_lorentz_polarisation_slope(mono):
    def ln_lp(t):
        return np.log(lorentz_polarisation(t, monochromator_two_theta=mono))

    fd = (ln_lp(TT + H) - ln_lp(TT - H)) / (2 * H)
    np.testing.assert_allclose(lorentz_polarisation_slope(TT, monochromator_two_theta=mono), fd, rtol=1e-6, atol=1e-9)
