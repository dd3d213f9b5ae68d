"""Checks that turn parsed columns into a :class:`~refdb.scan.types.Scan` or refuse them.

Every reader ends here, so every format gets the same rules and the same one-line messages.
"""

from __future__ import annotations

import numpy as np

from refdb.errors import InputError
from refdb.radiation import Radiation
from refdb.scan.types import Scan

#: Fewest points a scan may have; fewer cannot carry a background and a peak profile.
MIN_POINTS = 20
#: A scan whose every 2θ lies below π (degrees) is taken for one in radians: no powder
#: reflection of a crystal with d under 28 Å lies there even with Cu Kα (Bragg's law), and
#: phase-identification scans start at a few degrees (common practice, no source).
RADIAN_LIMIT = float(np.pi)
#: A file with at most this many rows, d-like first column and 0–100 intensities is a peak list.
_PEAK_LIST_MAX_ROWS = 200


def make_scan(
    two_theta: np.ndarray,
    counts: np.ndarray,
    sigma: np.ndarray | None,
    radiation: Radiation,
    *,
    source: str,
    line_numbers: np.ndarray | None = None,
    warnings: tuple[str, ...] | list[str] = (),
) -> Scan:
    """Validate scan columns and build a :class:`Scan`.

    Parameters
    ----------
    two_theta, counts : ndarray, shape (n,)
        2θ in degrees and counts, in file order.
    sigma : ndarray, shape (n,), optional
        Standard uncertainties of the counts; ``√max(counts, 1)`` when None. Zero values (common
        where counts are zero) are replaced by that default.
    radiation : Radiation
    source : str
        The name shown in messages.
    line_numbers : ndarray of int, shape (n,), optional
        Line (or row) number of each point in the file, for messages; 1…n when None.
    warnings : sequence of str
        Warnings of the reader, carried into ``Scan.warnings``.

    Returns
    -------
    Scan
        Sorted by increasing 2θ.

    Raises
    ------
    InputError
        The data look like a peak list, have fewer than 20 points, hold NaN or infinite values,
        negative counts or uncertainties, 2θ outside (0°, 180°), every 2θ below π (radians),
        or repeated 2θ values.
    """
    tt = np.asarray(two_theta, dtype=float)
    y = np.asarray(counts, dtype=float)
    lines = np.arange(1, tt.size + 1) if line_numbers is None else np.asarray(line_numbers)
    notes = list(warnings)
    _refuse_peak_list(tt, y, source)
    if tt.size < MIN_POINTS:
        raise InputError(
            f"{source} has only {tt.size} point{'' if tt.size == 1 else 's'}; a scan needs at least {MIN_POINTS}",
            "for a list of peak positions use --peak-table",
        )
    columns = {"2θ": tt, "counts": y} if sigma is None else {"2θ": tt, "counts": y, "uncertainty": sigma}
    for label, values in columns.items():
        bad = ~np.isfinite(values)
        if bad.any():
            i = int(np.argmax(bad))
            raise InputError(f"{source} line {lines[i]}: {label} is {values[i]} (NaN or infinite)")
    if (y < 0).any():
        i = int(np.argmax(y < 0))
        raise InputError(
            f"{source} line {lines[i]}: negative counts ({y[i]:g})",
            "give raw counts, not background-subtracted intensities",
        )
    outside = (tt <= 0) | (tt >= 180)
    if outside.any():
        i = int(np.argmax(outside))
        raise InputError(
            f"{source} line {lines[i]}: 2θ = {tt[i]:g}° is outside (0°, 180°)",
            "the first column must be 2θ in degrees; convert d-spacings, Q or radians first",
        )
    if tt.max() < RADIAN_LIMIT:
        raise InputError(
            f"{source}: 2θ runs from {tt.min():g} to {tt.max():g}, all below π — this looks like radians",
            "the first column must be 2θ in degrees (multiply radians by 180/π)",
        )
    order = np.argsort(tt, kind="stable")
    if np.any(np.diff(order) != 1):
        notes.append(f"{source}: 2θ values were not in increasing order; the points were sorted")
    tt, y, lines = tt[order], y[order], lines[order]
    same = np.diff(tt) == 0
    if same.any():
        i = int(np.argmax(same))
        raise InputError(
            f"{source} lines {lines[i]} and {lines[i + 1]}: 2θ = {tt[i]:g}° appears twice",
            "a scan has one count per angle; merge or split the runs first",
        )
    if sigma is None:
        s = np.sqrt(np.maximum(y, 1.0))
    else:
        s = np.asarray(sigma, dtype=float)[order]
        if (s < 0).any():
            i = int(np.argmax(s < 0))
            raise InputError(f"{source} line {lines[i]}: negative uncertainty ({s[i]:g})")
        s = np.where(s > 0, s, np.sqrt(np.maximum(y, 1.0)))
    steps = np.diff(tt)
    if steps.max() > 1.5 * steps.min() and steps.max() - steps.min() > 1e-4:
        notes.append(
            f"{source}: uneven 2θ steps ({steps.min():.4g}° to {steps.max():.4g}°); widths use the local step"
        )
    return Scan(
        two_theta=tt, counts=y, sigma=s, radiation=radiation, source=source, warnings=tuple(notes)
    )


def _refuse_peak_list(first: np.ndarray, second: np.ndarray, source: str) -> None:
    """Refuse columns that look like a list of peaks rather than a step scan.

    A d-list: at most 200 rows, first column below 20 (Å) and decreasing, intensities within
    0–100. A 2θ peak list: fewer than 20 rows with intensities within 0–100 and steps far from
    even. Both are common practice, no source: scans have many evenly spaced points.
    """
    n = first.size
    if n < 2 or not (np.all(np.isfinite(first)) and np.all(np.isfinite(second))):
        return
    relative = second.min() >= 0 and second.max() <= 100.0
    steps = np.diff(first)
    d_like = n <= _PEAK_LIST_MAX_ROWS and first.max() < 20 and np.mean(steps < 0) > 0.8 and relative
    uneven = n < MIN_POINTS and relative and np.ptp(steps) > 0.5 * np.abs(np.mean(steps))
    if d_like or uneven:
        kind = "d-spacings" if d_like else "peak positions"
        raise InputError(
            f"{source} looks like a peak list ({kind} with relative intensities), not a scan",
            "read it with --peak-table, or load_peak_table in Python",
        )
