"""One entry point for commands that accept either a scan or a peak table."""

from __future__ import annotations

from pathlib import Path

from refdb.radiation import Radiation
from refdb.scan.peak_table import load_peak_table
from refdb.scan.readers import load_scan
from refdb.scan.types import PeakList, Scan


def load_measurement(
    path: str | Path,
    *,
    radiation: Radiation | None = None,
    fmt: str = "auto",
    peak_table: bool = False,
    positions: str | None = None,
) -> Scan | PeakList:
    """Read what a command was given: a scan (default) or, with ``peak_table``, a peak table.

    Parameters
    ----------
    path : str or Path
        The file, or ``"-"`` for standard input.
    radiation : Radiation, optional
        Used when the file does not state its radiation.
    fmt : str
        Scan format (``"auto"`` or a name in :data:`refdb.scan.SCAN_FORMATS`); ignored for
        peak tables.
    peak_table : bool
        Read a peak table (:func:`refdb.scan.load_peak_table`) instead of a scan.
    positions : {"d", "two_theta"}, optional
        Meaning of a peak table's first column when it has no header.

    Returns
    -------
    Scan or PeakList
        A :class:`Scan` for a scan, a :class:`PeakList` for a peak table.

    Raises
    ------
    InputError
        As :func:`refdb.scan.load_scan` and :func:`refdb.scan.load_peak_table`.
    """
    if peak_table:
        return load_peak_table(path, radiation=radiation, positions=positions)
    return load_scan(path, radiation=radiation, fmt=fmt)
