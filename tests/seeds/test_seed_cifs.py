"""Checks of the seed library's CIFs against crystallography, not against refdb itself.

Every seed CIF is read with gemmi's CIF parser, expanded with the symmetry operations written in
the file (numpy, no refdb code), and checked for

* a citation (authors, journal, year, volume, first page) and our CC0 licence statement;
* agreement of the three ways the file states its space group (IT number, H-M symbol with
  setting, Hall symbol) with the explicit symmetry-operation loop;
* cell contents equal to Z times the stated formula (hydrogen excepted where the file says it
  left disordered hydrogen out);
* a density from the cell contents that matches the published density stated in the file
  (``_exptl_crystal_density_diffrn``; its source is named in ``_refdb_density_source`` and in
  seeds/PROVENANCE.md);
* no two atoms closer than chemistry allows, and every fully occupied atom bonded to something;
* the provenance table naming every file.

When ``refdb.structure`` is importable the strongest computed Cu Kα line of each phase is
compared with the well-known strongest line of the mineral (values from memory, marked so).
"""

from __future__ import annotations

import itertools
import re
from fractions import Fraction
from pathlib import Path

import gemmi
import numpy as np
import pytest

SEEDS = Path(__file__).resolve().parents[2] / "seeds"
STRUCTURES = sorted((SEEDS / "structures").glob("*.cif"))
IDS = [p.stem for p in STRUCTURES]

# Avogadro constant (exact, SI 2019) and Å³ → cm³, so density = mass / (N_A · V).
N_A = 6.02214076e23
A3_TO_CM3 = 1e-24


def _block(path: Path) -> gemmi.cif.Block:
    return gemmi.cif.read(str(path)).sole_block()


def _text(block: gemmi.cif.Block, tag: str) -> str | None:
    raw = block.find_value(tag)
    if raw is None or raw in ("?", "."):
        return None
    return gemmi.cif.as_string(raw).strip()


def _num(block: gemmi.cif.Block, tag: str) -> float:
    text = _text(block, tag)
    assert text is not None, f"{tag} missing"
    return float(re.sub(r"\(\d+\)$", "", text))


def _parse_op(triplet: str) -> tuple[np.ndarray, np.ndarray]:
    """'x+1/2,-y,z' → (3×3 rotation, translation); written here so the test does not lean on
    gemmi's or refdb's own operation parsers."""
    rot = np.zeros((3, 3))
    tr = np.zeros(3)
    for row, expr in enumerate(triplet.replace(" ", "").lower().split(",")):
        for sign, body in re.findall(r"([+-]?)([^+-]+)", expr):
            s = -1.0 if sign == "-" else 1.0
            if body in ("x", "y", "z"):
                rot[row, "xyz".index(body)] += s
            else:
                tr[row] += s * float(Fraction(body))
    return rot, tr


def _formula(text: str) -> dict[str, float]:
    counts: dict[str, float] = {}
    for el, n in re.findall(r"([A-Z][a-z]?)([0-9.]*)", text):
        counts[el] = counts.get(el, 0.0) + (float(n) if n else 1.0)
    return counts


def _element(type_symbol: str) -> str:
    return re.match(r"[A-Z][a-z]?", type_symbol).group(0)


