"""Reflections and structure factors checked against published values and exact rules.

Sources are named beside each check. Tolerances say why they are that size.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from refdb.radiation import ANODES, d_from_two_theta, radiation_for, two_theta_from_d
from refdb.structure import compute_reflections, read_crystal
from refdb.structure.scattering import f0, species_name
from tests.structure._cifs import cubic, make_cif

CU_KA1 = 1.54059292  # ITC Vol. C (2006) Table 4.2.2.6 (check-values.md §1)
SI_A = 5.431144  # NIST SRM 640f (check-values.md §2)


def _as_dict(lines) -> dict[tuple[int, int, int], tuple[float, int, float]]:
    return {tuple(int(v) for v in h): (d, m, f2) for h, d, m, f2 in zip(lines.hkl, lines.d, lines.multiplicity, lines.f2)}


def _silicon(setting: str = "F d -3 m:1", xyz=(0, 0, 0)) -> str:
    return cubic(SI_A, setting, [("Si1", "Si", *xyz, 1.0, 0.0)], name="silicon")


def test_silicon_positions_match_srm640f_derived_values():
    """check-values.md §7: d and 2θ computed from SRM 640f a and ITC Cu Kα1.

    The values are quoted to 6 decimals in d (rounding ±5e-7 Å) and 4 in 2θ (±5e-5°).
    """
    lines = _as_dict(compute_reflections(read_crystal(_silicon())))
    expected = {
        (1, 1, 1): (3.135672, 28.4412),
        (2, 2, 0): (1.920199, 47.3007),
        (3, 1, 1): (1.637552, 56.1199),
        (4, 0, 0): (1.357786, 69.1268),
        (3, 3, 1): (1.245990, 76.3726),
        (4, 2, 2): (1.108628, 88.0257),
    }
    for hkl, (d, tt) in expected.items():
        assert lines[hkl][0] == pytest.approx(d, abs=6e-7)
        assert float(two_theta_from_d(lines[hkl][0], CU_KA1)) == pytest.approx(tt, abs=6e-5)


def test_silicon_200_and_222_absent_in_spherical_atom_model():
    """Diamond structure: 200 is a lattice absence of the d-glide, 222 vanishes for spherical
    atoms (it is seen only through bonding charge; check-values.md task list, common practice)."""
    lines = _as_dict(compute_reflections(read_crystal(_silicon())))
    assert (2, 0, 0) not in lines and (2, 2, 2) not in lines
    assert (1, 1, 1) in lines and (4, 0, 0) in lines


def test_origin_choices_give_the_same_pattern():
    """Si at 0,0,0 in origin choice 1 and at ⅛,⅛,⅛ in origin choice 2 (ITA Vol. A, Fd-3m) is
    one structure; d and |F|² must agree to rounding (1e-9 relative)."""
    one = compute_reflections(read_crystal(_silicon("F d -3 m:1", (0, 0, 0))))
    two = compute_reflections(read_crystal(_silicon("F d -3 m:2", (0.125, 0.125, 0.125))))
    np.testing.assert_allclose(one.d, two.d, rtol=1e-12)
    np.testing.assert_allclose(one.f2, two.f2, rtol=1e-5)  # float32 phases, see reflections.py
    np.testing.assert_array_equal(one.multiplicity, two.multiplicity)


def _parity_all_same(h):
    return len({v % 2 for v in h}) == 1


@pytest.mark.parametrize(
    ("space_group", "atoms", "rule"),
    [
        # fcc: h, k, l all even or all odd (ITA Vol. A reflection conditions; common practice).
        ("F m -3 m", [("Cu1", "Cu", 0, 0, 0)], _parity_all_same),
        # bcc: h + k + l even.
        ("I m -3 m", [("W1", "W", 0, 0, 0)], lambda h: sum(h) % 2 == 0),
        # diamond: fcc, and h + k + l = 4n when all are even.
        ("F d -3 m:1", [("C1", "C", 0, 0, 0)], lambda h: _parity_all_same(h) and (h[0] % 2 == 1 or sum(h) % 4 == 0)),
    ],
)
def test_extinction_rules_come_out_of_the_structure_factor(space_group, atoms, rule):
    lines = compute_reflections(read_crystal(cubic(4.0, space_group, atoms)), d_min=0.5)
    present = {tuple(int(v) for v in h) for h in lines.hkl}
    # Every listed reflection obeys the rule, and every allowed reflection is listed.
    assert all(rule(h) for h in present)
    for h in range(0, 8):
        for k in range(0, h + 1):
            for l in range(0, k + 1):
                if (h, k, l) != (0, 0, 0) and 4.0 / np.sqrt(h * h + k * k + l * l) >= 0.5 and rule((h, k, l)):
                    assert (h, k, l) in present


def test_cubic_multiplicities_m3m():
    """Multiplicities of Laue class m-3m: 100 → 6, 110 → 12, 111 → 8, 210 → 24, 211 → 24,
    321 → 48 (ITA Vol. A, general and special forms; common practice)."""
    lines = _as_dict(compute_reflections(read_crystal(cubic(6.0, "P m -3 m", [("Cs1", "Cs", 0, 0, 0)]))))
    for hkl, m in {(1, 0, 0): 6, (1, 1, 0): 12, (1, 1, 1): 8, (2, 1, 0): 24, (2, 1, 1): 24, (3, 2, 1): 48}.items():
        assert lines[hkl][1] == m


def test_laue_class_m3_keeps_321_and_312_apart():
    """In Laue class m-3 (Pa-3, pyrite type) only cyclic permutations are equivalent, so 321 and
    312 (= 231) are two lines of the same d with different |F|², each of multiplicity 24
    (ITA Vol. A; common practice). Pyrite-like positions, x(S) = 0.385 (from memory)."""
    crystal = read_crystal(cubic(5.417, "P a -3", [("Fe1", "Fe", 0, 0, 0), ("S1", "S", 0.385, 0.385, 0.385)]))
    lines = _as_dict(compute_reflections(crystal))
    assert lines[(3, 2, 1)][1] == 24 and lines[(3, 1, 2)][1] == 24
    assert lines[(3, 2, 1)][0] == pytest.approx(lines[(3, 1, 2)][0], rel=1e-12)
    assert abs(lines[(3, 2, 1)][2] - lines[(3, 1, 2)][2]) > 1.0  # electrons², far above rounding
    assert (1, 2, 0) not in lines and (2, 0, 1) not in lines  # c-glide ⊥ b: h0l needs l even


def test_kcl_111_nearly_vanishes_but_nacl_111_is_weak():
    """K⁺ and Cl⁻ are isoelectronic (18 e), so F(111) = 4(f_K⁺ − f_Cl⁻) nearly vanishes; in NaCl
    F(111) = 4(f_Cl⁻ − f_Na⁺) is small but clear (common practice, no source). Cells: NaCl
    5.6401 Å (Walker et al. 2004, check-values §4), KCl 6.2931 Å (from memory; it does not
    enter the comparison of relative intensities)."""

    def rock_salt(a, cation, anion):
        text = cubic(a, "F m -3 m", [("M1", cation, 0, 0, 0), ("X1", anion, 0.5, 0.5, 0.5)])
        lines = _as_dict(compute_reflections(read_crystal(text)))
        return lines[(1, 1, 1)][2] / lines[(2, 0, 0)][2]

    nacl = rock_salt(5.6401, "Na1+", "Cl1-")
    kcl = rock_salt(6.2931, "K1+", "Cl1-")
    # |F111|²/|F200|²: K⁺ and Cl⁻ differ by ~0.6 e at s ≈ 0.14 Å⁻¹ against f ≈ 12 e each, so
    # the ratio is ~(0.6/24)² ≈ 6e-4…3e-3; for NaCl (8 e difference) it is ~(8/25)²/2 ≈ 0.05.
    assert kcl < 5e-3
    assert 0.02 < nacl < 0.1
    assert kcl < nacl / 10


@pytest.mark.parametrize(
    ("species", "s", "value"),
    [
        # check-values.md §5 (xraydb column): f0 at sinθ/λ = 0, 0.25, 0.5 Å⁻¹.
        ("O", 0.0, 7.9997), ("O", 0.25, 4.8081), ("O", 0.5, 2.3379),
        ("Si", 0.5, 6.2396), ("Cu", 0.5, 13.7116), ("Na", 0.25, 7.6235), ("Cl", 0.5, 7.3090),
        ("Na1+", 0.5, 4.2904), ("Cl1-", 0.5, 7.3100), ("O2-", 0.25, 4.8953), ("Ca2+", 0.0, 18.0017),
    ],
)
def test_f0_matches_waasmaier_kirfel_values(species, s, value):
    """Quoted to 4 decimals: agreement within 1e-4 e (the last quoted digit)."""
    assert float(f0(species, s)) == pytest.approx(value, abs=1e-4)


@pytest.mark.parametrize(("element", "s", "gemmi_value"), [("Si", 0.5, 6.2401), ("Cu", 0.5, 13.7007), ("Zn", 0.5, 14.5505)])
def test_f0_agrees_with_the_independent_it92_fit(element, s, gemmi_value):
    """gemmi's IT92 4-Gaussian fit (check-values §5) is an independent fit of the same ITC
    table: the two agree within 0.02 e (0.1 %) for these elements."""
    assert float(f0(element, s)) == pytest.approx(gemmi_value, abs=0.02)


def test_ions_fall_back_to_neutral_atoms_when_not_tabulated():
    assert species_name("Fe", 3) == "Fe3+"
    assert species_name("O", -2) == "O2-"
    assert species_name("Fe", 5) == "Fe"  # Waasmaier–Kirfel have no Fe5+
    assert species_name("D", 0) == "H"


def test_anomalous_terms_change_f2_of_a_copper_structure():
    """Cu Kα1 lies below the Cu K edge: f′ ≈ −2 e (Chantler tables via xraydb), so |F|² of Cu
    falls by about 2·2/f0 ≈ 15–25 % at low angle, and never rises."""
    crystal = read_crystal(cubic(3.6150, "F m -3 m", [("Cu1", "Cu", 0, 0, 0)]))
    plain = compute_reflections(crystal)
    anomalous = compute_reflections(crystal, anomalous_radiation=radiation_for("Cu"))
    ratio = anomalous.f2 / plain.f2
    assert np.all(ratio < 1.0)
    assert 0.75 < ratio[0] < 0.9


def test_anomalous_terms_beyond_the_tables_are_a_clear_error():
    """xraydb's Chantler tables end at uranium (Z = 92; from the xraydb data, tried here): a
    neptunium structure with anomalous terms is refused in one line, not with a traceback."""
    from refdb.errors import InputError

    crystal = read_crystal(cubic(3.52, "I m -3 m", [("Np1", "Np", 0, 0, 0)]))
    with pytest.raises(InputError, match="no anomalous scattering data for Np"):
        compute_reflections(crystal, anomalous_radiation=radiation_for("Cu"))
    assert compute_reflections(crystal).d.size > 0


def test_displacement_parameter_damps_high_angle_lines():
    """Debye–Waller factor exp(−2B s²) on |F|² for a one-atom structure (ITC Vol. C §6.1.3)."""
    cold = compute_reflections(read_crystal(cubic(4.0, "F m -3 m", [("Al1", "Al", 0, 0, 0, 1.0, 0.0)])))
    warm = compute_reflections(read_crystal(cubic(4.0, "F m -3 m", [("Al1", "Al", 0, 0, 0, 1.0, 1.0)])))
    s2 = 1.0 / (4.0 * cold.d**2)
    np.testing.assert_allclose(warm.f2 / cold.f2, np.exp(-2.0 * 1.0 * s2), rtol=1e-5)


# ---------------------------------------------------------------- properties (hypothesis)

@settings(max_examples=25, deadline=None)
@given(a=st.floats(2.5, 9.0), d_min=st.floats(0.6, 1.5))
def test_cubic_d_equals_a_over_root_h2k2l2(a, d_min):
    """Metric-tensor d-spacings equal the cubic formula d = a/√(h²+k²+l²) (ITC Vol. B §1.1)."""
    lines = compute_reflections(read_crystal(cubic(round(a, 4), "P m -3 m", [("Cs1", "Cs", 0, 0, 0)])), d_min=d_min)
    a = round(a, 4)
    expected = a / np.sqrt(np.sum(lines.hkl.astype(float) ** 2, axis=1))
    np.testing.assert_allclose(lines.d, expected, rtol=1e-12)
    assert np.all(np.diff(lines.d) <= 1e-12)  # lines of equal d may differ in the last bit


@settings(max_examples=20, deadline=None)
@given(
    a=st.floats(3.0, 8.0), b=st.floats(3.0, 8.0), c=st.floats(3.0, 8.0),
    beta=st.floats(95.0, 120.0), x=st.floats(0.0, 1.0), y=st.floats(0.0, 1.0), z=st.floats(0.0, 1.0),
)
def test_multiplicities_sum_to_the_number_of_hkl_in_the_sphere(a, b, c, beta, x, y, z):
    """Σ m over the lines = number of (h, k, l) ≠ 0 with d ≥ d_min, counted by brute force
    from the monoclinic 1/d² formula (ITC Vol. B Table 1.1.2.1 style; an independent route).
    A general position in P2/c has no absences, so nothing is dropped."""
    text = make_cif((a, b, c, 90, beta, 90), [("Fe1", "Fe", x, y, z)], space_group="P 1 2/c 1")
    crystal = read_crystal(text)
    d_min = 1.0
    lines = compute_reflections(crystal, d_min=d_min, relative_cutoff=0.0)
    sb, cb = np.sin(np.radians(beta)), np.cos(np.radians(beta))
    r = np.arange(-12, 13)
    h, k, l = np.meshgrid(r, r, r, indexing="ij")
    inv_d2 = (h**2 / a**2 + k**2 * sb**2 / b**2 + l**2 / c**2 - 2 * h * l * cb / (a * c)) / sb**2
    count = int(np.sum((inv_d2 > 0) & (inv_d2 <= 1.0 / d_min**2 * (1 + 1e-12))))
    assert int(lines.multiplicity.sum()) == count


@settings(max_examples=50, deadline=None)
@given(d=st.floats(0.8, 20.0), anode=st.sampled_from(sorted(ANODES)))
def test_two_theta_and_d_round_trip(d, anode):
    lam = ANODES[anode][0]
    tt = two_theta_from_d(d, lam)
    if np.isfinite(tt):
        assert float(d_from_two_theta(tt, lam)) == pytest.approx(d, rel=1e-10)  # float rounding only
    else:
        assert d < lam / 2


# ------------------------------------------------------------- settings and low symmetry

def _merged_pair(a, b) -> tuple[np.ndarray, np.ndarray]:
    """Σ m·|F|² per d-spacing of two line lists on a common set of d (what a powder pattern can
    see): d-spacings within 1e-9 relative are one, and a d missing on one side gives 0."""
    d = np.concatenate([a.d, b.d])
    order = np.argsort(d)
    group = np.empty(d.size, dtype=np.int64)
    group[order] = np.concatenate([[0], np.cumsum(np.diff(d[order]) > 1e-9 * d[order][1:])])
    n = int(group.max()) + 1
    sa = np.bincount(group[: len(a.d)], weights=a.multiplicity * a.f2, minlength=n)
    sb = np.bincount(group[len(a.d) :], weights=b.multiplicity * b.f2, minlength=n)
    return sa, sb


def _p1_text(cell, elements, frac, b_iso) -> str:
    atoms = [(f"{e}{i}", e, *np.round(x, 10), 1.0, b) for i, (e, x, b) in enumerate(zip(elements, frac, b_iso))]
    return make_cif(cell, atoms, space_group="P 1")


def _assert_same_powder_pattern(a, b):
    """Σ m|F|² per d equal within 1e-5 relative (float32 phases). The weak-line cutoff (1e-6
    of the strongest m|F|²) acts on orbits, which are smaller in lower symmetry, so lines near
    it can fall on either side; 2e-6 of the strongest covers that."""
    sa, sb = _merged_pair(a, b)
    np.testing.assert_allclose(sb, sa, rtol=1e-5, atol=2e-6 * sa.max())
    assert np.array_equal(sa > 1e-3 * sa.max(), sb > 1e-3 * sa.max())


def test_low_symmetry_structure_equals_its_p1_expansion(shared_structures):
    """Diopside (C2/c, COD 1000007) and the same atoms listed in P1: merging by the monoclinic
    Laue class must give the same powder pattern as merging only Friedel pairs."""
    crystal = read_crystal(shared_structures / "1000007.cif")
    p1 = read_crystal(_p1_text(crystal.cell, crystal.elements, crystal.frac, crystal.b_iso))
    _assert_same_powder_pattern(compute_reflections(crystal, d_min=1.0), compute_reflections(p1, d_min=1.0))


def test_hexagonal_and_rhombohedral_settings_agree():
    """Corundum (R-3c) in hexagonal axes, and the same atoms in the primitive rhombohedral cell
    (obverse setting, ITA Vol. A Table 5.1.3.1: a_r = (2a + b + c)/3, b_r = (−a + b + c)/3,
    c_r = (−a − 2b + c)/3) written in P1: one powder pattern."""
    from refdb.structure import corundum_reference

    hexagonal = read_crystal(corundum_reference().structure_text)
    a, c = hexagonal.cell[0], hexagonal.cell[2]
    p = np.array([[2, -1, -1], [1, 1, -2], [1, 1, 1]], dtype=float) / 3.0  # columns: a_r, b_r, c_r in hex
    frac_r = np.mod(hexagonal.frac @ np.linalg.inv(p).T, 1.0)
    frac_r, index = np.unique(np.round(frac_r, 6) % 1.0, axis=0, return_index=True)
    assert frac_r.shape[0] == 10  # Z = 2 Al2O3 in the rhombohedral cell
    a_r = np.sqrt(3 * a * a + c * c) / 3
    alpha = np.degrees(np.arccos((2 * c * c - 3 * a * a) / (2 * c * c + 6 * a * a)))
    text = _p1_text((a_r, a_r, a_r, alpha, alpha, alpha), [hexagonal.elements[i] for i in index], frac_r, hexagonal.b_iso[index])
    rhombohedral = read_crystal(text)
    # Same species on both sides (the P1 file has no charges: compare neutral atoms).
    from dataclasses import replace

    neutral = replace(hexagonal, charges=np.zeros_like(hexagonal.charges))
    hex_lines = compute_reflections(neutral, d_min=0.9)
    rh_lines = compute_reflections(rhombohedral, d_min=0.9)
    # |F|² per cell scales with the square of the cell contents: the hexagonal cell holds three
    # rhombohedral cells, so its m|F|² per d is 9 times larger.
    scaled = replace(rh_lines, f2=rh_lines.f2 * 9.0)
    _assert_same_powder_pattern(hex_lines, scaled)
