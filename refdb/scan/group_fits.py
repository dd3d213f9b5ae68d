"""Group fits and the refits that improve them: merging, rejection, shoulders, shape trends.

Stages 4–6 of :func:`refdb.scan.peaks.find_peaks`; see that module's docstring.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Generator
from dataclasses import dataclass

import numpy as np
from scipy.signal import find_peaks as _local_maxima
from scipy.signal import savgol_coeffs, savgol_filter

from refdb.profiles import caglioti_fwhm
from refdb.scan.profile_fit import FitSetup, GroupResult, GroupTask, fit_groups, line_centers
from refdb.scan.types import Scan

#: Refits of a group after removing insignificant peaks.
_MAX_REFITS = 4
#: Most peaks fitted together in one group (see :func:`_split_large`).
MAX_GROUP = 8


def smoothing_window(fwhm_points: float, smooth: bool) -> tuple[int, float]:
    """Savitzky–Golay window (odd, points) about one FWHM, and the noise factor √Σc²."""
    if not smooth:
        return 1, 1.0
    window = max(5, int(round(fwhm_points)) | 1)
    return window, float(np.sqrt(np.sum(savgol_coeffs(window, 2) ** 2)))


def _groups(centers: np.ndarray, fwhm: float, setup: FitSetup) -> list[np.ndarray]:
    """Indices of candidates whose fitting windows overlap, one array per group."""
    if centers.size == 0:
        return []
    lines, _ = line_centers(centers, setup.ratios)
    starts = np.nanmin(lines, axis=1) - 4.0 * fwhm
    ends = np.nanmax(lines, axis=1) + 4.0 * fwhm
    reach = np.maximum.accumulate(ends)
    breaks = np.flatnonzero(starts[1:] > reach[:-1]) + 1
    groups: list[np.ndarray] = []
    for members in np.split(np.arange(centers.size), breaks):
        groups.extend(_split_large(members, centers))
    return groups


def _split_large(members: np.ndarray, centers: np.ndarray) -> list[np.ndarray]:
    """Split a group of more than :data:`MAX_GROUP` peaks at its widest gaps.

    Long chains of overlapping peaks would make one large least-squares problem whose cost
    grows with the cube of its size; the peaks at a wide gap hardly interact.
    """
    if members.size <= MAX_GROUP:
        return [members]
    gaps = np.diff(centers[members])
    cut = int(np.argmax(gaps[MAX_GROUP // 2 - 1 : members.size - MAX_GROUP // 2])) + MAX_GROUP // 2
    return _split_large(members[:cut], centers) + _split_large(members[cut:], centers)


def _collapsed(res: GroupResult, fwhm: float) -> np.ndarray:
    """Peaks that converged onto a larger neighbour (closer than half a FWHM): one reflection."""
    close = np.abs(res.center[:, None] - res.center[None, :]) < 0.5 * max(fwhm, float(np.min(res.fwhm)))
    smaller = res.area[:, None] < res.area[None, :]
    return (close & smaller).any(axis=1)


#: A fitting job: yields the group fits it needs one at a time, is sent each result, and
#: returns its outcome (see :func:`run_jobs`).
FitJob = Generator[GroupTask, GroupResult, "tuple[GroupResult | None, int]"]


def run_jobs(jobs: list[FitJob], setup: FitSetup) -> list[tuple[GroupResult | None, int]]:
    """Run fitting jobs side by side; their outcomes in the order of ``jobs``.

    Every round collects the fit each unfinished job asks for next and makes all of them in
    one call of :func:`fit_groups` (one batched solve per group size), so a scan's groups cost
    a few solver calls instead of one each.
    """
    outcomes: list[tuple[GroupResult | None, int] | None] = [None] * len(jobs)
    asks: dict[int, GroupTask] = {}

    def advance(i: int, result: GroupResult | None) -> None:
        try:
            asks[i] = jobs[i].send(result)  # type: ignore[arg-type]  (None starts a job)
        except StopIteration as end:
            outcomes[i] = end.value

    for i in range(len(jobs)):
        advance(i, None)
    while asks:
        order = list(asks)
        results = fit_groups([asks.pop(i) for i in order], setup)
        for i, res in zip(order, results, strict=True):
            advance(i, res)
    return outcomes  # type: ignore[return-value]


def _fit_until_significant(center: np.ndarray, height: np.ndarray, fwhm: float,
                           min_significance: float) -> FitJob:
    """Fit a group, drop insignificant peaks and refit; None when nothing survives.

    Peaks that merged onto a neighbour go first. Otherwise all insignificant peaks go, except
    that the most significant one stays for another fit when every peak fell short: a noise
    bump on a real peak's flank can make both look uncertain until the bump is removed.
    """
    widths = np.full(center.size, fwhm)
    dropped = 0
    for _ in range(_MAX_REFITS + 1):
        res = yield GroupTask(center, height, widths)
        with np.errstate(divide="ignore", invalid="ignore"):
            sig = np.where(res.u_height > 0, res.height / res.u_height, 0.0)
        merged = _collapsed(res, fwhm)
        if merged.any():
            keep = ~merged
        else:
            keep = sig >= min_significance
            if keep.all():
                return res, dropped
            if center.size == 1:
                return (yield from _fixed_shape_single(res, fwhm, min_significance, dropped))
            if not keep.any():
                keep[np.argmax(sig)] = True
        dropped += int((~keep).sum())
        center, height, widths = res.center[keep], res.height[keep], np.clip(res.fwhm[keep], 0.5 * fwhm, 2 * fwhm)
    # Out of refits (rare): keep what is significant in the last fit.
    res = yield GroupTask(center, height, widths)
    with np.errstate(divide="ignore", invalid="ignore"):
        good = res.height >= min_significance * res.u_height
    if not good.any():
        return None, dropped + center.size
    fields = {f: getattr(res, f)[good] for f in ("center", "area", "height", "fwhm", "eta", "u_center", "u_area",
                                               "u_height", "u_fwhm")}
    return dataclasses.replace(res, **fields), dropped + int((~good).sum())


def _fixed_shape_single(res: GroupResult, fwhm: float, min_significance: float, dropped: int) -> FitJob:
    """A lone peak that fell short with a free shape, fitted again with the typical FWHM and
    eta = 0.5; kept when significant then.

    With a few points per FWHM (a sharp line at low angle), a free width and eta trade off
    against the height and inflate its uncertainty: a clear reflection can look insignificant
    although its counts stand far above the noise.
    """
    refit = yield GroupTask(res.center, res.height, np.array([fwhm]), eta=np.array([0.5]),
                            fixed_shape=np.array([True]), span=(res.lo, res.hi))
    with np.errstate(divide="ignore", invalid="ignore"):
        ok = bool(refit.u_height[0] > 0 and refit.height[0] >= min_significance * refit.u_height[0])
    return (refit, dropped) if ok else (None, dropped + 1)


def fit_all(tt: np.ndarray, h: np.ndarray, fwhm: float, setup: FitSetup,
             min_significance: float) -> tuple[list[GroupResult], int]:
    """Group candidates and fit every group; the fits and the number of peaks rejected."""
    jobs = [_fit_until_significant(tt[m], h[m], fwhm, min_significance) for m in _groups(tt, fwhm, setup)]
    outcomes = run_jobs(jobs, setup)
    return [res for res, _ in outcomes if res is not None], sum(n for _, n in outcomes)


#: A residual bump must also exceed this fraction of the fitted net counts there, so that small
#: profile-shape misfits of strong peaks (asymmetry, common practice, no source) are not taken
#: for shoulders.
_SHOULDER_FRACTION = 0.05


def residual_pass(scan: Scan, results: list[GroupResult], fwhm: float, setup: FitSetup,
                 min_significance: float, smooth: bool) -> tuple[list[GroupResult], int, int]:
    """Look for significant bumps in the residual (shoulders without a maximum of their own).

    Each bump joins the fitted peaks of the groups whose windows it touches, and those groups
    are fitted again; the others are kept.
    """
    model = setup.background.copy()
    net = np.zeros_like(model)
    for r in results:
        model[r.lo : r.hi] = r.model
        net[r.lo : r.hi] = r.model - r.local_background
    step = float(np.median(np.diff(scan.two_theta)))
    window, factor = smoothing_window(fwhm / step, smooth)
    resid = scan.counts - model
    smooth_resid = savgol_filter(resid, window, 2) if window > 1 else resid
    floor = np.maximum(min_significance * factor * scan.sigma, _SHOULDER_FRACTION * net)
    idx, _ = _local_maxima(smooth_resid, height=floor)
    inside = np.zeros(idx.size, dtype=bool)
    for r in results:
        inside |= (idx >= r.lo) & (idx < r.hi)
    idx = idx[inside]  # outside every window the first pass already saw the data
    if idx.size == 0:
        return results, 0, 0
    new_tt, new_h = scan.two_theta[idx], smooth_resid[idx]
    touched = [i for i, r in enumerate(results) if np.any((idx >= r.lo) & (idx < r.hi))]
    kept = [r for i, r in enumerate(results) if i not in touched]
    tt = np.concatenate([new_tt] + [results[i].center for i in touched])
    h = np.concatenate([new_h] + [results[i].height for i in touched])
    order = np.argsort(tt)
    refit, dropped = fit_all(tt[order], h[order], fwhm, setup, min_significance)
    # Keep the refit only where it explains the touched windows better (a refit can fall into
    # a worse local minimum than the first fit).
    region = np.zeros(model.size, dtype=bool)
    for r in [results[i] for i in touched] + refit:
        region[r.lo : r.hi] = True
    before = _chi2(scan, results, setup.background, region)
    after = _chi2(scan, kept + refit, setup.background, region)
    if after >= before:
        return results, int(idx.size), 0
    return kept + refit, int(idx.size), dropped


def _chi2(scan: Scan, results: list[GroupResult], background: np.ndarray, region: np.ndarray) -> float:
    """Σ((counts − model)/σ)² over ``region`` for the model made of ``results``."""
    model = background.copy()
    for r in results:
        model[r.lo : r.hi] = r.model
    z = (scan.counts - model)[region] / scan.sigma[region]
    return float(z @ z)


#: Peaks at least this significant define the width and eta trends (common practice, no source:
#: their FWHM is known to about 1 %).
_TREND_SIGNIFICANCE = 25.0
#: Peaks less significant than this get their shape from the trend (where the data allow).
_FIX_BELOW = 60.0
#: Fewest strong peaks for a width trend (three Caglioti parameters plus one to spare).
_TREND_MIN_PEAKS = 4


@dataclass(frozen=True, eq=False)
class ShapeTrend:
    """FWHM² = U tan²θ + V tan θ + W and eta = a + b·2θ with their covariances."""

    uvw: np.ndarray
    uvw_cov: np.ndarray
    eta_coef: np.ndarray
    eta_cov: np.ndarray

    def at(self, two_theta: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """FWHM, its uncertainty, eta and its uncertainty at positions (degrees)."""
        t = np.tan(np.radians(two_theta) / 2.0)
        rows_w = np.column_stack([t * t, t, np.ones_like(t)])
        rows_e = np.column_stack([np.ones_like(t), two_theta])
        w = caglioti_fwhm(two_theta, *self.uvw)
        u_w2 = np.sqrt(np.maximum(np.einsum("np,pq,nq->n", rows_w, self.uvw_cov, rows_w), 0.0))
        eta = np.clip(rows_e @ self.eta_coef, 0.0, 1.0)
        u_eta = np.sqrt(np.maximum(np.einsum("np,pq,nq->n", rows_e, self.eta_cov, rows_e), 0.0))
        return w, u_w2 / (2.0 * w), eta, u_eta


def _lstsq_cov(design: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    coef = np.linalg.lstsq(design, values, rcond=None)[0]
    resid = values - design @ coef
    s2 = float(resid @ resid) / max(values.size - design.shape[1], 1)
    return coef, np.linalg.pinv(design.T @ design) * s2


def shape_trend(results: list[GroupResult]) -> ShapeTrend | None:
    """Width and eta trends across the scan from the strong peaks, or None with too few.

    FWHM² = U tan²θ + V tan θ + W (Caglioti, Paoletti & Ricci 1958, Nucl. Instrum. 3, 223) and
    eta = a + b·2θ, both by least squares over the peaks with height ≥ 25 u(height); the
    covariances come from the scatter about the trends.
    """
    c = np.concatenate([r.center for r in results])
    w = np.concatenate([r.fwhm for r in results])
    eta = np.concatenate([r.eta for r in results])
    with np.errstate(divide="ignore", invalid="ignore"):
        sig = np.concatenate([r.height / r.u_height for r in results])
    strong = sig >= _TREND_SIGNIFICANCE
    if strong.sum() < _TREND_MIN_PEAKS:
        return None
    t = np.tan(np.radians(c[strong]) / 2.0)
    uvw, uvw_cov = _lstsq_cov(np.column_stack([t * t, t, np.ones_like(t)]), w[strong] ** 2)
    eta_coef, eta_cov = _lstsq_cov(np.column_stack([np.ones_like(t), c[strong]]), eta[strong])
    return ShapeTrend(uvw, uvw_cov, eta_coef, eta_cov)


def refit_weak(results: list[GroupResult], trend: ShapeTrend, setup: FitSetup,
                min_significance: float) -> tuple[list[GroupResult], int]:
    """Refit groups with weak peaks (height < 60 u(height)), FWHM and eta taken from the trend.

    A weak peak's width and eta are poorly determined and correlate with its area; fixing them
    to the strong peaks' trend makes the area several times more precise. The constrained fit
    is kept only when it is not significantly worse: Δχ² ≤ s²(n + 3√(2n)) for n removed
    parameters, with s² the free fit's reduced χ² (an F-test-like bound, 3 standard
    deviations of a χ²_n variable; a phase broader than the trend fails it and stays free).
    """
    weak_of = []
    tasks = []
    for res in results:
        with np.errstate(divide="ignore", invalid="ignore"):
            weak = res.height / res.u_height < _FIX_BELOW
        if not weak.any():
            weak_of.append(None)
            continue
        w_t, u_w, eta_t, u_eta = trend.at(res.center)
        weak_of.append((weak, u_w, u_eta))
        tasks.append(GroupTask(res.center, res.height,
                               np.where(weak, np.clip(w_t, 0.3 * setup.fwhm, 3.0 * setup.fwhm), res.fwhm),
                               eta=np.where(weak, eta_t, res.eta), fixed_shape=weak, span=(res.lo, res.hi)))
    refits = iter(fit_groups(tasks, setup))
    out: list[GroupResult] = []
    n_fixed = 0
    for res, weak_info in zip(results, weak_of, strict=True):
        if weak_info is None:
            out.append(res)
            continue
        weak, u_w, u_eta = weak_info
        refit = next(refits)
        fwhm0, eta0 = refit.fwhm, refit.eta  # held at the trend's values where weak (only those count)
        # The trend's own uncertainty reaches the area through area = height / h(w, eta):
        # δA/A = −δw/w + δeta·(2/π − g0)/(eta·2/π + (1 − eta)·g0), with g0 = 2√(ln2/π).
        g0 = 2.0 * np.sqrt(np.log(2.0) / np.pi)
        rel = np.hypot(u_w / fwhm0, u_eta * (2.0 / np.pi - g0) / (eta0 * 2.0 / np.pi + (1.0 - eta0) * g0))
        u_area = np.where(weak, np.hypot(refit.u_area, refit.area * rel), refit.u_area)
        u_fwhm = np.where(weak, u_w, refit.u_fwhm)
        refit = dataclasses.replace(refit, u_area=u_area, u_fwhm=u_fwhm)
        removed = 2 * int(weak.sum())
        s2 = max(1.0, res.chi2 / max(res.hi - res.lo - res.n_free, 1))
        with np.errstate(divide="ignore", invalid="ignore"):
            significant = np.all(refit.height >= min_significance * refit.u_height)
        if significant and refit.chi2 - res.chi2 <= s2 * (removed + 3.0 * np.sqrt(2.0 * removed)):
            out.append(refit)
            n_fixed += int(weak.sum())
        else:
            out.append(res)
    return out, n_fixed
