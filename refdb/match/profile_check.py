"""Whole-profile check of leading candidates against the background-subtracted scan.

For each candidate the lines inside the scan's range are drawn on the scan's 2θ grid as
area-normalised pseudo-Voigt profiles (:func:`refdb.profiles.pseudo_voigt`) with

* positions from the fitted zero shift, displacement and d-scale of the peak-list stage, for
  every wavelength of the scan's radiation (Kα1, Kα2 … with the radiation's weights);
* widths from the width model fitted to the peak list, and the median Lorentzian fraction of
  the observed peaks (0.5 when unknown);
* areas proportional to the line intensities.

The check value is Pearson's correlation coefficient between the square roots of this drawn
pattern and of the scan minus its background (negative values set to 0), over the scanned
points; it does not depend on the candidate's scale. The square roots (the variance-stabilising
transform of counts) stop one strong shared peak from making a poor candidate look good. Each line is only evaluated within ±:data:`HALF_WINDOW_FWHM` widths of its centre
(the pseudo-Voigt tails beyond carry < 1 % of the area for η ≤ 0.5).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from refdb.match.index import expand_ranges
from refdb.match.score import LineSet, LineScores, WidthModel
from refdb.profiles import pseudo_voigt

if TYPE_CHECKING:
    from refdb.scan.types import PeakList, Scan

HALF_WINDOW_FWHM = 8.0


def rough_background(scan: Scan, *, window_deg: float = 3.0) -> np.ndarray:
    """A simple background for when none is given: a rolling minimum, then smoothed.

    The window (degrees 2θ) should be wider than the broadest peak; the estimate sits a little
    below the true background, which only lowers the correlation of every candidate alike.

    Returns
    -------
    ndarray, shape (n,), counts
    """
    from scipy.ndimage import minimum_filter1d, uniform_filter1d

    tt = np.asarray(scan.two_theta, dtype=float)
    y = np.asarray(scan.counts, dtype=float)
    if tt.size < 3:
        return np.zeros_like(y)
    step = float(np.median(np.diff(tt)))
    size = max(int(round(window_deg / max(step, 1e-6))), 3)
    low = minimum_filter1d(y, size=size, mode="nearest")
    return uniform_filter1d(low, size=size, mode="nearest")


def draw_patterns(two_theta: np.ndarray, lines: LineSet, scores: LineScores, peaks: PeakList,
                  width: WidthModel) -> np.ndarray:
    """Draw the candidates' patterns on a grid.

    Parameters
    ----------
    two_theta : ndarray, shape (n,)
        Increasing grid, degrees.
    lines, scores : LineSet, LineScores
        The same C candidates, with their fitted geometry.
    peaks : PeakList
        Provides the radiation and the Lorentzian fraction.
    width : WidthModel

    Returns
    -------
    ndarray, shape (C, n)
        Unscaled patterns (areas proportional to line intensities).
    """
    rad = peaks.radiation
    eta_obs = np.asarray(peaks.eta, dtype=float)
    eta_obs = eta_obs[np.isfinite(eta_obs)]
    eta = float(np.clip(np.median(eta_obs), 0.0, 1.0)) if eta_obs.size else 0.5
    c_n = lines.rows.size
    grid = np.asarray(two_theta, dtype=float)
    d = lines.d * (1.0 + scores.d_scale[:, None])
    centres, amps, owners = [], [], []
    for lam, weight in zip(rad.wavelengths, rad.weights, strict=True):
        with np.errstate(invalid="ignore", divide="ignore"):
            x = lam / (2.0 * d)
            tt = np.where(x <= 1.0, 2.0 * np.degrees(np.arcsin(np.clip(x, 0.0, 1.0))), np.nan)
        tt = tt + scores.zero_shift[:, None] + scores.displacement[:, None] * np.cos(np.radians(tt) / 2.0)
        ok = np.isfinite(tt) & (lines.intensity > 0)
        centres.append(tt[ok])
        amps.append(lines.intensity[ok] * float(weight))
        owners.append(np.nonzero(ok)[0])
    centre = np.concatenate(centres)
    amp = np.concatenate(amps)
    owner = np.concatenate(owners)
    fw = width(centre)
    a = np.searchsorted(grid, centre - HALF_WINDOW_FWHM * fw, side="left")
    b = np.searchsorted(grid, centre + HALF_WINDOW_FWHM * fw, side="right")
    pt, line_of = expand_ranges(a, b - a)
    val = amp[line_of] * pseudo_voigt(grid[pt], centre[line_of], fw[line_of], eta)
    flat = owner[line_of] * grid.size + pt
    return np.bincount(flat, weights=val, minlength=c_n * grid.size).reshape(c_n, grid.size)


def profile_correlation(scan: Scan, background: np.ndarray, lines: LineSet, scores: LineScores,
                        peaks: PeakList, width: WidthModel) -> np.ndarray:
    """Pearson correlation of √(drawn pattern) with √(net scan) for each candidate.

    Returns
    -------
    ndarray, shape (C,)
        In [−1, 1]; 0 for a candidate with nothing drawn or a flat net scan.
    """
    lo, hi = peaks.two_theta_range
    sel = (scan.two_theta >= lo) & (scan.two_theta <= hi)
    grid = np.asarray(scan.two_theta, dtype=float)[sel]
    net = (np.asarray(scan.counts, dtype=float) - np.asarray(background, dtype=float))[sel]
    # Square roots (as for counting statistics) keep the strongest peak from deciding alone:
    # a candidate that shares only the main peak must also answer for its other lines.
    model = np.sqrt(np.maximum(draw_patterns(grid, lines, scores, peaks, width), 0.0))
    net = np.sqrt(np.maximum(net, 0.0))
    mc = model - model.mean(axis=1, keepdims=True)
    nc = net - net.mean()
    num = mc @ nc
    den = np.sqrt((mc * mc).sum(axis=1) * float(nc @ nc))
    return np.where(den > 0, num / np.where(den > 0, den, 1.0), 0.0)
