"""Reference entries from CIFs: fields, formulas, and reference intensity ratios (I/Ic)."""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from refdb.errors import InputError
from refdb.radiation import radiation_for
from refdb.structure import compute_rir, corundum_reference, read_crystal, reference_from_cif, stick_pattern
from refdb.structure.formula import hill_formula, parse_formula
from refdb.structure.reference import reference_from_crystal
from refdb.structure.rir import CORUNDUM_CIF
from tests.structure._cifs import make_cif

CU_KA1 = radiation_for(wavelength=1.54059292)  # ITC Vol. C (2006) Table 4.2.2.6


def _relative(ref, hkls, two_theta_range=(10.0, 90.0)):
    sticks = stick_pattern(ref, CU_KA1, two_theta_range=two_theta_range)
    table = {tuple(int(v) for v in h): i for h, i in zip(sticks.hkl, sticks.intensity)}
    return [table[h] for h in hkls]


# ------------------------------------------------------------------ fields and formulas

def test_reference_fields_from_a_cod_file(shared_structures):
    ref = reference_from_cif(shared_structures / "1010914.cif")
    assert ref.kind == "computed" and ref.source == "COD" and ref.source_id == "1010914"
    assert ref.formula == "Al2 O3" and ref.formula_reduced == "Al2O3" and ref.elements == ("Al", "O")
    assert ref.file_name == "1010914.cif" and ref.structure_text.startswith("#---")
    assert ref.doi == "10.1021/ja01680a027" and "public domain" in ref.licence
    # _exptl_crystal_density_diffrn 4.008 in the file: computed from the same cell, so the
    # file's rounding (3 decimals) is the tolerance.
    assert ref.density == pytest.approx(4.008, abs=1e-3)
    assert ref.cell_mass == pytest.approx(2 * 101.961, rel=1e-4)  # Z = 2 Al2O3 (IUPAC masses)
    assert np.all(np.diff(ref.lines.d) <= 1e-12)


def test_in_house_reference_without_database_code():
    text = make_cif((4.0, 4.0, 4.0, 90, 90, 90), [("Cs1", "Cs", 0, 0, 0), ("Cl1", "Cl", 0.5, 0.5, 0.5)], space_group="P m -3 m")
    ref = reference_from_crystal(read_crystal(text))
    assert ref.source == "in-house" and ref.source_id is None and ref.formula_reduced == "ClCs"
    assert ref.licence is None


@pytest.mark.parametrize(
    ("given_formula", "hill"),
    [
        # Hill (1900), J. Am. Chem. Soc. 22, 478: C, then H, then alphabetical; no C: alphabetical.
        ("Al2 O3", "Al2O3"), ("O2 Ti", "O2Ti"), ("Cl Na", "ClNa"), ("H2 O", "H2O"),
        ("C2 H6 O", "C2H6O"), ("O C H4", "CH4O"), ("C3 D3 O7 Sr", "C3H3O7Sr"), ("Ca0.5 Mg0.5 C O3", "CCa0.5Mg0.5O3"),
    ],
)
def test_hill_formula(given_formula, hill):
    assert hill_formula(parse_formula(given_formula)) == hill


@given(st.dictionaries(st.sampled_from(["C", "H", "O", "N", "Fe", "Si", "Al", "Na", "Cl"]), st.integers(1, 40), min_size=1))
def test_hill_formula_round_trips(counts):
    text = hill_formula({k: float(v) for k, v in counts.items()}, reduce=False)
    assert parse_formula(text) == {k: float(v) for k, v in counts.items()}


def test_bad_formula_is_an_input_error():
    with pytest.raises(InputError):
        parse_formula("Al2 Qx3")
    with pytest.raises(InputError):
        parse_formula("aluminium oxide")


# ------------------------------------------------------------------ I/Ic

def test_corundum_rir_is_one_by_definition():
    """I/Ic is defined against corundum 113 (de Wolff & Visser 1964; check-values §3)."""
    ref = corundum_reference()
    assert ref.rir == 1.0
    assert compute_rir(ref) == pytest.approx(1.0, abs=1e-12)


def test_corundum_line_order_and_srm674_intensities():
    """NIST SRM 674 via ITC Vol. C Table 5.2.11.1 (check-values §2): I(116) = 92.5(26) and
    I(104) = 87.4(19) relative to I(113) = 100; SRM 676a certifies the order 113 > 116 > 104.
    Computed spherical-atom intensities with approximate B (see rir.CORUNDUM_CIF) differ from
    measured ones by a few points: 5 points covers the certificate's uncertainties (2–3 points)
    plus the B values' effect (≤ 2 points)."""
    i113, i116, i104 = _relative(corundum_reference(), [(1, 1, 3), (1, 1, 6), (1, 0, 4)])
    assert i113 == pytest.approx(100.0)
    assert i113 > i116 > i104
    assert i116 == pytest.approx(92.5, abs=5.0)
    assert i104 == pytest.approx(87.4, abs=5.0)