class Seed:
    """One seed CIF read into plain numpy arrays."""

    def __init__(self, path: Path):
        self.path = path
        self.block = b = _block(path)
        self.cell = tuple(_num(b, f"_cell_{t}") for t in (
            "length_a", "length_b", "length_c", "angle_alpha", "angle_beta", "angle_gamma"))
        self.ops = [_parse_op(t) for t in b.find_values("_space_group_symop_operation_xyz")
                    for t in [gemmi.cif.as_string(t)]]
        table = b.find("_atom_site_", ["label", "type_symbol", "fract_x", "fract_y", "fract_z",
                                       "occupancy"])
        self.labels = [row[0] for row in table]
        self.elements = [_element(row[1]) for row in table]
        self.xyz = np.array([[float(row[i]) for i in (2, 3, 4)] for row in table])
        self.occ = np.array([float(row[5]) for row in table])
        self.uc_gemmi = gemmi.UnitCell(*self.cell)
        self.orth = np.array(self.uc_gemmi.orth.mat.tolist())

    def expanded(self) -> list[tuple[int, np.ndarray]]:
        """(site index, fractional position in [0, 1)) for every atom of the unit cell."""
        out = []
        for i, p in enumerate(self.xyz):
            images = np.array([np.mod(r @ p + t, 1.0) for r, t in self.ops])
            kept: list[np.ndarray] = []
            for q in images:
                # 1e-4 in fractional units (< 0.002 Å here) merges the copies of a special
                # position while keeping distinct atoms, which are ≥ 0.9 Å apart.
                if not any(np.all(np.abs(np.mod(q - k + 0.5, 1.0) - 0.5) < 1e-4) for k in kept):
                    kept.append(q)
            out += [(i, q) for q in kept]
        return out

    def contents(self) -> dict[str, float]:
        counts: dict[str, float] = {}
        for i, _ in self.expanded():
            counts[self.elements[i]] = counts.get(self.elements[i], 0.0) + self.occ[i]
        return counts


SEED_CACHE: dict[Path, Seed] = {}


def seed(path: Path) -> Seed:
    if path not in SEED_CACHE:
        SEED_CACHE[path] = Seed(path)
    return SEED_CACHE[path]


def test_own_operation_parser_agrees_with_gemmi():
    # The checks below expand sites with the small parser above; make sure it reads every
    # operation of the 230 space groups (reference settings) exactly as gemmi does.
    for sg in gemmi.spacegroup_table_itb():
        for op in sg.operations():
            rot, tr = _parse_op(op.triplet())
            assert np.array_equal(rot, np.array(op.rot) / op.DEN), op.triplet()
            assert np.allclose(np.mod(tr, 1.0), np.mod(np.array(op.tran) / op.DEN, 1.0)), op.triplet()


def test_library_size_and_required_phases():
    # The scenario needs 25–35 phases, and two standards every lab uses: corundum (the RIR
    # reference) and silicon (the line-position standard).
    assert 25 <= len(STRUCTURES) <= 35
    assert {"corundum", "silicon", "magnetite", "goethite", "lepidocrocite", "akaganeite"} <= set(IDS)


@pytest.mark.parametrize("path", STRUCTURES, ids=IDS)
def test_citation_and_licence(path):
    b = _block(path)
    text = path.read_text(encoding="utf-8")
    assert "Written for refdb from the published structure cited below" in text
    assert re.search(r"Licence: this file is released under\s+#?\s*CC0 1\.0", text)
    assert _text(b, "_refdb_licence") == "CC0-1.0"
    assert list(b.find_values("_publ_author_name")), "no authors"
    for tag in ("_journal_name_full", "_journal_year", "_journal_volume", "_journal_page_first",
                "_publ_section_title", "_refdb_density_source", "_chemical_formula_sum"):
        assert _text(b, tag), f"{tag} missing"
    assert 1900 < int(_text(b, "_journal_year")) <= 2026
    doi = _text(b, "_journal_paper_doi")
    assert doi is None or re.fullmatch(r"10\.\d{4,5}/\S+", doi)
    # Written by us, not copied: no COD bookkeeping items, no machine paths.
    assert "_cod_database_code" not in text and "_database_code_amcsd" not in text
    assert not re.search(r"(?<![\w.:])/(?:home|root|usr|var|tmp|work|mnt)/", text), "machine path"


@pytest.mark.parametrize("path", STRUCTURES, ids=IDS)
def test_space_group_statements_agree(path):
    s = seed(path)
    listed = gemmi.GroupOps([gemmi.Op(gemmi.cif.as_string(t))
                             for t in s.block.find_values("_space_group_symop_operation_xyz")])
    by_hall = gemmi.symops_from_hall(_text(s.block, "_space_group_name_Hall"))
    by_hm = gemmi.SpaceGroup(_text(s.block, "_space_group_name_H-M_alt")).operations()
    # Compare as sets of operations, each written by gemmi in one canonical form.
    ops = {op.triplet() for op in listed}
    assert ops == {op.triplet() for op in by_hall}
    assert ops == {op.triplet() for op in by_hm}
    assert gemmi.find_spacegroup_by_ops(listed).number == int(_num(s.block, "_space_group_IT_number"))
    # The cell must obey the lattice the space group implies (e.g. a = b for tetragonal).
    assert gemmi.UnitCell(*s.cell).is_compatible_with_spacegroup(gemmi.find_spacegroup_by_ops(listed))


