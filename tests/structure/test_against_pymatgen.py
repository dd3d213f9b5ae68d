"""Powder patterns compared with pymatgen's XRDCalculator, an independent calculator.

pymatgen (Ong et al. 2013, Comput. Mater. Sci. 68, 314) is a test-only dependency. To make
the comparison fair:

* same wavelength (Cu Kα1 = 1.54059292 Å, ITC Vol. C) and the same Lorentz–polarisation
  factor (1 + cos²2θ)/(sin²θ cos θ), no monochromator;
* no Debye–Waller factors on either side (pymatgen ignores the CIF's displacement
  parameters) and neutral atoms on our side (pymatgen drops oxidation states);
* pymatgen merges reflections whose 2θ agree to 1e-5°, so our lines of equal d (e.g. cubic
  333 and 511, or hk0 and kh0 in Laue class 4/m) are merged the same way before comparing.

What remains is the difference of the scattering-factor fits: pymatgen's four-parameter
Mott–Bethe form versus the Waasmaier–Kirfel five-Gaussian fits, a few 0.1 % of f0 at the angles
compared. Relative intensities therefore agree to well within 2 points of 100 (the
tolerance asked of this check); positions agree to rounding, 1e-4 Å being generous.

Structures: the shared COD set (../shared/data/structures), taken in order of COD number, with
at most 200 atoms per cell (to keep the test fast), that both programs read and that give the
same cell contents (pymatgen resolves some disorder and special positions differently; those
files are skipped and counted). At least 50 must be compared.
"""

from __future__ import annotations

import csv
import warnings
from dataclasses import replace

import numpy as np
import pytest

from refdb.errors import InputError
from refdb.geometry import lorentz_polarisation
from refdb.radiation import two_theta_from_d
from refdb.structure import compute_reflections, read_crystal
from refdb.structure.scattering import chemical_element

CU_KA1 = 1.54059292
RANGE = (5.0, 90.0)
MIN_COMPARED = 50
MAX_ATOMS = 200


def _merge(two_theta: np.ndarray, d: np.ndarray, intensity: np.ndarray, tol: float = 2e-4):
    """Merge peaks closer than ``tol`` degrees (sorted by 2θ); returns (2θ, d, I)."""
    order = np.argsort(two_theta)
    tt, d, inten = two_theta[order], d[order], intensity[order]
    group = np.concatenate([[0], np.cumsum(np.diff(tt) > tol)])
    count = np.bincount(group)
    return (np.bincount(group, tt) / count, np.bincount(group, d) / count, np.bincount(group, inten))


def _ours(crystal):
    fair = replace(crystal, charges=np.zeros_like(crystal.charges), b_iso=np.zeros_like(crystal.b_iso))
    lines = compute_reflections(fair, d_min=CU_KA1 / (2 * np.sin(np.radians(RANGE[1] / 2))) * 0.999)
    tt = two_theta_from_d(lines.d, CU_KA1)
    ok = np.isfinite(tt) & (tt >= RANGE[0]) & (tt <= RANGE[1])
    inten = lines.multiplicity[ok] * lines.f2[ok] * lorentz_polarisation(tt[ok])
    tt, d, inten = _merge(tt[ok], lines.d[ok], inten)
    return tt, d, 100.0 * inten / inten.max()


def _theirs(path, calculator):
    from pymatgen.io.cif import CifParser

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        structure = CifParser(str(path)).parse_structures(primitive=False)[0]
        pattern = calculator.get_pattern(structure, scaled=False, two_theta_range=RANGE)
    tt, d, inten = _merge(np.asarray(pattern.x), np.asarray(pattern.d_hkls), np.asarray(pattern.y))
    return structure, tt, d, 100.0 * inten / inten.max()


def _same_contents(crystal, structure) -> bool:
    ours: dict[str, float] = {}
    for e, occ in zip(crystal.elements, crystal.occupancy, strict=True):
        ours[chemical_element(e)] = ours.get(chemical_element(e), 0.0) + float(occ)
    theirs: dict[str, float] = {}
    for site in structure:
        for sp, occ in site.species.items():
            theirs[sp.symbol] = theirs.get(sp.symbol, 0.0) + float(occ)
    return set(ours) == set(theirs) and all(abs(ours[e] - theirs[e]) < 1e-3 for e in ours)


def _candidates(structures):
    with open(structures / "MANIFEST.tsv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t"))
    rows = [r for r in rows if int(r["atoms_in_cell"]) <= MAX_ATOMS]
    return [structures / f"{r['cod_id']}.cif" for r in sorted(rows, key=lambda r: int(r["cod_id"]))]


def test_patterns_agree_with_pymatgen(shared_structures):
    pytest.importorskip("pymatgen.analysis.diffraction.xrd")
    from pymatgen.analysis.diffraction.xrd import XRDCalculator

    calculator = XRDCalculator(wavelength=CU_KA1)
    compared, skipped, problems, worst = [], {}, [], [0.0, 0.0]
    for path in _candidates(shared_structures):
        if len(compared) >= MIN_COMPARED + 10:
            break
        try:
            crystal = read_crystal(path)
        except InputError as exc:
            skipped[path.name] = f"refdb: {exc.one_line()}"
            continue
        try:
            structure, tt_p, d_p, i_p = _theirs(path, calculator)
        except Exception as exc:  # noqa: BLE001 - any pymatgen failure just excludes the file
            skipped[path.name] = f"pymatgen: {type(exc).__name__}"
            continue
        if not _same_contents(crystal, structure):
            skipped[path.name] = "different cell contents (disorder or special positions)"
            continue
        tt_o, d_o, i_o = _ours(crystal)
        compared.append(path.name)
        for tt_a, d_a, i_a, tt_b, d_b, i_b, side in (
            (tt_p, d_p, i_p, tt_o, d_o, i_o, "pymatgen line missing in refdb"),
            (tt_o, d_o, i_o, tt_p, d_p, i_p, "refdb line missing in pymatgen"),
        ):
            for t, dd, ii in zip(tt_a, d_a, i_a, strict=True):
                if ii <= 1.0:
                    continue
                j = int(np.argmin(np.abs(tt_b - t)))
                worst[0] = max(worst[0], abs(d_b[j] - dd))
                worst[1] = max(worst[1], abs(i_b[j] - ii))
                if abs(d_b[j] - dd) > 1e-4 or abs(i_b[j] - ii) > 2.0:
                    problems.append(f"{path.name}: {side} or different at 2θ={t:.3f}: {ii:.2f} vs {i_b[j]:.2f}")
    print(
        f"compared {len(compared)} structures with pymatgen (largest |Δd| {worst[0]:.2e} Å, "
        f"largest |ΔI| {worst[1]:.2f} of 100); skipped {len(skipped)}: {skipped}"
    )
    assert len(compared) >= MIN_COMPARED
    assert not problems, "\n".join(problems[:20])
