"""A picture of a computed pattern: drawn profile (with the Kα doublet) and Kα1 sticks."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from refdb.errors import InputError
from refdb.structure.pattern import Sticks, draw_profile

#: Number of the strongest Kα1 lines labelled with their hkl.
LABELLED_LINES = 12


def plot_pattern(
    sticks: Sticks, path: Path, *, title: str, two_theta_range: tuple[float, float] | None = None, step: float = 0.01
) -> None:
    """Write a PNG of the drawn profile and the primary-line sticks.

    Parameters
    ----------
    sticks : Sticks
        All emission lines; the profile is drawn from all, sticks are shown for the first line.
    path : Path
        Output file (PNG).
    title : str
        First line of the title; the radiation is added below it.
    two_theta_range : (float, float), optional
        Degrees 2θ shown; default: the sticks' span ±1°.
    step : float
        Profile step in degrees 2θ.

    Raises
    ------
    InputError
        The file cannot be written.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rad = sticks.radiation
    lo = float(np.floor(sticks.two_theta.min())) - 1.0 if len(sticks) else 0.0
    hi = float(np.ceil(sticks.two_theta.max())) + 1.0 if len(sticks) else 90.0
    if two_theta_range is not None:
        lo, hi = (float(x) for x in two_theta_range)
    grid = np.arange(max(lo, 0.5), min(hi, 179.5) + step / 2, step)
    profile = draw_profile(sticks, rad, grid)
    primary = np.array([n == rad.line_names[0] for n in sticks.line_name], dtype=bool)

    fig, ax = plt.subplots(figsize=(10, 5), dpi=120)
    ax.vlines(sticks.two_theta[primary], 0, sticks.intensity[primary], color="tab:red", lw=2.5, alpha=0.45,
              label=f"{rad.line_names[0].replace('Ka1', 'Kα1')} sticks (integrated intensity)", zorder=1)
    if profile.max() > 0:
        ax.plot(grid, profile * (100.0 / profile.max()), color="black", lw=0.8,
                label="profile with all emission lines (peak height)", zorder=2)
    if sticks.hkl is not None:
        idx = np.nonzero(primary)[0]
        top = idx[np.argsort(sticks.intensity[idx])[::-1][:LABELLED_LINES]]
        for i in top:
            h, k, l = (int(v) for v in sticks.hkl[i])
            ax.annotate(f"{h} {k} {l}", (sticks.two_theta[i], sticks.intensity[i]), xytext=(0, 4),
                        textcoords="offset points", ha="center", fontsize=8, rotation=90)
    ax.set_xlim(grid[0], grid[-1])
    ax.set_ylim(0, 125)
    ax.set_xlabel("2θ (degrees)")
    ax.set_ylabel("relative intensity (strongest = 100)")
    ax.set_title(f"{title}\n{rad.describe()}", fontsize=11)
    ax.legend(loc="upper right", fontsize=9, frameon=False)
    fig.tight_layout()
    try:
        fig.savefig(path, format="png")
    except OSError as exc:
        raise InputError(f"cannot write {path.name}: {exc.strerror or exc}") from None
    finally:
        plt.close(fig)
