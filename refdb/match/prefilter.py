"""Coarse, vectorised prefilter: which entries deserve the detailed figure of merit.

Two passes over the strong-line table of :mod:`refdb.match.index` (each entry's
:data:`~refdb.match.index.STRONG_LINES` strongest lines, weights relative to its strongest):

1. **Windows.** Each of the strongest :data:`N_OBSERVED` observed peaks opens a window in ln d
   of half-width ``tol_j + ln(1 + ε_max)``, where ``tol_j = cot θ_j · (τ_j + SHIFT_ALLOWANCE)/2``
   (radians) turns the 2θ tolerance τ_j plus an allowance for zero shift and displacement into
   ln d (from Δd/d = −cot θ·Δθ) and ε_max is the largest d-scale. Overlapping windows are
   merged so that no strong line is counted twice; every strong line inside a window votes its
   weight for its entry (``np.searchsorted`` on the sorted ln d, then ``np.bincount``). An
   entry's pass-1 key is ``U / (D + 1/2)``: U the votes, D the summed weight of its strong lines
   inside the scanned d range (a candidate with few lines in range is weaker evidence).
2. **Scale-consistent votes** for the best :data:`N_PASS2` entries: every (strong line,
   observed peak) pair within reach marks the d-scales ε on a grid of step :data:`SCALE_STEP`
   for which the two agree; the best ε of each entry is the one whose matched lines carry the
   most weight. The pass-2 key is the same ratio with those votes, and the best ε is handed to
   the detailed score as a starting value.

Nothing here decides an identification; it only keeps the work of the detailed score (which
sees every line of an entry) proportional to a shortlist instead of to the library.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from refdb.match.index import SearchIndex, expand_ranges
from refdb.match.score import D_SCALE_MAX, WidthModel, TOL_FWHM, TOL_MIN
from refdb.scan.types import PeakList

#: Observed peaks (strongest first) that open windows.
N_OBSERVED = 24
#: Entries passed from the first to the second pass.
N_PASS2 = 1500
#: Allowance for zero shift plus displacement in the windows, degrees 2θ.
SHIFT_ALLOWANCE = 0.2
#: Grid step of the d-scale votes in ln d.
SCALE_STEP = 0.0025


@dataclass(frozen=True, eq=False)
class Shortlist:
    """Entries kept by the prefilter, best first.

    Attributes
    ----------
    rows : ndarray, shape (n,), int64
        Index rows.
    key : ndarray, shape (n,)
        Pass-2 key (see the module docstring), 0–1.
    d_scale : ndarray, shape (n,)
        Best d-scale ε of each entry on the vote grid.
    """

    rows: np.ndarray
    key: np.ndarray
    d_scale: np.ndarray


def observed_windows(peaks: PeakList, width: WidthModel, *, d_scale: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """ln d of the strongest observed peaks, their ln-d tolerance, and the scale reach.

    Returns
    -------
    log_d : ndarray, shape (J,)
    tol : ndarray, shape (J,)
        Half-width in ln d without the d-scale.
    reach : float
        ln(1 + ε_max), 0 without d-scale.
    """
    rel = np.asarray(peaks.relative_intensity, dtype=float)
    order = np.argsort(-rel, kind="stable")[:N_OBSERVED]
    tt = np.asarray(peaks.two_theta, dtype=float)[order]
    tau = np.maximum(TOL_FWHM * width(tt), TOL_MIN) + SHIFT_ALLOWANCE
    theta = np.radians(tt) / 2.0
    tol = np.radians(tau) / 2.0 / np.tan(theta)
    log_d = np.log(np.asarray(peaks.d, dtype=float)[order])
    reach = float(np.log1p(D_SCALE_MAX)) if d_scale else 0.0
    return log_d, tol, reach


def _merged_ranges(lo: np.ndarray, hi: np.ndarray, sorted_values: np.ndarray) -> np.ndarray:
    """Positions in ``sorted_values`` inside the union of intervals [lo_i, hi_i]."""
    order = np.argsort(lo)
    lo, hi = lo[order], hi[order]
    run_hi = np.maximum.accumulate(hi)
    new = np.ones(lo.size, dtype=bool)
    new[1:] = lo[1:] > run_hi[:-1]
    starts = np.flatnonzero(new)
    m_lo = lo[starts]
    m_hi = run_hi[np.append(starts[1:] - 1, lo.size - 1)]
    a = np.searchsorted(sorted_values, m_lo.astype(sorted_values.dtype), side="left")
    b = np.searchsorted(sorted_values, m_hi.astype(sorted_values.dtype), side="right")
    return expand_ranges(a, b - a)[0]


def first_pass(peaks: PeakList, index: SearchIndex, allowed: np.ndarray, *, d_scale: bool, width: WidthModel,
               d_range: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Pass 1 (module docstring): allowed entries with at least one vote and their keys.

    Returns
    -------
    rows : ndarray, shape (h,), int64
        Entries with votes, increasing.
    key : ndarray, shape (h,)
        ``min(U, D) / (D + 1/2)``.
    """
    table = index.strong_lines(peaks.radiation.wavelength)
    log_d, tol, reach = observed_windows(peaks, width, d_scale=d_scale)
    pos = _merged_ranges(log_d - tol - reach, log_d + tol + reach, table.sorted_log_d)
    slot = np.asarray(table.sorted_slot[pos], dtype=np.int64)
    entry = slot // table.k
    w = np.asarray(table.weight.reshape(-1)[slot], dtype=np.float64)
    votes = np.bincount(entry, weights=w, minlength=index.n_entries)
    votes[~allowed] = 0.0
    hit = np.flatnonzero(votes > 0)
    lo_d, hi_d = np.log(d_range[0]) - reach, np.log(d_range[1]) + reach
    ld = np.asarray(table.log_d[hit], dtype=np.float64)
    wt = np.asarray(table.weight[hit], dtype=np.float64)
    den = np.where((ld >= lo_d) & (ld <= hi_d), wt, 0.0).sum(axis=1)
    return hit.astype(np.int64), np.minimum(votes[hit], den) / (den + 0.5)


