"""Reference entries computed from crystal structures (the input of the library)."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

from refdb.errors import InputError
from refdb.records import ReferenceData
from refdb.structure.crystal import Crystal, read_crystal
from refdb.structure.formula import formula_from_atoms, hill_formula, hill_order, parse_formula
from refdb.structure.reflections import compute_reflections
from refdb.structure.rir import compute_rir


def reference_from_cif(path: str | Path, *, d_min: float = 0.7, name_hint: str | None = None) -> ReferenceData:
    """Read a CIF and compute its reference pattern (``kind="computed"``).

    Parameters
    ----------
    path : str or Path
        CIF file (or CIF text, see :func:`refdb.structure.read_crystal`).
    d_min : float
        Shortest d-spacing in Å.
    name_hint : str, optional
        Data block to use, and the name when the CIF names no compound.

    Returns
    -------
    ReferenceData
        Lines radiation-free (d, hkl, multiplicity, |F|²), with cell, volume (Å³), Z, density
        (g/cm³), cell mass (g/mol), I/Ic (Cu Kα1), provenance and the CIF text.

    Raises
    ------
    InputError
        Whatever :func:`read_crystal` rejects; a structure without any reflection.
    """
    return reference_from_crystal(read_crystal(path, name_hint=name_hint), d_min=d_min)


def reference_from_crystal(crystal: Crystal, *, d_min: float = 0.7, rir: float | None = None) -> ReferenceData:
    """The reference entry of a :class:`Crystal`; ``rir`` overrides the computed I/Ic."""
    lines = compute_reflections(crystal, d_min=d_min)
    if len(lines) == 0:
        raise InputError(f"{crystal.file_name or crystal.name}: no reflection with d ≥ {d_min} Å")
    counts = _formula_counts(crystal)
    # "COD" for database entries, "literature" for a structure typed in from a paper (it has a
    # journal or DOI), else "in-house"; the citation itself is kept in its own fields.
    source = "COD" if crystal.database_code else ("literature" if (crystal.journal or crystal.doi) else "in-house")
    ref = ReferenceData(
        kind="computed",
        name=crystal.name,
        formula=crystal.formula or hill_formula(counts),
        formula_reduced=hill_formula(counts),
        elements=hill_order(counts),
        lines=lines,
        mineral_name=crystal.mineral_name,
        space_group=crystal.space_group,
        sg_number=crystal.sg_number,
        cell=crystal.cell,
        volume=crystal.volume,
        z=crystal.z,
        density=crystal.density,
        cell_mass=crystal.cell_mass,
        source=source,
        source_id=crystal.database_code or (Path(crystal.file_name).stem if crystal.file_name else None),
        doi=crystal.doi,
        citation=crystal.citation,
        licence=crystal.licence,
        file_name=Path(crystal.file_name).name if crystal.file_name else None,
        structure_text=crystal.text,
        notes="; ".join(crystal.warnings),
    )
    return replace(ref, rir=rir if rir is not None else compute_rir(ref))


def _formula_counts(crystal: Crystal) -> dict[str, float]:
    """Element counts of the given sum formula, else of the cell contents divided by Z."""
    if crystal.formula:
        try:
            return parse_formula(crystal.formula)
        except InputError:
            pass  # an odd _chemical_formula_sum: fall back to the atoms themselves
    return formula_from_atoms(crystal.elements, crystal.occupancy, crystal.z)
