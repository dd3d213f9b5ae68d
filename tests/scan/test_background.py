"""Background methods: one lookup by name, one calling convention, and accuracy on a known
background (synthetic scans from tests/scan/_synthetic.py, true background known exactly)."""

from __future__ import annotations

import numpy as np
import pytest

from refdb.errors import InputError
from refdb.radiation import radiation_for
from refdb.scan import BACKGROUND_METHODS, estimate_background, typical_fwhm
from refdb.scan.types import Scan

from ._synthetic import make_scan

CU = radiation_for("Cu")


@pytest.fixture(scope="module")
def syn():
    return make_scan([20.0, 35.0, 50.0, 65.0], [60.0, 40.0, 80.0, 30.0], background=(300.0, -2.0), seed=4)


def _scan(s) -> Scan:
    return Scan(two_theta=s.two_theta, counts=s.counts, sigma=np.sqrt(np.maximum(s.counts, 1)), radiation=CU)


@pytest.mark.parametrize("name", sorted(BACKGROUND_METHODS))
def test_every_method_follows_a_straight_background(syn, name):
    scan = _scan(syn)
    counts = scan.counts.copy()
    bkg = estimate_background(scan, method=name)
    assert bkg.shape == scan.counts.shape and np.all(bkg >= 0)
    np.testing.assert_array_equal(scan.counts, counts)  # input not mutated
    np.testing.assert_array_equal(bkg, estimate_background(scan, method=name))  # repeatable
    # Away from the peaks (> 1° from each), the estimate stays within 4 % of the true
    # background (~140–300 counts): looser than the 1σ noise (~6 %) of one point because the
    # methods smooth, tighter than any method that followed the peaks.
    far = np.min(np.abs(syn.two_theta[:, None] - np.array([20.0, 35.0, 50.0, 65.0])[None, :]), axis=1) > 1.0
    rel = np.abs(bkg[far] - syn.background[far]) / syn.background[far]
    assert np.median(rel) < 0.04


def test_snip_is_unbiased_on_noise():
    # SNIP alone sits ~0.44σ below the mean of Poisson noise (measured); refdb lifts it back.
    x = np.arange(10.0, 80.0, 0.01)
    rng = np.random.default_rng(0)
    counts = rng.poisson(np.full(x.size, 200.0)).astype(float)
    scan = Scan(two_theta=x, counts=counts, sigma=np.sqrt(counts), radiation=CU)
    bkg = estimate_background(scan)
    # Remaining offset after the correction is < 0.15σ (measured 0.08σ; 7,000 points give the
    # mean a standard error of 0.012σ, so the bound is about systematic error).
    assert abs(np.mean(counts - bkg)) / np.sqrt(200.0) < 0.15


@pytest.mark.parametrize("alias", ["SNIP", "Rolling_Ball", "rolling-ball", " arPLS "])
def test_names_are_case_and_separator_insensitive(syn, alias):
    assert estimate_background(_scan(syn), method=alias).shape == syn.counts.shape


def test_unknown_method_and_bad_option(syn):
    with pytest.raises(InputError, match="unknown background method"):
        estimate_background(_scan(syn), method="magic")
    with pytest.raises(InputError, match="background method asls"):
        estimate_background(_scan(syn), method="asls", no_such_option=3)


def test_typical_fwhm_from_the_peaks(syn):
    # The generator's FWHM is 0.08°; the Kα doublet widens the measured half-height width a
    # little at higher angles, hence the one-sided tolerance (0.08–0.11°).
    assert 0.075 < typical_fwhm(_scan(syn)) < 0.11
