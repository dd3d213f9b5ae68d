"""A crystal structure read from a CIF: cell, symmetry, all atoms of the unit cell, metadata.

The reader is the only entry point for structures; everything downstream (reflections,
reference patterns) trusts a :class:`Crystal`, so all checks live here.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import gemmi
import numpy as np

from refdb.errors import InputError
from refdb.structure import _cif, _symmetry, scattering

#: Relative difference allowed between _cell_volume and the volume from the cell parameters.
#: Cell lengths are quoted to 4–5 significant digits, angles to 0.01°: the volume they give
#: agrees with a quoted volume to better than 0.1 %; 1 % leaves room for rounded volumes
#: while catching a mistyped length or angle (common practice, no source).
VOLUME_TOLERANCE = 0.01
#: Largest cell edge accepted, Å (protein cells reach a few hundred Å; beyond that a unit is wrong).
MAX_CELL_EDGE = 1000.0
#: Shortest cell edge accepted, Å: the shortest cell edges of real crystals are ~2 Å (lithium,
#: diamond 2.5 Å in hexagonal settings); below 1 Å the lengths are almost surely in nm.
MIN_CELL_EDGE = 1.0

#: Largest relative change of the metric tensor under a symmetry operation (|RᵀGR − G|/|G|):
#: cells are quoted to ~1e-4 relative, so a setting that contradicts the cell shows up as ≥ 0.1.
METRIC_TOLERANCE = 1e-3

_B_FROM_U = 8.0 * np.pi**2


@dataclass(frozen=True, eq=False)
class Crystal:
    """A crystal structure with every atom of the unit cell.

    Attributes
    ----------
    name : str
        Mineral name, else common or systematic chemical name, else the formula or block name.
    formula : str or None
        ``_chemical_formula_sum`` exactly as given.
    mineral_name : str or None
    cell : tuple of 6 float
        a, b, c in Å; α, β, γ in degrees.
    space_group : str
        Hermann–Mauguin symbol with setting (gemmi's extended symbol where tabulated).
    sg_number : int or None
    rotations : ndarray, shape (n_ops, 3, 3), int
        Rotation parts of the symmetry operations (x' = R·x + t), centring included.
    translations : ndarray, shape (n_ops, 3)
    labels : tuple of str, length n_atoms
        Site label of the asymmetric-unit site each atom comes from.
    elements : tuple of str, length n_atoms
        Element symbols as written (``D`` stays ``D``; it scatters as H).
    charges : ndarray, shape (n_atoms,), int
        Oxidation states from the CIF, 0 where not given.
    frac : ndarray, shape (n_atoms, 3)
        Fractional coordinates in [0, 1).
    occupancy : ndarray, shape (n_atoms,)
        Site occupancy (chemical convention), 0–1.
    b_iso : ndarray, shape (n_atoms,)
        Isotropic displacement parameter B = 8π²U in Å² (U_eq for anisotropic sites).
    z : float or None
        Formula units per cell (``_cell_formula_units_Z``).
    database_code, journal, doi, citation, licence, block_name, file_name : str or None
        Provenance. ``licence`` is the licence statement of the file header, None if absent.
    text : str
        The CIF text.
    warnings : tuple of str
        What the reader assumed (missing displacement parameters, encoding…).
    """

    name: str
    formula: str | None
    mineral_name: str | None
    cell: tuple[float, float, float, float, float, float]
    space_group: str
    sg_number: int | None
    rotations: np.ndarray
    translations: np.ndarray
    labels: tuple[str, ...]
    elements: tuple[str, ...]
    charges: np.ndarray
    frac: np.ndarray
    occupancy: np.ndarray
    b_iso: np.ndarray
    z: float | None = None
    database_code: str | None = None
    journal: str | None = None
    doi: str | None = None
    citation: str | None = None
    licence: str | None = None
    block_name: str | None = None
    file_name: str | None = None
    text: str = ""
    warnings: tuple[str, ...] = ()

    @property
    def n_atoms(self) -> int:
        return int(self.frac.shape[0])

    @property
    def direct_metric(self) -> np.ndarray:
        """Metric tensor G (3, 3), Gij = ai·aj in Å²."""
        return direct_metric(self.cell)

    @property
    def reciprocal_metric(self) -> np.ndarray:
        """Reciprocal metric tensor G* = G⁻¹ (3, 3) in Å⁻²; 1/d² = h·G*·hᵀ."""
        return reciprocal_metric(self.cell)

    @property
    def volume(self) -> float:
        """Cell volume in Å³, √det G."""
        return float(np.sqrt(np.linalg.det(self.direct_metric)))

    @property
    def cell_mass(self) -> float:
        """Σ occupancy × atomic mass over the unit cell, g/mol."""
        names, index = np.unique(np.array(self.elements), return_inverse=True)
        masses = np.array([scattering.atomic_mass(str(e)) for e in names])  # one per element
        return float(np.sum(self.occupancy * masses[index.ravel()]))

    @property
    def density(self) -> float:
        """Calculated density in g/cm³: cell mass / (N_A · V)."""
        return self.cell_mass * 1.66053906660 / self.volume


def direct_metric(cell: tuple[float, ...]) -> np.ndarray:
    """Metric tensor G of a cell (a, b, c in Å; α, β, γ in degrees). ITC Vol. B §1.1.2."""
    a, b, c = cell[:3]
    ca, cb, cg = np.cos(np.radians(cell[3:]))
    return np.array(
        [[a * a, a * b * cg, a * c * cb], [a * b * cg, b * b, b * c * ca], [a * c * cb, b * c * ca, c * c]]
    )


def reciprocal_metric(cell: tuple[float, ...]) -> np.ndarray:
    """Reciprocal metric tensor G* = G⁻¹ of a cell, in Å⁻², written out (ITC Vol. B §1.1.3).

    G*11 = b²c² sin²α / V², G*12 = abc² (cosα cosβ − cosγ) / V² (and cyclically), with
    V² = a²b²c² (1 − cos²α − cos²β − cos²γ + 2 cosα cosβ cosγ). The differences of cosines
    cancel for cells with small angles; they are taken in product form with σ = (α + β + γ)/2,
    1 − cos²α − … = 4 sinσ sin(σ−α) sin(σ−β) sin(σ−γ) and
    cosα cosβ − cosγ = sin(σ−α) sin(σ−β) − sinσ sin(σ−γ) (sum-to-product identities).
    """
    a, b, c = cell[:3]
    al, be, ga = (math.radians(x) for x in cell[3:])
    sigma = (al + be + ga) / 2.0
    s0, sa, sb, sg = math.sin(sigma), math.sin(sigma - al), math.sin(sigma - be), math.sin(sigma - ga)
    v2 = (a * b * c) ** 2 * 4.0 * s0 * sa * sb * sg
    g12 = a * b * c * c * (sa * sb - s0 * sg) / v2
    g13 = a * b * b * c * (sa * sg - s0 * sb) / v2
    g23 = a * a * b * c * (sb * sg - s0 * sa) / v2
    return np.array(
        [
            [(b * c * math.sin(al)) ** 2 / v2, g12, g13],
            [g12, (a * c * math.sin(be)) ** 2 / v2, g23],
            [g13, g23, (a * b * math.sin(ga)) ** 2 / v2],
        ]
    )


def cell_matrix(cell: tuple[float, ...]) -> np.ndarray:
    """Rows a, b, c as Cartesian vectors (Å) with a along x and b in the xy plane."""
    return np.linalg.cholesky(direct_metric(cell))


def read_crystal(path_or_text: str | Path, *, name_hint: str | None = None) -> Crystal:
    """Read a crystal structure from a CIF file or CIF text.

    Parameters
    ----------
    path_or_text : str or Path
        A path, or CIF text (a ``str`` containing a line break).
    name_hint : str, optional
        Data block to use when the file holds several structures; also the name used when
        the CIF names no compound.

    Returns
    -------
    Crystal

    Raises
    ------
    InputError
        Missing, empty, binary or non-CIF file; no atom coordinates; unknown element; a cell
        with non-positive or absurd lengths, angles that close no cell, or a volume that
        disagrees with ``_cell_volume`` by more than :data:`VOLUME_TOLERANCE`; unknown space
        group; occupancies outside 0–1.

    Notes
    -----
    Symmetry comes from the listed operations (any setting), else the Hall symbol, else the
    Hermann–Mauguin symbol (Wojdyr 2022, gemmi). Each site is expanded by all operations and
    images closer than :data:`refdb.structure._symmetry.SPECIAL_POSITION_TOLERANCE` are
    merged. Anisotropic U become U_eq = ⅓ Σij Uij ai* aj* ai·aj (Fischer & Tillmanns 1988,
    Acta Cryst. C44, 775).
    """
    source = _cif.load_text(path_or_text)
    block = _cif.parse_block(source, name_hint)
    label = source.file_name or f"data_{block.name}"
    warnings = list(source.warnings)
    try:
        small = gemmi.make_small_structure_from_block(block)
    except (RuntimeError, ValueError) as exc:
        raise InputError(f"{label}: {' '.join(str(exc).split())}") from None

    cell = _read_cell(block, label)
    ops = _symmetry.ops_from_block(block, label, cell)
    if _symmetry.metric_mismatch(ops.rotations, direct_metric(cell)) > METRIC_TOLERANCE:
        raise InputError(
            f"{label}: the cell {cell} does not have the symmetry of {ops.name}",
            "check the cell parameters and the space-group setting",
        )
    dummies = _dummy_labels(block)
    sites = [s for s in small.sites if s.label not in dummies]
    if not sites:
        raise InputError(f"{label} has no atom sites with coordinates")
    site_labels = [s.label for s in sites]
    elements = [_element_of(s, label) for s in sites]
    charges = _charges(block, sites)
    frac = np.array([[s.fract.x, s.fract.y, s.fract.z] for s in sites], dtype=float)
    if not np.all(np.isfinite(frac)):
        bad = site_labels[int(np.nonzero(~np.all(np.isfinite(frac), axis=1))[0][0])]
        raise InputError(f"{label}: site {bad} has missing coordinates")
    occ = np.array([s.occ for s in sites], dtype=float)
    if np.any(~np.isfinite(occ)) or np.any(occ < 0) or np.any(occ > 1.0 + 1e-3):
        bad = site_labels[int(np.argmax(~np.isfinite(occ) | (occ < 0) | (occ > 1.0 + 1e-3)))]
        raise InputError(f"{label}: site {bad} has occupancy outside 0–1")
    b_iso, b_warning = _displacements(sites, cell)
    if b_warning:
        warnings.append(f"{label}: {b_warning}")

    positions, site_index, crowding = _symmetry.expand_sites(frac, ops, cell_matrix(cell))
    keep = occ[site_index] > 0
    positions, site_index, crowding = positions[keep], site_index[keep], crowding[keep]
    atom_occ = np.minimum(occ[site_index], 1.0)
    # A site whose images crowd closer than a bond can hold at most one atom among them: a
    # split position given without its fractional occupancy.
    crowded = atom_occ * crowding > 1.0 + 1e-3
    if np.any(crowded):
        atom_occ = np.where(crowded, 1.0 / crowding, atom_occ)
        names = sorted({site_labels[i] for i in site_index[crowded]})
        warnings.append(
            f"{label}: symmetry images of {', '.join(names)} lie closer than "
            f"{_symmetry.CROWDING_DISTANCE} Å (a split position); their occupancy is shared"
        )
    if positions.shape[0] == 0:
        raise InputError(f"{label}: every site has zero occupancy")

    formula = _cif.value(block, "_chemical_formula_sum")
    mineral = _cif.value(block, "_chemical_name_mineral")
    name = (
        mineral
        or _cif.value(block, "_chemical_name_common", "_chemical_name_systematic")
        or name_hint
        or formula
        or block.name
    )
    z = _cif.number(block, "_cell_formula_units_Z", label)
    return Crystal(
        name=name,
        formula=formula,
        mineral_name=mineral,
        cell=cell,
        space_group=ops.name,
        sg_number=ops.number,
        rotations=ops.rotations,
        translations=ops.translations,
        labels=tuple(site_labels[i] for i in site_index),
        elements=tuple(elements[i] for i in site_index),
        charges=charges[site_index],
        frac=positions,
        occupancy=atom_occ,
        b_iso=b_iso[site_index],
        z=z if z and z > 0 else None,
        database_code=_cif.value(block, "_cod_database_code"),
        journal=_cif.value(block, "_journal_name_full", "_journal_name_abbrev"),
        doi=_cif.value(block, "_journal_paper_doi"),
        citation=_cif.citation(block),
        licence=_cif.licence_statement(source.text),
        block_name=block.name,
        file_name=source.file_name,
        text=source.text,
        warnings=tuple(warnings),
    )


def _read_cell(block: gemmi.cif.Block, label: str) -> tuple[float, float, float, float, float, float]:
    tags = ("_cell_length_a", "_cell_length_b", "_cell_length_c", "_cell_angle_alpha", "_cell_angle_beta", "_cell_angle_gamma")
    vals = [_cif.number(block, t, label) for t in tags]
    missing = [t for t, v in zip(tags, vals, strict=True) if v is None and "length" in t]
    if missing:
        raise InputError(f"{label}: no unit cell ({', '.join(missing)} missing)")
    a, b, c = vals[:3]
    alpha, beta, gamma = (90.0 if v is None else v for v in vals[3:])  # CIF default: 90°
    if min(a, b, c) <= 0 or max(a, b, c) > MAX_CELL_EDGE:
        raise InputError(f"{label}: cell lengths {a}, {b}, {c} Å are not physical", "lengths are in Å")
    if min(a, b, c) < MIN_CELL_EDGE:
        raise InputError(
            f"{label}: cell length {min(a, b, c)} Å is shorter than any crystal's", "lengths are in Å, not nm"
        )
    angles = np.radians([alpha, beta, gamma])
    if np.any(angles <= 0) or np.any(angles >= np.pi):
        raise InputError(f"{label}: cell angles {alpha}, {beta}, {gamma}° are outside 0–180°")
    ca, cb, cg = np.cos(angles)
    factor = 1 - ca * ca - cb * cb - cg * cg + 2 * ca * cb * cg
    if factor <= 1e-6:
        raise InputError(f"{label}: cell angles {alpha}, {beta}, {gamma}° do not close a cell")
    cell = (float(a), float(b), float(c), float(alpha), float(beta), float(gamma))
    given = _cif.number(block, "_cell_volume", label)
    volume = a * b * c * np.sqrt(factor)
    if given is not None and abs(given - volume) > VOLUME_TOLERANCE * volume:
        raise InputError(
            f"{label}: _cell_volume {given} Å³ disagrees with {volume:.2f} Å³ from the cell parameters",
            "one of the cell parameters is probably mistyped",
        )
    return cell


def _dummy_labels(block: gemmi.cif.Block) -> set[str]:
    """Labels of sites flagged as dummy atoms (``_atom_site_calc_flag dum``): not real atoms."""
    labels = list(block.find_values("_atom_site_label"))
    flags = list(block.find_values("_atom_site_calc_flag"))
    if not flags or len(flags) != len(labels):
        return set()
    return {gemmi.cif.as_string(lab) for lab, f in zip(labels, flags, strict=True) if gemmi.cif.as_string(f).lower() == "dum"}


def _element_of(site: gemmi.SmallStructure.Site, label: str) -> str:
    symbol = site.element.name
    if symbol in ("X", "") or not scattering.known_element(symbol):
        raise InputError(
            f"{label}: site {site.label} has unknown element {site.type_symbol or site.label!r}",
            "give _atom_site_type_symbol as an element symbol such as Fe or Fe3+",
        )
    return symbol


_CHARGE_SUFFIX = re.compile(r"^([A-Za-z]{1,2})(\d*)([+-])$")


def _charges(block: gemmi.cif.Block, sites: list) -> np.ndarray:
    """Oxidation states: the charge in the site's type symbol, else _atom_type_oxidation_number."""
    table: dict[str, int] = {}
    symbols = _cif.values(block, "_atom_type_symbol")
    numbers = list(block.find_values("_atom_type_oxidation_number"))
    if symbols and len(numbers) == len(symbols):
        for sym, raw in zip(symbols, numbers, strict=True):
            try:
                table[sym] = int(round(float(re.sub(r"\(\d+\)$", "", gemmi.cif.as_string(raw)))))
            except ValueError:
                continue
    out = np.zeros(len(sites), dtype=np.int64)
    for i, s in enumerate(sites):  # per asymmetric-unit site, a few dozen string look-ups
        if s.charge:
            out[i] = int(s.charge)
            continue
        m = _CHARGE_SUFFIX.match(s.type_symbol or "")
        if m and m.group(1).capitalize() == s.element.name:
            out[i] = int(m.group(2) or 1) * (1 if m.group(3) == "+" else -1)
        else:
            out[i] = table.get(s.type_symbol, 0)
    return out


def _displacements(sites: list, cell: tuple[float, ...]) -> tuple[np.ndarray, str | None]:
    """B (Å²) per site: from U_iso/B_iso, else U_eq of the anisotropic U; 0 where none."""
    g = direct_metric(cell)
    gstar = np.linalg.inv(g)
    astar = np.sqrt(np.diag(gstar))
    u_iso = np.array([s.u_iso for s in sites], dtype=float)
    u_aniso = np.array(
        [[[s.aniso.u11, s.aniso.u12, s.aniso.u13], [s.aniso.u12, s.aniso.u22, s.aniso.u23],
          [s.aniso.u13, s.aniso.u23, s.aniso.u33]] for s in sites],
        dtype=float,
    )
    # U_eq = 1/3 Σij Uij ai* aj* (ai·aj), with Uij referred to the reciprocal-scaled axes.
    u_eq = np.einsum("nij,i,j,ij->n", u_aniso, astar, astar, g) / 3.0
    u = np.where((u_iso == 0) & (u_eq > 0), u_eq, u_iso)
    u = np.where(np.isfinite(u), u, 0.0)
    warning = None
    if np.any(u <= 0):
        n = int(np.sum(u <= 0))
        warning = f"{n} of {len(sites)} sites have no displacement parameter; B = 0 Å² used for them"
    return np.clip(u, 0.0, None) * _B_FROM_U, warning
