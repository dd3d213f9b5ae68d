"""Peak search: detection by counting statistics, then grouped profile fits.

1. Background by :func:`refdb.scan.background.estimate_background`.
2. Detection on Savitzky–Golay smoothed counts (smoothing is for detection only; fits use the
   raw counts): a local maximum is a candidate when its net height exceeds
   ``min_significance`` times the standard deviation of the smoothed counts there,
   ``√(Σc_j²) · σ_i`` for filter coefficients c_j and count uncertainty σ_i (Poisson: √counts).
   Savitzky & Golay (1964), Anal. Chem. 36, 1627.
3. Candidates that sit at the Kα2 position of a stronger candidate are dropped: the doublet is
   fitted as one reflection.
4. Candidates whose fitting windows overlap are fitted together
   (:mod:`refdb.scan.profile_fit`); a fitted peak whose height is below ``min_significance``
   times its standard uncertainty is removed and its group fitted again.
5. Significant bumps of the smoothed residual become new candidates and the groups they touch
   are fitted again (shoulders without a maximum of their own).
6. Weak peaks are refitted with FWHM and eta from the strong peaks' trend where the data allow
   it (:func:`shape_trend`).
7. Optionally, an internal standard corrects zero shift and sample displacement
   (:mod:`refdb.scan.standard`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.signal import find_peaks as _local_maxima
from scipy.signal import savgol_coeffs, savgol_filter

from refdb.errors import InputError
from refdb.profiles import caglioti_fwhm
from refdb.scan.background import background_method_key, estimate_background, typical_fwhm
from refdb.scan.profile_fit import FitSetup, GroupResult, fit_group, group_window, line_centers
from refdb.scan.standard import InternalStandard, StandardCorrection, corrected_two_theta, fit_standard
from refdb.scan.types import PeakList, Scan

#: Lines within this relative wavelength of Kα1 are fitted with it (the Kα doublet; Kβ is not).
_DOUBLET_SPREAD = 0.02
#: Refits of a group after removing insignificant peaks.
_MAX_REFITS = 4
#: Most peaks fitted together in one group (see :func:`_split_large`).
MAX_GROUP = 8


@dataclass(frozen=True, eq=False)
class PeakSearch:
    """The result of :func:`find_peaks`.

    Attributes
    ----------
    peaks : PeakList
        Fitted, significant peaks (Kα1 positions), sorted by 2θ.
    background : ndarray, shape (n,)
        The background under the scan: the estimate plus each group's straight-line correction.
    model : ndarray, shape (n,)
        Fitted counts: background plus all fitted peaks.
    residual : ndarray, shape (n,)
        Counts minus model.
    parameters : dict
        What was used: background method, typical FWHM (°), smoothing window (points),
        min_significance, lines fitted (wavelengths Å and weights), counts of candidates.
    n_groups : int
        Number of groups fitted.
    converged : ndarray of bool, shape (n_groups,)
        Whether each group's least-squares fit met its convergence test.
    standard : StandardCorrection or None
        The internal-standard correction applied to ``peaks``, if one was asked for.
    warnings : tuple of str
    """

    peaks: PeakList
    background: np.ndarray
    model: np.ndarray
    residual: np.ndarray
    parameters: dict[str, Any]
    n_groups: int
    converged: np.ndarray
    standard: StandardCorrection | None = None
    warnings: tuple[str, ...] = field(default=())


def fitted_lines(scan: Scan, alpha2: bool) -> tuple[np.ndarray, np.ndarray]:
    """Wavelength ratios λ_l/λ_1 and weights of the lines fitted together for each peak."""
    rad = scan.radiation
    ratios = rad.wavelengths / rad.wavelength
    keep = np.abs(ratios - 1.0) < _DOUBLET_SPREAD
    if not alpha2:
        keep = np.arange(ratios.size) == 0
    return ratios[keep], rad.weights[keep] / rad.weights[0]


def _smoothing(fwhm_points: float, smooth: bool) -> tuple[int, float]:
    """Savitzky–Golay window (odd, points) about one FWHM, and the noise factor √Σc²."""
    if not smooth:
        return 1, 1.0
    window = max(5, int(round(fwhm_points)) | 1)
    return window, float(np.sqrt(np.sum(savgol_coeffs(window, 2) ** 2)))


def detect(scan: Scan, background: np.ndarray, *, fwhm: float, min_significance: float, smooth: bool,
           ratios: np.ndarray) -> tuple[np.ndarray, np.ndarray, dict[str, Any]]:
    """Candidate Kα1 positions and net heights (arrays of shape (c,)) and detection facts."""
    step = float(np.median(np.diff(scan.two_theta)))
    window, factor = _smoothing(fwhm / step, smooth)
    y = savgol_filter(scan.counts, window, 2) if window > 1 else scan.counts
    net = y - background
    noise = factor * scan.sigma
    idx, _ = _local_maxima(net, height=min_significance * noise)
    tt, height = scan.two_theta[idx], net[idx]
    n_found = int(idx.size)
    if ratios.size > 1 and idx.size > 1:
        second = line_centers(tt, ratios)[0][:, 1]
        tol = max(0.5 * fwhm, 1.5 * step)
        # j is the Kα2 line of i when it sits at i's Kα2 position and is clearly weaker. Only a
        # kept candidate may claim one: strongest first, so a Kα2 maximum never hides a real
        # reflection that happens to lie at its own Kα2 position.
        shadow = (np.abs(tt[None, :] - second[:, None]) < tol) & (height[None, :] < 0.85 * height[:, None])
        removed = np.zeros(tt.size, dtype=bool)
        for i in np.argsort(-height, kind="stable"):
            if not removed[i]:
                removed |= shadow[i]
        tt, height = tt[~removed], height[~removed]
    # Two maxima closer than half a FWHM cannot be two resolved reflections: keep the higher.
    if tt.size > 1:
        close = np.abs(tt[:, None] - tt[None, :]) < 0.5 * fwhm
        lower = height[:, None] < height[None, :]
        keep = ~(close & lower).any(axis=1)
        tt, height = tt[keep], height[keep]
    facts = {"smoothing_window": window, "candidates": n_found, "candidates_fitted": int(tt.size)}
    return tt, height, facts


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


def _fit_until_significant(center: np.ndarray, height: np.ndarray, fwhm: float, setup: FitSetup,
                           min_significance: float) -> tuple[GroupResult | None, int]:
    """Fit a group, drop insignificant peaks and refit; None when nothing survives.

    Peaks that merged onto a neighbour go first. Otherwise all insignificant peaks go, except
    that the most significant one stays for another fit when every peak fell short: a noise
    bump on a real peak's flank can make both look uncertain until the bump is removed.
    """
    widths = np.full(center.size, fwhm)
    dropped = 0
    for _ in range(_MAX_REFITS + 1):
        res = fit_group(center, height, widths, setup)
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
                return None, dropped + 1
            if not keep.any():
                keep[np.argmax(sig)] = True
        dropped += int((~keep).sum())
        center, height, widths = res.center[keep], res.height[keep], np.clip(res.fwhm[keep], 0.5 * fwhm, 2 * fwhm)
    # Out of refits (rare): keep what is significant in the last fit.
    res = fit_group(center, height, widths, setup)
    with np.errstate(divide="ignore", invalid="ignore"):
        good = res.height >= min_significance * res.u_height
    if not good.any():
        return None, dropped + center.size
    fields = {f: getattr(res, f)[good] for f in ("center", "area", "height", "fwhm", "eta", "u_center", "u_area",
                                               "u_height", "u_fwhm")}
    return dataclasses.replace(res, **fields), dropped + int((~good).sum())


def _fit_all(tt: np.ndarray, h: np.ndarray, fwhm: float, setup: FitSetup,
             min_significance: float) -> tuple[list[GroupResult], int]:
    """Group candidates and fit every group; the fits and the number of peaks rejected."""
    results: list[GroupResult] = []
    dropped = 0
    for members in _groups(tt, fwhm, setup):
        res, n_drop = _fit_until_significant(tt[members], h[members], fwhm, setup, min_significance)
        dropped += n_drop
        if res is not None:
            results.append(res)
    return results, dropped


#: A residual bump must also exceed this fraction of the fitted net counts there, so that small
#: profile-shape misfits of strong peaks (asymmetry, common practice, no source) are not taken
#: for shoulders.
_SHOULDER_FRACTION = 0.05


def _second_pass(scan: Scan, results: list[GroupResult], fwhm: float, setup: FitSetup,
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
    window, factor = _smoothing(fwhm / step, smooth)
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
    refit, dropped = _fit_all(tt[order], h[order], fwhm, setup, min_significance)
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


def _refit_weak(results: list[GroupResult], trend: ShapeTrend, setup: FitSetup,
                min_significance: float) -> tuple[list[GroupResult], int]:
    """Refit groups with weak peaks (height < 60 u(height)), FWHM and eta taken from the trend.

    A weak peak's width and eta are poorly determined and correlate with its area; fixing them
    to the strong peaks' trend makes the area several times more precise. The constrained fit
    is kept only when it is not significantly worse: Δχ² ≤ s²(n + 3√(2n)) for n removed
    parameters, with s² the free fit's reduced χ² (an F-test-like bound, 3 standard
    deviations of a χ²_n variable; a phase broader than the trend fails it and stays free).
    """
    out: list[GroupResult] = []
    n_fixed = 0
    for res in results:
        with np.errstate(divide="ignore", invalid="ignore"):
            weak = res.height / res.u_height < _FIX_BELOW
        if not weak.any():
            out.append(res)
            continue
        w_t, u_w, eta_t, u_eta = trend.at(res.center)
        fwhm0 = np.where(weak, np.clip(w_t, 0.3 * setup.fwhm, 3.0 * setup.fwhm), res.fwhm)
        eta0 = np.where(weak, eta_t, res.eta)
        refit = fit_group(res.center, res.height, fwhm0, setup, eta0=eta0, fixed_shape=weak,
                          span=(res.lo, res.hi))
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


def find_peaks(
    scan: Scan,
    *,
    background: str = "snip",
    min_significance: float = 3.5,
    alpha2: bool = True,
    smooth: bool = True,
    fwhm: float | None = None,
    internal_standard: InternalStandard | np.ndarray | None = None,
    background_options: dict[str, Any] | None = None,
    second_pass: bool = True,
    shape_from_trend: bool = True,
) -> PeakSearch:
    """Find and fit the peaks of a scan.

    Parameters
    ----------
    scan : Scan
    background : str
        Background method name (see :data:`refdb.scan.background.BACKGROUND_METHODS`).
    min_significance : float
        Threshold in standard deviations, for detection (net height of the smoothed counts over
        its noise) and after fitting (height over its standard uncertainty). Default 3.5: on
        pure Poisson noise it gives well under one false peak per 1,000 points (measured in
        tests/scan/test_peaks.py).
    alpha2 : bool
        Fit the Kα2 line with each peak (when the radiation has one). False for data whose Kα2
        was stripped, or a Kα1 monochromator not stated in the file.
    smooth : bool
        Savitzky–Golay smoothing (window about one FWHM) for detection.
    fwhm : float, optional
        Typical FWHM in degrees; estimated from the scan when None.
    internal_standard : InternalStandard or array_like, optional
        A standard in the sample, or its true Kα1 2θ positions (degrees).
    background_options : dict, optional
        Options passed to the background method.
    second_pass : bool
        After the first fits, look for significant bumps in the residual (shoulders that have
        no maximum of their own, often hidden in a Kα2 line) and refit the groups they touch.
        A bump must also exceed 5 % of the fitted net counts there.
    shape_from_trend : bool
        Refit weak peaks (height < 60 u(height)) with FWHM and eta from the trend of the strong
        peaks (height ≥ 25 u(height)) (Caglioti FWHM, linear eta), where that fits not significantly worse; their
        areas become several times more precise. Their ``u_fwhm`` and the trend part of
        ``u_area`` come from the scatter of the strong peaks about the trend.

    Returns
    -------
    PeakSearch

    Raises
    ------
    InputError
        ``min_significance`` or ``fwhm`` not positive, an unknown background method, or an
        internal standard none of whose lines was found.
    """
    if not (np.isfinite(min_significance) and min_significance > 0):
        raise InputError(f"min_significance must be positive, not {min_significance}")
    if fwhm is not None and not (np.isfinite(fwhm) and fwhm > 0):
        raise InputError(f"fwhm must be a positive number of degrees, not {fwhm}")
    method = background_method_key(background)
    width = typical_fwhm(scan) if fwhm is None else float(fwhm)
    bkg = estimate_background(scan, method=method, fwhm=width, **(background_options or {}))
    ratios, weights = fitted_lines(scan, alpha2)
    setup = FitSetup(scan.two_theta, scan.counts, scan.sigma, bkg, ratios, weights, width)
    tt0, h0, facts = detect(scan, bkg, fwhm=width, min_significance=min_significance, smooth=smooth, ratios=ratios)

    results, dropped = _fit_all(tt0, h0, width, setup, min_significance)
    if second_pass and results:
        results, added, n_drop = _second_pass(scan, results, width, setup, min_significance, smooth)
        facts["second_pass_candidates"] = added
        dropped += n_drop
    trend = shape_trend(results) if shape_from_trend and results else None
    if trend is not None:
        results, n_fixed = _refit_weak(results, trend, setup, min_significance)
        facts["width_trend_uvw"] = [float(v) for v in trend.uvw]
        facts["eta_trend"] = [float(v) for v in trend.eta_coef]
        facts["peaks_with_trend_shape"] = n_fixed

    effective_bkg = bkg.copy()
    model = bkg.copy()
    for res in results:
        effective_bkg[res.lo : res.hi] = res.local_background
        model[res.lo : res.hi] = res.model

    def gather(name: str) -> np.ndarray:
        return np.concatenate([getattr(r, name) for r in results]) if results else np.empty(0)

    center = gather("center")
    order = np.argsort(center, kind="stable")
    fields = {n: gather(n)[order] for n in ("center", "area", "height", "fwhm", "eta", "u_center", "u_area",
                                             "u_height", "u_fwhm")}
    center = fields["center"]
    inside = (center > scan.two_theta[0]) & (center < scan.two_theta[-1])
    fields = {n: v[inside] for n, v in fields.items()}
    with np.errstate(divide="ignore", invalid="ignore"):
        significance = fields["height"] / fields["u_height"]

    correction = None
    center = fields["center"]
    if internal_standard is not None:
        std = internal_standard if isinstance(internal_standard, InternalStandard) else InternalStandard(
            two_theta=np.sort(np.asarray(internal_standard, dtype=float)))
        correction = fit_standard(center, fields["u_center"], std)
        center = corrected_two_theta(center, correction)

    peaks = PeakList(
        two_theta=center, d=scan.radiation.d_spacing(center), height=fields["height"], area=fields["area"],
        fwhm=fields["fwhm"], eta=fields["eta"], u_two_theta=fields["u_center"], u_height=fields["u_height"],
        u_area=fields["u_area"], u_fwhm=fields["u_fwhm"], significance=significance,
        radiation=scan.radiation, two_theta_range=(float(scan.two_theta[0]), float(scan.two_theta[-1])),
        source=scan.source,
    )
    converged = np.array([r.converged for r in results], dtype=bool)
    notes = list(scan.warnings)
    if (~converged).any():
        notes.append(f"{int((~converged).sum())} of {converged.size} peak groups did not converge; their values are rough")
    parameters = {
        "background": method,
        "min_significance": float(min_significance),
        "typical_fwhm": width,
        "alpha2": bool(ratios.size > 1),
        "wavelengths": [float(r * scan.radiation.wavelength) for r in ratios],
        "line_weights": [float(w) for w in weights],
        **facts,
        "rejected_after_fit": dropped,
    }
    return PeakSearch(
        peaks=peaks, background=effective_bkg, model=model, residual=scan.counts - model,
        parameters=parameters, n_groups=len(results), converged=converged, standard=correction,
        warnings=tuple(notes),
    )
