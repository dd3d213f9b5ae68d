"""Derivatives of drawn profiles (sum_profiles_with_derivatives) against finite differences of
sum_profiles, the function they differentiate."""

from __future__ import annotations

import numpy as np
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from refdb.structure.pattern import (
    GAUSSIAN_HALF_WINDOW,
    PROFILE_HALF_WINDOW,
    sum_profiles,
    sum_profiles_with_derivatives,
)

GRID = np.arange(10.0, 80.0, 0.01)
#: Step of the central differences along a direction whose weights are at most 3 (degrees of
#: centre or width per unit step; relative area per unit step).
STEP = 1e-6


def _same_windows(c1, w1, c2, w2) -> bool:
    """True when no grid point crosses a window edge between the two line sets: the windowed
    sum jumps there (by ≤ 1/(1 + 4·40²) of a Lorentzian's height) and has no derivative."""
    for half in (PROFILE_HALF_WINDOW, GAUSSIAN_HALF_WINDOW):
        for sign in (-1.0, 1.0):
            if not np.array_equal(np.searchsorted(GRID, c1 + sign * half * w1), np.searchsorted(GRID, c2 + sign * half * w2)):
                return False
    return True


@settings(max_examples=40, deadline=None)
@given(
    centers=st.lists(st.floats(12.0, 78.0), min_size=1, max_size=10),
    widths=st.lists(st.floats(0.03, 0.4), min_size=10, max_size=10),
    eta=st.floats(0.0, 1.0),
    seed=st.integers(0, 2**32 - 1),
)
def test_derivative_columns_match_central_differences_of_sum_profiles(centers, widths, eta, seed):
    c = np.array(centers)
    w = np.array(widths[: c.size])
    a = np.linspace(1.0, 3.0, c.size)
    rng = np.random.default_rng(seed)
    # three columns of random per-line weights for area (relative), centre and width
    value, center, width = rng.uniform(-3.0, 3.0, size=(3, 3, c.size))
    got = sum_profiles_with_derivatives(GRID, c, a, w, eta, value=value, center=center, width=width)

    plain = sum_profiles(GRID, c, a, w, eta)
    height = float(np.sum(a / w))  # ≥ every line's height (2/π and 2√(ln2/π) are < 1)
    # the same sum in a different order of operations: rounding only
    np.testing.assert_allclose(got.profile, plain, rtol=0, atol=1e-12 * height)
    # the profile is linear in eta, so this difference is exact up to rounding
    exact_eta = sum_profiles(GRID, c, a, w, 1.0) - sum_profiles(GRID, c, a, w, 0.0)
    np.testing.assert_allclose(got.eta, exact_eta, rtol=0, atol=1e-12 * height)

    for k in range(3):
        def along(t, k=k):
            return c + t * center[k], a * (1.0 + t * value[k]), w + t * width[k]

        (cp, ap, wp), (cm, am, wm) = along(STEP), along(-STEP)
        assume(_same_windows(c, w, cp, wp) and _same_windows(c, w, cm, wm))
        fd = (sum_profiles(GRID, cp, ap, wp, eta) - sum_profiles(GRID, cm, am, wm, eta)) / (2.0 * STEP)
        # Scale of the column: each line's |∂pV/∂c| and |∂pV/∂w| are below 2/w², |pV| below 1/w.
        scale = float(np.sum(a * (np.abs(value[k]) / w + 2.0 * (np.abs(center[k]) + np.abs(width[k])) / w**2)))
        # Central-difference truncation error h²/6·|f‴| is about 5·(δ/w)² of the column for a
        # line moved by δ = STEP·3 ≤ 3e-6° with w ≥ 0.03°: ≤ 5e-8; rounding adds
        # ε·|f|/h ≈ 1e-16·height/1e-6 ≈ 1e-10·height. 1e-6 of the scale is well above both.
        np.testing.assert_allclose(got.columns[k], fd, rtol=0, atol=1e-6 * scale)


def test_no_lines_and_no_weights():
    empty = sum_profiles_with_derivatives(GRID, np.zeros(0), np.zeros(0), np.zeros(0), 0.5,
                                          center=np.zeros((2, 0)))
    assert empty.profile.shape == GRID.shape and not empty.profile.any()
    assert empty.columns.shape == (2, GRID.size) and not empty.columns.any()
    one = sum_profiles_with_derivatives(GRID, np.array([30.0]), np.array([2.0]), np.array([0.1]), 0.3)
    assert one.columns.shape == (0, GRID.size)
    np.testing.assert_allclose(one.profile, sum_profiles(GRID, np.array([30.0]), np.array([2.0]), np.array([0.1]), 0.3),
                               rtol=0, atol=1e-12)
