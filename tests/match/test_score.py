"""Figure of merit on hand-made cases, and the fast prefilter against slow versions.

Peak lists are invented (tests/match/_search_data.py) from invented cells; what is checked
is the behaviour the figure of merit promises in refdb.match.score's docstring, and the
Smith–Snyder F_N against its definition (Smith & Snyder 1979, J. Appl. Cryst. 12, 60; as in
../shared/check-values.md §6).
"""

from __future__ import annotations

import numpy as np
import pytest

from refdb.match.index import build_index
from refdb.match.prefilter import first_pass, observed_windows, scale_votes
from refdb.match.score import LineSet, gather_lines, score_lines, width_model
from refdb.match.search import _d_range, score_entries
from tests.match._search_data import LAMBDA, entry_peaks, make_peaks, synthetic_arrays

ARRAYS = synthetic_arrays(300, seed=21)
INDEX = build_index(ARRAYS)
ROW = 17
ENTRY = int(ARRAYS.entry_id[ROW])


def one(peaks, *, d_scale=True):
    return score_entries(peaks, INDEX, [ENTRY], d_scale=d_scale)[0]


def test_perfect_match_scores_near_100_and_beats_a_partial_one():
    full = one(entry_peaks(ARRAYS, ROW))
    # Peaks are at the exact line positions: position agreement is limited only by merged
    # lines (centroids of lines closer than half a width), so ≥ 0.9.
    assert full.score > 90 and full.components.expected_found == pytest.approx(1.0)
    assert full.components.position > 0.9
    half = entry_peaks(ARRAYS, ROW, two_theta_range=(10.0, 80.0))
    tt, area = half.two_theta[::2], half.area[::2]
    partial = one(make_peaks(tt, area))
    assert partial.score < full.score
    # With every second peak gone, about half of the expected intensity is missing.
    assert partial.components.expected_found < 0.8


def test_missing_strong_line_costs_a_lot():
    full = one(entry_peaks(ARRAYS, ROW))
    no_top = one(entry_peaks(ARRAYS, ROW, drop=(0,)))
    no_weak = one(entry_peaks(ARRAYS, ROW, drop=(25,)))
    assert no_top.components.strongest_missing == pytest.approx(1.0)
    # Missing the strongest line must cost far more than missing a weak one.
    assert no_top.score < 0.5 * full.score
    assert no_weak.score > 0.9 * full.score
    assert no_weak.score - no_top.score > 40


def test_zero_shift_is_recovered():
    shift = 0.12
    c = one(entry_peaks(ARRAYS, ROW, zero_shift=shift))
    # z, s·cosθ and the d-scale term −2·tanθ·ε (rad) are nearly collinear over 10–80°; the
    # data fix their sum. At 2θ = 45° it must equal the applied shift within a tenth of the
    # peak width (0.01°), and the matched lines must sit on the peaks within 0.01° on average.
    th = np.radians(45.0) / 2
    total = c.zero_shift + c.displacement * np.cos(th) - 2 * np.degrees(np.tan(th)) * c.d_scale
    assert total == pytest.approx(shift, abs=0.01)
    assert c.components.mean_abs_delta < 0.01
    assert c.score > 90
    no_fit_peaks = entry_peaks(ARRAYS, ROW)
    assert one(no_fit_peaks).score == pytest.approx(c.score, abs=3)


@pytest.mark.parametrize("eps", [-0.018, -0.007, 0.011, 0.019])
def test_strained_phase_is_recovered_with_the_d_scale(eps):
    c = one(entry_peaks(ARRAYS, ROW, d_scale=eps))
    # 5e-4 in ε is a 0.03° shift at 2θ = 60°, a third of the peak width used here.
    assert c.d_scale == pytest.approx(eps, abs=5e-4)
    assert c.score > 90
    without = one(entry_peaks(ARRAYS, ROW, d_scale=eps), d_scale=False)
    assert without.score < 0.5 * c.score


