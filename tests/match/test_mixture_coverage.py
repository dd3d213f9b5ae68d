"""The chance-coincidence test of mixture decomposition (refdb.match.mixture._coverage),
checked against a brute-force enumeration written here."""

from __future__ import annotations

import itertools

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from refdb.match.mixture import DENSITY_HALF_WINDOW, _coverage


def _brute_force(points, reflections, fwhm):
    dist = np.abs(points[:, None] - reflections[None, :])
    covered = dist.min(axis=1) <= 0.5 * fwhm
    p = np.clip(np.sum(dist <= DENSITY_HALF_WINDOW, axis=1) / (2 * DENSITY_HALF_WINDOW) * fwhm, 0, 1)
    m = int(covered.sum())
    if m < 2:
        return covered, 1.0
    total = 0.0
    for hits in itertools.product([0, 1], repeat=points.size):  # every outcome, by its probability
        if sum(hits) >= m:
            total += float(np.prod([pi if h else 1 - pi for pi, h in zip(p, hits, strict=True)]))
    return covered, total


@settings(max_examples=60, deadline=None)
@given(
    points=st.lists(st.floats(10, 80), min_size=1, max_size=7),
    reflections=st.lists(st.floats(10, 80), min_size=1, max_size=30),
    fwhm=st.floats(0.03, 0.5),
    snap=st.lists(st.booleans(), min_size=7, max_size=7),
)
def test_coverage_matches_enumeration(points, reflections, fwhm, snap):
    refl = np.array(reflections)
    pts = np.array(points)
    # put some points exactly on reflections so that coverage happens often
    pts = np.where(np.array(snap[: pts.size]), refl[np.arange(pts.size) % refl.size], pts)
    covered, chance = _coverage(pts, refl, fwhm)
    want_cov, want = _brute_force(pts, refl, fwhm)
    assert np.array_equal(covered, want_cov)
    assert 0.0 <= chance <= 1.0 + 1e-12
    # 1e-9: summation order only
    assert abs(chance - want) < 1e-9


def test_sparse_lattice_coverage_is_significant_and_dense_is_not():
    """Four points on a sparse cubic-like set of reflections are unlikely by chance; the same
    points among reflections every 0.05° prove nothing (pure arithmetic)."""
    sparse = np.array([25.0, 29.0, 41.6, 49.3, 51.7, 60.4])
    pts = np.array([29.0, 41.6, 51.7, 60.4])
    _, p_sparse = _coverage(pts, sparse, 0.08)
    dense = np.arange(10.0, 80.0, 0.05)
    _, p_dense = _coverage(pts, dense, 0.08)
    assert p_sparse < 1e-4
    assert p_dense > 0.5
