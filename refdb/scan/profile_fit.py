"""Least-squares fits of pseudo-Voigt peaks, in groups of overlapping peaks.

Each peak is a set of lines (Kα1, Kα2 …) sharing one d-spacing: the line positions follow from
the Kα1 position by Bragg's law, ``sin θ_l = (λ_l/λ_1) sin θ_1``, and their areas from the
radiation's weights, so a Kα2 component is never a free peak. All lines of a peak share one
FWHM and one Lorentzian fraction (the small wavelength dispersion of the width is neglected;
common practice, no source). Under each group the background is a free straight line, started
from the estimated background at the window's ends (see :func:`_edge_line`). The fit minimises
Σ((model − counts)/σ)² with the bounded Levenberg–Marquardt solver of :mod:`refdb.lm`, using the
analytical Jacobian below. The groups of a scan are independent problems: :func:`fit_groups`
solves all groups with the same number of peaks side by side in one batched solver call.

Standard uncertainties come from the covariance ``s²(JᵀJ)⁻¹`` with ``s² = χ²/(m − p)``
(Press, Teukolsky, Vetterling & Flannery, Numerical Recipes, 3rd ed., §15.4).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from refdb.lm import LMResult, bounded_lm_batch
from refdb.profiles import pseudo_voigt, pv_height_factor

_LN2 = np.log(2.0)
_G0 = 2.0 * np.sqrt(_LN2 / np.pi)
#: Half-width of a group's fitting window in FWHMs beyond its outermost lines (common practice,
#: no source: ±4 FWHM holds > 97 % of a pseudo-Voigt with eta ≤ 0.5).
WINDOW_FWHM = 4.0


@dataclass(frozen=True, eq=False)
class FitSetup:
    """What every group fit shares.

    Attributes
    ----------
    x, y, sigma, background : ndarray, shape (n,)
        2θ (degrees), counts, their uncertainties and the estimated background of the scan.
    ratios : ndarray, shape (L,)
        λ_l / λ_1 of the lines fitted together (1 first).
    weights : ndarray, shape (L,)
        Intensity of each line relative to the first.
    fwhm : float
        Typical FWHM (degrees), the scale of bounds and windows.
    """

    x: np.ndarray
    y: np.ndarray
    sigma: np.ndarray
    background: np.ndarray
    ratios: np.ndarray
    weights: np.ndarray
    fwhm: float


@dataclass(frozen=True, eq=False)
class GroupResult:
    """Fitted peaks of one group; arrays have shape (k,) for k peaks.

    ``center`` is the Kα1 2θ (degrees), ``area`` the Kα1 component's area (counts·degrees),
    ``height`` its height; ``u_*`` are standard uncertainties. ``lo:hi`` is the fitted slice of
    the scan, ``model`` the fitted counts there and ``local_background`` the estimated
    background plus the group's straight-line correction; ``chi2`` is Σ((model − counts)/σ)²
    over the window and ``n_free`` the number of fitted parameters.
    """

    center: np.ndarray
    area: np.ndarray
    height: np.ndarray
    fwhm: np.ndarray
    eta: np.ndarray
    u_center: np.ndarray
    u_area: np.ndarray
    u_height: np.ndarray
    u_fwhm: np.ndarray
    lo: int
    hi: int
    model: np.ndarray
    local_background: np.ndarray
    converged: bool
    chi2: float = 0.0
    n_free: int = 0


def line_centers(center: np.ndarray, ratios: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """2θ of every line of every peak and d(2θ_l)/d(2θ_1).

    Parameters
    ----------
    center : ndarray, shape (..., k)
        Kα1 positions, degrees.
    ratios : ndarray, shape (L,)

    Returns
    -------
    centers, slope : ndarray, shape (..., k, L)
        Line positions (NaN where the line cannot diffract) and their derivative with respect
        to the Kα1 position.
    """
    half = np.radians(center)[..., None] / 2.0
    s = ratios * np.sin(half)
    beyond = s >= 1.0
    if beyond.any():
        s = np.where(beyond, 0.0, s)
    half_l = np.arcsin(s)
    slope = ratios * np.cos(half) / np.cos(half_l)
    if beyond.any():
        half_l, slope = np.where(beyond, np.nan, half_l), np.where(beyond, np.nan, slope)
    return 2.0 * np.degrees(half_l), slope


def _profiles(x: np.ndarray, xm: np.ndarray, p: np.ndarray, k: int, setup: FitSetup) -> tuple[np.ndarray, np.ndarray]:
    """Model counts above the estimated background and their Jacobian for n groups of k peaks.

    ``x`` has shape (n, m) (each group's window, padded), ``xm`` (n,) the middle of each
    window (the straight line's origin) and ``p`` (n, 4k + 2) the parameters: k centres, areas,
    FWHMs and etas, then the line's offset and slope. Returns the model, shape (n, m), and
    the Jacobian, shape (n, m, 4k + 2).
    """
    c, a, w, eta = p[:, :k], p[:, k : 2 * k], p[:, 2 * k : 3 * k], p[:, 3 * k : 4 * k]
    centers, slope = line_centers(c, setup.ratios)  # (n, k, L)
    # A line that cannot diffract (2θ > 180°) is moved far away, where it contributes nothing.
    missing = np.isnan(centers)
    if missing.any():
        centers, slope = np.where(missing, 1e6, centers), np.where(missing, 0.0, slope)
    wt = setup.weights[:, None]
    ww = w[:, :, None, None]
    u = (x[:, None, None, :] - centers[..., None]) / ww  # (n, k, L, m)
    u2 = u * u
    g = (_G0 / ww) * np.exp(-4.0 * _LN2 * u2)
    den = 1.0 / (1.0 + 4.0 * u2)
    lor = (2.0 / np.pi) / ww * den
    e = eta[:, :, None, None]
    shape = (wt * (e * lor + (1.0 - e) * g)).sum(axis=2)  # (n, k, m)
    offset = x - xm[:, None]
    model = np.einsum("nk,nkm->nm", a, shape) + p[:, 4 * k, None] + p[:, 4 * k + 1, None] * offset
    dg_dc = g * (8.0 * _LN2) * u / ww
    dl_dc = lor * 8.0 * u * den / ww
    dp_dc = (wt * (e * dl_dc + (1.0 - e) * dg_dc) * slope[..., None]).sum(axis=2)
    dg_dw = g * (-1.0 + 8.0 * _LN2 * u2) / ww
    dl_dw = lor * (-1.0 + 8.0 * u2 * den) / ww
    dp_dw = (wt * (e * dl_dw + (1.0 - e) * dg_dw)).sum(axis=2)
    dp_de = (wt * (lor - g)).sum(axis=2)
    jac = np.empty((x.shape[0], x.shape[1], 4 * k + 2))
    jac[:, :, :k] = (a[:, :, None] * dp_dc).transpose(0, 2, 1)
    jac[:, :, k : 2 * k] = shape.transpose(0, 2, 1)
    jac[:, :, 2 * k : 3 * k] = (a[:, :, None] * dp_dw).transpose(0, 2, 1)
    jac[:, :, 3 * k : 4 * k] = (a[:, :, None] * dp_de).transpose(0, 2, 1)
    jac[:, :, 4 * k] = 1.0
    jac[:, :, 4 * k + 1] = offset
    return model, jac


def group_window(center: np.ndarray, fwhm: float, setup: FitSetup) -> tuple[float, float]:
    """The 2θ interval a group of peaks needs: its lines ± :data:`WINDOW_FWHM` FWHMs."""
    lines, _ = line_centers(np.atleast_1d(center), setup.ratios)
    return float(np.nanmin(lines)) - WINDOW_FWHM * fwhm, float(np.nanmax(lines)) + WINDOW_FWHM * fwhm


@dataclass(frozen=True, eq=False)
class GroupTask:
    """One fit of a group of overlapping peaks, for :func:`fit_groups`.

    Attributes
    ----------
    center, height, fwhm : ndarray, shape (k,)
        Starting Kα1 positions (degrees), net heights (counts) and FWHMs (degrees).
    eta : ndarray, shape (k,), optional
        Starting Lorentzian fractions (default 0.5).
    fixed_shape : ndarray of bool, shape (k,), optional
        Peaks whose FWHM and eta stay at their starts (their uncertainties are then 0 and do
        not enter the other parameters' covariance).
    span : (int, int), optional
        The slice of the scan to fit; by default the lines ± :data:`WINDOW_FWHM` FWHMs.
    """

    center: np.ndarray
    height: np.ndarray
    fwhm: np.ndarray
    eta: np.ndarray | None = None
    fixed_shape: np.ndarray | None = None
    span: tuple[int, int] | None = None


@dataclass(frozen=True, eq=False)
class _Prepared:
    """A task's window and the starts, bounds and fixed mask of its parameters."""

    lo: int
    hi: int
    bkg: np.ndarray
    p0: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    fixed: np.ndarray


def _prepare(task: GroupTask, setup: FitSetup) -> _Prepared:
    center0, height0, fwhm0 = task.center, task.height, task.fwhm
    k = center0.size
    if task.span is None:
        lo_x, hi_x = group_window(center0, float(np.max(fwhm0)), setup)
        lo, hi = np.searchsorted(setup.x, [lo_x, hi_x])
        hi = max(hi, lo + 4 * k + 3)
        lo = max(0, min(lo, hi - (4 * k + 3)))
        hi = min(hi, setup.x.size)
    else:
        lo, hi = task.span
    x = setup.x[lo:hi]
    bkg = _edge_line(x, setup.background[lo:hi])
    step = float(np.median(np.diff(x))) if x.size > 1 else setup.fwhm
    reach = np.maximum(fwhm0, 2.0 * step)
    eta0 = np.full(k, 0.5) if task.eta is None else np.clip(np.asarray(task.eta, dtype=float), 0.0, 1.0)
    area0 = np.maximum(height0, 1.0) / pv_height_factor(fwhm0, eta0) / (1.0 + 0.5 * setup.weights[1:].sum())
    w_lo, w_hi = 0.25 * setup.fwhm, 4.0 * max(setup.fwhm, float(fwhm0.max()))
    p0 = np.concatenate([center0, area0, np.clip(fwhm0, w_lo * 1.01, w_hi * 0.99), eta0, [0.0, 0.0]])
    lower = np.concatenate([center0 - reach, np.zeros(k), np.full(k, w_lo), np.zeros(k), [-np.inf, -np.inf]])
    upper = np.concatenate([center0 + reach, np.full(k, np.inf), np.full(k, w_hi), np.ones(k), [np.inf, np.inf]])
    fixed = np.zeros(p0.size, dtype=bool)
    if task.fixed_shape is not None and np.any(task.fixed_shape):
        held = np.flatnonzero(task.fixed_shape)
        fixed[2 * k + held] = fixed[3 * k + held] = True
        p0[2 * k + held] = fwhm0[held]
        p0[3 * k + held] = eta0[held]
    return _Prepared(int(lo), int(hi), bkg, p0, lower, upper, fixed)


def fit_groups(tasks: list[GroupTask], setup: FitSetup) -> list[GroupResult]:
    """Fit groups of overlapping peaks, each on its own; the results in the order of ``tasks``.

    Groups with the same number of peaks are solved side by side by
    :func:`refdb.lm.bounded_lm_batch` (their windows padded to one length with points of zero
    weight), which gives each the same fit as alone at a fraction of the overhead.

    Returns
    -------
    list of GroupResult
        Bounds: each centre within ±max(FWHM, 2 steps) of its start, FWHM within 0.25–4 times
        the typical FWHM, eta within 0–1, areas non-negative.
    """
    out: list[GroupResult | None] = [None] * len(tasks)
    by_size: dict[int, list[int]] = {}
    for i, t in enumerate(tasks):
        by_size.setdefault(t.center.size, []).append(i)
    for k, members in by_size.items():
        for i, res in zip(members, _fit_same_size([tasks[i] for i in members], k, setup), strict=True):
            out[i] = res
    return out  # type: ignore[return-value]


def _fit_same_size(tasks: list[GroupTask], k: int, setup: FitSetup) -> list[GroupResult]:
    prep = [_prepare(t, setup) for t in tasks]
    n = len(prep)
    size = np.array([q.hi - q.lo for q in prep])
    m = int(size.max())
    x = np.empty((n, m))
    y = np.zeros((n, m))
    inv_s = np.zeros((n, m))  # zero weight on the padding
    bkg = np.zeros((n, m))
    for i, q in enumerate(prep):
        j = size[i]
        x[i, :j], x[i, j:] = setup.x[q.lo : q.hi], setup.x[q.hi - 1]
        y[i, :j], inv_s[i, :j], bkg[i, :j] = setup.y[q.lo : q.hi], 1.0 / setup.sigma[q.lo : q.hi], q.bkg
    xm = 0.5 * (x[:, 0] + x[np.arange(n), size - 1])

    def evaluate(p: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        model, jac = _profiles(x[rows], xm[rows], p, k, setup)
        w = inv_s[rows]
        return (model + bkg[rows] - y[rows]) * w, jac * w[:, :, None]

    # Relative tolerances 1e-6 stop far below the statistical uncertainties of the parameters
    # (≥ 1e-4 relative for any peak worth reporting); and once χ² cannot fall by 0.01 more,
    # every parameter is within 0.1 standard uncertainty of its minimum, which is plenty.
    fits = bounded_lm_batch(evaluate, np.array([q.p0 for q in prep]), np.array([q.lower for q in prep]),
                            np.array([q.upper for q in prep]), fixed=np.array([q.fixed for q in prep]),
                            ftol=1e-6, xtol=1e-6, gtol=1e-6, cost_atol=0.01, max_nfev=60 * k + 100)
    return [_result(q, fit, k, setup, int(j)) for q, fit, j in zip(prep, fits, size, strict=True)]


def _result(q: _Prepared, fit: LMResult, k: int, setup: FitSetup, size: int) -> GroupResult:
    """The fitted peaks, their uncertainties and the fitted counts of one group."""
    x, y, s = setup.x[q.lo : q.hi], setup.y[q.lo : q.hi], setup.sigma[q.lo : q.hi]
    p, free = fit.x, ~q.fixed
    fun = fit.fun[:size]
    c, a, w, eta = p[:k], p[k : 2 * k], p[2 * k : 3 * k], p[3 * k : 4 * k]
    cov = np.zeros((p.size, p.size))
    cov[np.ix_(free, free)] = _covariance(fit.jac[:size][:, free], fun, int(free.sum()))
    hf = pv_height_factor(w, eta)
    grad_h = np.zeros((k, p.size))
    idx = np.arange(k)
    grad_h[idx, k + idx] = hf
    grad_h[idx, 2 * k + idx] = -a * hf / w
    grad_h[idx, 3 * k + idx] = a * (2.0 / np.pi - _G0) / w
    var = np.diag(cov)
    u_height = np.sqrt(np.maximum(np.einsum("kp,pq,kq->k", grad_h, cov, grad_h), 0.0))
    model = fun * s + y  # the fitted counts, from the residual the solver returned
    local = q.bkg + p[4 * k] + p[4 * k + 1] * (x - 0.5 * (x[0] + x[-1]))
    return GroupResult(
        center=c, area=a, height=a * hf, fwhm=w, eta=eta,
        u_center=np.sqrt(np.maximum(var[:k], 0.0)), u_area=np.sqrt(np.maximum(var[k : 2 * k], 0.0)),
        u_height=u_height, u_fwhm=np.sqrt(np.maximum(var[2 * k : 3 * k], 0.0)),
        lo=q.lo, hi=q.hi, model=model, local_background=local, converged=fit.success,
        chi2=float(fun @ fun), n_free=int(free.sum()),
    )


def _edge_line(x: np.ndarray, bkg: np.ndarray) -> np.ndarray:
    """The straight line through the estimated background at the window's two ends.

    A clipping background (SNIP, rolling ball) rises under the Lorentzian tails of strong
    peaks, which would cut their areas by several per cent; within one window the background is
    therefore a free straight line started from the estimate at the ends, where the tails are
    weak. Averages over the outer eighth of the window on each side damp the noise.
    """
    m = max(1, x.size // 8)
    x0, x1 = x[:m].mean(), x[-m:].mean()
    b0, b1 = bkg[:m].mean(), bkg[-m:].mean()
    return b0 + (b1 - b0) * (x - x0) / (x1 - x0) if x1 > x0 else np.full(x.size, b0)


def _covariance(jac: np.ndarray, fun: np.ndarray, n_params: int) -> np.ndarray:
    """s²(JᵀJ)⁻¹ with s² = χ²/(m − p); pseudo-inverse for parameters the data do not fix."""
    dof = max(fun.size - n_params, 1)
    s2 = float(fun @ fun) / dof
    return np.linalg.pinv(jac.T @ jac) * s2


def draw_peaks(x: np.ndarray, center: np.ndarray, area: np.ndarray, fwhm: np.ndarray, eta: np.ndarray,
               setup: FitSetup) -> np.ndarray:
    """Counts of fitted peaks (all their lines, no background) at positions ``x``, shape (n,)."""
    centers, _ = line_centers(center, setup.ratios)
    prof = pseudo_voigt(x[None, None, :], centers[:, :, None], fwhm[:, None, None], eta[:, None, None])
    return np.nan_to_num(area[:, None, None] * setup.weights[None, :, None] * prof).sum(axis=(0, 1))