def test_smith_snyder_matches_its_definition():
    peaks = entry_peaks(ARRAYS, ROW, jitter=0.01, seed=3)
    c = one(peaks, d_scale=False)
    comp = c.components
    obs_matched = np.unique(c.matched[:, 0])
    # F_N = N / (N_poss · mean|Δ2θ|) with N the matched observed peaks.
    dist = []
    for j in obs_matched:
        lines = c.matched[c.matched[:, 0] == j, 1]
        pred = c.predicted_two_theta[np.isin(c.line_index, lines)]
        dist.append(np.min(np.abs(peaks.two_theta[j] - pred)))
    mean = float(np.mean(dist))
    assert comp.mean_abs_delta == pytest.approx(mean, rel=1e-9)
    assert comp.smith_snyder == pytest.approx(obs_matched.size / (comp.n_possible * mean), rel=1e-9)


def test_components_stay_in_range_and_inputs_are_not_mutated():
    peaks = entry_peaks(ARRAYS, ROW + 1, jitter=0.02)
    before = peaks.two_theta.copy()
    rows = np.arange(40)
    lines = gather_lines(INDEX, rows, LAMBDA, (1.0, 10.0))
    sc = score_lines(peaks, lines)
    for name in ("expected_found", "observed_explained", "position", "intensity_agreement", "strongest_missing"):
        v = getattr(sc, name)
        assert np.all((v >= 0) & (v <= 1 + 1e-12)), name
    assert np.all((sc.score >= 0) & (sc.score <= 100))
    np.testing.assert_array_equal(peaks.two_theta, before)
    again = score_lines(peaks, lines)
    np.testing.assert_array_equal(again.score, sc.score)


def test_width_model_recovers_caglioti_like_widths():
    tt = np.linspace(15, 110, 25)
    t = np.tan(np.radians(tt) / 2)
    fw = np.sqrt(0.004 + 0.01 * t * t)
    pk = make_peaks(tt, np.ones(25))
    pk = type(pk)(**{**pk.__dict__, "fwhm": fw})
    w = width_model(pk)
    # Exact data of the model's own form: recovered to rounding.
    np.testing.assert_allclose(w(tt), fw, rtol=1e-8)


# -- prefilter against slow versions -------------------------------------------------------


def slow_first_pass(peaks, allowed, d_scale):
    from refdb.match.index import SORTED_MIN_WEIGHT
    from refdb.match.prefilter import PASS1_SOFTENING, SCALE_SLICES

    width = width_model(peaks)
    log_d, tol, reach, strength = observed_windows(peaks, width, d_scale=d_scale)
    table = INDEX.strong_lines(LAMBDA)
    d_lo, d_hi = _d_range(peaks)
    n = SCALE_SLICES if d_scale else 1
    half = reach / n
    centres = [-reach + half + 2 * half * i for i in range(n)]
    keys = {}
    for row in range(INDEX.n_entries):
        if not allowed[row]:
            continue
        den = 0.0
        u = [0.0] * n
        for ld, w in zip(table.log_d[row], table.weight[row]):
            if not np.isfinite(ld):
                continue
            if w < SORTED_MIN_WEIGHT:
                continue  # only lines at least this strong vote in pass 1
            if np.log(d_lo) - reach <= ld <= np.log(d_hi) + reach:
                den += w
            for i, c in enumerate(centres):
                for x, t, o in zip(log_d, tol, strength):
                    if abs(ld - (x - c)) <= t + half:
                        u[i] += min(w, o)
        if max(u) > 0:
            keys[row] = min(max(u), den) / (den + PASS1_SOFTENING)
    return keys


@pytest.mark.parametrize("d_scale", [True, False])
def test_first_pass_agrees_with_slow_loops(d_scale):
    peaks = entry_peaks(ARRAYS, ROW, jitter=0.01)
    allowed = np.arange(INDEX.n_entries) % 5 != 1
    rows, key = first_pass(peaks, INDEX, allowed, d_scale=d_scale, width=width_model(peaks), d_range=_d_range(peaks))
    slow = slow_first_pass(peaks, allowed, d_scale)
    assert sorted(slow) == rows.tolist()
    # float32 ln d against float64 window edges: keys agree to rounding.
    np.testing.assert_allclose(key, [slow[r] for r in rows.tolist()], rtol=1e-6)


