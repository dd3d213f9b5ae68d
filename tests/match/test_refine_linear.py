"""The scale solver of whole-profile refinement (refdb.match.refine.LinearSolver) against
scipy.optimize.lsq_linear, an independent bounded least-squares solver."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import lsq_linear

from refdb.match.refine import LinearSolver, _chebyshev_basis


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), phases=st.integers(0, 5), degree=st.integers(0, 4))
def test_scales_and_background_match_bounded_least_squares(seed, phases, degree):
    rng = np.random.default_rng(seed)
    x = np.linspace(10.0, 80.0, 400)
    # peaky non-negative columns like phase profiles, a target mixing some of them with noise
    cols = np.column_stack([
        np.exp(-0.5 * ((x[:, None] - rng.uniform(10, 80, 6)[None, :]) / rng.uniform(0.05, 0.3)) ** 2).sum(axis=1)
        for _ in range(phases)
    ]) if phases else np.zeros((x.size, 0))
    basis = _chebyshev_basis(x, degree)
    truth = rng.uniform(-1.0, 3.0, phases)  # negative truths make the bound active
    target = cols @ truth + basis @ rng.normal(size=degree + 1) + rng.normal(scale=0.1, size=x.size)
    w = rng.uniform(0.5, 2.0, x.size)
    s, c = LinearSolver(basis, w, target).solve(cols)
    assert np.all(s >= 0)
    sw = np.sqrt(w)
    a = np.hstack([cols, basis]) * sw[:, None]
    lo = np.concatenate([np.zeros(phases), np.full(degree + 1, -np.inf)])
    ref = lsq_linear(a, target * sw, bounds=(lo, np.inf), method="bvls", tol=1e-12)
    cost = np.sum((a @ np.concatenate([s, c]) - target * sw) ** 2)
    cost_ref = np.sum((a @ ref.x - target * sw) ** 2)
    # The minimum of a convex problem is unique: equal costs to 1e-9 relative (both solvers
    # stop at machine-precision optimality on 400 points; 1e-9 leaves room for rounding).
    assert cost == pytest.approx(cost_ref, rel=1e-9, abs=1e-9)