def prefilter(peaks: PeakList, index: SearchIndex, allowed: np.ndarray, *, d_scale: bool, width: WidthModel,
              d_range: tuple[float, float], keep: int) -> Shortlist:
    """Shortlist entries for the detailed score (module docstring).

    Parameters
    ----------
    peaks : PeakList
        At least one peak.
    index : SearchIndex
    allowed : ndarray, shape (E,), bool
        Entries that pass the filters.
    d_scale : bool
        Allow an isotropic d-scale up to ±D_SCALE_MAX.
    width : WidthModel
    d_range : (float, float)
        (d_min, d_max) of the scan, Å.
    keep : int
        Size of the shortlist.
    """
    hit, key1 = first_pass(peaks, index, allowed, d_scale=d_scale, width=width, d_range=d_range)
    if hit.size == 0:
        return Shortlist(np.zeros(0, np.int64), np.zeros(0), np.zeros(0))
    n2 = min(N_PASS2, hit.size)
    top = np.argpartition(-key1, n2 - 1)[:n2] if n2 < hit.size else np.arange(hit.size)
    rows2 = hit[top]
    key2, eps = scale_votes(peaks, index, rows2, width=width, d_scale=d_scale, d_range=d_range)
    order = np.argsort(-key2, kind="stable")[: max(keep, 0)]
    return Shortlist(rows=rows2[order].astype(np.int64), key=key2[order], d_scale=eps[order])


def scale_votes(peaks: PeakList, index: SearchIndex, rows: np.ndarray, *, width: WidthModel, d_scale: bool,
                d_range: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Pass 2 of the prefilter for given entries: key and best d-scale of each.

    Parameters
    ----------
    rows : ndarray, shape (C,), int
        Index rows.

    Returns
    -------
    key : ndarray, shape (C,)
        Weight of strong lines found at the best scale over (D + 1/2) (module docstring).
    d_scale : ndarray, shape (C,)
        Best ε (0 without d-scale).
    """
    table = index.strong_lines(peaks.radiation.wavelength)
    log_d, tol, reach = observed_windows(peaks, width, d_scale=d_scale)
    rows = np.asarray(rows, dtype=np.int64)
    k = table.k
    ld2 = np.asarray(table.log_d[rows], dtype=np.float64)
    wt2 = np.asarray(table.weight[rows], dtype=np.float64)
    lo_d, hi_d = np.log(d_range[0]) - reach, np.log(d_range[1]) + reach
    wt2 = np.where((ld2 >= lo_d) & (ld2 <= hi_d), wt2, 0.0)
    den2 = wt2.sum(axis=1)
    grid = np.arange(-reach, reach + SCALE_STEP / 2, SCALE_STEP) if reach > 0 else np.zeros(1)
    r = log_d[None, None, :] - ld2[:, :, None]  # (C, K, J): ln(d_obs / d_ref)
    reachable = np.abs(r) <= (reach + tol)[None, None, :]
    reachable &= (wt2 > 0)[:, :, None]
    c_i, k_i, j_i = np.nonzero(reachable)
    rr = r[c_i, k_i, j_i]
    tj = tol[j_i]
    if reach > 0:
        i0 = np.clip(np.ceil((rr - tj - grid[0]) / SCALE_STEP), 0, grid.size - 1).astype(np.int64)
        i1 = np.clip(np.floor((rr + tj - grid[0]) / SCALE_STEP), 0, grid.size - 1).astype(np.int64)
        mid = np.clip(np.rint((rr - grid[0]) / SCALE_STEP), 0, grid.size - 1).astype(np.int64)
        bad = i1 < i0
        i0, i1 = np.where(bad, mid, i0), np.where(bad, mid, i1)
    else:
        i0 = i1 = np.zeros(rr.size, dtype=np.int64)
    s_idx, pair = expand_ranges(i0, i1 - i0 + 1)
    cell = (c_i * k + k_i)[pair]
    marks = np.zeros((rows.size * k, grid.size), dtype=bool)
    marks[cell, s_idx] = True
    per_scale = np.einsum("cks,ck->cs", marks.reshape(rows.size, k, grid.size), wt2)
    # Prefer the smallest |ε| among equal votes.
    best = np.argmax(per_scale - 1e-9 * np.abs(grid)[None, :], axis=1)
    votes = per_scale[np.arange(rows.size), best]
    return votes / (den2 + 0.5), np.expm1(grid[best])
