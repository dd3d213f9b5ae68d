"""Reading crystal structures: symmetry expansion, displacement parameters, metadata."""

from __future__ import annotations

import csv

import numpy as np
import pytest

from refdb.structure import read_crystal
from refdb.structure.crystal import cell_matrix
from tests.structure._cifs import cubic, make_cif


def test_cell_contents_match_the_manifest_counts(shared_structures):
    """MANIFEST.tsv lists atoms_in_cell for every shared file, counted by whoever compiled the
    set (an outside count). All but a few agree; the known exceptions are files with dummy
    atoms (flagged 'dum', which refdb drops), sites of zero occupancy (dropped), and split
    positions; they are listed here so that any new difference fails."""
    known = {"1010246", "1011152", "1100015", "2101439", "8100503"}
    with open(shared_structures / "MANIFEST.tsv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t"))
    unreadable = {"1526655", "5910153"}  # _cell_volume contradicts the cell (see test_reference)
    different = []
    for row in rows:
        if row["cod_id"] in unreadable:
            continue
        crystal = read_crystal(shared_structures / f"{row['cod_id']}.cif")
        if crystal.n_atoms != int(row["atoms_in_cell"]):
            different.append(row["cod_id"])
    assert set(different) == known
    assert len(rows) - len(known) - len(unreadable) >= 400


def test_split_hydrogen_without_occupancy_is_shared(shared_structures):
    """Brucite Mg(OH)2, COD 2101439: H sits on a 6i split position with no occupancy given;
    three images crowd round each 3-fold axis, so each carries ⅓ and the cell holds 2 H
    (formula H2 Mg O2, Z = 1, from the file)."""
    crystal = read_crystal(shared_structures / "2101439.cif")
    h = np.array([e == "H" for e in crystal.elements])
    assert crystal.occupancy[h].sum() == pytest.approx(2.0, abs=1e-9)
    assert any("split position" in w for w in crystal.warnings)


def test_corundum_rhombohedral_file_metadata(shared_structures):
    """COD 1010914 (Pauling & Hendricks 1925), in the rhombohedral setting of R-3c."""
    c = read_crystal(shared_structures / "1010914.cif")
    assert c.name == "Corundum" and c.mineral_name == "Corundum"
    assert c.formula == "Al2 O3" and c.z == 2
    assert c.space_group.startswith("R -3 c") and c.sg_number == 167
    assert c.n_atoms == 10  # 4 Al + 6 O in the rhombohedral cell
    assert c.doi == "10.1021/ja01680a027" and c.database_code == "1010914"
    assert c.citation.startswith("Pauling, L; Hendricks, S B (1925). Crystal Structures of Hematite and Corundum.")
    assert "781–790" in c.citation
    assert "public domain" in c.licence
    assert set(zip(c.elements, c.charges.tolist())) == {("Al", 3), ("O", -2)}  # Al3+ / O2- type symbols


def test_amcsd_licence_statement_is_kept(shared_structures):
    """COD files from the AMCSD carry the 'proper attribution' terms (LICENSE.md of the set)."""
    c = read_crystal(shared_structures / "9008877.cif")
    assert "American Mineralogist Crystal Structure Database" in c.licence
    assert "proper attribution" in c.licence


def test_oxidation_states_from_type_symbols_and_atom_type_table():
    text = cubic(5.64, "F m -3 m", [("Na1", "Na1+", 0, 0, 0), ("Cl1", "Cl", 0.5, 0.5, 0.5)])
    text = text.replace("loop_\n_atom_site_label", "loop_\n_atom_type_symbol\n_atom_type_oxidation_number\nCl -1\nloop_\n_atom_site_label")
    c = read_crystal(text)
    assert set(zip(c.elements, c.charges.tolist())) == {("Na", 1), ("Cl", -1)}


def test_isotropic_b_and_u_agree():
    """B = 8π²U (ITC Vol. C §8.3; Trueblood et al. 1996)."""
    with_b = read_crystal(cubic(4.0, "P m -3 m", [("Cs1", "Cs", 0, 0, 0, 1, 1.0)]))
    with_u = read_crystal(cubic(4.0, "P m -3 m", [("Cs1", "Cs", 0, 0, 0, 1, 1.0)]).replace("_B_iso_or_equiv", "_U_iso_or_equiv"))
    assert with_b.b_iso[0] == pytest.approx(1.0, rel=1e-9)
    assert with_u.b_iso[0] == pytest.approx(8 * np.pi**2, rel=1e-9)