@pytest.mark.parametrize("path", STRUCTURES, ids=IDS)
def test_cell_contents_equal_z_times_formula(path):
    s = seed(path)
    z = _num(s.block, "_cell_formula_units_Z")
    formula = _formula(_text(s.block, "_chemical_formula_sum"))
    contents = s.contents()
    h_omitted = _text(s.block, "_refdb_hydrogen_omitted") == "yes"
    if h_omitted:
        assert "H" not in contents and "H" in formula
    for el in set(formula) | set(contents):
        if el == "H" and h_omitted:
            continue
        # Formula counts are written to 3 decimals (e.g. Fe2.667 for maghemite, Cl0.156 for
        # akaganeite), so Z × formula carries up to Z × 0.0005 of rounding.
        assert contents.get(el, 0.0) == pytest.approx(z * formula.get(el, 0.0), abs=z * 5e-4 + 1e-6), el


@pytest.mark.parametrize("path", STRUCTURES, ids=IDS)
def test_density_matches_published_value(path):
    s = seed(path)
    z = _num(s.block, "_cell_formula_units_Z")
    mass = sum(n * gemmi.Element(el).weight for el, n in s.contents().items())
    if _text(s.block, "_refdb_hydrogen_omitted") == "yes":
        mass += z * _formula(_text(s.block, "_chemical_formula_sum"))["H"] * gemmi.Element("H").weight
    rho = mass / (N_A * s.uc_gemmi.volume * A3_TO_CM3)
    published = _num(s.block, "_exptl_crystal_density_diffrn")
    # 2 %: published densities were computed from slightly different cells, compositions
    # (natural Fe-, Ni- or Mg-substitution, non-stoichiometry) or measured as specific gravity;
    # a wrong Z, a missing site or a wrong multiplicity is off by 10 % or more.
    assert rho == pytest.approx(published, rel=0.02)


def _all_distances(s: Seed) -> list[tuple[int, int, float]]:
    cells = np.array(list(itertools.product((-1, 0, 1), repeat=3)), dtype=float)
    atoms = s.expanded()
    pos = np.array([q for _, q in atoms])
    site = np.array([i for i, _ in atoms])
    out = []
    for i, p in enumerate(s.xyz):
        diff = (pos[None, :, :] + cells[:, None, :]) - p  # (27, n, 3) fractional
        d = np.linalg.norm(diff @ s.orth.T, axis=2)
        for j, dist in zip(np.broadcast_to(site, d.shape).ravel(), d.ravel()):
            if dist > 1e-3:
                out.append((i, int(j), float(dist)))
    return out


@pytest.mark.parametrize("path", STRUCTURES, ids=IDS)
def test_no_overlapping_atoms_and_every_atom_bonded(path):
    s = seed(path)
    dists = _all_distances(s)
    radius = {el: gemmi.Element(el).covalent_r for el in set(s.elements)}
    nearest = {i: min(d for a, _, d in dists if a == i) for i in range(len(s.labels))}
    for i, j, d in dists:
        pair = radius[s.elements[i]] + radius[s.elements[j]]
        # 0.6 × the sum of covalent radii: real contacts, including short O–H (0.93 Å vs
        # 0.97 Å) and carbonate C–O (1.28 Å vs 1.42 Å), stay above 0.65 ×; a wrong origin
        # choice or sign typically puts atoms at 0.1–0.6 × (e.g. Fe–O 1.15 Å).
        assert d > 0.6 * pair, f"{s.labels[i]}–{s.labels[j]} {d:.3f} Å"
        assert d > 0.8, f"{s.labels[i]}–{s.labels[j]} {d:.3f} Å"
    for i, label in enumerate(s.labels):
        if s.occ[i] < 1.0 or s.elements[i] == "H":
            # Partly occupied tunnel anions (Cl in akaganeite) sit at hydrogen-bond distance.
            continue
        # Some neighbour within 1.3 × the largest plausible bond: catches atoms left in empty
        # space by a wrong setting (K–Cl in sylvite, 3.15 Å, is the longest bond here).
        assert nearest[i] < 1.3 * (radius[s.elements[i]] + max(radius.values())), label


