"""Synthetic CIF text for tests, written without importing the code under test."""

from __future__ import annotations

from collections.abc import Sequence


def make_cif(
    cell: Sequence[float],
    atoms: Sequence[tuple],
    *,
    space_group: str | None = "P 1",
    symops: Sequence[str] | None = None,
    name: str = "test",
    formula: str | None = None,
    extra: str = "",
) -> str:
    """A minimal CIF.

    ``atoms`` rows are (label, type_symbol, x, y, z) with optional occupancy and B_iso.
    """
    a, b, c, al, be, ga = cell
    lines = [
        f"data_{name}",
        f"_cell_length_a {a}",
        f"_cell_length_b {b}",
        f"_cell_length_c {c}",
        f"_cell_angle_alpha {al}",
        f"_cell_angle_beta {be}",
        f"_cell_angle_gamma {ga}",
    ]
    if space_group:
        lines.append(f"_symmetry_space_group_name_H-M '{space_group}'")
    if formula:
        lines.append(f"_chemical_formula_sum '{formula}'")
    if symops:
        lines += ["loop_", "_space_group_symop_operation_xyz"] + [f"'{op}'" for op in symops]
    if extra:
        lines.append(extra)
    lines += [
        "loop_",
        "_atom_site_label",
        "_atom_site_type_symbol",
        "_atom_site_fract_x",
        "_atom_site_fract_y",
        "_atom_site_fract_z",
        "_atom_site_occupancy",
        "_atom_site_B_iso_or_equiv",
    ]
    for row in atoms:
        label, symbol, x, y, z = row[:5]
        occ = row[5] if len(row) > 5 else 1.0
        biso = row[6] if len(row) > 6 else 0.0
        lines.append(f"{label} {symbol} {x} {y} {z} {occ} {biso}")
    return "\n".join(lines) + "\n"


def cubic(a: float, space_group: str, atoms: Sequence[tuple], **kw) -> str:
    """A cubic structure in its standard setting."""
    return make_cif((a, a, a, 90, 90, 90), atoms, space_group=space_group, **kw)
