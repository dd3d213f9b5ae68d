"""Drawing a search: the scan with the leading candidates' lines beneath it."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from refdb.report.caution import CAUTION_SHORT
from refdb.report.peaks_plot import agg_pyplot, check_plot_path
from refdb.scan.types import PeakList, Scan

#: Colour-blind-safe qualitative colours (Okabe & Ito 2008, "Color Universal Design").
COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000")


def plot_search(scan: Scan, peaks: PeakList, result, path: str | Path, *, count: int = 3,
                background: np.ndarray | None = None, title: str | None = None) -> Path:
    """Draw a scan and the line positions of its leading candidates to a PNG, SVG or PDF file.

    The upper panel shows the counts, the background (if given) and a tick at every observed
    peak; below it, one strip per candidate shows its lines at the fitted positions (zero
    shift, displacement and d-scale applied) with heights proportional to their intensities,
    in the candidate's colour, matched lines solid and unmatched ones faint.

    Parameters
    ----------
    scan : Scan
    peaks : PeakList
        The peaks that were searched.
    result : SearchResult
        From :func:`refdb.match.search.search`.
    path : str or Path
        Output file; the suffix chooses the format.
    count : int
        Number of candidates drawn (1–8).
    background : ndarray, shape (n,), optional
    title : str, optional

    Returns
    -------
    Path

    Raises
    ------
    InputError
        Unsupported suffix or a folder that does not exist.
    """
    out = check_plot_path(path)
    plt = agg_pyplot()

    cands = list(result.candidates[: max(1, min(count, len(COLOURS)))])
    n = max(len(cands), 1)
    fig, axes = plt.subplots(
        1 + n, 1, sharex=True, figsize=(12, 4.5 + 0.9 * n),
        gridspec_kw={"height_ratios": [4] + [1] * n, "hspace": 0.08},
    )
    top = axes[0]
    x, y = scan.two_theta, scan.counts
    top.plot(x, y, color="0.25", lw=0.8, label="counts")
    if background is not None:
        top.plot(x, background, color="0.6", lw=0.8, ls="--", label="background")
    ymax = float(np.max(y)) if len(y) else 1.0
    top.vlines(peaks.two_theta, ymax * 1.02, ymax * 1.07, color="0.35", lw=0.8, label="peaks found")
    top.set_ylim(0, ymax * 1.1)
    top.set_ylabel("counts")
    top.legend(loc="center right", fontsize=8, framealpha=0.9)
    top.set_title(title or f"{scan.source or 'scan'} — {scan.radiation.describe()} — leading candidates",
                  fontsize=10, loc="left")
    lo, hi = float(x[0]), float(x[-1])
    for k, (ax, cand) in enumerate(zip(axes[1:], cands, strict=False)):
        colour = COLOURS[k]
        tt, inten = cand.predicted_two_theta, cand.line_intensity
        inside = (tt >= lo) & (tt <= hi)
        hit = np.isin(cand.line_index, cand.matched[:, 1]) if len(cand.matched) else np.zeros(tt.size, bool)
        ax.vlines(tt[inside & hit], 0, inten[inside & hit], color=colour, lw=1.3)
        ax.vlines(tt[inside & ~hit], 0, inten[inside & ~hit], color=colour, lw=0.8, alpha=0.35)
        ax.set_ylim(0, 110)
        ax.set_yticks([])
        label = f"{k + 1}. {cand.name or cand.formula} ({cand.formula}, {cand.source_id}) — score {cand.score:.1f}"
        ax.text(0.995, 0.92, label, transform=ax.transAxes, va="top", ha="right", fontsize=8.5, color=colour,
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85, "pad": 1.5})
    axes[-1].set_xlabel("2θ (degrees)")
    axes[-1].set_xlim(lo, hi)
    fig.text(0.01, 0.005, CAUTION_SHORT, fontsize=6.5, color="0.4", ha="left", va="bottom")
    fig.savefig(out, dpi=130, bbox_inches="tight")
    plt.close(fig)
    return out
