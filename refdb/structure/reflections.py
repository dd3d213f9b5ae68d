"""Reflections of a crystal: d-spacings, multiplicities and structure factors |F|².

Every hkl inside the sphere 1/d ≤ 1/d_min is generated from the metric tensor, reduced to one
representative per Laue-class orbit (symmetry-equivalent and Friedel-related reflections have
the same d and |F|²), and given

    F(h) = Σ_j occ_j · f_j(s) · exp(−B_j s²) · exp(2πi h·x_j),   s = sinθ/λ = 1/(2d),

summed over every atom of the unit cell. Systematic absences are not looked up in tables:
they come out of F as zeros and are dropped with everything negligibly weak.

References
----------
International Tables for Crystallography Vol. B (2010), §1.2 (structure factor) and
Vol. C (2006), §6.1.1 (scattering factors); Waasmaier & Kirfel (1995), Acta Cryst. A51, 416.
"""

from __future__ import annotations

import numpy as np

from refdb.errors import InputError
from refdb.radiation import Radiation
from refdb.records import PatternLines
from refdb.structure import _symmetry, scattering
from refdb.structure.crystal import Crystal

#: Lines weaker than this fraction of the strongest |F|²·m are dropped: absences come out of F
#: at ~1e-30 relative (rounding), real weak lines of heavy-atom structures at > 1e-5.
RELATIVE_CUTOFF = 1e-6
#: Smallest d_min accepted (Å): 0.2 Å is beyond Ag Kα's limit λ/2 = 0.28 Å.
D_MIN_LIMIT = 0.2
#: Work arrays (reflections × atoms) are processed in blocks of about this many elements.
_BLOCK = 1_000_000


def miller_sphere(crystal: Crystal, d_min: float) -> tuple[np.ndarray, np.ndarray]:
    """Half of the hkl ≠ 000 with d ≥ d_min: one of each Friedel pair (h, −h).

    The half-space is h > 0, or h = 0 and k > 0, or h = k = 0 and l > 0. The box
    |h| ≤ a/d_min, |k| ≤ b/d_min, |l| ≤ c/d_min holds the whole sphere because h = a·r* and
    |r*| = 1/d.

    Returns
    -------
    hkl : ndarray, shape (n, 3), int64
    inv_d2 : ndarray, shape (n,)
        1/d² in Å⁻² from the reciprocal metric tensor.
    """
    gstar = crystal.reciprocal_metric
    limits = np.floor(np.array(crystal.cell[:3]) / d_min + 1e-9).astype(np.int64)
    axes = [np.arange(0, limits[0] + 1, dtype=np.int64)] + [np.arange(-m, m + 1, dtype=np.int64) for m in limits[1:]]
    hkl = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    h, k, l = hkl.T
    half = (h > 0) | ((h == 0) & ((k > 0) | ((k == 0) & (l > 0))))
    hkl = hkl[half]
    hkl_f = hkl.astype(float)
    inv_d2 = np.sum((hkl_f @ gstar) * hkl_f, axis=1)
    inside = inv_d2 <= (1.0 + 1e-12) / (d_min * d_min)
    return hkl[inside], inv_d2[inside]


