"""Stick patterns, preferred orientation and drawn profiles."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from refdb.errors import InputError
from refdb.geometry import lorentz_polarisation
from refdb.radiation import radiation_for, two_theta_from_d
from refdb.records import PatternLines, ReferenceData
from refdb.structure import MarchDollase, draw_profile, read_crystal, stick_pattern
from refdb.structure.reference import reference_from_crystal
from tests.structure._cifs import cubic, make_cif


@pytest.fixture(scope="module")
def cscl() -> ReferenceData:
    text = cubic(4.11, "P m -3 m", [("Cs1", "Cs", 0, 0, 0, 1, 1.2), ("Cl1", "Cl", 0.5, 0.5, 0.5, 1, 1.5)])
    return reference_from_crystal(read_crystal(text))


def test_stick_intensities_are_m_f2_lp(cscl):
    rad = radiation_for(wavelength=1.5406)
    sticks = stick_pattern(cscl, rad, two_theta_range=(10, 120))
    lines = cscl.lines
    tt = two_theta_from_d(lines.d, 1.5406)
    ok = (tt >= 10) & (tt <= 120)
    expected = (lines.multiplicity * lines.f2 * lorentz_polarisation(tt))[ok]
    np.testing.assert_allclose(np.sort(sticks.absolute), np.sort(expected), rtol=1e-12)
    assert sticks.intensity.max() == pytest.approx(100.0)
    assert np.all(np.diff(sticks.two_theta) >= 0)


def test_kalpha2_sticks_sit_at_their_own_bragg_angle_with_half_weight(cscl):
    """Kα2 sticks: same d, λ(Kα2) = 1.5444274 Å (Hölzer et al. 1997), weight 0.5 × LP ratio."""
    sticks = stick_pattern(cscl, radiation_for("Cu"), two_theta_range=(20, 80))
    names = np.array(sticks.line_name)
    a1, a2 = sticks.line_index[names == "Ka1"], sticks.line_index[names == "Ka2"]
    assert set(a1) == set(a2)
    for i in a1[:3]:
        s1 = np.nonzero((sticks.line_index == i) & (names == "Ka1"))[0][0]
        s2 = np.nonzero((sticks.line_index == i) & (names == "Ka2"))[0][0]
        assert sticks.two_theta[s2] == pytest.approx(float(two_theta_from_d(sticks.d[s1], 1.5444274)), abs=1e-9)
        lp_ratio = lorentz_polarisation(sticks.two_theta[s2]) / lorentz_polarisation(sticks.two_theta[s1])
        assert sticks.absolute[s2] / sticks.absolute[s1] == pytest.approx(0.5 * lp_ratio, rel=1e-12)


def test_monochromator_changes_relative_intensities(cscl):
    """With a graphite monochromator (2θ_M = 26.6°) each line changes by exactly the ratio of
    the two Lorentz–polarisation factors (Azároff 1955; check-values §6)."""
    plain = stick_pattern(cscl, radiation_for(wavelength=1.5406), two_theta_range=(10, 120))
    mono = stick_pattern(cscl, radiation_for(wavelength=1.5406, monochromator_two_theta=26.6), two_theta_range=(10, 120))
    expected = lorentz_polarisation(plain.two_theta, monochromator_two_theta=26.6) / lorentz_polarisation(plain.two_theta)
    np.testing.assert_allclose(mono.absolute / plain.absolute, expected, rtol=1e-12)


@settings(max_examples=20, deadline=None)
@given(anode=st.sampled_from(["Mo", "Co", "Fe", "Cr", "Ag"]))
def test_measured_lines_move_between_anodes_and_back(cscl, anode):
    """Measured intensities rescaled by LP(new)/LP(old): Cu → other → Cu is the identity."""
    cu = radiation_for("Cu", alpha2=False)
    computed = stick_pattern(cscl, cu, two_theta_range=(5, 150))
    measured = PatternLines(d=computed.d, intensity=computed.intensity)
    other = radiation_for(anode, alpha2=False)
    there = stick_pattern(measured, other, two_theta_range=(1, 179), measured_wavelength=cu.wavelength)
    back = stick_pattern(PatternLines(d=there.d, intensity=there.intensity), cu, two_theta_range=(5, 150),
                         measured_wavelength=other.wavelength)
    keep = np.isin(np.round(computed.d, 9), np.round(back.d, 9))
    np.testing.assert_allclose(back.intensity, computed.intensity[keep] * 100 / computed.intensity[keep].max(), rtol=1e-9)
    # And moving computed lines directly to the other anode gives the same relative intensities.
    direct = stick_pattern(cscl, other, two_theta_range=(1, 179))
    np.testing.assert_allclose(np.sort(there.intensity), np.sort(direct.intensity[np.isin(np.round(direct.d, 9), np.round(there.d, 9))]) * 100
                               / direct.intensity[np.isin(np.round(direct.d, 9), np.round(there.d, 9))].max(), rtol=1e-9)


def test_measured_lines_need_a_wavelength():
    with pytest.raises(InputError, match="wavelength"):
        stick_pattern(PatternLines(d=np.array([3.0, 2.0]), intensity=np.array([100.0, 50.0])), radiation_for("Cu"))


def test_march_dollase_of_the_cubic_100_family(cscl):
    """Dollase (1986), J. Appl. Cryst. 19, 267: P(α) = (r² cos²α + sin²α / r)^(−3/2). For {100}
    of a cubic crystal with axis [001], the six equivalents have α = 0 (two) and 90° (four):
    P = (2 r⁻³ + 4 r^{3/2}) / 6, worked out here by hand."""
    r = 0.7
    plain = stick_pattern(cscl, radiation_for("Cu", alpha2=False), two_theta_range=(10, 90))
    textured = stick_pattern(cscl, radiation_for("Cu", alpha2=False), two_theta_range=(10, 90), march_dollase=(r, (0, 0, 1)))
    row = [i for i, h in enumerate(plain.hkl.tolist()) if h == [1, 0, 0]][0]
    expected = (2 * r**-3 + 4 * r**1.5) / 6
    assert textured.absolute[row] / plain.absolute[row] == pytest.approx(expected, rel=1e-12)


def test_march_dollase_ratio_one_changes_nothing(cscl):
    rad = radiation_for("Cu")
    a = stick_pattern(cscl, rad)
    b = stick_pattern(cscl, rad, march_dollase=MarchDollase(1.0, (1, 1, 1)))
    np.testing.assert_allclose(a.absolute, b.absolute, rtol=1e-12)


def test_march_dollase_function_is_normalised_over_the_sphere():
    """∫ P(α) dΩ / 4π = 1 for any r (Dollase 1986): checked with a fine quadrature over cos α
    on a triclinic structure, whose only equivalent is the Friedel mate. Tolerance 1e-4 from
    the midpoint rule with 20 000 points."""
    r = 0.6
    c = np.linspace(0, 1, 20001)
    c = 0.5 * (c[1:] + c[:-1])
    assert np.mean((r * r * c * c + (1 - c * c) / r) ** -1.5) == pytest.approx(1.0, abs=1e-4)


def test_preferred_orientation_in_a_hexagonal_cell():
    """Platelets ⊥ c (r < 1) strengthen 00l and weaken hk0 (Dollase 1986)."""
    text = make_cif((3.25, 3.25, 5.21, 90, 90, 120), [("Zn1", "Zn", 1 / 3, 2 / 3, 0), ("O1", "O", 1 / 3, 2 / 3, 0.3825)],
                    space_group="P 63 m c")
    ref = reference_from_crystal(read_crystal(text))
    rad = radiation_for("Cu", alpha2=False)
    plain, plate = stick_pattern(ref, rad), stick_pattern(ref, rad, march_dollase=(0.6, (0, 0, 1)))
    ratio = {tuple(h): b / a for h, a, b in zip(plain.hkl.tolist(), plain.absolute, plate.absolute)}
    assert ratio[(0, 0, 2)] == pytest.approx(0.6**-3, rel=1e-9)  # α = 0 for both 002 and 00−2
    assert ratio[(1, 0, 0)] == pytest.approx(0.6**1.5, rel=1e-9)  # α = 90° for all six


def test_profile_area_equals_the_stick_intensities(cscl):
    """Area-normalised pseudo-Voigts: ∫ profile d2θ = Σ intensities, minus the Lorentzian tails
    cut at ±40 FWHM (≤ 0.8 % of the Lorentzian half, i.e. ≤ 0.4 % at eta = 0.5) and the parts
    beyond the grid; 1 % covers both."""
    rad = radiation_for("Cu")
    sticks = stick_pattern(cscl, rad, two_theta_range=(20, 80))
    grid = np.arange(15, 85, 0.005)
    profile = draw_profile(sticks, rad, grid, eta=0.5)
    assert np.trapezoid(profile, grid) == pytest.approx(sticks.intensity.sum(), rel=0.01)


def test_profile_peak_width_matches_the_requested_fwhm(cscl):
    """A Gaussian drawn with FWHM 0.2° is 0.2° wide at half height (grid step 0.001°)."""
    rad = radiation_for(wavelength=1.5406)
    sticks = stick_pattern(cscl, rad, two_theta_range=(20, 25))  # one line (100, 21.6°)
    grid = np.arange(19, 26, 0.001)
    profile = draw_profile(sticks, rad, grid, fwhm=0.2, eta=0.0)
    above = grid[profile >= profile.max() / 2]
    assert above[-1] - above[0] == pytest.approx(0.2, abs=0.002)


def test_scherrer_broadening_widens_lines(cscl):
    rad = radiation_for(wavelength=1.5406)
    grid = np.arange(19, 26, 0.001)
    narrow = draw_profile(cscl, rad, grid, fwhm=0.05, eta=0.0)
    broad = draw_profile(cscl, rad, grid, fwhm=0.05, eta=0.0, crystallite_size_nm=20)
    assert broad.max() < narrow.max() / 2


def test_bad_grid_and_eta_are_input_errors(cscl):
    rad = radiation_for("Cu")
    with pytest.raises(InputError):
        draw_profile(cscl, rad, np.array([30.0, 20.0, 10.0]))
    with pytest.raises(InputError):
        draw_profile(cscl, rad, np.arange(10, 20, 0.1), eta=1.5)
    with pytest.raises(InputError):
        stick_pattern(cscl, rad, two_theta_range=(90, 10))


@settings(max_examples=30, deadline=None)
@given(
    centers=st.lists(st.floats(12.0, 78.0), min_size=1, max_size=12),
    width=st.floats(0.03, 0.4),
    eta=st.floats(0.0, 1.0),
)
def test_windowed_profile_sum_matches_the_full_pseudo_voigt(centers, width, eta):
    """sum_profiles (windowed: Lorentzian part ±40 FWHM, Gaussian part ±4 FWHM) against the
    pseudo-Voigt evaluated on the whole grid, written out here (Gaussian and Lorentzian of
    equal FWHM, the usual definition; common practice, no source)."""
    from refdb.structure.pattern import sum_profiles

    grid = np.arange(10.0, 80.0, 0.01)
    c = np.array(centers)
    areas = np.linspace(1.0, 3.0, c.size)
    dx = (grid[None, :] - c[:, None]) / width
    gauss = 2.0 * np.sqrt(np.log(2.0) / np.pi) / width * np.exp(-4.0 * np.log(2.0) * dx**2)
    lor = 2.0 / (np.pi * width) / (1.0 + 4.0 * dx**2)
    full = (areas[:, None] * (eta * lor + (1.0 - eta) * gauss)).sum(axis=0)
    got = sum_profiles(grid, c, areas, np.full(c.size, width), eta)
    # What the windows leave out: the Lorentzian beyond ±40 FWHM, at most 1/(1 + 4·40²) of a
    # line's height at each point (plus rounding); the Gaussian beyond ±4 FWHM is < 1e-19.
    height = areas.sum() * (2.0 / (np.pi * width))
    assert np.max(np.abs(got - full)) <= eta * height / (1.0 + 4.0 * 40.0**2) + 1e-9 * height
