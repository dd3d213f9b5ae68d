"""Simulated scans: positions, mixtures weighted by mass, noise, errors."""

from __future__ import annotations

import numpy as np
import pytest

from refdb.errors import InputError
from refdb.radiation import radiation_for, two_theta_from_d
from refdb.records import PatternLines, ReferenceData
from refdb.structure import compute_rir, corundum_reference, read_crystal, simulate_scan
from refdb.structure.reference import reference_from_crystal
from tests.structure._cifs import make_cif

GRID = np.arange(20.0, 70.0, 0.01)


@pytest.fixture(scope="module")
def rutile() -> ReferenceData:
    """Rutile from the SRM 674 cell (ITC Vol. C Table 5.2.11.1), x(O) = 0.3048 (from memory)."""
    text = make_cif((4.59365, 4.59365, 2.95874, 90, 90, 90), [("Ti1", "Ti", 0, 0, 0, 1, 0.4), ("O1", "O", 0.3048, 0.3048, 0, 1, 0.5)],
                    space_group="P 42/m n m")
    return reference_from_crystal(read_crystal(text))


def _area(scan_or_counts, grid, lo, hi, background=0.0):
    counts = getattr(scan_or_counts, "counts", scan_or_counts)
    m = (grid >= lo) & (grid <= hi)
    return np.trapezoid(counts[m] - background, grid[m])


def test_peak_sits_at_the_bragg_angle_plus_zero_shift(rutile):
    rad = radiation_for(wavelength=1.5406)
    tt110 = float(two_theta_from_d(rutile.lines.d[0], 1.5406))
    for shift in (0.0, 0.05):
        scan = simulate_scan(rutile, rad, GRID, zero_shift=shift, background=(0.0,), noise=False, fwhm=0.05)
        window = (GRID > tt110 - 0.5) & (GRID < tt110 + 0.5)
        top = GRID[window][np.argmax(scan.counts[window])]
        assert top == pytest.approx(tt110 + shift, abs=0.006)  # grid step 0.01°


def test_cell_scale_moves_lines_to_larger_d(rutile):
    rad = radiation_for(wavelength=1.5406)
    scan = simulate_scan(rutile, rad, GRID, cell_scale=1.01, background=(0.0,), noise=False, fwhm=0.05)
    tt = float(two_theta_from_d(rutile.lines.d[0] * 1.01, 1.5406))
    window = (GRID > tt - 0.5) & (GRID < tt + 0.5)
    assert GRID[window][np.argmax(scan.counts[window])] == pytest.approx(tt, abs=0.006)


def test_fifty_fifty_mixture_reproduces_the_rir(rutile):
    """By definition of I/Ic (Chung 1974), in a 50:50 mixture by weight with corundum the
    strongest rutile line over corundum 113 equals I/Ic. Integrated areas from a noise-free,
    Kα1-only simulation with narrow lines; the window (±0.4°) loses a little Lorentzian tail
    (eta = 0) — none with Gaussian lines — so 1 % covers the numerical integration."""
    rad = radiation_for("Cu", alpha2=False)
    scan = simulate_scan([(rutile, 0.5), (corundum_reference(), 0.5)], rad, GRID, background=(0.0,), noise=False,
                         fwhm=0.05, eta=0.0)
    t110 = float(two_theta_from_d(rutile.lines.d[0], rad.wavelength))
    cor = corundum_reference().lines
    d113 = cor.d[np.nonzero(np.all(cor.hkl == (1, 1, 3), axis=1))[0][0]]
    t113 = float(two_theta_from_d(d113, rad.wavelength))
    ratio = _area(scan, GRID, t110 - 0.4, t110 + 0.4) / _area(scan, GRID, t113 - 0.4, t113 + 0.4)
    assert ratio == pytest.approx(compute_rir(rutile), rel=0.01)


def test_weight_fractions_scale_intensities_linearly(rutile):
    """Hill & Howard (1987): phase intensity ∝ weight fraction at fixed others. A 20:80 and an
    80:20 mixture give a rutile/corundum area ratio that differs by (0.8/0.2)² = 16."""
    rad = radiation_for("Cu", alpha2=False)
    cor = corundum_reference()
    t110 = float(two_theta_from_d(rutile.lines.d[0], rad.wavelength))
    t113 = float(two_theta_from_d(cor.lines.d[np.nonzero(np.all(cor.lines.hkl == (1, 1, 3), axis=1))[0][0]], rad.wavelength))

    def ratio(w):
        s = simulate_scan([(rutile, w), (cor, 1 - w)], rad, GRID, background=(0.0,), noise=False, fwhm=0.05, eta=0.0)
        return _area(s, GRID, t110 - 0.4, t110 + 0.4) / _area(s, GRID, t113 - 0.4, t113 + 0.4)

    assert ratio(0.8) / ratio(0.2) == pytest.approx(16.0, rel=1e-3)  # numerical integration only