def test_anisotropic_u_becomes_u_equivalent():
    """U_eq = ⅓ trace of the Cartesian tensor U_C = M·U*·Mᵀ with U*_ij = U_ij a*_i a*_j and M the
    matrix of direct cell vectors (Fischer & Tillmanns 1988, Acta Cryst. C44, 775): computed
    here in Cartesian form, independently of refdb's metric-tensor formula."""
    cell = (5.0, 6.0, 7.0, 90.0, 105.0, 90.0)
    u11, u22, u33, u12, u13, u23 = 0.012, 0.018, 0.009, 0.0, 0.003, 0.0
    text = make_cif(cell, [("Fe1", "Fe", 0.1, 0.2, 0.3)], space_group="P 1")
    text = text.replace(" 1.0 0.0\n", " 1.0 ?\n")
    text += (
        "loop_\n_atom_site_aniso_label\n_atom_site_aniso_U_11\n_atom_site_aniso_U_22\n_atom_site_aniso_U_33\n"
        f"_atom_site_aniso_U_12\n_atom_site_aniso_U_13\n_atom_site_aniso_U_23\nFe1 {u11} {u22} {u33} {u12} {u13} {u23}\n"
    )
    crystal = read_crystal(text)
    m = cell_matrix(cell).T  # columns are a, b, c
    recip = np.linalg.inv(m).T  # columns are a*, b*, c*
    n = np.diag(np.linalg.norm(recip, axis=0))
    u = np.array([[u11, u12, u13], [u12, u22, u23], [u13, u23, u33]])
    u_cart = m @ n @ u @ n @ m.T
    assert crystal.b_iso[0] == pytest.approx(8 * np.pi**2 * np.trace(u_cart) / 3, rel=1e-9)


def test_special_positions_are_not_duplicated():
    """Perovskite-like cubic cell: Ca at 1a, Ti at 1b, O at 3c → 5 atoms (ITA Vol. A, Pm-3m)."""
    c = read_crystal(cubic(3.9, "P m -3 m", [("Ti1", "Ti", 0, 0, 0), ("Ca1", "Ca", 0.5, 0.5, 0.5), ("O1", "O", 0.5, 0, 0)]))
    assert sorted(c.elements) == ["Ca", "O", "O", "O", "Ti"]
    assert np.all((c.frac >= 0) & (c.frac < 1))


def test_text_and_path_give_the_same_crystal(tmp_path):
    text = cubic(4.11, "P m -3 m", [("Cs1", "Cs", 0, 0, 0), ("Cl1", "Cl", 0.5, 0.5, 0.5)])
    (tmp_path / "cscl.cif").write_text(text, encoding="utf-8")
    a, b = read_crystal(text), read_crystal(tmp_path / "cscl.cif")
    assert a.cell == b.cell and a.elements == b.elements and b.file_name == "cscl.cif" and a.file_name is None
    np.testing.assert_array_equal(a.frac, b.frac)


def test_deuterium_scatters_as_hydrogen_but_weighs_as_deuterium():
    h = read_crystal(cubic(4.0, "P m -3 m", [("H1", "H", 0, 0, 0)]))
    d = read_crystal(cubic(4.0, "P m -3 m", [("D1", "D", 0, 0, 0)]))
    assert d.cell_mass == pytest.approx(2.014, abs=1e-3) and h.cell_mass == pytest.approx(1.008, abs=1e-3)


def test_density_of_silicon():
    """Si, a = 5.431144 Å (SRM 640f), 8 atoms × 28.0855 g/mol: ρ = 2.3290 g/cm³ (computed here
    from those inputs and N_A = 6.02214076e23; 1e-4 relative covers the atomic-mass rounding)."""
    c = read_crystal(cubic(5.431144, "F d -3 m:1", [("Si1", "Si", 0, 0, 0)]))
    expected = 8 * 28.0855 / (6.02214076e23 * (5.431144e-8) ** 3)
    assert c.density == pytest.approx(expected, rel=1e-4)


@pytest.mark.parametrize("placeholder", ["?", "' ?'", "'.'", "'  '"])
def test_an_unknown_name_falls_back_to_the_formula(placeholder):
    """The CIF 1.1 syntax (IUCr) gives an unquoted '?' for an unknown value and '.' for an
    inapplicable one (from memory); quoted and padded forms of them, as some database files
    hold, and a blank string are no name either."""
    text = cubic(4.11, "P m -3 m", [("Cs1", "Cs", 0, 0, 0), ("Cl1", "Cl", 0.5, 0.5, 0.5)],
                 formula="Cl Cs", extra=f"_chemical_name_systematic {placeholder}")
    assert read_crystal(text).name == "Cl Cs"
