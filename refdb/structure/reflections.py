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
        In lexicographic order.
    inv_d2 : ndarray, shape (n,)
        1/d² in Å⁻² from the reciprocal metric tensor.
    """
    gstar = crystal.reciprocal_metric
    # floor(edge / d_min) (positive numbers); 1e-9 keeps an index whose d is d_min exactly.
    na, nb, nc = (int(edge / d_min + 1e-9) for edge in crystal.cell[:3])
    # The box 0 ≤ h ≤ na, |k| ≤ nb, |l| ≤ nc in lexicographic order: the half-space is every
    # row after that of 000, which is row nb·(2nc + 1) + nc.
    box = np.indices((na + 1, 2 * nb + 1, 2 * nc + 1)).reshape(3, -1).T
    hkl = box[nb * (2 * nc + 1) + nc + 1 :] - np.array([0, nb, nc])
    hkl_f = hkl.astype(float)
    inv_d2 = ((hkl_f @ gstar) * hkl_f) @ np.ones(3)  # row sums (numpy's sum is slow on 3 columns)
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
    n, n_ops = hkl.shape[0], laue.shape[0]
    # Images of a reflection can have larger indices than any member of the sphere (hexagonal
    # axes map (h, k) to (h + k)); three times the largest index bounds them.
    span = 3 * (int(np.abs(hkl).max()) if n else 0) + 1
    base = 2 * span + 1
    key_range = float(base**3)
    # The mixed-radix key h·w (|h·w| < key_range / 2) orders reflections lexicographically.
    # Keys are exact integers below 2**53, so float64 arithmetic (BLAS) is exact here.
    weights = np.array([base * base, base, 1.0])
    laue_f = laue.astype(float)
    ops_key = laue_f @ weights  # (k, 3): ops_key @ h = every key h·R·w
    hkl_f = hkl.astype(float)
    # Stage 1, every reflection: the orbit is named by its lexicographically largest member.
    # Keys are laid out (operations × reflections): numpy's max down columns is many times
    # faster than along short rows.
    canon = np.empty(n)
    step = max(1, _BLOCK // n_ops)
    for start in range(0, n, step):
        canon[start : start + step] = (ops_key @ hkl_f[start : start + step].T).max(axis=0)
    # Members of one orbit share the name: runs of a stable sort (members in input order).
    order = np.argsort(canon, kind="stable")
    ranked = canon[order]
    edge = np.empty(n + 1, dtype=bool)
    edge[0] = edge[n] = True
    np.not_equal(ranked[1:], ranked[:-1], out=edge[1:n])
    bounds = np.flatnonzero(edge)
    starts, counts = bounds[:-1], np.diff(bounds)
    mean_inv_d2 = np.add.reduceat(inv_d2[order], starts) / counts if n else np.zeros(0)
    # Stage 2, one member per orbit: rank its images by (non-negative indices)·key_range + key.
    member = hkl_f[order[starts]]
    images = (member @ laue_f.transpose(1, 0, 2).reshape(3, 3 * n_ops)).reshape(-1, 3)  # (u·k, 3)
    score = member @ ops_key.T  # (u, k)
    # A sum over a length-3 axis is one small matrix product (numpy's reduction is slow there).
    score += ((images >= 0).astype(float) @ np.full(3, key_range)).reshape(score.shape)
    top = np.argmax(score, axis=1)
    rep = images.reshape(-1, n_ops, 3)[np.arange(top.shape[0]), top].astype(np.int64)
    return rep, 2 * counts, mean_inv_d2


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
    # Atoms of one element, charge and B scatter alike: each such group needs f0·exp(−Bs²)
    # once, and its phase sums are one matrix product (reflections × atoms) @ (atoms × groups)
    # with the occupancies. Element symbols (one or two ASCII letters) read as two bytes are
    # one 16-bit number; with the charge's low byte it names the (element, charge) pair. A
    # complex key sorts by real, then imaginary part: one np.unique finds the (pair, B) groups.
    element_code = np.array(crystal.elements, dtype="S2").view(np.uint16).astype(float)
    group_key = element_code * 256.0 + (crystal.charges & 255) + 1j * crystal.b_iso
    _, first_atom, atom_group = np.unique(group_key, return_index=True, return_inverse=True)
    n_groups = first_atom.shape[0]
    occ_matrix = np.zeros((crystal.n_atoms, n_groups), dtype=np.float32)
    occ_matrix[np.arange(crystal.n_atoms), atom_group.ravel()] = crystal.occupancy
    atom_of_group = first_atom.tolist()
    group_species = [scattering.species_name(crystal.elements[i], int(crystal.charges[i])) for i in atom_of_group]
    names = tuple(dict.fromkeys(group_species))  # distinct species, a handful
    column = [names.index(sp) for sp in group_species]
    thermal = np.exp(np.multiply.outer(-s2, crystal.b_iso[first_atom]))  # exp(−Bs²), (n, groups)
    amplitude = scattering.f0_table(names, np.sqrt(s2))[:, column] * thermal
    imaginary = None
    if anomalous:
        fp, fpp = np.array([anomalous[crystal.elements[i]] for i in atom_of_group]).reshape(-1, 2).T
        amplitude += thermal * fp
        imaginary = thermal * fpp
    per_group = np.ones(n_groups)
    f2 = np.empty(hkl.shape[0])
    frac_t = crystal.frac.T.copy()
    hkl_f = hkl.astype(float)
    step = max(1, _BLOCK // max(1, crystal.n_atoms))
    for start in range(0, hkl.shape[0], step):
        rows = slice(start, start + step)
        cycles = hkl_f[rows] @ frac_t  # (b, atoms), phase in cycles, computed in float64
        cycles -= np.rint(cycles)  # exact periodicity: the argument stays within ±π
        # Single-precision trigonometry (vectorised by numpy, ~10× faster than float64) on the
        # reduced angle: phase errors ≤ 1e-6 rad, i.e. relative |F| errors ≤ 1e-6 per atom.
        angle = (2.0 * np.pi * cycles).astype(np.float32)
        cos_sum = np.cos(angle) @ occ_matrix  # (b, groups), single precision
        sin_sum = np.sin(angle) @ occ_matrix
        a_re = (amplitude[rows] * cos_sum) @ per_group  # products in double precision
        a_im = (amplitude[rows] * sin_sum) @ per_group
        f2[rows] = a_re * a_re + a_im * a_im
        if imaginary is not None:
            b_re = (imaginary[rows] * cos_sum) @ per_group
            b_im = (imaginary[rows] * sin_sum) @ per_group
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
    neg = -rep
    order = np.lexsort((neg[:, 2], neg[:, 1], neg[:, 0], -np.round(d, 9)))
    return PatternLines(d=d[order], hkl=rep[order], multiplicity=mult[order], f2=f2[order])
