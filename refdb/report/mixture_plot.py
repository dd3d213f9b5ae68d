"""The mixture figure: observed and calculated scan, difference, and one row of lines per phase.

Drawn with matplotlib's object API (no pyplot, so no global state and safe in worker
processes). Colours come from matplotlib's colour-blind-safe "tab10" cycle.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from refdb.errors import InputError
from refdb.match.mixture import MixtureResult

#: File types the figure can be written as (by suffix).
PLOT_FORMATS: tuple[str, ...] = (".png", ".svg", ".pdf")
#: Phase colours: the tab10 colours without its red, which marks the calculated pattern.
_PALETTE = ("#1f77b4", "#2ca02c", "#9467bd", "#ff7f0e", "#8c564b", "#e377c2", "#17becf", "#bcbd22", "#7f7f7f")


def _label(p) -> str:
    w = p.weight_fraction
    frac = f"{100 * w:.1f} ± {100 * p.u_weight_fraction:.1f} wt %" if np.isfinite(w) else "not quantified"
    ident = f"#{p.entry_id}" if p.entry_id is not None else (p.source_id or "")
    std = ", standard" if p.is_standard else ""
    return f"{p.name} ({p.formula}) {ident}: {frac}{std}"


def mixture_figure(result: MixtureResult, *, title: str | None = None, width_in: float = 11.0) -> Figure:
    """Build the figure of a decomposition.

    Parameters
    ----------
    result : MixtureResult
    title : str, optional
        Default: the scan's name and the fit quality.
    width_in : float
        Figure width in inches (height follows the number of phases).

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    InputError
        The result has no fitted pattern (no phase was identified).
    """
    fit = result.fit
    if fit is None:
        raise InputError("nothing to plot: no phase was identified in this scan")
    n_ph = len(result.phases)
    heights = [5.0, 1.4, max(0.45 * n_ph, 0.6)]
    fig = Figure(figsize=(width_in, sum(heights) * 0.75 + 1.2), layout="constrained")
    axes = fig.subplots(3, 1, sharex=True, gridspec_kw={"height_ratios": heights})
    main, diff, sticks = axes
    x = fit.two_theta
    main.plot(x, fit.observed, ".", ms=2.0, color="#444444", label="observed", zorder=2)
    main.plot(x, fit.calculated, "-", lw=1.0, color="#d62728", label="calculated", zorder=3)
    main.plot(x, fit.background, "--", lw=0.9, color="#7f7f7f", label="background", zorder=1)
    if len(result.unexplained):
        ytop = np.interp(result.unexplained.two_theta, x, fit.observed)
        main.plot(result.unexplained.two_theta, ytop * 1.04 + 0.01 * fit.observed.max(), "v", ms=6,
                  color="#ff7f0e", label="unexplained peak", zorder=4)
    main.set_ylabel("Intensity (counts)")
    main.legend(loc="upper right", fontsize=9, frameon=False)
    main.set_title(title or _default_title(result), fontsize=11, loc="left")
    main.set_xlim(float(x[0]), float(x[-1]))

    d = fit.observed - fit.calculated
    diff.plot(x, d, "-", lw=0.7, color="#1f77b4")
    diff.axhline(0.0, color="#999999", lw=0.6)
    diff.set_ylabel("obs − calc\n(counts)")
    lim = float(np.percentile(np.abs(d), 99.5)) * 1.3 or 1.0
    diff.set_ylim(-lim, lim)

    for row, p in enumerate(result.phases):
        colour = _PALETTE[row % len(_PALETTE)]
        base = n_ph - 1 - row
        tt, inten = p.line_two_theta, p.line_intensity
        strong = inten >= 1.0  # lines below 1 % of the strongest would only blacken the row
        sticks.vlines(tt[strong], base, base + 0.15 + 0.75 * inten[strong] / 100.0, color=colour, lw=1.0)
        sticks.text(1.005, base + 0.45, _label(p), transform=sticks.get_yaxis_transform(), fontsize=8.5,
                    color=colour, va="center", ha="left", clip_on=False)
    sticks.set_ylim(-0.1, max(n_ph, 1))
    sticks.set_yticks([])
    sticks.set_ylabel("phases", fontsize=9)
    sticks.set_xlabel(f"2θ (degrees), {result.radiation}")
    return fig


def _default_title(result: MixtureResult) -> str:
    name = result.scan_source or "scan"
    return f"{name}: {len(result.phases)} phase(s), Rwp {100 * result.rwp:.1f} %, GoF {result.gof:.2f}"


def mixture_image(result: MixtureResult, fmt: str = "png", *, dpi: int = 130) -> bytes:
    """The figure as image bytes (``png``, ``svg`` or ``pdf``)."""
    fig = mixture_figure(result)
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=dpi, bbox_inches="tight")
    return buf.getvalue()


def save_mixture_plot(result: MixtureResult, path: str | Path, *, dpi: int = 150) -> Path:
    """Write the figure to ``path``; the format follows the suffix (:data:`PLOT_FORMATS`).

    Raises
    ------
    InputError
        Unknown suffix, no phase identified, or the file cannot be written.
    """
    out = Path(path)
    suffix = out.suffix.lower()
    if suffix not in PLOT_FORMATS:
        raise InputError(f"cannot write a plot as {out.name!r}", f"use one of {', '.join(PLOT_FORMATS)}")
    data = mixture_image(result, suffix[1:], dpi=dpi)
    try:
        out.write_bytes(data)
    except OSError as exc:
        raise InputError(f"cannot write {out}: {exc.strerror}", "check the folder exists and is writable") from None
    return out