def test_scale_votes_agree_with_slow_grid():
    from refdb.match.prefilter import PASS1_SOFTENING, SCALE_STEP

    peaks = entry_peaks(ARRAYS, ROW, d_scale=0.01)
    width = width_model(peaks)
    rows = np.array([ROW, 3, 4])
    key, eps = scale_votes(peaks, INDEX, rows, width=width, d_scale=True, d_range=_d_range(peaks))
    log_d, tol, reach, strength = observed_windows(peaks, width, d_scale=True)
    table = INDEX.strong_lines(LAMBDA)
    d_lo, d_hi = _d_range(peaks)
    grid = np.arange(-reach, reach + SCALE_STEP / 2, SCALE_STEP)
    for i, row in enumerate(rows):
        best = -1.0
        ld, wt = table.log_d[row], table.weight[row]
        inr = (ld >= np.log(d_lo) - reach) & (ld <= np.log(d_hi) + reach)
        for s in grid:
            v = 0.0
            for l, w, ok in zip(ld, wt, inr):
                near = np.abs(log_d - l - s) <= tol + 1e-12
                if ok and near.any():
                    v += min(w, strength[near].max())
            best = max(best, v)
        den = wt[inr].sum()
        # The fast version also counts a pair whose interval falls between grid points at the
        # nearest point, so it may exceed the pure grid count, never fall below it.
        assert key[i] >= best / (den + PASS1_SOFTENING) - 1e-6
    # The true scale is found within one grid step.
    assert eps[0] == pytest.approx(0.01, abs=SCALE_STEP)


def test_line_set_is_strongest_first_and_inside_the_range():
    lines: LineSet = gather_lines(INDEX, np.array([ROW, 5]), LAMBDA, (1.2, 6.0), max_lines=15)
    for i in range(2):
        v = lines.intensity[i][lines.line[i] >= 0]
        assert np.all(np.diff(v) <= 0)
        d = lines.d[i][lines.line[i] >= 0]
        assert np.all((d >= 1.2) & (d <= 6.0))
    assert lines.d.shape[1] <= 15


# -- invariants (property tests) -----------------------------------------------------------

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=25, deadline=None)
@given(factor=st.floats(0.01, 1e4), row=st.integers(0, 299))
def test_scores_do_not_depend_on_the_intensity_unit(factor, row):
    """Counts or counts·degrees, ×0.01 or ×10⁴: only relative intensities may matter."""
    peaks = entry_peaks(ARRAYS, row, jitter=0.005, seed=row)
    scaled = make_peaks(peaks.two_theta, peaks.area * factor)
    a = score_entries(peaks, INDEX, [int(ARRAYS.entry_id[row]), ENTRY])
    b = score_entries(scaled, INDEX, [int(ARRAYS.entry_id[row]), ENTRY])
    # Relative intensities are recomputed from the scaled areas: equal to rounding.
    np.testing.assert_allclose([c.score for c in a], [c.score for c in b], rtol=1e-9, atol=1e-9)


@settings(max_examples=20, deadline=None)
@given(rows=st.lists(st.integers(0, 299), min_size=1, max_size=6, unique=True))
def test_a_candidate_scores_the_same_alone_or_in_company(rows):
    """Candidates are scored independently: batching must not change any score."""
    peaks = entry_peaks(ARRAYS, ROW, jitter=0.01)
    ids = [int(ARRAYS.entry_id[r]) for r in rows]
    together = score_entries(peaks, INDEX, ids)
    alone = [score_entries(peaks, INDEX, [i])[0] for i in ids]
    # Padding to a common line count must not leak between candidates: equal to rounding.
    np.testing.assert_allclose([c.score for c in together], [c.score for c in alone], rtol=1e-9, atol=1e-9)


@settings(max_examples=60, deadline=None)
@given(
    counts=st.lists(st.integers(1, 12), min_size=1, max_size=8),
    levels=st.lists(st.sampled_from([1.0, 2.5, 40.0, 100.0, 1e-3, 7e5]), min_size=96, max_size=96),
)
def test_strongest_first_orders_as_numpy_lexsort(counts, levels):
    """The one-key sort gives numpy's two-key lexsort order (owner, then −intensity, ties
    in given order); intensities drawn from a few levels so that exact ties occur."""
    from refdb.match.score import _strongest_first

    owner = np.repeat(3 * np.arange(len(counts)), counts)  # owners with gaps, as after filtering
    inten = np.asarray(levels[: owner.size]) * (1.0 + owner)
    np.testing.assert_array_equal(_strongest_first(owner, inten), np.lexsort((-inten, owner)))
