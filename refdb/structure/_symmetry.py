"""Space-group operations, site expansion and Laue classes, as numpy arrays.

Operations act on fractional coordinates as x' = R·x + t. A reflection h (a row vector of
Miller indices) is carried to h·R by the same operation, with |F(h·R)| = |F(h)|; adding the
inversion (Friedel's law) gives the Laue class that merges powder reflections.

References
----------
International Tables for Crystallography Vol. A (2016), ch. 1.4 (symmetry operations) and
Vol. B (2010), §1.4.2 (symmetry in reciprocal space).
"""

from __future__ import annotations

from dataclasses import dataclass

import gemmi
import numpy as np

from refdb.errors import InputError
from refdb.structure import _cif

#: Two images of one site closer than this (Å) are one atom on a special position. CIFs round
#: coordinates to 3–5 decimals (up to ~0.02 Å in a 20 Å cell); genuinely split (disordered)
#: positions of one site lie further apart, typically ≥ 0.3 Å (common practice, no source).
SPECIAL_POSITION_TOLERANCE = 0.1
#: Two atoms cannot be closer than ~0.7 Å (the H–H bond, 0.74 Å); distinct images of one site
#: closer than this are alternative positions of one atom (a split site).
CROWDING_DISTANCE = 0.7
_BASE5 = 5 ** np.arange(9, dtype=np.int64)


@dataclass(frozen=True, eq=False)
class SpaceGroupOps:
    """The operations of a space group and its names.

    Attributes
    ----------
    rotations : ndarray, shape (n, 3, 3), int
        Rotation parts R of all n operations (centring included).
    translations : ndarray, shape (n, 3)
        Translation parts t in fractions of the cell edges.
    name : str
        Hermann–Mauguin symbol with setting, e.g. ``"R -3 c:H"``, as gemmi names it when the
        operations are in its table; else the symbol given in the CIF.
    number : int or None
        International Tables number, None when the operations match no tabulated setting.
    hall : str or None
        Hall symbol, when known.
    """

    rotations: np.ndarray
    translations: np.ndarray
    name: str
    number: int | None
    hall: str | None


def ops_from_block(block: gemmi.cif.Block, label: str, cell: tuple[float, ...]) -> SpaceGroupOps:
    """Symmetry operations of a CIF block: listed operations first, then Hall, then H-M.

    A rhombohedral H-M symbol without a setting (``R -3``) means the hexagonal axes in
    ITA, but older files use it with a rhombohedral cell (a = b = c, α = β = γ ≠ 90°); the
    setting is then taken from the cell.

    Raises
    ------
    InputError
        No symmetry at all, an unreadable operation, or an unknown space-group symbol.
    """
    triplets = _cif.values(block, "_space_group_symop_operation_xyz") or _cif.values(
        block, "_symmetry_equiv_pos_as_xyz"
    )
    hall = _cif.value(block, "_space_group_name_Hall", "_symmetry_space_group_name_Hall")
    hm = _cif.value(block, "_space_group_name_H-M_alt", "_symmetry_space_group_name_H-M")
    if triplets:
        try:
            group = gemmi.GroupOps([gemmi.Op(t.replace(" ", "")) for t in triplets])
        except (RuntimeError, ValueError) as exc:
            raise InputError(f"{label}: unreadable symmetry operation ({' '.join(str(exc).split())})") from None
    elif hall:
        try:
            group = gemmi.symops_from_hall(hall)
        except (RuntimeError, ValueError):
            raise InputError(f"{label}: unknown Hall symbol {hall!r}") from None
    elif hm:
        sg = gemmi.find_spacegroup_by_name(hm)
        if sg is not None and sg.hm.startswith("R") and ":" not in hm and _rhombohedral_cell(cell):
            sg = gemmi.find_spacegroup_by_name(f"{sg.hm}:R")
        if sg is None:
            raise InputError(f"{label}: unknown space group {hm!r}", "give the symmetry operations in the CIF")
        group = sg.operations()
    else:
        raise InputError(f"{label} gives no space group or symmetry operations")
    ops = list(group)
    if not ops:
        raise InputError(f"{label}: empty list of symmetry operations")
    seitz = np.array([op.seitz() for op in ops], dtype=float)
    rotations = np.rint(seitz[:, :3, :3]).astype(np.int64)
    translations = np.mod(seitz[:, :3, 3], 1.0)
    sg = gemmi.find_spacegroup_by_ops(group)
    if sg is not None:
        return SpaceGroupOps(rotations, translations, sg.xhm(), sg.number, sg.hall)
    name = hm or (f"Hall {hall}" if hall else "unknown")
    return SpaceGroupOps(rotations, translations, name, None, hall)