def test_provenance_names_every_file():
    table = (SEEDS / "PROVENANCE.md").read_text(encoding="utf-8")
    for stem in IDS:
        assert f"{stem}.cif" in table, stem


# Strongest line of each mineral for Cu Kα1 (λ = 1.5406 Å), as 2θ in degrees: from memory of
# the standard powder patterns (not from a stored source). Each seed is run through two
# calculators: pymatgen's XRDCalculator (independent CIF reader and structure factors, a test-only
# dependency; it ignores displacement parameters) and refdb's own, when present.
STRONGEST_FROM_MEMORY = {
    "quartz": 26.64,  # 101
    "hematite": 33.15,  # 104
    "magnetite": 35.42,  # 311
    "maghemite": 35.63,  # 311
    "chromite": 35.6,  # 311
    "goethite": 21.22,  # 110
    "lepidocrocite": 14.14,  # 020
    "halite": 31.69,  # 200
    "sylvite": 28.35,  # 200
    "calcite": 29.41,  # 104
    "siderite": 32.0,  # 104
    "dolomite": 30.94,  # 104
    "aragonite": 26.22,  # 111
    "corundum": 43.36,  # 113
    "eskolaite": 33.6,  # 104
    "diaspore": 22.27,  # 110
    "boehmite": 14.48,  # 020
    "rutile": 27.45,  # 110
    "anatase": 25.31,  # 101
    "zincite": 36.25,  # 101
    "zinc": 43.22,  # 101
    "cuprite": 36.42,  # 111
    "silicon": 28.44,  # 111
    "iron-alpha": 44.67,  # 110
    "austenite": 43.6,  # 111
    "wustite": 41.9,  # 200
    "gypsum": 11.6,  # 020
    "brucite": 38.0,  # 101
    "mackinawite": 17.6,  # 001
    "akaganeite": 26.7,  # 310
}
# How far down the computed list the remembered strongest line may sit. Gypsum: 020 and 12-1
# are of similar height, and measured patterns favour 020 through {010} cleavage texture.
# Akaganeite: 110, 200 and 310 of our tetragonal average model are of similar height, and
# their ratio depends on the tunnel chloride, which the model only averages.
RANK_ALLOWED = {"gypsum": 2, "akaganeite": 3}
# Corundum's 113 and 116 are within a few per cent of each other; without displacement
# parameters (pymatgen) 116 comes out ahead, so pymatgen is allowed the top two there.
RANK_ALLOWED_NO_ADP = {"corundum": 2}


