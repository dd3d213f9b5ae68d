"""Drawing a peak search: counts, background, fitted profile, residual and peak markers."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from refdb.errors import InputError
from refdb.scan.peaks import PeakSearch
from refdb.scan.types import Scan

#: File types the plot can be written as.
PLOT_SUFFIXES = (".png", ".svg", ".pdf")


def check_plot_path(path: str | Path) -> Path:
    """The plot file as a Path, after checking its suffix and folder (shared by the plots).

    Raises
    ------
    InputError
        Unsupported suffix or a folder that does not exist.
    """
    out = Path(path)
    if out.suffix.lower() not in PLOT_SUFFIXES:
        raise InputError(f"cannot draw to {out.name}", f"use a file name ending in {', '.join(PLOT_SUFFIXES)}")
    if not out.parent.exists():
        raise InputError(f"folder {out.parent} does not exist")
    return out


def agg_pyplot():
    """matplotlib's pyplot on the Agg backend: plots go to files, no display is needed."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


#: At most this many peaks get a text label (the strongest); all get a marker.
MAX_LABELS = 40


def plot_peak_search(scan: Scan, result: PeakSearch, path: str | Path, *, title: str | None = None) -> Path:
    """Draw a scan with its fitted peaks to a PNG, SVG or PDF file.

    The upper panel shows the counts (dots), the background, the fitted profile and a marker
    at each Kα1 position labelled with its 2θ and d; the lower panel the residual in standard
    deviations, ``(counts − model)/σ``, with ±3 lines.

    Parameters
    ----------
    scan : Scan
    result : PeakSearch
        From :func:`refdb.scan.find_peaks` on ``scan``.
    path : str or Path
        Output file; its suffix (.png, .svg, .pdf) chooses the format.
    title : str, optional
        Defaults to the scan's name and radiation.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    InputError
        Unsupported suffix or a folder that does not exist.
    """
    out = check_plot_path(path)
    plt = agg_pyplot()

    peaks = result.peaks
    fig, (top, bottom) = plt.subplots(
        2, 1, sharex=True, figsize=(12, 6.5), gridspec_kw={"height_ratios": [4, 1], "hspace": 0.05}
    )
    x = scan.two_theta
    top.plot(x, scan.counts, ".", ms=2.5, color="0.35", label="counts", zorder=2)
    top.plot(x, result.background, "-", lw=1.0, color="tab:green", label="background", zorder=3)
    top.plot(x, result.model, "-", lw=1.0, color="tab:red", label="fitted profile", zorder=4)
    ymax = float(max(scan.counts.max(), result.model.max()))
    top.set_ylim(min(0.0, float(scan.counts.min())), ymax * 1.48)
    if len(peaks):
        base = np.interp(peaks.two_theta, x, result.model)
        top.vlines(peaks.two_theta, base + 0.02 * ymax, base + 0.06 * ymax, color="tab:blue", lw=1.2,
                   label="peaks (Kα1)", zorder=5)
        chosen = np.sort(np.argsort(peaks.height)[::-1][:MAX_LABELS])
        label_x = spread_labels(peaks.two_theta[chosen], float(x[0]), float(x[-1]), 0.011 * float(x[-1] - x[0]))
        label_y = ymax * 1.1
        for i, lx in zip(chosen, label_x, strict=True):
            top.plot([peaks.two_theta[i], peaks.two_theta[i], lx], [base[i] + 0.07 * ymax, label_y - 0.03 * ymax,
                     label_y], "-", lw=0.5, color="tab:blue", alpha=0.6, zorder=5)
            top.annotate(f"{peaks.two_theta[i]:.2f}° ({peaks.d[i]:.3f} Å)", (lx, label_y), rotation=90,
                         ha="center", va="bottom", fontsize=7, color="tab:blue")
    top.set_ylabel("counts")
    default = f"{scan.source} — {scan.radiation.describe()} — {len(peaks)} peaks"
    if len(peaks) > MAX_LABELS:
        default += f" (the {MAX_LABELS} highest labelled)"
    top.set_title(title or default, fontsize=10)
    top.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=8, frameon=False)
    with np.errstate(divide="ignore", invalid="ignore"):
        weighted = result.residual / scan.sigma
    bottom.plot(x, weighted, "-", lw=0.6, color="0.3")
    bottom.axhline(0.0, color="0.6", lw=0.6)
    for level in (-3.0, 3.0):
        bottom.axhline(level, color="tab:orange", lw=0.6, ls="--")
    bottom.set_ylabel("residual (σ)")
    bottom.set_xlabel("2θ (°)")
    bottom.set_xlim(float(x[0]), float(x[-1]))
    fig.savefig(out, dpi=130, bbox_inches="tight")
    plt.close(fig)
    return out


def spread_labels(positions: np.ndarray, lo: float, hi: float, gap: float) -> np.ndarray:
    """Label x positions near ``positions`` (sorted) but at least ``gap`` apart, within [lo, hi].

    Labels are pushed right where they crowd, then the whole run is shifted back left where it
    passed ``hi``; each label moves as little as these two passes allow.
    """
    xs = np.asarray(positions, dtype=float).copy()
    if xs.size == 0:
        return xs
    xs = np.maximum.accumulate(np.maximum(xs, xs[0]) - gap * np.arange(xs.size)) + gap * np.arange(xs.size)
    over = xs[-1] - hi
    if over > 0:
        xs = np.minimum(xs, hi - gap * np.arange(xs.size)[::-1])
    return np.clip(xs, lo, hi)
