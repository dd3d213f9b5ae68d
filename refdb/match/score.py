"""Peak-list figure of merit of reference patterns against an observed peak list.

Every candidate is scored on the same, fully reported terms. Notation: observed peaks j with
2θ_j and relative integrated intensity o_j (0–100, :attr:`PeakList.relative_intensity`);
reference lines k of one candidate inside the scanned range with intensity I_k (its own
scale, for the scan's wavelength: ``strength·LP(2θ)``, see :mod:`refdb.match.index`).

1. **Tolerance.** The instrument's width w(2θ) is fitted to the peak list's FWHMs as
   ``w² = a + b·tan²θ`` (a Caglioti-like form with V = 0, Caglioti, Paoletti & Ricci 1958,
   Nucl. Instrum. 3, 223; median FWHM where too few widths are known, 0.1° with none). A line
   matches the nearest observed peak if ``|Δ2θ| ≤ τ = max(TOL_FWHM·w(2θ_j), TOL_MIN)``.
2. **Geometry fitted per candidate.** Predicted positions are
   ``2θ_k = 2θ(d_k·(1 + ε)) + z + s·cos θ_k`` with zero shift z, sample displacement
   amplitude s (:func:`refdb.geometry.peak_shift`) and an optional isotropic d-scale ε
   (|ε| ≤ D_SCALE_MAX). Starting z and ε come from a vote over an (ε, z) grid by the
   strongest lines (:func:`_hough_start`); then (z, s, ε) are refined by three Gauss–Newton
   steps (the first with 1.5 τ) of weighted least squares over the matched lines (weights √(I_k/I_max)/τ²) with Gaussian
   priors of widths PRIOR_ZERO, PRIOR_DISPLACEMENT, PRIOR_D_SCALE (ridge terms that keep
   the nearly collinear z and s·cos θ stable when few lines match).
3. **Detectability.** The candidate's scale c = Σ_{j matched} o_j / Σ_{k matched} I_k puts its
   lines on the observed scale; an unmatched line counts as *expected* only if c·I_k is at
   least the weakest observed peak (the detection floor). So a minor phase is not blamed for
   weak lines nobody could see, while every line it should show is counted.
4. **Components**, each in [0, 1] (M matched lines, X = M ∪ expected lines, J matched peaks):

   * ``expected_found``     E = Σ_M I_k / Σ_X I_k
   * ``observed_explained`` O = Σ_J o_j / Σ_all o_j
   * ``position``           P = 1 − Σ_M I_k·|Δ2θ_k|/τ_k / Σ_M I_k
   * ``intensity_agreement`` A = Σ_J min(o_j/Σ_J o, r_j/Σ_J r), with r_j = Σ I_k of the lines
     matched to peak j (histogram intersection of the two intensity distributions)
   * ``strongest_missing``  m = max over expected unmatched lines of I_k / max_X I_k (0 when
     every expected line is found)

5. **Figure of merit** (0–100):
   ``score = 100 · E · √(O·P·A) · (1 − MISSING_PENALTY·m)``.
   E enters linearly because a phase that is present shows its lines; O, P and A enter as
   square roots because mixtures, overlaps and preferred orientation legitimately lower them.
   A missing strongest line multiplies the score by 1 − MISSING_PENALTY = 0.4.

The Smith–Snyder figure of merit F_N = N / (N_poss · ⟨|Δ2θ|⟩) over the N matched observed
peaks, with N_poss the candidate's lines up to the last matched peak (Smith & Snyder 1979,
J. Appl. Cryst. 12, 60) is reported alongside but does not enter the score.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from refdb.match.index import expand_ranges

if TYPE_CHECKING:
    from refdb.scan.types import PeakList

#: Matching tolerance as a fraction of the fitted FWHM (common practice, no source: half
#: a width or a bit more separates resolved peaks and absorbs peak-position noise).
TOL_FWHM = 0.6
#: Smallest matching tolerance, degrees 2θ (step sizes of lab scans are 0.01–0.02°).
TOL_MIN = 0.02
#: Largest |zero shift| and |displacement amplitude| searched, degrees 2θ.
Z_MAX = 0.3
#: Largest |ε| of the isotropic d-scale.
D_SCALE_MAX = 0.02
PRIOR_ZERO = 0.1
PRIOR_DISPLACEMENT = 0.1
PRIOR_D_SCALE = 0.01
MISSING_PENALTY = 0.6
#: At most this many strongest lines per candidate inside the range enter the score.
MAX_LINES = 400
#: Strongest lines per candidate that vote for the starting zero shift and d-scale.
GRID_LINES = 15
#: Step of the d-scale grid of the starting vote: half a step is a shift of ≤ 0.07° at
#: 2θ = 80°, inside the first, widened Gauss–Newton window.
SCALE_GRID_STEP = 0.002
#: Strongest lines per candidate used to fit the geometry.
FIT_LINES = 60


@dataclass(frozen=True, eq=False)
class WidthModel:
    """Peak width against angle: FWHM² = a + b·tan²θ (degrees 2θ)."""

    a: float
    b: float

    def __call__(self, two_theta: np.ndarray) -> np.ndarray:
        t = np.tan(np.radians(np.asarray(two_theta, dtype=float)) / 2.0)
        return np.sqrt(np.maximum(self.a + self.b * t * t, 1e-6))


def width_model(peaks: PeakList) -> WidthModel:
    """Fit :class:`WidthModel` to the peak list's FWHMs (robust, non-negative terms).

    Peaks without a finite positive FWHM are ignored; fewer than 3 widths give a constant
    width (their median, or 0.1° with none).
    """
    ok = np.isfinite(peaks.fwhm) & (peaks.fwhm > 0) & np.isfinite(peaks.two_theta)
    f = np.asarray(peaks.fwhm[ok], dtype=float)
    if f.size == 0:
        return WidthModel(0.01, 0.0)
    med = float(np.median(f))
    if f.size < 3:
        return WidthModel(med * med, 0.0)
    t2 = np.tan(np.radians(peaks.two_theta[ok]) / 2.0) ** 2
    # Trim widths far from the median (merged doublets, broad impurity peaks) before fitting.
    keep = (f > 0.5 * med) & (f < 2.0 * med)
    if keep.sum() < 3:
        return WidthModel(med * med, 0.0)
    a_mat = np.column_stack([np.ones(keep.sum()), t2[keep]])
    coef, *_ = np.linalg.lstsq(a_mat, f[keep] ** 2, rcond=None)
    a, b = float(coef[0]), float(coef[1])
    if b < 0 or a < 0:
        return WidthModel(float(np.median(f[keep])) ** 2, 0.0)
    return WidthModel(a, b)


@dataclass(frozen=True, eq=False)
class LineSet:
    """Reference lines of C candidates padded to a common length L.

    Attributes
    ----------
    rows : ndarray, shape (C,), int
        Index rows of the candidates.
    d : ndarray, shape (C, L)
        d-spacings in Å; NaN on padding.
    two_theta : ndarray, shape (C, L)
        2θ (degrees) for the primary wavelength without shifts; NaN on padding.
    intensity : ndarray, shape (C, L)
        Intensity on the candidate's own scale; 0 on padding.
    line : ndarray, shape (C, L), int
        Position of the line within its entry (0-based); −1 on padding.
    """

    rows: np.ndarray
    d: np.ndarray
    two_theta: np.ndarray
    intensity: np.ndarray
    line: np.ndarray


@dataclass(frozen=True, eq=False)
class LineScores:
    """Figure of merit and its parts for C candidates (see the module docstring).

    All fields have shape (C,) except ``nearest``, ``matched`` and ``expected`` (C, L) and
    ``predicted`` (C, L, degrees 2θ after the fitted geometry).
    """

    score: np.ndarray
    expected_found: np.ndarray
    observed_explained: np.ndarray
    position: np.ndarray
    intensity_agreement: np.ndarray
    strongest_missing: np.ndarray
    smith_snyder: np.ndarray
    mean_abs_delta: np.ndarray
    n_possible: np.ndarray
    n_matched: np.ndarray
    n_expected: np.ndarray
    zero_shift: np.ndarray
    displacement: np.ndarray
    d_scale: np.ndarray
    nearest: np.ndarray
    matched: np.ndarray
    expected: np.ndarray
    predicted: np.ndarray


def _predict(lines: LineSet, z: np.ndarray, s: np.ndarray, eps: np.ndarray,
             wavelength: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Predicted 2θ (NaN where a line cannot diffract) and sin θ, cos θ of the unshifted
    line (cos θ = √(1 − sin²θ) saves a second trigonometric pass)."""
    d = lines.d * (1.0 + eps[:, None])
    with np.errstate(invalid="ignore", divide="ignore"):
        x = wavelength / (2.0 * d)
        sin_t = np.where(x <= 1.0, x, np.nan)
        tt = 2.0 * np.degrees(np.arcsin(sin_t))
        cos_t = np.sqrt(1.0 - sin_t * sin_t)
    return tt + z[:, None] + s[:, None] * cos_t, sin_t, cos_t


