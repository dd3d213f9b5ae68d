"""Reference intensity ratios I/Ic against corundum, computed from structures.

In a flat, infinitely thick powder sample the integrated intensity of line j of phase p is

    I_pj = K · (w_p / (ρ_p · μ*_mix)) · (1 / V_p²) · m_j |F_j|² LP(2θ_j),

(Klug & Alexander 1974, X-ray Diffraction Procedures, 2nd ed., ch. 7; from memory), so the
intensity per unit mass fraction is m|F|²LP / (ρ V²). With ρ V = M_cell / N_A (M_cell: mass of
the cell contents in g/mol) this is ∝ m|F|²LP / (M_cell · V). In a 50:50 mixture by weight
with corundum everything else cancels:

    I/Ic = [max_j m|F|²LP / (M V)]_phase / [m|F|²LP(113) / (M V)]_corundum,

the definition of de Wolff & Visser (1964) and Chung (1974), J. Appl. Cryst. 7, 519, with the
strongest line of the phase and corundum 113, both for Cu Kα1. Lines at the same d-spacing
(e.g. cubic 333 and 511) are one observed peak and are added. The same relation gives the
Rietveld weight fractions of Hill & Howard (1987), J. Appl. Cryst. 20, 467: w_p ∝ S_p (Z M V)_p.

Microabsorption and extinction are ignored; computed I/Ic therefore differ from measured ones
by several per cent (more for strongly absorbing or coarse phases).
"""

from __future__ import annotations

import functools

import numpy as np

from refdb.errors import InputError
from refdb.geometry import lorentz_polarisation
from refdb.radiation import ANODES, two_theta_from_d
from refdb.records import ReferenceData

#: Cu Kα1 (Å), the wavelength I/Ic is defined for (ITC Vol. C 2006, Table 4.2.2.6).
CU_KALPHA1 = ANODES["Cu"][0]

#: α-Al2O3 written for refdb from published facts. Cell: NIST SRM 674 as given in ITC Vol. C
#: (2006) Table 5.2.11.1, a = 4.75893(10), c = 12.9917(7) Å. Atom positions: Kirfel & Eichhorn
#: (1990), Acta Cryst. A46, 271–284, doi:10.1107/S0108767389012596 (Al 0 0 z, z = 0.35216;
#: O x 0 ¼, x = 0.30624). The B values are approximate room-temperature values from memory
#: (B ≈ 0.2 Å² for both atoms); they change I(113) by less than 2 %.
CORUNDUM_CIF = """\
# alpha-Al2O3 (corundum) written for refdb from published crystallographic facts.
# Cell: NIST SRM 674, ITC Vol. C (2006) Table 5.2.11.1.
# Atom positions: Kirfel & Eichhorn (1990) Acta Cryst. A46, 271-284.
# Displacement parameters: approximate values from memory, not from the paper.
data_corundum_refdb
_chemical_name_mineral           Corundum
_chemical_name_systematic        'aluminium oxide'
_chemical_formula_sum            'Al2 O3'
loop_
_publ_author_name
'Kirfel, A.'
'Eichhorn, K.'
_publ_section_title
'Accurate structure analysis with synchrotron radiation. The electron density in Al2O3 and Cu2O'
_journal_name_full               'Acta Crystallographica Section A'
_journal_volume                  46
_journal_year                    1990
_journal_page_first              271
_journal_page_last               284
_journal_paper_doi               10.1107/S0108767389012596
_space_group_name_H-M_alt        'R -3 c :H'
_space_group_name_Hall           '-R 3 2"c'
_space_group_IT_number           167
_cell_length_a                   4.75893
_cell_length_b                   4.75893
_cell_length_c                   12.9917
_cell_angle_alpha                90
_cell_angle_beta                 90
_cell_angle_gamma                120
_cell_formula_units_Z            6
loop_
_atom_site_label
_atom_site_type_symbol
_atom_site_fract_x
_atom_site_fract_y
_atom_site_fract_z
_atom_site_occupancy
_atom_site_B_iso_or_equiv
Al1 Al3+ 0 0 0.35216 1 0.19
O1 O2- 0.30624 0 0.25 1 0.22
"""

