"""refdb: open powder X-ray diffraction phase identification.

The public Python API, along the data flow::

    import refdb

    lib = refdb.open_library("lab.sqlite", create=True)           # reference library
    refdb.import_cifs(lib, ["structures/"])                        # CIF → computed references
    scan = refdb.load_scan("sample.xy", radiation=refdb.radiation_for("Cu"))
    peaks = refdb.find_peaks(scan).peaks                           # background, Kα2, profile fits
    hits = refdb.search(peaks, refdb.load_index(lib), scan=scan)   # ranked candidates
    mix = refdb.decompose(scan, lib)                               # phases and weight fractions

Names are imported on first use, so ``import refdb`` stays quick.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

_EXPORTS = {
    "RefdbError": "refdb.errors",
    "InputError": "refdb.errors",
    "LibraryError": "refdb.errors",
    "SchemaError": "refdb.errors",
    "Radiation": "refdb.radiation",
    "radiation_for": "refdb.radiation",
    "PatternLines": "refdb.records",
    "ReferenceData": "refdb.records",
    "ReferenceEntry": "refdb.records",
    "Scan": "refdb.scan.types",
    "PeakList": "refdb.scan.types",
    "read_crystal": "refdb.structure",
    "compute_reflections": "refdb.structure",
    "reference_from_cif": "refdb.structure",
    "stick_pattern": "refdb.structure",
    "draw_profile": "refdb.structure",
    "simulate_scan": "refdb.structure",
    "load_scan": "refdb.scan",
    "load_peak_table": "refdb.scan",
    "find_peaks": "refdb.scan",
    "estimate_background": "refdb.scan",
    "open_library": "refdb.library",
    "import_cifs": "refdb.library.ingest",
    "measured_reference": "refdb.library.ingest",
    "load_index": "refdb.match.index",
    "search": "refdb.match.search",
    "decompose": "refdb.match.mixture",
}

__all__ = ["__version__", *sorted(_EXPORTS)]


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'refdb' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__
