"""Background estimation with pybaselines, picked by name through one lookup.

Methods (case-insensitive; ``-`` and ``_`` are the same):

``snip`` (default)
    Statistics-sensitive non-linear iterative peak clipping: Ryan, Clayton, Griffin, Sie &
    Cousens (1988), Nucl. Instrum. Meth. B 34, 396; Morháč, Kliman, Matoušek, Veselský &
    Turzo (1997), Nucl. Instrum. Meth. A 401, 113.
``asls``
    Asymmetric least squares: Eilers & Boelens (2005), Leiden University Medical Centre report.
``arpls``
    Asymmetrically reweighted penalised least squares: Baek, Park, Ahn & Choo (2015),
    Analyst 140, 250.
``modpoly``
    Modified polynomial fit: Lieber & Mahadevan-Jansen (2003), Appl. Spectrosc. 57, 1363.
``rolling-ball``
    Rolling ball (morphological opening with smoothing): Kneen & Annegarn (1996),
    Nucl. Instrum. Meth. B 109, 209.

The window-based methods take their window from the typical peak width of the scan (estimated
by :func:`typical_fwhm` unless given), so the caller need not know the step size.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy.signal import find_peaks as _local_maxima

from refdb.errors import InputError
from refdb.scan.types import Scan

#: Fallback FWHM in points when no peak stands out of the noise (common practice, no source).
_FALLBACK_FWHM_POINTS = 5.0


def typical_fwhm(scan: Scan) -> float:
    """Median FWHM (degrees 2θ) of the clearly visible peaks of a scan.

    Local maxima standing more than 8√counts above their surroundings (prominence within
    ±2 times the widest width allowed) and narrower
    than 3° or a tenth of the scanned range (broader humps are background: amorphous
    scattering, air scatter) are measured at half their prominence
    (scipy.signal.peak_widths); the median width of the 30 most prominent, in points, times the
    median step is returned. A scan without such peaks gets 5 steps.
    """
    y = scan.counts
    step = float(np.median(np.diff(scan.two_theta)))
    widest = min(3.0, 0.1 * float(scan.two_theta[-1] - scan.two_theta[0])) / step
    # Prominence is measured within ±2 widest widths, so that slow humps do not count.
    window = int(4 * widest) | 1
    idx, props = _local_maxima(y, prominence=4.0, width=(None, widest), rel_height=0.5, wlen=window)
    strong = props["prominences"] > 8.0 * np.sqrt(np.maximum(y[idx], 1.0))
    if not strong.any():
        return _FALLBACK_FWHM_POINTS * step
    order = np.argsort(props["prominences"][strong])[-30:]
    widths = props["widths"][strong][order]
    return float(max(np.median(widths), 2.0) * step)


def _half_window(scan: Scan, fwhm: float | None, factor: float) -> int:
    """A window half-width in points covering ``factor`` FWHMs (at least 3 points)."""
    width = typical_fwhm(scan) if fwhm is None else float(fwhm)
    step = float(np.median(np.diff(scan.two_theta)))
    return max(3, int(round(factor * width / step)))


def _snip(scan: Scan, fwhm: float | None, options: dict) -> np.ndarray:
    from pybaselines import Baseline

    # A peak's base spans about ±2 FWHM; the Kα doublet and overlaps need more, so clip over
    # 3 FWHM on each side. Smoothing first keeps SNIP from hugging the noise minima.
    hw = _half_window(scan, fwhm, 3.0)
    opts = {"max_half_window": hw, "decreasing": True, "smooth_half_window": max(1, hw // 6)}
    opts.update(options)
    return Baseline(x_data=scan.two_theta).snip(scan.counts, **opts)[0]


def _lift(scan: Scan, bkg: np.ndarray) -> np.ndarray:
    """Raise a background estimate by its noise bias.

    Clipping filters and asymmetric fits follow the low side of the noise and so sit below the
    mean background: about 0.44 σ for SNIP on Poisson noise (measured here over 20–2,000
    counts), more for asls with its default asymmetry. The bias is
    proportional to the local σ, so it is removed as ``k·σ`` with k the median of (counts −
    background)/σ over the points less than 2σ above the background (which leaves peaks out).
    """
    z = (scan.counts - bkg) / scan.sigma
    low = z[z < 2.0]
    k = float(np.median(low)) if low.size else 0.0
    return bkg + max(k, 0.0) * scan.sigma


def _penalised(name: str) -> Callable[[Scan, float | None, dict], np.ndarray]:
    def run(scan: Scan, fwhm: float | None, options: dict) -> np.ndarray:
        from pybaselines import Baseline

        return getattr(Baseline(x_data=scan.two_theta), name)(scan.counts, **options)[0]

    return run


def _rolling_ball(scan: Scan, fwhm: float | None, options: dict) -> np.ndarray:
    from pybaselines import Baseline

    hw = _half_window(scan, fwhm, 3.0)
    opts = {"half_window": hw, "smooth_half_window": max(1, hw // 3)}
    opts.update(options)
    return Baseline(x_data=scan.two_theta).rolling_ball(scan.counts, **opts)[0]


def _modpoly(scan: Scan, fwhm: float | None, options: dict) -> np.ndarray:
    from pybaselines import Baseline

    opts = {"poly_order": 4}
    opts.update(options)
    return Baseline(x_data=scan.two_theta).modpoly(scan.counts, **opts)[0]


#: Background methods by normalised name; the values take (scan, typical FWHM or None, options).
BACKGROUND_METHODS: dict[str, Callable[[Scan, float | None, dict], np.ndarray]] = {
    "snip": _snip,
    "asls": _penalised("asls"),
    "arpls": _penalised("arpls"),
    "modpoly": _modpoly,
    "rolling-ball": _rolling_ball,
}


def background_method_key(method: str) -> str:
    """Normalise a method name (case, ``_``/``-``) and check that it exists.

    Raises
    ------
    InputError
        The name is not in :data:`BACKGROUND_METHODS`.
    """
    key = method.strip().lower().replace("_", "-").replace(" ", "-")
    if key not in BACKGROUND_METHODS:
        raise InputError(f"unknown background method {method!r}", f"choose one of {', '.join(BACKGROUND_METHODS)}")
    return key


def estimate_background(
    scan: Scan, *, method: str = "snip", fwhm: float | None = None, **options
) -> np.ndarray:
    """Estimate the background under a scan's peaks.

    Parameters
    ----------
    scan : Scan
    method : str
        A name in :data:`BACKGROUND_METHODS` (case-insensitive; ``rolling_ball`` is
        ``rolling-ball``). Default ``"snip"``.
    fwhm : float, optional
        Typical peak FWHM in degrees 2θ for the window-based methods; estimated from the scan
        by :func:`typical_fwhm` when None.
    **options
        Passed to the pybaselines method (e.g. ``max_half_window`` for SNIP, ``lam`` for
        ``asls``), overriding refdb's defaults.

    Returns
    -------
    ndarray, shape (n,)
        Background counts at each point, raised by the estimate's noise bias (see
        :func:`_lift`) and clipped at zero.

    Raises
    ------
    InputError
        Unknown method, or an option the method does not take.
    """
    key = background_method_key(method)
    try:
        bkg = BACKGROUND_METHODS[key](scan, fwhm, dict(options))
    except TypeError as exc:
        raise InputError(f"background method {key}: {' '.join(str(exc).split())}") from None
    return np.clip(_lift(scan, np.asarray(bkg, dtype=float)), 0.0, None)