#: Lines whose d-spacings agree to this many decimals (Å) count as one observed peak.
_COINCIDENT_DECIMALS = 6


def mass_normalised_strengths(reference: ReferenceData, wavelength: float = CU_KALPHA1) -> tuple[np.ndarray, np.ndarray]:
    """Integrated intensity per unit mass fraction of each line, m|F|²LP / (M_cell · V).

    Parameters
    ----------
    reference : ReferenceData
        A computed entry (``lines.f2``, ``cell_mass`` and ``volume`` set).
    wavelength : float
        Å; no monochromator.

    Returns
    -------
    d : ndarray, shape (n,)
        d-spacings of the lines that exist for this wavelength.
    strength : ndarray, shape (n,)
        In electrons² · mol / (g · Å³).

    Raises
    ------
    InputError
        Not a computed entry, or cell mass / volume missing.
    """
    lines = reference.lines
    if lines.f2 is None or not reference.cell_mass or not reference.volume:
        raise InputError(
            f"{reference.name}: I/Ic can only be computed from a structure",
            "a measured entry carries the RIR it was measured with",
        )
    tt = two_theta_from_d(lines.d, wavelength)
    ok = np.isfinite(tt)
    mult = lines.multiplicity if lines.multiplicity is not None else np.ones(len(lines))
    strength = (mult * lines.f2)[ok] * lorentz_polarisation(tt[ok])
    return lines.d[ok], strength / (reference.cell_mass * reference.volume)


def _strongest_peak(d: np.ndarray, strength: np.ndarray) -> float:
    if d.size == 0:
        return 0.0
    _, group = np.unique(np.round(d, _COINCIDENT_DECIMALS), return_inverse=True)
    return float(np.bincount(group.ravel(), weights=strength).max())


@functools.lru_cache(maxsize=8)
def corundum_113_strength(wavelength: float = CU_KALPHA1) -> float:
    """m|F|²LP/(M V) of corundum 113 for a wavelength (see :func:`mass_normalised_strengths`)."""
    ref = corundum_reference()
    d, strength = mass_normalised_strengths(ref, wavelength)
    hkl = ref.lines.hkl[np.isfinite(two_theta_from_d(ref.lines.d, wavelength))]
    row = np.nonzero(np.all(hkl == (1, 1, 3), axis=1))[0]
    return float(strength[row[0]])


@functools.lru_cache(maxsize=1)
def corundum_reference() -> ReferenceData:
    """The corundum (α-Al2O3) reference built from :data:`CORUNDUM_CIF`, with I/Ic = 1."""
    from refdb.structure.reference import reference_from_crystal
    from refdb.structure.crystal import read_crystal

    crystal = read_crystal(CORUNDUM_CIF)
    return reference_from_crystal(crystal, rir=1.0)


def compute_rir(reference: ReferenceData, *, wavelength: float = CU_KALPHA1) -> float:
    """I/Ic of a computed reference: its strongest peak over corundum 113, 50:50 by weight.

    Parameters
    ----------
    reference : ReferenceData
        Computed entry with ``f2``, ``multiplicity``, ``cell_mass`` and ``volume``.
    wavelength : float
        Å; I/Ic is defined for Cu Kα1 (default) without a monochromator.

    Returns
    -------
    float
        Corundum gives 1 (to rounding). Published measured values: ZnO 5.17(13), rutile
        3.39(12) (NIST SRM 674, ITC Vol. C Table 5.2.11.1).

    Raises
    ------
    InputError
        Measured entry or missing cell mass/volume.
    """
    d, strength = mass_normalised_strengths(reference, wavelength)
    if not d.size:
        raise InputError(f"{reference.name}: no line is reachable with λ = {wavelength} Å")
    return _strongest_peak(d, strength) / corundum_113_strength(wavelength)


def validate_rir(value: float | None, name: str) -> float:
    """A usable I/Ic (positive, finite), or InputError naming the reference."""
    if value is None or not np.isfinite(value) or value <= 0:
        raise InputError(f"{name} has no reference intensity ratio", "weight fractions need I/Ic for every phase")
    return float(value)
