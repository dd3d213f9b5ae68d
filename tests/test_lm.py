"""Bounded Levenberg–Marquardt (refdb.lm) against certified values and an independent solver."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import least_squares, lsq_linear

from refdb.lm import LMResult, bounded_lm_batch

# NIST Statistical Reference Datasets, nonlinear regression, Misra1a (lower difficulty):
# y = b1 (1 − exp(−b2 x)), 14 observations (from memory; the certified values below are
# reproduced by scipy.optimize.least_squares on these data to 9 digits, which checks them).
MISRA_X = np.array([77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1, 689.1, 760.0])
MISRA_Y = np.array([10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40, 75.47, 81.78])
MISRA_B = np.array([2.3894212918e02, 5.5015643181e-04])  # certified
MISRA_RSS = 1.2455138894e-01  # certified residual sum of squares


def bounded_lm(residual, jacobian, x0, lower, upper, **options) -> LMResult:
    """One problem (x → r, x → J) solved by bounded_lm_batch as a batch of one."""

    def evaluate(x, rows):
        return residual(x[0])[None], jacobian(x[0])[None]

    return bounded_lm_batch(evaluate, np.atleast_2d(x0), np.atleast_2d(lower), np.atleast_2d(upper), **options)[0]


def _split(fun_jac):
    """Residual and Jacobian callables from one function giving both."""
    return (lambda x: fun_jac(x)[0]), (lambda x: fun_jac(x)[1])


def _misra(b):
    e = np.exp(-b[1] * MISRA_X)
    r = b[0] * (1.0 - e) - MISRA_Y
    jac = np.column_stack([1.0 - e, b[0] * MISRA_X * e])
    return r, jac


@pytest.mark.parametrize("start", [(500.0, 1e-4), (250.0, 5e-4)])  # NIST's start 1 and start 2
def test_misra1a_certified_values(start):
    fit = bounded_lm(*_split(_misra), np.array(start), np.full(2, -np.inf), np.full(2, np.inf), max_nfev=500,
                     ftol=1e-15, xtol=1e-15, gtol=1e-15)
    # NIST asks for agreement to at least 4–6 significant digits for a good solver; 1e-7
    # relative is what double precision reaches on this well-conditioned problem.
    np.testing.assert_allclose(fit.x, MISRA_B, rtol=1e-7)
    assert fit.fun @ fit.fun == pytest.approx(MISRA_RSS, rel=1e-9)
    assert fit.success


def _rosenbrock(x):
    r = np.array([10.0 * (x[1] - x[0] ** 2), 1.0 - x[0]])
    jac = np.array([[-20.0 * x[0], 10.0], [-1.0, 0.0]])
    return r, jac


def test_rosenbrock_unbounded_and_with_an_active_bound():
    # Rosenbrock (1960, Comput. J. 3, 175): minimum 0 at (1, 1) from the classic start (−1.2, 1).
    fit = bounded_lm(*_split(_rosenbrock), np.array([-1.2, 1.0]), np.full(2, -np.inf), np.full(2, np.inf),
                     max_nfev=500, ftol=1e-15, xtol=1e-15, gtol=1e-15)
    np.testing.assert_allclose(fit.x, [1.0, 1.0], atol=1e-8)  # double precision on a zero-residual problem
    # With x1 ≤ 0.5 the constrained minimum (by hand: x2 = x1², cost (1 − x1)²) is (0.5, 0.25).
    fit = bounded_lm(*_split(_rosenbrock), np.array([-1.2, 1.0]), np.array([-np.inf, -np.inf]), np.array([0.5, np.inf]),
                     max_nfev=500, ftol=1e-15, xtol=1e-15, gtol=1e-15)
    np.testing.assert_allclose(fit.x, [0.5, 0.25], atol=1e-8)
    assert fit.fun @ fit.fun == pytest.approx(0.25, rel=1e-10)


def test_evaluation_limit_is_reported():
    fit = bounded_lm(*_split(_rosenbrock), np.array([-1.2, 1.0]), np.full(2, -np.inf), np.full(2, np.inf), max_nfev=3)
    assert fit.nfev <= 3 and not fit.success and fit.status == 0


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 2**31 - 1),
    m=st.integers(4, 30),
    p=st.integers(1, 8),
)
def test_box_constrained_linear_problems_match_scipy_lsq_linear(seed, m, p):
    """On linear problems the solver must find the same constrained minimum as scipy's
    lsq_linear (an independent bounded solver); the minimum cost is unique."""
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(max(m, p + 1), p))
    b = rng.normal(size=a.shape[0]) * 3.0
    lo = rng.uniform(-1.0, 0.0, p)
    hi = lo + rng.uniform(0.1, 2.0, p)
    ref = lsq_linear(a, b, bounds=(lo, hi), tol=1e-14, lsmr_tol="auto", method="bvls")
    fit = bounded_lm(lambda x: a @ x - b, lambda x: a, (lo + hi) / 2.0, lo, hi, max_nfev=400, ftol=1e-14, xtol=1e-14,
                     gtol=1e-12)
    assert np.all(fit.x >= lo) and np.all(fit.x <= hi)  # never leaves the box
    cost_ref = float(np.sum((a @ ref.x - b) ** 2))
    cost = float(fit.fun @ fit.fun)
    # Equal minimum costs to 1e-7 relative (plus 1e-10 absolute for a zero-residual case):
    # both solvers stop within ~1e-8 of the optimum in their own tests.
    assert cost == pytest.approx(cost_ref, rel=1e-7, abs=1e-10)


def test_absolute_cost_tolerance_stops_early_but_close():
    tight = bounded_lm(*_split(_misra), np.array([500.0, 1e-4]), np.full(2, -np.inf), np.full(2, np.inf),
                       max_nfev=500, ftol=1e-15, xtol=1e-15, gtol=1e-15)
    loose = bounded_lm(*_split(_misra), np.array([500.0, 1e-4]), np.full(2, -np.inf), np.full(2, np.inf),
                       max_nfev=500, ftol=1e-15, xtol=1e-15, gtol=1e-15, cost_atol=1e-3)
    assert loose.success and loose.nfev < tight.nfev
    # Stopped where neither the last step nor an undamped one gains 1e-3: near the minimum the
    # problem is almost quadratic, so what is left to gain is of that size (NIST certified RSS).
    assert 0.0 <= loose.fun @ loose.fun - MISRA_RSS <= 1e-3


def _decay_problems(seed: int, n: int):
    """n fits of y = A·exp(−k t) + c to noisy data of different lengths, padded with zero
    residuals to one length (as refdb.scan.profile_fit pads peak windows)."""
    rng = np.random.default_rng(seed)
    sizes = rng.integers(8, 40, n)
    m = int(sizes.max())
    t = np.zeros((n, m))
    y = np.zeros((n, m))
    w = np.zeros((n, m))
    for i, s in enumerate(sizes):
        t[i, :s] = np.linspace(0.0, 5.0, s)
        y[i, :s] = rng.uniform(1, 10) * np.exp(-rng.uniform(0.2, 2.0) * t[i, :s]) + rng.uniform(-1, 1)
        y[i, :s] += rng.normal(0.0, 0.05, s)
        w[i, :s] = 1.0

    def evaluate(x, rows):
        a, k, c = x[:, 0, None], x[:, 1, None], x[:, 2, None]
        e = np.exp(-k * t[rows])
        r = (a * e + c - y[rows]) * w[rows]
        jac = np.stack([e, -a * t[rows] * e, np.ones_like(e)], axis=2) * w[rows][:, :, None]
        return r, jac

    x0 = np.tile([5.0, 1.0, 0.0], (n, 1))
    lo = np.tile([0.0, 0.05, -np.inf], (n, 1))
    hi = np.tile([np.inf, 1.5, np.inf], (n, 1))  # k ≤ 1.5 binds for some problems
    return evaluate, x0, lo, hi, t, y, w, sizes


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), n=st.integers(1, 9))
def test_a_batch_solves_each_problem_as_alone(seed, n):
    """Invariant of bounded_lm_batch: problems solved side by side get the result each gets
    alone (own damping, active set and stops), also with parameters held fixed."""
    evaluate, x0, lo, hi, *_ = _decay_problems(seed, n)
    fixed = np.zeros_like(x0, dtype=bool)
    fixed[::3, 2] = True  # every third problem keeps its offset at the start
    kw = {"ftol": 1e-10, "xtol": 1e-10, "gtol": 1e-10, "max_nfev": 200}
    together = bounded_lm_batch(evaluate, x0, lo, hi, fixed=fixed, **kw)
    for i in range(n):
        alone = bounded_lm_batch(lambda x, rows, i=i: evaluate(x, np.full(rows.size, i)), x0[i : i + 1],
                                 lo[i : i + 1], hi[i : i + 1], fixed=fixed[i : i + 1], **kw)[0]
        # The same arithmetic in a different stack: only the order of floating-point sums can
        # differ, so 1e-9 relative is generous.
        np.testing.assert_allclose(together[i].x, alone.x, rtol=1e-9, atol=1e-12)
        assert together[i].nfev == alone.nfev and together[i].status == alone.status
        if fixed[i, 2]:
            assert together[i].x[2] == x0[i, 2]


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 2**31 - 1))
def test_batched_minima_match_scipy_least_squares(seed):
    """Each problem's bounded minimum agrees with scipy.optimize.least_squares (trust-region
    reflective, an independent bounded solver) run on that problem alone."""
    evaluate, x0, lo, hi, t, y, w, sizes = _decay_problems(seed, 6)
    fits = bounded_lm_batch(evaluate, x0, lo, hi, ftol=1e-12, xtol=1e-12, gtol=1e-12, max_nfev=400)
    for i, s in enumerate(sizes):
        ti, yi = t[i, :s], y[i, :s]
        ref = least_squares(lambda p: p[0] * np.exp(-p[1] * ti) + p[2] - yi, x0[i], bounds=(lo[i], hi[i]),
                            method="trf", xtol=1e-14, ftol=1e-14, gtol=1e-14)
        cost = float(fits[i].fun @ fits[i].fun)
        # Both stop within ~1e-10 relative of the same minimum of a smooth problem; 1e-7
        # relative (1e-12 absolute for a perfect fit) leaves room for their different paths.
        assert cost == pytest.approx(2.0 * ref.cost, rel=1e-7, abs=1e-12)
        assert np.all(fits[i].x >= lo[i]) and np.all(fits[i].x <= hi[i])