def _rhombohedral_cell(cell: tuple[float, ...]) -> bool:
    a, b, c, al, be, ga = cell
    return abs(a - b) < 1e-3 * a and abs(a - c) < 1e-3 * a and abs(al - be) < 0.01 and abs(al - ga) < 0.01 and abs(al - 90) > 0.01


def metric_mismatch(rotations: np.ndarray, metric: np.ndarray) -> float:
    """Largest |RᵀGR − G| relative to max |G|: 0 when the cell has the group's symmetry."""
    transformed = np.einsum("oji,jk,okl->oil", rotations, metric, rotations)
    return float(np.abs(transformed - metric[None]).max() / np.abs(metric).max())


def expand_sites(
    frac: np.ndarray, ops: SpaceGroupOps, cell_matrix: np.ndarray, tolerance: float = SPECIAL_POSITION_TOLERANCE
) -> tuple[np.ndarray, np.ndarray]:
    """All atoms of the unit cell from the asymmetric unit.

    Parameters
    ----------
    frac : ndarray, shape (n, 3)
        Fractional coordinates of the asymmetric-unit sites.
    ops : SpaceGroupOps
    cell_matrix : ndarray, shape (3, 3)
        Rows are the cell vectors a, b, c in Å (Cartesian), for distances.
    tolerance : float
        Images of one site closer than this (Å) are merged (special positions).

    Returns
    -------
    positions : ndarray, shape (m, 3)
        Fractional coordinates in [0, 1).
    site_index : ndarray, shape (m,), int
        Row of ``frac`` that each atom comes from.
    crowding : ndarray, shape (m,), int
        Number of distinct images of the same site within :data:`CROWDING_DISTANCE` of each
        atom (itself included): more than 1 marks a split (disordered) position.
    """
    n_ops = ops.rotations.shape[0]
    images = np.einsum("oij,nj->noi", ops.rotations, frac) + ops.translations[None, :, :]
    images = np.mod(images, 1.0)  # (n, o, 3)
    earlier = np.triu(np.ones((n_ops, n_ops), dtype=bool), k=1)  # [i, j]: i < j
    keep = np.empty(images.shape[:2], dtype=bool)
    crowd = np.empty(images.shape[:2], dtype=np.int64)
    # Blocks of sites keep the (sites, o, o, 3) difference array near 16 MB for 192 operations.
    step = max(1, 2_000_000 // (n_ops * n_ops * 3))
    for start in range(0, images.shape[0], step):
        block = images[start : start + step]
        diff = block[:, :, None, :] - block[:, None, :, :]  # (b, o, o, 3)
        diff -= np.rint(diff)
        dist = np.linalg.norm(diff @ cell_matrix, axis=-1)  # (b, o, o)
        first = ~np.any((dist < tolerance) & earlier[None, :, :], axis=1)  # (b, o)
        keep[start : start + step] = first
        # Distinct images of one site closer than CROWDING_DISTANCE share the site.
        crowd[start : start + step] = np.sum((dist < CROWDING_DISTANCE) & first[:, :, None], axis=1)
    site_index = np.nonzero(keep)[0]
    positions = images[keep]
    positions = np.where(positions >= 1.0 - 1e-12, 0.0, positions)
    return positions, site_index, crowd[keep]


def laue_rotations(rotations: np.ndarray) -> np.ndarray:
    """The distinct rotation parts and their negatives: the Laue class, shape (k, 3, 3), int.

    The matrices come in the order of their base-5 codes (below).
    """
    flat = rotations.reshape(-1, 9)
    both = np.concatenate((flat, -flat))
    # Entries of rotation matrices in any lattice basis are small integers (|Rij| ≤ 2 allows
    # every setting): a base-5 number names each matrix, and a 1-D unique is cheap. The
    # largest entry of ±R is the largest |Rij|.
    if both.max() > 2:  # an unusual setting: the general (slower) unique
        return np.unique(both, axis=0).reshape(-1, 3, 3)
    _, first = np.unique((both + 2) @ _BASE5, return_index=True)
    return both[first].reshape(-1, 3, 3)
