"""Chemical formulas: parse ``_chemical_formula_sum`` and write Hill order.

Hill order (Hill 1900, J. Am. Chem. Soc. 22, 478): with carbon present, C first, then H, then
the other elements alphabetically; without carbon, all elements alphabetically. Counts of 1
are omitted; fractional counts keep up to four significant decimals.
"""

from __future__ import annotations

import re

import numpy as np

from refdb.errors import InputError
from refdb.structure import scattering

_TOKEN = re.compile(r"([A-Z][a-z]?)\s*(\d*\.?\d*)")


def parse_formula(text: str) -> dict[str, float]:
    """Element counts of a formula such as ``"Al2 O3"``, ``"C3 D3 O7 Sr"`` or ``"Ca0.5Mg0.5"``.

    D and T count as H. Charges and brackets are not part of ``_chemical_formula_sum``.

    Raises
    ------
    InputError
        Text that is not a sum formula, or an unknown element.
    """
    cleaned = re.sub(r"[\s'\"]", "", text)
    if not cleaned or _TOKEN.sub("", cleaned):
        raise InputError(f"formula {text!r} is not a sum formula", "write it like 'Al2 O3'")
    counts: dict[str, float] = {}
    for symbol, number in _TOKEN.findall(cleaned):
        if not scattering.known_element(symbol):
            raise InputError(f"formula {text!r}: unknown element {symbol!r}")
        element = scattering.chemical_element(symbol)
        counts[element] = counts.get(element, 0.0) + (float(number) if number not in ("", ".") else 1.0)
    return counts


def hill_formula(counts: dict[str, float]) -> str:
    """Write element counts in Hill order without spaces, e.g. ``{"O": 3, "Al": 2}`` → ``Al2O3``."""
    elements = sorted(counts)
    if "C" in counts:
        elements = ["C"] + (["H"] if "H" in counts else []) + [e for e in elements if e not in ("C", "H")]
    return "".join(f"{e}{_count(counts[e])}" for e in elements if counts[e] > 0)


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


def _count(x: float) -> str:
    if abs(x - 1.0) < 1e-6:
        return ""
    if abs(x - round(x)) < 1e-6:
        return str(int(round(x)))
    return f"{x:.4f}".rstrip("0").rstrip(".")