class _Nearest:
    """Nearest observed peak of many positions: a lookup table instead of a binary search.

    The table holds ``searchsorted(obs, x)`` at the left edge of cells narrower than half the
    smallest gap between peaks, so a position needs one table read and at most one step.
    """

    def __init__(self, obs: np.ndarray) -> None:
        self.obs = obs
        self.n = obs.size
        gap = float(np.min(np.diff(obs))) if obs.size > 1 else 1.0
        self.step = min(max(gap / 2.0, 1e-3), 0.01)
        self.lo = float(obs[0]) - 1.0
        cells = int((float(obs[-1]) + 1.0 - self.lo) / self.step) + 2
        self.table = np.searchsorted(obs, self.lo + self.step * np.arange(cells))
        self.ext = np.append(obs, np.inf)

    def __call__(self, pred: np.ndarray, tol: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Index of the nearest peak, signed offset (peak − position) and the match flag."""
        p = np.where(np.isfinite(pred), pred, self.lo)
        cell = np.clip(((p - self.lo) / self.step).astype(np.int64), 0, self.table.size - 1)
        hi = self.table[cell]
        hi = hi + (self.ext[hi] < p)
        hi = hi + (self.ext[hi] < p)
        hi = np.clip(hi, 0, self.n - 1)
        lo = np.maximum(hi - 1, 0)
        pick = np.where(np.abs(self.obs[hi] - p) < np.abs(self.obs[lo] - p), hi, lo)
        delta = self.obs[pick] - pred
        ok = np.isfinite(delta) & (np.abs(delta) <= tol[pick])
        return pick, delta, ok


def score_lines(peaks: PeakList, lines: LineSet, *, d_scale: bool = True,
                d_scale_start: np.ndarray | None = None, width: WidthModel | None = None) -> LineScores:
    """Fit geometry and compute the figure of merit for C candidates at once.

    Parameters
    ----------
    peaks : PeakList
        Observed peaks (n ≥ 1), sorted by 2θ.
    lines : LineSet
        Candidates' reference lines inside the scanned range (:func:`gather_lines`).
    d_scale : bool
        Fit the isotropic d-scale ε (else ε = 0).
    d_scale_start : ndarray, shape (C,), optional
        Starting ε per candidate (the prefilter's best scale).
    width : WidthModel, optional
        Peak width model; fitted from ``peaks`` when omitted.

    Returns
    -------
    LineScores
    """
    c_n = lines.rows.shape[0]
    lam = peaks.radiation.wavelength
    obs = np.asarray(peaks.two_theta, dtype=float)
    o = np.asarray(peaks.relative_intensity, dtype=float)
    o = np.where(np.isfinite(o) & (o > 0), o, 0.0)
    w = width or width_model(peaks)
    tol = np.maximum(TOL_FWHM * w(obs), TOL_MIN)
    nearest = _Nearest(obs)
    inten = lines.intensity
    z, eps = _hough_start(obs, lines, tol, d_scale=d_scale, d_scale_start=d_scale_start, wavelength=lam)
    s = np.zeros(c_n)

    # The geometry is fitted on the strongest FIT_LINES lines (lines are strongest first);
    # weak lines add little information and most of the cost.
    f = min(FIT_LINES, inten.shape[1])
    fit = LineSet(lines.rows, lines.d[:, :f], lines.two_theta[:, :f], inten[:, :f], lines.line[:, :f])
    imax = np.maximum(inten[:, :1].max(axis=1, initial=0.0), 1e-300)
    wl = np.sqrt(fit.intensity / imax[:, None])
    prior = np.array([PRIOR_ZERO, PRIOR_DISPLACEMENT, PRIOR_D_SCALE if d_scale else 1e-9]) ** -2.0
    jac = np.empty(fit.d.shape + (3,))
    jac[..., 0] = 1.0
    for widen in (1.5, 1.0, 1.0):
        pred, sin_t, cos_t = _predict(fit, z, s, eps, lam)
        pick, delta, ok = nearest(pred, tol * widen)
        # d(2θ)/ds = cos θ and d(2θ)/dε = −2 tan θ (degrees) / (1 + ε); finite on padding.
        on = np.isfinite(pred)
        jac[..., 1] = np.where(on, cos_t, 1.0)
        jac[..., 2] = np.where(on, -2.0 * np.degrees(sin_t / np.maximum(cos_t, 1e-12)), 0.0) / (1.0 + eps[:, None])
        wt = np.where(ok, wl / tol[pick] ** 2, 0.0)
        wj = jac * wt[..., None]
        normal = np.matmul(wj.transpose(0, 2, 1), jac) + np.diag(prior)
        # Priors pull the *total* parameters to zero: rhs carries −prior·current value.
        cur = np.stack([z, s, eps], axis=1)
        rhs = np.matmul(wj.transpose(0, 2, 1), np.where(ok, delta, 0.0)[..., None])[..., 0] - prior * cur
        step_v = np.linalg.solve(normal, rhs[..., None])[..., 0]
        z = np.clip(z + step_v[:, 0], -Z_MAX, Z_MAX)
        s = np.clip(s + step_v[:, 1], -Z_MAX, Z_MAX)
        eps = np.clip(eps + step_v[:, 2], -D_SCALE_MAX, D_SCALE_MAX) if d_scale else eps

    pred = _predict(lines, z, s, eps, lam)[0]
    pick, delta, matched = nearest(pred, tol)
    lo_tt, hi_tt = peaks.two_theta_range
    inside = np.isfinite(pred) & (pred >= lo_tt) & (pred <= hi_tt) & (inten > 0)
    matched &= inside
    return _components(o, obs, tol, inten, pred, pick, delta, matched, inside, z, s, eps)


def _hough_start(obs: np.ndarray, lines: LineSet, tol: np.ndarray, *, d_scale: bool,
                 d_scale_start: np.ndarray | None, wavelength: float) -> tuple[np.ndarray, np.ndarray]:
    """Starting zero shift and d-scale by voting (a Hough transform over (ε, z)).

    Every pair of one of the :data:`GRID_LINES` strongest lines, a d-scale ε on a grid of
    step :data:`SCALE_GRID_STEP` and one of the four observed peaks around the line's scaled
    position implies a zero shift z = 2θ_obs − 2θ(d·(1+ε)); the pair votes its line's
    intensity for the (ε, z) cell. The fullest cell wins (ties: smallest |ε|, then |z|).
    Without d-scale only ε = 0 (or the given start) is tried.
    """
    c_n = lines.rows.shape[0]
    g = min(GRID_LINES, lines.d.shape[1])
    d = lines.d[:, :g]
    inten = lines.intensity[:, :g]
    if d_scale:
        grid_e = np.arange(-D_SCALE_MAX, D_SCALE_MAX + SCALE_GRID_STEP / 2, SCALE_GRID_STEP)
    else:
        grid_e = np.zeros(1)
    z_step = max(float(np.min(tol)), 0.01)
    n_z = int(np.ceil(Z_MAX / z_step))
    with np.errstate(invalid="ignore", divide="ignore"):
        x = wavelength / (2.0 * d[:, :, None] * (1.0 + grid_e[None, None, :]))
        tt = np.where(x <= 1.0, 2.0 * np.degrees(np.arcsin(np.clip(x, 0.0, 1.0))), np.nan)  # (C, g, E)
    # The four observed peaks around each position, from a list padded with two infinite
    # peaks at each end (infinite or NaN offsets never vote).
    obs_pad = np.concatenate([[-np.inf, -np.inf], obs, [np.inf, np.inf]])
    reach = np.concatenate([[0.0, 0.0], Z_MAX + tol, [0.0, 0.0]])
    j = np.searchsorted(obs, np.where(np.isfinite(tt), tt, -1.0))[..., None] + np.arange(4)  # (C, g, E, 4)
    zz = np.take(obs_pad, j) - tt[..., None]
    good = (np.abs(zz) <= np.take(reach, j)) & (inten > 0)[:, :, None, None]
    n_e, n_b = grid_e.size, 2 * n_z + 1
    zbin = np.rint(zz[good] / z_step).astype(np.int64) + n_z
    c_i, k_i, e_i, _ = np.nonzero(good)
    flat = (c_i * n_e + e_i) * n_b + np.clip(zbin, 0, 2 * n_z)
    votes = np.bincount(flat, weights=inten[c_i, k_i], minlength=c_n * n_e * n_b).reshape(c_n, n_e, n_b)
    # A vote spread over neighbouring z cells is one shift measured with noise: smooth by 3 cells.
    sm = votes.copy()
    sm[:, :, 1:] += votes[:, :, :-1]
    sm[:, :, :-1] += votes[:, :, 1:]
    z_centres = (np.arange(n_b) - n_z) * z_step
    tie = 1e-9 * (np.abs(grid_e)[:, None] * 100 + np.abs(z_centres)[None, :])
    if d_scale_start is not None and d_scale:
        # Lean towards the prefilter's ε among near-equal cells.
        tie = tie + 1e-9 * np.abs(grid_e[None, :, None] - d_scale_start[:, None, None]) * 100
    best = np.argmax((sm - tie).reshape(c_n, -1), axis=1)
    e_best, z_best = np.divmod(best, n_b)
    eps = grid_e[e_best]
    z = z_centres[z_best]
    empty = votes.reshape(c_n, -1).max(axis=1) <= 0
    z = np.where(empty, 0.0, z)
    eps = np.where(empty, 0.0 if d_scale_start is None or not d_scale else np.clip(d_scale_start, -D_SCALE_MAX, D_SCALE_MAX), eps)
    return z, eps


def _components(o, obs, tol, inten, pred, pick, delta, matched, inside, z, s, eps) -> LineScores:
    c_n, n = inten.shape[0], obs.size
    mi = np.where(matched, inten, 0.0)
    # Observed peaks explained: scatter matched line intensity onto peaks (C·n bins).
    flat = (np.arange(c_n)[:, None] * n + pick)[matched]
    r = np.bincount(flat, weights=inten[matched], minlength=c_n * n).reshape(c_n, n)
    hit = r > 0
    o_hit = np.where(hit, o[None, :], 0.0)
    sum_o_hit = o_hit.sum(axis=1)
    sum_r = r.sum(axis=1)
    scale = np.where(sum_r > 0, sum_o_hit / np.maximum(sum_r, 1e-300), 0.0)
    floor = float(np.min(o[o > 0])) if np.any(o > 0) else 0.0
    detectable = inside & (scale[:, None] * inten >= floor) & (scale[:, None] > 0)
    expected = matched | detectable
    ei = np.where(expected, inten, 0.0)
    e_sum = ei.sum(axis=1)
    big_e = np.where(e_sum > 0, mi.sum(axis=1) / np.maximum(e_sum, 1e-300), 0.0)
    big_o = sum_o_hit / max(float(o.sum()), 1e-300)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel_off = np.where(matched, np.abs(delta) / tol[pick], 0.0)
        big_p = np.where(mi.sum(axis=1) > 0, 1.0 - (mi * rel_off).sum(axis=1) / np.maximum(mi.sum(axis=1), 1e-300), 0.0)
        on = o_hit / np.maximum(sum_o_hit, 1e-300)[:, None]
        rn = r / np.maximum(sum_r, 1e-300)[:, None]
    big_a = np.minimum(on, rn).sum(axis=1)
    missing = expected & ~matched
    top = np.maximum(ei.max(axis=1, initial=0.0), 1e-300)
    m = np.where(missing, inten, 0.0).max(axis=1, initial=0.0) / top
    score = 100.0 * big_e * np.sqrt(np.clip(big_o * big_p * big_a, 0.0, None)) * (1.0 - MISSING_PENALTY * m)

    # Smith–Snyder F_N over matched observed peaks.
    dist = np.full((c_n, n), np.inf)
    np.minimum.at(dist, (np.nonzero(matched)[0], pick[matched]), np.abs(delta[matched]))
    n_hit = hit.sum(axis=1)
    mean_abs = np.where(n_hit > 0, np.where(hit, dist, 0.0).sum(axis=1) / np.maximum(n_hit, 1), np.nan)
    last = np.where(hit, obs[None, :], -np.inf).max(axis=1, initial=-np.inf)
    n_poss = (inside & (pred <= last[:, None] + tol.max())).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        fn = np.where((n_hit > 0) & (n_poss > 0), n_hit / (n_poss * np.maximum(mean_abs, 1e-4)), 0.0)
    return LineScores(
        score=score, expected_found=big_e, observed_explained=big_o, position=big_p,
        intensity_agreement=big_a, strongest_missing=m, smith_snyder=fn, mean_abs_delta=mean_abs,
        n_possible=n_poss, n_matched=matched.sum(axis=1), n_expected=expected.sum(axis=1),
        zero_shift=z, displacement=s, d_scale=eps, nearest=pick, matched=matched,
        expected=expected, predicted=pred,
    )


def gather_lines(index, rows: np.ndarray, wavelength: float, d_range: tuple[float, float], *,
                 monochromator_two_theta: float | None = None, max_lines: int = MAX_LINES) -> LineSet:
    """Collect the candidates' lines inside a d range, strongest first, padded to (C, L).

    Parameters
    ----------
    index : SearchIndex
    rows : ndarray, shape (C,), int
        Index rows of the candidates.
    wavelength : float
        Primary wavelength, Å.
    d_range : (float, float)
        (d_min, d_max) in Å; widen it by the largest d-scale before calling.
    max_lines : int
        Keep at most this many strongest lines per candidate.
    """
    rows = np.asarray(rows, dtype=np.int64)
    c_n = rows.size
    start = index.line_start[rows]
    count = index.line_start[rows + 1] - start
    idx, owner = expand_ranges(start, count)
    d = np.asarray(index.d[idx], dtype=np.float64)
    # Most of an entry's lines lie outside the scanned range: drop them before computing
    # intensities.
    keep = (d >= d_range[0]) & (d <= d_range[1])
    idx, owner, d = idx[keep], owner[keep], d[keep]
    offs = idx - start[owner]
    tt, inten = index.line_intensity(rows[owner], idx, wavelength, monochromator_two_theta=monochromator_two_theta)
    keep = (inten > 0) & np.isfinite(tt)
    owner, offs, d, tt, inten = owner[keep], offs[keep], d[keep], tt[keep], inten[keep]
    order = _strongest_first(owner, inten)
    owner, offs, d, tt, inten = owner[order], offs[order], d[order], tt[order], inten[order]
    first = np.searchsorted(owner, owner, side="left")
    rank = np.arange(owner.size) - first
    sel = rank < max_lines
    n_per = np.bincount(owner[sel], minlength=c_n)
    width = max(int(n_per.max(initial=0)), 1)
    out_d = np.full((c_n, width), np.nan)
    out_tt = np.full((c_n, width), np.nan)
    out_i = np.zeros((c_n, width))
    out_line = np.full((c_n, width), -1, dtype=np.int64)
    at = (owner[sel], rank[sel])
    out_d[at], out_tt[at], out_i[at], out_line[at] = d[sel], tt[sel], inten[sel], offs[sel]
    return LineSet(rows=rows, d=out_d, two_theta=out_tt, intensity=out_i, line=out_line)


def _strongest_first(owner: np.ndarray, inten: np.ndarray) -> np.ndarray:
    """Order that groups lines by their (sorted, non-decreasing) owner and puts each owner's
    lines strongest first, equal intensities in their given order — ``lexsort((-inten,
    owner))`` with one stable sort of a float key: owner + (1 − I/I_max of the owner)/2."""
    if owner.size == 0:
        return np.zeros(0, dtype=np.int64)
    starts = np.flatnonzero(np.r_[True, owner[1:] != owner[:-1]])
    imax = np.repeat(np.maximum.reduceat(inten, starts), np.diff(np.r_[starts, owner.size]))
    return np.argsort(owner + 0.5 * (1.0 - inten / imax), kind="stable")