def unique_reflections(
    hkl: np.ndarray, inv_d2: np.ndarray, laue: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One representative per orbit of the Laue group, with the orbit's size.

    The representative is the equivalent with the fewest negative indices, then the largest
    (h, k, l) in lexicographic order (e.g. 110 rather than 2−10 in a hexagonal cell).

    Parameters
    ----------
    hkl : ndarray, shape (n, 3), int
        One of each Friedel pair of a sphere (see :func:`miller_sphere`). The Laue group holds
        the inversion, so every orbit is closed under h → −h and its size is twice the number
        of its members in the half-space.
    inv_d2 : ndarray, shape (n,)
        1/d² of each reflection, Å⁻².
    laue : ndarray, shape (k, 3, 3), int
        Rotation parts of the Laue group.

    Returns
    -------
    rep : ndarray, shape (u, 3), int
    multiplicity : ndarray, shape (u,), int
        Members of each orbit inside the sphere (Friedel mates included).
    inv_d2 : ndarray, shape (u,)
        Mean 1/d² of the members (they agree to rounding when the cell has the group's
        symmetry; at the sphere's edge an orbit may be cut by rounding, hence the mean).
    """
    # Images of a reflection can have larger indices than any member of the sphere (hexagonal
    # axes map (h, k) to (h + k)); three times the largest index bounds them.
    span = 3 * (np.abs(hkl).max(axis=0) if len(hkl) else np.zeros(3, dtype=np.int64)) + 1
    base = 2 * span + 1
    lex_size = int(np.prod(base))

    # Keys are exact integers below 2**53, so float64 arithmetic (BLAS) is exact here.
    # Stage 1, every reflection: the orbit is named by its lexicographically largest member,
    # whose key h·R·w is one matrix product for all R.
    weights = np.array([base[1] * base[2], base[2], 1], dtype=float)
    offset = float(span @ weights)
    n_ops = laue.shape[0]
    lex_of_ops = (laue.astype(float) @ weights).T  # (3, k): column j is R_j·w
    hkl_f = hkl.astype(float)
    canon = np.empty(hkl.shape[0], dtype=np.int64)
    step = max(1, _BLOCK // n_ops)
    for start in range(0, hkl.shape[0], step):
        canon[start : start + step] = np.rint((hkl_f[start : start + step] @ lex_of_ops).max(axis=1) + offset)
    keys, orbit, counts = np.unique(canon, return_inverse=True, return_counts=True)
    # The key is (h + span)·w, a mixed-radix number whose digits are the shifted indices.
    first = np.stack([keys // (base[1] * base[2]), (keys // base[2]) % base[1], keys % base[2]], axis=1) - span
    # Stage 2, one member per orbit: prefer the member with the fewest negative indices.
    ops = laue.transpose(1, 0, 2).reshape(3, 3 * n_ops).astype(float)
    images = (first.astype(float) @ ops).reshape(-1, n_ops, 3)  # (u, k, 3)
    score = (3.0 - np.count_nonzero(images < 0, axis=2)) * lex_size + images @ weights
    best = np.argmax(score, axis=1)
    rep = np.rint(images[np.arange(images.shape[0]), best]).astype(np.int64)
    mean_inv_d2 = np.bincount(orbit.ravel(), weights=inv_d2, minlength=keys.size) / counts
    return rep, 2 * counts.astype(np.int64), mean_inv_d2


def structure_factors(
    crystal: Crystal, hkl: np.ndarray, inv_d2: np.ndarray, *, anomalous: dict[str, tuple[float, float]] | None = None
) -> np.ndarray:
    """Powder-averaged |F|² (electrons²) of reflections.

    Parameters
    ----------
    crystal : Crystal
    hkl : ndarray, shape (n, 3)
    inv_d2 : ndarray, shape (n,)
        1/d² in Å⁻².
    anomalous : dict, optional
        (f′, f″) per element symbol. With anomalous terms |F(h)|² ≠ |F(−h)|²; a powder line
        holds both, so the mean ½(|F(h)|² + |F(−h)|²) = |A|² + |B|² is returned, where A and
        B are the structure factors of the real (f0 + f′) and imaginary (f″) parts.

    Returns
    -------
    ndarray, shape (n,)
    """
    s2 = inv_d2 / 4.0
    species = tuple(scattering.species_name(e, int(c)) for e, c in zip(crystal.elements, crystal.charges, strict=True))
    names, atom_species = np.unique(np.array(species), return_inverse=True)
    # Atoms sharing a species and a B share f0·exp(−Bs²): the phase sums of a group are one
    # matrix product (reflections × atoms) @ (atoms × groups) with the occupancies.
    b_key = np.rint(crystal.b_iso * 1e6).astype(np.int64)  # B to 1e-6 Å²
    group_keys, first_atom, atom_group = np.unique(
        atom_species.ravel() * (b_key.max() + 1) + b_key, return_index=True, return_inverse=True
    )
    atom_group = atom_group.ravel()
    occ_matrix = np.zeros((crystal.n_atoms, group_keys.size))
    occ_matrix[np.arange(crystal.n_atoms), atom_group] = crystal.occupancy
    group_species = atom_species.ravel()[first_atom]
    group_b = crystal.b_iso[first_atom]
    f0 = scattering.f0_table(tuple(names), np.sqrt(s2))[:, group_species]  # (n, groups)
    amplitude = f0 * np.exp(-np.multiply.outer(s2, group_b))  # (n, groups)
    if anomalous:
        element_of_group = [crystal.elements[i] for i in first_atom]
        fp = np.array([anomalous[e][0] for e in element_of_group])
        fpp = np.array([anomalous[e][1] for e in element_of_group])
        thermal = np.exp(-np.multiply.outer(s2, group_b))
        imaginary = thermal * fpp
        amplitude = amplitude + thermal * fp
    f2 = np.empty(hkl.shape[0])
    frac_t = crystal.frac.T.copy()
    hkl_f = hkl.astype(float)
    occ32 = occ_matrix.astype(np.float32)
    step = max(1, _BLOCK // max(1, crystal.n_atoms))
    for start in range(0, hkl.shape[0], step):
        rows = slice(start, start + step)
        cycles = hkl_f[rows] @ frac_t  # (b, atoms), phase in cycles, computed in float64
        cycles -= np.rint(cycles)  # exact periodicity: the argument stays within ±π
        # Single-precision trigonometry (vectorised by numpy, ~10× faster than float64) on the
        # reduced angle: phase errors ≤ 1e-6 rad, i.e. relative |F| errors ≤ 1e-6 per atom.
        angle = (2.0 * np.pi * cycles).astype(np.float32)
        cos_sum = (np.cos(angle) @ occ32).astype(float)  # (b, groups)
        sin_sum = (np.sin(angle) @ occ32).astype(float)
        a_re = np.sum(amplitude[rows] * cos_sum, axis=1)
        a_im = np.sum(amplitude[rows] * sin_sum, axis=1)
        f2[rows] = a_re * a_re + a_im * a_im
        if anomalous:
            b_re = np.sum(imaginary[rows] * cos_sum, axis=1)
            b_im = np.sum(imaginary[rows] * sin_sum, axis=1)
            f2[rows] += b_re * b_re + b_im * b_im
    return f2


def compute_reflections(
    crystal: Crystal,
    *,
    d_min: float = 0.7,
    anomalous_radiation: Radiation | None = None,
    relative_cutoff: float = RELATIVE_CUTOFF,
) -> PatternLines:
    """The powder reflections of a crystal down to ``d_min``.

    Parameters
    ----------
    crystal : Crystal
    d_min : float
        Shortest d-spacing in Å (default 0.7 Å: Cu Kα reaches 0.78 Å at 2θ = 160°).
    anomalous_radiation : Radiation, optional
        Include f′ and f″ of every element at the primary (Kα1) wavelength. The result then
        belongs to that radiation; library entries are stored without anomalous terms.
    relative_cutoff : float
        Lines with m·|F|² below this fraction of the strongest are dropped
        (systematic absences and negligible lines).

    Returns
    -------
    PatternLines
        ``d`` (Å, descending; ties ordered by hkl), ``hkl`` (n, 3) representatives,
        ``multiplicity`` (number of hkl merged, Friedel mates included) and ``f2`` (|F|² in
        electrons² per cell, powder-averaged).

    Raises
    ------
    InputError
        ``d_min`` not a positive number ≥ 0.2 Å.
    """
    if not np.isfinite(d_min) or d_min < D_MIN_LIMIT:
        raise InputError(f"d_min = {d_min} Å is too small", f"use a value ≥ {D_MIN_LIMIT} Å (0.7 Å is usual)")
    hkl, inv_d2 = miller_sphere(crystal, d_min)
    laue = _symmetry.laue_rotations(crystal.rotations)
    rep, mult, inv_d2 = unique_reflections(hkl, inv_d2, laue)
    anomalous = None
    if anomalous_radiation is not None:
        energy = scattering.energy_ev(anomalous_radiation.wavelength)
        anomalous = {e: scattering.anomalous_terms(e, energy) for e in set(crystal.elements)}
    f2 = structure_factors(crystal, rep, inv_d2, anomalous=anomalous)
    strength = f2 * mult
    keep = strength >= relative_cutoff * strength.max() if len(strength) else np.zeros(0, dtype=bool)
    d = 1.0 / np.sqrt(inv_d2[keep])
    rep, mult, f2 = rep[keep], mult[keep], f2[keep]
    order = np.lexsort((-rep[:, 2], -rep[:, 1], -rep[:, 0], -np.round(d, 9)))
    return PatternLines(d=d[order], hkl=rep[order], multiplicity=mult[order], f2=f2[order])
