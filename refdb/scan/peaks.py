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

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.signal import find_peaks as _local_maxima
from scipy.signal import savgol_filter

from refdb.errors import InputError
from refdb.scan.background import background_method_key, estimate_background, typical_fwhm
from refdb.scan.group_fits import fit_all, refit_weak, residual_pass, smoothing_window, shape_trend
from refdb.scan.profile_fit import FitSetup, line_centers
from refdb.scan.standard import InternalStandard, StandardCorrection, corrected_two_theta, fit_standard
from refdb.scan.types import PeakList, Scan

#: Lines within this relative wavelength of Kα1 are fitted with it (the Kα doublet; Kβ is not).
_DOUBLET_SPREAD = 0.02


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


def detect(scan: Scan, background: np.ndarray, *, fwhm: float, min_significance: float, smooth: bool,
           ratios: np.ndarray) -> tuple[np.ndarray, np.ndarray, dict[str, Any]]:
    """Candidate Kα1 positions and net heights (arrays of shape (c,)) and detection facts."""
    step = float(np.median(np.diff(scan.two_theta)))
    window, factor = smoothing_window(fwhm / step, smooth)
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

    results, dropped = fit_all(tt0, h0, width, setup, min_significance)
    if second_pass and results:
        results, added, n_drop = residual_pass(scan, results, width, setup, min_significance, smooth)
        facts["second_pass_candidates"] = added
        dropped += n_drop
    trend = shape_trend(results) if shape_from_trend and results else None
    if trend is not None:
        results, n_fixed = refit_weak(results, trend, setup, min_significance)
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
