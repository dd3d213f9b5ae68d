"""Identification of real structures among many: the shared open COD structures.

The library holds computed references (refdb.structure.reference_from_cif) of every fourth
structure in ../shared/data/structures plus the phases searched for. Two kinds of unknowns:

* peak lists computed by pymatgen's XRDCalculator (an independent, general-purpose calculator,
  used only in tests) from the same CIFs, with Cu Kα1 — so refdb's library must agree with an
  outside calculation well enough to rank the right phase first;
* scans simulated by refdb.structure.simulate_scan with zero shift, displacement, a cell change
  and Kα2, peaks found by refdb.scan.find_peaks, searched with the profile check.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from refdb.match.search import group_rows, search
from tests.match._search_data import CU, make_peaks

STRUCTURES = Path(__file__).resolve().parents[2] / ".." / "shared" / "data" / "structures"

#: COD ids of the unknowns (names from the CIFs / MANIFEST.tsv of the shared folder).
UNKNOWNS = {
    "5000035": "quartz",
    "1010914": "corundum",
    "9009668": "calcite",
    "9009083": "rutile",
    "9008671": "periclase",
    "1000007": "diopside",
}


@pytest.fixture(scope="module")
def shared_index(tmp_path_factory):
    if not (STRUCTURES / "MANIFEST.tsv").is_file():
        pytest.skip("the shared structure set (../shared/data/structures) is not beside this checkout")
    from refdb.errors import RefdbError
    from refdb.library import open_library
    from refdb.match.index import load_index
    from refdb.structure import reference_from_cif

    paths = sorted(STRUCTURES.glob("*.cif"))[::4]
    paths += [STRUCTURES / f"{c}.cif" for c in UNKNOWNS if STRUCTURES / f"{c}.cif" not in paths]
    folder = tmp_path_factory.mktemp("shared-lib")
    lib = open_library(str(folder / "lib.sqlite"), create=True)
    ids: dict[str, int] = {}
    refs = {}
    for p in paths:
        try:
            ref = reference_from_cif(p)
        except RefdbError:
            continue  # a CIF refdb refuses (reported by the structure tests)
        res = lib.add(ref)
        ids[p.stem] = res.entry_id
        refs[p.stem] = ref
    index = load_index(lib)
    lib.close()
    assert len(ids) > 100
    return index, ids, refs


def _same_phase(index, entry_a: int, entry_b: int) -> bool:
    rows = index.row_of([entry_a, entry_b])
    return len(group_rows(index, rows.tolist(), 2)) == 1


@pytest.mark.parametrize("cod", list(UNKNOWNS))
def test_pymatgen_peak_list_finds_the_phase(shared_index, cod):
    from pymatgen.analysis.diffraction.xrd import XRDCalculator
    from pymatgen.core import Structure

    index, ids, _ = shared_index
    struct = Structure.from_file(str(STRUCTURES / f"{cod}.cif"))
    pat = XRDCalculator(wavelength=CU.wavelength).get_pattern(struct, two_theta_range=(10, 80))
    keep = pat.y >= 1.0  # peaks a lab scan would show: ≥ 1 % of the strongest
    peaks = make_peaks(pat.x[keep], pat.y[keep], fwhm=0.1, two_theta_range=(10.0, 80.0))
    res = search(peaks, index, top=5, d_scale=False)
    top = res.candidates[0]
    assert top.entry_id == ids[cod] or _same_phase(index, top.entry_id, ids[cod]), (
        f"{UNKNOWNS[cod]}: got {top.formula} {top.space_group} ({top.source_id})"
    )
    # Same structure, same wavelength, two calculators: every line the unknown shows is a
    # line of the reference, so the whole observed intensity is explained.
    assert top.components.observed_explained > 0.95
    assert abs(top.zero_shift + top.displacement) < 0.02


@pytest.mark.parametrize("cod, shift, disp, scale", [
    ("5000035", 0.06, -0.05, 1.008),
    ("9009668", -0.04, 0.08, 0.991),
    ("1000007", 0.02, 0.03, 1.012),
])
def test_simulated_scan_is_identified(shared_index, cod, shift, disp, scale):
    from refdb.scan import find_peaks
    from refdb.structure import simulate_scan

    index, ids, refs = shared_index
    grid = np.arange(8.0, 80.0, 0.02)
    scan = simulate_scan(refs[cod], CU, grid, zero_shift=shift, displacement=disp, cell_scale=scale,
                         crystallite_size_nm=120.0, background=(120.0, -0.4), amorphous=(24.0, 8.0, 60.0),
                         counts=8000.0, seed=11)
    found = find_peaks(scan)
    res = search(found.peaks, index, scan=scan, background=found.background, top=5)
    top = res.candidates[0]
    assert top.entry_id == ids[cod] or _same_phase(index, top.entry_id, ids[cod])
    assert top.components.profile_correlation is not None and top.components.profile_correlation > 0.8
    # The fitted d-scale recovers the applied cell change to 0.2 % (a zero shift of 0.06° at
    # 2θ = 40° is worth 0.15 % in d, and z, s and ε share the work).
    assert top.d_scale == pytest.approx(scale - 1.0, abs=0.002)
    assert top.score > 70


def test_same_phase_at_two_temperatures_is_one_phase(tmp_path):
    """bcc sodium at 5 K (COD 9008544, a = 4.225 Å) and at 293 K (COD 9008545, a = 4.2906 Å),
    1.6 % apart (cells from the two CIFs) — inside the ±2 % d-scale the search fits, so one
    phase; bcc potassium (COD 9008540) is another phase."""
    if not (STRUCTURES / "MANIFEST.tsv").is_file():
        pytest.skip("the shared structure set (../shared/data/structures) is not beside this checkout")
    from refdb.library import open_library
    from refdb.match.index import load_index
    from refdb.structure import reference_from_cif

    lib = open_library(str(tmp_path / "na.sqlite"), create=True)
    ids = [lib.add(reference_from_cif(STRUCTURES / f"{c}.cif")).entry_id for c in ("9008544", "9008545", "9008540")]
    index = load_index(lib)
    lib.close()
    assert _same_phase(index, ids[0], ids[1])
    assert not _same_phase(index, ids[0], ids[2])


def test_enantiomorphs_are_one_phase(tmp_path):
    """Tellurium in P3₁21 (COD 1011098) and in P3₂21 (COD 9008580): mirror images, whose powder
    patterns are identical (Friedel's law; common practice, no source), so one phase."""
    if not (STRUCTURES / "MANIFEST.tsv").is_file():
        pytest.skip("the shared structure set (../shared/data/structures) is not beside this checkout")
    from refdb.library import open_library
    from refdb.match.index import load_index
    from refdb.structure import reference_from_cif

    lib = open_library(str(tmp_path / "te.sqlite"), create=True)
    refs = [reference_from_cif(STRUCTURES / f"{c}.cif") for c in ("1011098", "9008580")]
    ids = [lib.add(r).entry_id for r in refs]
    index = load_index(lib)
    lib.close()
    assert {r.sg_number for r in refs} == {152, 154}
    assert _same_phase(index, ids[0], ids[1])
