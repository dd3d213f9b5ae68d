"""Bragg conversions used by the scan code, against published and derived check values.

Si d-spacings and 2θ: ../shared/check-values.md section 7 (computed from NIST SRM 640f,
a = 5.431144 Å, and Cu Kα1 = 1.54059292 Å from ITC Vol. C (2006) Table 4.2.2.6).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from refdb.radiation import d_from_two_theta, radiation_for, two_theta_from_d
from refdb.scan.profile_fit import line_centers

SI = [(3.135672, 28.4412), (1.920199, 47.3007), (1.637552, 56.1199), (1.357786, 69.1268),
      (1.245990, 76.3726), (1.108628, 88.0257)]


@pytest.mark.parametrize(("d", "two_theta"), SI)
def test_si_lines(d, two_theta):
    cu = radiation_for("Cu")
    assert cu.wavelength == 1.54059292  # ITC Vol. C Table 4.2.2.6
    # The published 2θ values carry four decimals: agreement to 6e-5° is all they can show.
    assert float(cu.two_theta(d)) == pytest.approx(two_theta, abs=6e-5)
    # d to six decimals ↔ 2θ to four: 5e-5° at 28° is 6e-6 Å.
    assert float(cu.d_spacing(two_theta)) == pytest.approx(d, abs=2e-5)


def test_kalpha2_position_from_same_d():
    # The Kα2 line of Si 111 (Hölzer et al. 1997 Kα2 = 1.5444274 Å): same d, longer λ.
    cu = radiation_for("Cu")
    centers, _ = line_centers(np.array([28.4412]), cu.wavelengths / cu.wavelength)
    expected = 2 * np.degrees(np.arcsin(1.5444274 / (2 * 3.135672)))
    assert centers[0, 1] == pytest.approx(expected, abs=1e-4)  # limited by the 4-decimal 2θ input


@given(st.floats(min_value=0.5, max_value=179.0), st.floats(min_value=0.2, max_value=3.0))
def test_round_trip(two_theta, wavelength):
    d = d_from_two_theta(two_theta, wavelength)
    # Double precision through sin/asin: 1e-9° is far above the rounding error near 180°.
    assert float(two_theta_from_d(d, wavelength)) == pytest.approx(two_theta, abs=1e-9)
