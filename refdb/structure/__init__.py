"""Crystal structures (CIF) to radiation-free reflections and reference patterns.

Data flow: :func:`read_crystal` (CIF → :class:`Crystal`) → :func:`compute_reflections`
(→ :class:`refdb.records.PatternLines`: d, hkl, multiplicity, |F|²) → :func:`reference_from_cif`
(→ :class:`refdb.records.ReferenceData` for the library) → :func:`stick_pattern`,
:func:`draw_profile` and :func:`simulate_scan` for a given radiation.
"""

from refdb.structure.crystal import Crystal, read_crystal
from refdb.structure.pattern import MarchDollase, Sticks, draw_profile, stick_pattern
from refdb.structure.reference import reference_from_cif, reference_from_crystal
from refdb.structure.reflections import compute_reflections
from refdb.structure.rir import compute_rir, corundum_reference
from refdb.structure.simulate import simulate_scan

__all__ = [
    "Crystal",
    "MarchDollase",
    "Sticks",
    "compute_reflections",
    "compute_rir",
    "corundum_reference",
    "draw_profile",
    "read_crystal",
    "reference_from_cif",
    "reference_from_crystal",
    "simulate_scan",
    "stick_pattern",
]