def test_corundum_in_the_rhombohedral_setting_has_rir_one(shared_structures):
    """COD 1010914 is corundum in rhombohedral axes (Pauling & Hendricks 1925, older
    coordinates, no displacement parameters): I/Ic within 5 % of 1 (the coordinate and B
    differences change I(113) by a few per cent)."""
    assert reference_from_cif(shared_structures / "1010914.cif").rir == pytest.approx(1.0, rel=0.05)


def test_rutile_rir_and_intensities_against_srm674(shared_structures):
    """Rutile, COD 9009083. Published (measured) I/Ic = 3.39(12), I(211) = 56.9(28),
    I(101) = 44.0(17), strongest 110 (NIST SRM 674, ITC Vol. C Table 5.2.11.1). Computed
    values ignore microabsorption and extinction and this file has no B: 15 % on I/Ic and
    5 points on the relative intensities cover those effects (common practice, no source)."""
    ref = reference_from_cif(shared_structures / "9009083.cif")
    assert ref.rir == pytest.approx(3.39, rel=0.15)
    i110, i211, i101 = _relative(ref, [(1, 1, 0), (2, 1, 1), (1, 0, 1)])
    assert i110 == pytest.approx(100.0)
    assert i211 == pytest.approx(56.9, abs=5.0)
    assert i101 == pytest.approx(44.0, abs=5.0)


def test_zincite_rir_against_srm674():
    """ZnO built from the SRM 674 cell (a = 3.24981, c = 5.20653 Å; check-values §2) and
    u(O) = 0.3825 with B = 0.5 Å² (from memory; COD 9008877 has u = 0.345, an old value).
    Published I/Ic = 5.17(13), I(100) = 57.6(11), I(002) = 40.2(14) (ITC Vol. C Table
    5.2.11.1). The computed I/Ic comes out about 20 % higher than measured, beyond the 15 %
    used for rutile; we have not traced the cause (microabsorption of the more absorbing ZnO
    and extinction both lower measured values). This test pins the discrepancy at < 25 %,
    and the relative intensities within 7 points (the 100 line is ~6 points low)."""
    text = make_cif(
        (3.24981, 3.24981, 5.20653, 90, 90, 120),
        [("Zn1", "Zn", 1 / 3, 2 / 3, 0, 1, 0.5), ("O1", "O", 1 / 3, 2 / 3, 0.3825, 1, 0.5)],
        space_group="P 63 m c",
    )
    ref = reference_from_crystal(read_crystal(text))
    assert 5.17 <= ref.rir <= 5.17 * 1.25
    i101, i100, i002 = _relative(ref, [(1, 0, 1), (1, 0, 0), (0, 0, 2)])
    assert i101 == pytest.approx(100.0)
    assert i100 == pytest.approx(57.6, abs=7.0)
    assert i002 == pytest.approx(40.2, abs=7.0)


@pytest.mark.parametrize("cod_id", ["9008877", "9009083", "1010914"])
def test_rir_agrees_with_pymatgen_intensities(shared_structures, tmp_path, cod_id):
    """The same I/Ic computed from pymatgen's unscaled intensities (an independent calculator)
    with the per-unit-mass normalisation m|F|²LP/(M·V): neutral atoms and no B on both sides.
    The scattering-factor fits differ by ~0.1 %; 2 % covers it."""
    pytest.importorskip("pymatgen.analysis.diffraction.xrd")
    from pymatgen.analysis.diffraction.xrd import XRDCalculator
    from pymatgen.io.cif import CifParser

    calc = XRDCalculator(wavelength=1.54059292)

    def strongest_per_mass(path, hkl=None):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            s = CifParser(str(path)).parse_structures(primitive=False)[0]
            p = calc.get_pattern(s, scaled=False, two_theta_range=(5, 120))
        if hkl is None:
            top = max(p.y)
        else:
            top = next(y for y, fams in zip(p.y, p.hkls) if any(f["hkl"] == hkl for f in fams))
        return top / (s.composition.weight * s.volume)

    fair_corundum = CORUNDUM_CIF.replace("1 0.19\n", "1 0\n").replace("1 0.22\n", "1 0\n").replace("Al3+", "Al").replace("O2-", "O")
    (tmp_path / "cor.cif").write_text(fair_corundum, encoding="utf-8")
    expected = strongest_per_mass(shared_structures / f"{cod_id}.cif") / strongest_per_mass(tmp_path / "cor.cif", (2, -1, -1, 3))

    def neutral(path_or_text):
        c = read_crystal(path_or_text)
        return replace(c, charges=np.zeros_like(c.charges), b_iso=np.zeros_like(c.b_iso))

    ours = compute_rir(reference_from_crystal(neutral(shared_structures / f"{cod_id}.cif")))
    corundum_fair = compute_rir(reference_from_crystal(neutral(fair_corundum)))  # vs refdb's corundum with B
    assert ours / corundum_fair == pytest.approx(expected, rel=0.02)
