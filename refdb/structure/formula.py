"""Formulas of crystal structures: counts from the atoms of a cell, Hill order of elements.

Hill order (Hill 1900, J. Am. Chem. Soc. 22, 478): with carbon present, C first, then H, then
the other elements alphabetically; without carbon, all elements alphabetically.
"""

from __future__ import annotations

import re

import numpy as np

from refdb.chem import hill_formula, parse_formula
from refdb.structure import scattering

# Parsing and Hill-order writing are shared with measured references: refdb.chem.
__all__ = ["formula_from_atoms", "hill_formula", "hill_order", "parse_formula"]


def hill_order(elements: set[str] | list[str] | tuple[str, ...]) -> tuple[str, ...]:
    """Element symbols in Hill order."""
    return tuple(re.findall(r"[A-Z][a-z]?", hill_formula({e: 1.0 for e in set(elements)})))


def formula_from_atoms(elements: tuple[str, ...], occupancy: np.ndarray, z: float | None) -> dict[str, float]:
    """Element counts per formula unit from the atoms of a cell (per cell when Z is unknown)."""
    counts: dict[str, float] = {}
    for e in sorted(set(elements)):
        mask = np.array([x == e for x in elements])
        key = scattering.chemical_element(e)
        counts[key] = counts.get(key, 0.0) + float(np.sum(occupancy[mask]))
    return {e: c / (z or 1.0) for e, c in counts.items()}