def _refdb_lines(path: Path, wavelength: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    structure = pytest.importorskip("refdb.structure", reason="refdb.structure not available yet")
    if not hasattr(structure, "reference_from_cif") or not hasattr(structure, "stick_pattern"):
        pytest.skip("refdb.structure does not export reference_from_cif/stick_pattern yet")
    from refdb.radiation import radiation_for

    sticks = structure.stick_pattern(structure.reference_from_cif(path), radiation_for(wavelength=wavelength))
    return np.asarray(sticks.two_theta), np.asarray(sticks.intensity), np.asarray(sticks.hkl)


def _pymatgen_lines(path: Path, wavelength: float) -> tuple[np.ndarray, np.ndarray]:
    pytest.importorskip("pymatgen", reason="pymatgen (test-only reference calculator) not installed")
    import warnings

    from pymatgen.analysis.diffraction.xrd import XRDCalculator
    from pymatgen.core import Structure

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pymatgen warns about our own _refdb_* CIF items
        structure = Structure.from_file(str(path))
    pattern = XRDCalculator(wavelength=wavelength).get_pattern(structure, two_theta_range=(5, 90))
    return np.asarray(pattern.x), np.asarray(pattern.y)


def _merge(tt: np.ndarray, inten: np.ndarray, tol: float = 0.02) -> tuple[np.ndarray, np.ndarray]:
    """Sum sticks closer than ``tol`` degrees (e.g. quartz 101 and 011), strongest first."""
    order = np.argsort(tt)
    tt, inten = tt[order], inten[order]
    groups = np.concatenate([[0], np.cumsum(np.diff(tt) > tol)])
    pos = np.array([tt[groups == g][np.argmax(inten[groups == g])] for g in range(groups[-1] + 1)])
    tot = np.array([inten[groups == g].sum() for g in range(groups[-1] + 1)])
    rank = np.argsort(tot)[::-1]
    return pos[rank], tot[rank]


@pytest.mark.parametrize("calculator", ["pymatgen", "refdb"])
@pytest.mark.parametrize("stem", sorted(STRONGEST_FROM_MEMORY))
def test_strongest_line_matches_known_pattern(stem, calculator):
    path = SEEDS / "structures" / f"{stem}.cif"
    if calculator == "refdb":
        tt, inten, _ = _refdb_lines(path, 1.5406)
        allowed = RANK_ALLOWED.get(stem, 1)
    else:
        tt, inten = _pymatgen_lines(path, 1.5406)
        allowed = max(RANK_ALLOWED.get(stem, 1), RANK_ALLOWED_NO_ADP.get(stem, 1))
    pos, _ = _merge(tt, inten)
    expected = STRONGEST_FROM_MEMORY[stem]
    # 0.3°: the remembered 2θ values are rounded to 0.05–0.1°, and the cells behind the
    # remembered patterns differ from the seeds' by up to ~0.5 % (≈ 0.15° at 35° 2θ).
    assert any(abs(t - expected) < 0.3 for t in pos[:allowed]), (stem, pos[:3], expected)


def _relative(stem: str, hkls: list[tuple[int, int, int]]) -> list[float]:
    """refdb's Cu Kα1 intensities of the given lines, relative to the first one = 100."""
    tt, inten, hkl = _refdb_lines(SEEDS / "structures" / f"{stem}.cif", 1.5406)
    out = []
    for want in hkls:
        rows = [i for i, h in enumerate(hkl) if tuple(int(v) for v in h) == want]
        assert rows, (stem, want)
        out.append(float(inten[rows].sum()))
    return [100.0 * v / out[0] for v in out]


# Certified relative intensities of NIST SRM 674 (ITC Vol. C, Table 5.2.11.1, "taken from the
# NIST certificate"; listed in check-values.md), strongest line = 100.
@pytest.mark.parametrize(
    "stem, lines, certified",
    [
        ("corundum", [(1, 1, 3), (1, 1, 6), (1, 0, 4)], [100.0, 92.5, 87.4]),
        ("zincite", [(1, 0, 1), (1, 0, 0), (0, 0, 2)], [100.0, 57.6, 40.2]),
        ("rutile", [(1, 1, 0), (2, 1, 1), (1, 0, 1)], [100.0, 56.9, 44.0]),
    ],
)
def test_relative_intensities_match_srm_674(stem, lines, certified):
    computed = _relative(stem, lines)
    # ±8 on the 0–100 scale: about three times the certified uncertainties (1.1–2.8), plus the
    # displacement parameters assumed in some seeds and the certificate's instrument (its
    # monochromator changes LP ratios by a few per cent between 30° and 60° 2θ).
    for got, want in zip(computed[1:], certified[1:]):
        assert got == pytest.approx(want, abs=8.0), (stem, computed, certified)


def test_corundum_intensity_order_of_srm_676a():
    # SRM 676a certifies the order I(113) > I(116) > I(104) (Powder Diffr. article on SRM 676a,
    # citing Kaiser & Watters 2008; check-values.md).
    i113, i116, i104 = _relative("corundum", [(1, 1, 3), (1, 1, 6), (1, 0, 4)])
    assert i113 > i116 > i104
