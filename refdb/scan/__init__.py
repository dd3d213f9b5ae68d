"""Measured scans: reading, validation, background, peak search and profile fitting.

The public API::

    load_scan(path, *, radiation=None, fmt="auto") -> Scan
    load_peak_table(path, *, radiation=None, positions=None) -> PeakList
    load_measurement(path, *, radiation=None, fmt="auto", peak_table=False, positions=None)
    estimate_background(scan, *, method="snip", fwhm=None, **options) -> ndarray
    find_peaks(scan, *, background="snip", min_significance=3.5, alpha2=True, ...) -> PeakSearch

with the tables :data:`SCAN_FORMATS` and :data:`BACKGROUND_METHODS`.
"""

from refdb.scan.background import BACKGROUND_METHODS, estimate_background, typical_fwhm
from refdb.scan.inputs import load_measurement
from refdb.scan.peak_table import load_peak_table
from refdb.scan.peaks import PeakSearch, find_peaks
from refdb.scan.readers import SCAN_FORMATS, ScanFormat, load_scan
from refdb.scan.standard import InternalStandard, StandardCorrection
from refdb.scan.types import PeakList, Scan

__all__ = [
    "BACKGROUND_METHODS",
    "SCAN_FORMATS",
    "InternalStandard",
    "PeakList",
    "PeakSearch",
    "Scan",
    "ScanFormat",
    "StandardCorrection",
    "estimate_background",
    "find_peaks",
    "load_measurement",
    "load_peak_table",
    "load_scan",
    "typical_fwhm",
]
