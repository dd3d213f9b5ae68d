"""Coarse, vectorised prefilter: which entries deserve the detailed figure of merit.

Two passes over the strong-line table of :mod:`refdb.match.index` (each entry's
:data:`~refdb.match.index.STRONG_LINES` strongest lines, weights relative to its strongest):

1. **Windows.** The d-scale range ±ln(1 + ε_max) is cut into :data:`SCALE_SLICES` slices of
   half-width h. For each slice centre c, each of the strongest :data:`N_OBSERVED` observed
   peaks opens a window in ln d centred on ``ln d_j − c`` of half-width ``tol_j + h``, where
   ``tol_j = cot θ_j · (τ_j + SHIFT_ALLOWANCE)/2`` (radians) turns the 2θ tolerance τ_j plus
   an allowance for zero shift and displacement into ln d (from Δd/d = −cot θ·Δθ). Overlapping
   strong line inside the window of peak j votes ``min(w_k, o_j)`` for its entry (w_k its
   weight, o_j the peak's intensity relative to the strongest peak, both 0–1), so a strong
   reference line only earns its weight at a strong observed peak (the idea behind Hanawalt's
   search by the strongest lines; Hanawalt, Rinn & Frevel 1938, Ind. Eng. Chem. Anal. Ed. 10,
   457). Found with ``np.searchsorted`` on the sorted ln d and summed with ``np.bincount``. An
   entry keeps the votes U of its best slice. Its pass-1 key is
   ``min(U, D) / (D + PASS1_SOFTENING)``, D the summed weight of its voting strong lines (weight
   ≥ SORTED_MIN_WEIGHT) inside the scanned d range (a candidate with few lines in range is
   weaker evidence). A line inside the windows of two peaks votes twice, which
   the cap at D bounds; merging windows would cost a sort per query.
2. **Scale-consistent votes** for the best :data:`N_PASS2` entries: every (strong line,
   observed peak) pair within reach marks the d-scales ε on a grid of step :data:`SCALE_STEP`
   for which the two agree, with the vote ``min(w_k, o_j)`` (the best peak per line and ε);
   the best ε of each entry is the one whose matched lines carry the most votes. The pass-2
   key is ``votes / (D₂ + PASS1_SOFTENING)`` with D₂ the weight of all K strong lines in range,
   and the best ε is handed to the detailed score as a starting value.

Nothing here decides an identification; it only keeps the work of the detailed score (which
sees every line of an entry) proportional to a shortlist instead of to the library.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from refdb.match.index import SORTED_MIN_WEIGHT, SearchIndex, expand_ranges
from refdb.match.score import D_SCALE_MAX, WidthModel, TOL_FWHM, TOL_MIN

if TYPE_CHECKING:
    from refdb.scan.types import PeakList

#: Observed peaks (strongest first) that open windows.
N_OBSERVED = 14
#: Added to D in the pass-1 key: an entry with few voting lines is weaker evidence.
PASS1_SOFTENING = 0.25
#: Entries passed from the first to the second pass.
N_PASS2 = 1500
#: Entries with the most pass-1 votes whose key is computed (the key needs their strong lines).
PASS1_KEEP = 10 * N_PASS2
#: Allowance for zero shift plus displacement in the windows, degrees 2θ.
SHIFT_ALLOWANCE = 0.15
#: Grid step of the d-scale votes in ln d.
SCALE_STEP = 0.0025
#: Slices of the d-scale range in pass 1 (each ±ln(1 + ε_max)/SCALE_SLICES wide).
SCALE_SLICES = 5


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


def observed_windows(peaks: PeakList, width: WidthModel, *,
                     d_scale: bool) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
    """ln d of the strongest observed peaks, their ln-d tolerance, the scale reach, strengths.

    Returns
    -------
    log_d : ndarray, shape (J,)
    tol : ndarray, shape (J,)
        Half-width in ln d without the d-scale.
    reach : float
        ln(1 + ε_max), 0 without d-scale.
    strength : ndarray, shape (J,)
        Relative intensity of each peak, strongest = 1.
    """
    rel = np.asarray(peaks.relative_intensity, dtype=float)
    order = np.argsort(-rel, kind="stable")[:N_OBSERVED]
    tt = np.asarray(peaks.two_theta, dtype=float)[order]
    tau = np.maximum(TOL_FWHM * width(tt), TOL_MIN) + SHIFT_ALLOWANCE
    theta = np.radians(tt) / 2.0
    tol = np.radians(tau) / 2.0 / np.tan(theta)
    log_d = np.log(np.asarray(peaks.d, dtype=float)[order])
    reach = float(np.log1p(D_SCALE_MAX)) if d_scale else 0.0
    top = float(rel[order[0]]) if order.size and rel[order[0]] > 0 else 1.0
    return log_d, tol, reach, np.clip(rel[order] / top, 0.0, 1.0)


def first_pass(peaks: PeakList, index: SearchIndex, allowed: np.ndarray, *, d_scale: bool, width: WidthModel,
               d_range: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Pass 1 (module docstring): allowed entries with at least one vote and their keys.

    Returns
    -------
    rows : ndarray, shape (h,), int64
        Entries with votes (at most :data:`PASS1_KEEP`, those with the most), increasing.
    key : ndarray, shape (h,)
        ``min(U, D) / (D + PASS1_SOFTENING)``.
    """
    table = index.strong_lines(peaks.radiation.wavelength)
    log_d, tol, reach, strength = observed_windows(peaks, width, d_scale=d_scale)
    votes = np.zeros(index.n_entries)
    # The d-scale range is cut into slices; an entry's votes are those of its best slice, so
    # its lines must agree with one common scale (to within a slice) to collect them.
    n_slices = SCALE_SLICES if reach > 0 else 1
    half = reach / n_slices
    sorted_ld = table.sorted_log_d
    for centre in np.linspace(-reach + half, reach - half, n_slices):
        a = np.searchsorted(sorted_ld, (log_d - centre - tol - half).astype(sorted_ld.dtype), side="left")
        b = np.searchsorted(sorted_ld, (log_d - centre + tol + half).astype(sorted_ld.dtype), side="right")
        # Windows are contiguous runs of the sorted table: copy them, no gathers.
        entry = np.concatenate([table.sorted_entry[i:j] for i, j in zip(a, b)])
        weight = np.concatenate([table.sorted_weight[i:j] for i, j in zip(a, b)])
        vote = np.minimum(weight, np.repeat(strength.astype(np.float32), b - a))
        np.maximum(votes, np.bincount(entry, weights=vote, minlength=index.n_entries), out=votes)
    votes[~allowed] = 0.0
    hit = np.flatnonzero(votes > 0)
    if hit.size > PASS1_KEEP:
        # The key is at most U/(U + 1/2): only entries with the most votes can lead.
        hit = np.sort(hit[np.argpartition(-votes[hit], PASS1_KEEP - 1)[:PASS1_KEEP]])
    lo_d, hi_d = np.log(d_range[0]) - reach, np.log(d_range[1]) + reach
    ld = np.asarray(table.log_d[hit], dtype=np.float64)
    wt = np.asarray(table.weight[hit], dtype=np.float64)
    den = np.where((ld >= lo_d) & (ld <= hi_d) & (wt >= SORTED_MIN_WEIGHT), wt, 0.0).sum(axis=1)
    return hit.astype(np.int64), np.minimum(votes[hit], den) / (den + PASS1_SOFTENING)


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
        Votes of strong lines found at the best scale over (D + PASS1_SOFTENING), D over all
        K strong lines in range (module docstring).
    d_scale : ndarray, shape (C,)
        Best ε (0 without d-scale).
    """
    table = index.strong_lines(peaks.radiation.wavelength)
    log_d, tol, reach, strength = observed_windows(peaks, width, d_scale=d_scale)
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
    vote = np.minimum(wt2[c_i, k_i], strength[j_i])[pair]
    # Each (line, scale) keeps its best peak: assign in increasing order, the last write wins.
    order = np.argsort(vote, kind="stable")
    marks = np.zeros((rows.size * k, grid.size))
    marks[cell[order], s_idx[order]] = vote[order]
    per_scale = marks.reshape(rows.size, k, grid.size).sum(axis=1)
    # Prefer the smallest |ε| among equal votes.
    best = np.argmax(per_scale - 1e-9 * np.abs(grid)[None, :], axis=1)
    votes = per_scale[np.arange(rows.size), best]
    return votes / (den2 + PASS1_SOFTENING), np.expm1(grid[best])