def test_measured_phase_enters_through_its_rir(rutile):
    """A measured copy of rutile (its own relative intensities, I/Ic from the computed entry)
    must give the same mixture as the computed entry. The measured copy loses lines weaker
    than stored precision only; 1 % covers it."""
    rad = radiation_for("Cu", alpha2=False)
    from refdb.structure import stick_pattern

    sticks = stick_pattern(rutile, rad, two_theta_range=(5, 150))
    measured = ReferenceData(kind="measured", name="rutile (measured)", formula="Ti O2", formula_reduced="O2Ti",
                             elements=("O", "Ti"), lines=PatternLines(d=sticks.d[::-1].copy(), intensity=sticks.intensity[::-1].copy()),
                             wavelength=rad.wavelength, rir=rutile.rir)
    cor = corundum_reference()
    a = simulate_scan([(rutile, 0.3), (cor, 0.7)], rad, GRID, background=(0.0,), noise=False, fwhm=0.05)
    b = simulate_scan([(measured, 0.3), (cor, 0.7)], rad, GRID, background=(0.0,), noise=False, fwhm=0.05)
    np.testing.assert_allclose(b.counts, a.counts, atol=0.01 * a.counts.max())


def test_poisson_noise_is_seeded_and_has_the_right_spread(rutile):
    rad = radiation_for("Cu")
    a = simulate_scan(rutile, rad, GRID, background=(200.0,), seed=7)
    b = simulate_scan(rutile, rad, GRID, background=(200.0,), seed=7)
    np.testing.assert_array_equal(a.counts, b.counts)
    expected = simulate_scan(rutile, rad, GRID, background=(200.0,), noise=False).counts
    z = (a.counts - expected) / np.sqrt(expected)
    # 5000 points of unit-variance residuals: the sample variance lies within ±10 % with
    # probability > 0.999 (its standard error is √(2/5000) = 2 %).
    assert np.var(z) == pytest.approx(1.0, abs=0.1)
    assert np.all(a.sigma == np.sqrt(np.maximum(a.counts, 1)))


def test_background_and_amorphous_hump(rutile):
    rad = radiation_for("Cu")
    scan = simulate_scan(rutile, rad, GRID, background=(50.0, 1.0), amorphous=(25.0, 8.0, 300.0), noise=False, counts=1000)
    i = np.argmin(np.abs(GRID - 21.0))  # no rutile line near 21°
    hump = 300.0 * np.exp(-4 * np.log(2) * ((21.0 - 25.0) / 8.0) ** 2)
    assert scan.counts[i] == pytest.approx(50.0 + 21.0 + hump, rel=1e-3)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"two_theta": np.array([10.0, 5.0])}, "strictly increasing"),
        ({"counts": -1.0}, "positive"),
        ({"background": (-100.0,)}, "negative"),
        ({"cell_scale": 0.0}, "cell scale"),
        ({"crystallite_size_nm": -3.0}, "crystallite size"),
    ],
)
def test_bad_settings_are_input_errors(rutile, kwargs, message):
    args = {"two_theta": GRID, **kwargs}
    grid = args.pop("two_theta")
    with pytest.raises(InputError, match=message):
        simulate_scan(rutile, radiation_for("Cu"), grid, **args)


def test_mixture_needs_rir_for_measured_phases(rutile):
    measured = ReferenceData(kind="measured", name="unknown", formula="X", formula_reduced="X", elements=(),
                             lines=PatternLines(d=np.array([3.0]), intensity=np.array([100.0])), wavelength=1.5406)
    with pytest.raises(InputError, match="reference intensity ratio"):
        simulate_scan([(rutile, 0.5), (measured, 0.5)], radiation_for("Cu"), GRID)
    with pytest.raises(InputError, match="weight"):
        simulate_scan([(rutile, -0.5), (measured, 0.5)], radiation_for("Cu"), GRID)
