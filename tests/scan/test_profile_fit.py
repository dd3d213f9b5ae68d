"""Group fits of overlapping peaks (refdb.scan.profile_fit.fit_groups) on synthetic scans.

The scans come from tests/scan/_synthetic.py, which draws pseudo-Voigt peaks with their Kα2
lines without refdb's profile or Bragg code; the true areas, widths and positions are known.
"""

from __future__ import annotations

import numpy as np
import pytest

from refdb.radiation import radiation_for
from refdb.scan.background import estimate_background
from refdb.scan.profile_fit import FitSetup, GroupTask, fit_groups
from refdb.scan.types import Scan

from ._synthetic import make_scan

CU = radiation_for("Cu")
# Three isolated peaks, a pair and a triple of overlapping ones (Kα1 2θ, degrees).
SINGLES = [20.0, 35.0, 62.0]
PAIR = [44.0, 44.12]
TRIPLE = [51.0, 51.1, 51.22]
CENTERS = np.array(SINGLES + PAIR + TRIPLE)
AREAS = np.array([40.0, 25.0, 60.0, 30.0, 15.0, 20.0, 35.0, 10.0])


def _setup(seed: int) -> tuple[FitSetup, object]:
    syn = make_scan(CENTERS, AREAS, fwhm=0.08, eta=0.4, seed=seed)
    sigma = np.sqrt(np.maximum(syn.counts, 1.0))
    scan = Scan(two_theta=syn.two_theta, counts=syn.counts, sigma=sigma, radiation=CU, source="synthetic")
    bkg = estimate_background(scan, method="snip", fwhm=0.08)
    ratios = CU.wavelengths / CU.wavelengths[0]
    return FitSetup(syn.two_theta, syn.counts, sigma, bkg, ratios, CU.weights, 0.08), syn


def _tasks(syn) -> list[GroupTask]:
    """Starts off the truth by a few hundredths of a degree and 30 % in height."""
    def task(c, **kw):
        c = np.asarray(c)
        return GroupTask(c + 0.02, np.full(c.size, 300.0), np.full(c.size, 0.1), **kw)

    return [task([SINGLES[0]]), task(PAIR), task([SINGLES[1]]), task(TRIPLE), task([SINGLES[2]]),
            task([SINGLES[1]], eta=np.array([0.4]), fixed_shape=np.array([True]))]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_fitting_side_by_side_gives_each_group_its_own_fit(seed):
    """Invariant: groups of different sizes fitted in one call, in any order, get the fit each
    gets alone."""
    setup, syn = _setup(seed)
    tasks = _tasks(syn)
    together = fit_groups(tasks, setup)
    for task, res in zip(tasks, together, strict=True):
        alone = fit_groups([task], setup)[0]
        # Same arithmetic, other stacking: only the order of floating-point sums differs.
        np.testing.assert_allclose(res.center, alone.center, rtol=0, atol=1e-9)
        np.testing.assert_allclose(res.area, alone.area, rtol=1e-8)
        np.testing.assert_allclose(res.u_area, alone.u_area, rtol=1e-6)
        assert (res.lo, res.hi) == (alone.lo, alone.hi)
    backwards = fit_groups(tasks[::-1], setup)[::-1]
    for a, b in zip(together, backwards, strict=True):
        np.testing.assert_allclose(a.area, b.area, rtol=1e-8)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_fitted_areas_and_positions_match_the_generated_peaks(seed):
    setup, syn = _setup(seed)
    results = fit_groups(_tasks(syn)[:5], setup)
    center = np.concatenate([r.center for r in results])
    area = np.concatenate([r.area for r in results])
    u_area = np.concatenate([r.u_area for r in results])
    order = np.argsort(center)
    truth = np.argsort(CENTERS)
    # Positions: the counting-statistics uncertainty is ≲ 0.003° for these peaks, and the
    # pair and triple overlap within one FWHM; 0.01° is the goal for isolated peaks.
    np.testing.assert_allclose(center[order], CENTERS[truth], atol=0.01)
    # Areas within 4 standard uncertainties of the generated ones (a 4σ band leaves a 1-in-
    # 16,000 chance per peak of a false failure for correct fits).
    assert np.all(np.abs(area[order] - AREAS[truth]) <= 4.0 * u_area[order])


def test_a_fixed_shape_stays_at_its_start():
    setup, syn = _setup(0)
    res = fit_groups(_tasks(syn)[5:], setup)[0]
    assert res.fwhm[0] == 0.1 and res.eta[0] == 0.4
    assert res.u_fwhm[0] == 0.0 and res.n_free == 4  # centre, area and the line's two terms
