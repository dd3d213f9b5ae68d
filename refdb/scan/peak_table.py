"""Reading plain peak tables: positions (d or 2θ) with intensities, no profile.

A peak table is text columns like a scan (same separators and comment lines, same
``# wavelength:`` / ``# anode:`` header). The first column holds positions, the second
intensities (optional: 100 for every peak when absent). Whether the positions are d-spacings
or 2θ comes from a header line (``d``, ``d-spacing``, ``d (Å)`` … or ``2theta``, ``two_theta``,
``angle`` …) or from the ``positions`` argument; refdb never guesses it from the numbers.
A comment line ``# two_theta_range: 5 90`` states the scanned range; without it the range is
taken from the first to the last peak.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from refdb.errors import InputError
from refdb.radiation import Radiation
from refdb.scan._text import choose_radiation, header_radiation, numeric_rows, read_source
from refdb.scan.readers import column_key
from refdb.scan.types import PeakList

#: Accepted values of ``positions`` and what they mean.
POSITION_KINDS = {"d": "d", "d-spacing": "d", "two_theta": "two_theta", "2theta": "two_theta", "2θ": "two_theta"}
_D_NAMES = {"d", "dspacing", "dspacings", "dobs", "dhkl", "dvalue"}
_TT_NAMES = {"2theta", "twotheta", "tth", "2th", "angle", "2thetaobs", "position"}
_RANGE = re.compile(r"^[#!;]\s*two_theta_range\s*[:=]\s*([-+\d.eE]+)[\s,;]+([-+\d.eE]+)", re.IGNORECASE | re.MULTILINE)


def load_peak_table(
    path: str | Path, *, radiation: Radiation | None = None, positions: str | None = None
) -> PeakList:
    """Read a table of peak positions and intensities.

    Parameters
    ----------
    path : str or Path
        The file; ``"-"`` reads standard input.
    radiation : Radiation, optional
        Used when the file does not state its radiation; needed to convert between d and 2θ.
    positions : {"d", "two_theta"}, optional
        What the first column holds, when the file has no header line saying it.

    Returns
    -------
    PeakList
        Sorted by increasing 2θ; ``height`` and ``area`` both hold the table's intensities,
        ``fwhm``, ``eta``, uncertainties and ``significance`` are NaN.

    Raises
    ------
    InputError
        Malformed rows, an unknown column meaning, no radiation, non-positive d-spacings,
        2θ outside (0°, 180°), d-spacings too short to diffract, or negative intensities.
    """
    src = read_source(path)
    rows = numeric_rows(src.text, src.name, allow_header=True, min_columns=1)
    kind = _position_kind(rows.header, positions, src.name)
    notes: list[str] = []
    rad = choose_radiation(header_radiation(src.text, src.name), radiation, src.name, notes)
    pos = rows.values[:, 0]
    inten = rows.values[:, 1] if rows.values.shape[1] > 1 else np.full(pos.size, 100.0)
    bad = ~(np.isfinite(pos) & np.isfinite(inten))
    if bad.any():
        raise InputError(f"{src.name} line {rows.line_numbers[np.argmax(bad)]}: NaN or infinite value")
    if (inten < 0).any():
        raise InputError(f"{src.name} line {rows.line_numbers[np.argmax(inten < 0)]}: negative intensity")
    if kind == "d":
        if (pos <= 0).any():
            raise InputError(f"{src.name} line {rows.line_numbers[np.argmax(pos <= 0)]}: d-spacing must be positive")
        d = pos
        tt = rad.two_theta(d)
        if np.isnan(tt).any():
            i = int(np.argmax(np.isnan(tt)))
            raise InputError(
                f"{src.name} line {rows.line_numbers[i]}: d = {d[i]:g} Å is shorter than λ/2 "
                f"({rad.wavelength / 2:.4f} Å) and cannot diffract",
                "check the radiation or the column meaning",
            )
    else:
        outside = (pos <= 0) | (pos >= 180)
        if outside.any():
            raise InputError(
                f"{src.name} line {rows.line_numbers[np.argmax(outside)]}: 2θ outside (0°, 180°)",
                "if the column holds d-spacings, say so with a header 'd' or --positions d",
            )
        tt = pos
        d = rad.d_spacing(tt)
    order = np.argsort(tt, kind="stable")
    tt, d, inten = tt[order], d[order], inten[order]
    nan = np.full(tt.size, np.nan)
    return PeakList(
        two_theta=tt, d=d, height=inten.copy(), area=inten.copy(), fwhm=nan, eta=nan.copy(),
        u_two_theta=nan.copy(), u_height=nan.copy(), u_area=nan.copy(), u_fwhm=nan.copy(),
        significance=nan.copy(), radiation=rad,
        two_theta_range=_scan_range(src.text, tt, src.name), source=src.name,
    )


def _position_kind(header: tuple[str, ...], positions: str | None, name: str) -> str:
    if positions is not None:
        key = positions.strip().lower()
        if key not in POSITION_KINDS:
            raise InputError(f"unknown position kind {positions!r}", "use d or two_theta")
        return POSITION_KINDS[key]
    if header:
        first = column_key(header[0])
        if first in _D_NAMES:
            return "d"
        if first in _TT_NAMES:
            return "two_theta"
    raise InputError(
        f"{name}: cannot tell whether the first column holds d-spacings or 2θ",
        "add a header line such as 'd intensity' or '2theta intensity', or pass --positions d|two_theta",
    )


def _scan_range(text: str, tt: np.ndarray, name: str) -> tuple[float, float]:
    m = _RANGE.search(text)
    if m is None:
        return float(tt.min()), float(tt.max())
    try:
        lo, hi = float(m.group(1)), float(m.group(2))
    except ValueError:
        raise InputError(f"{name}: two_theta_range {m.group(0)!r} is not two numbers") from None
    if not (0 < lo < hi < 180):
        raise InputError(f"{name}: two_theta_range {lo:g}–{hi:g} is not within (0°, 180°)")
    return lo, hi
