"""Test data for mixture refinement: real structures, lines from pymatgen, invented scans.

The reference lines come from pymatgen's XRD calculator (an independent, general-purpose
calculator used only in tests), applied to openly licensed COD structures in the shared data
folder. Synthetic scans are drawn here with their own few lines of numpy, without importing
the code under test, so that a mistake in refdb's profile model cannot hide itself.
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np
import pytest

from refdb.radiation import Radiation
from refdb.records import PatternLines, ReferenceData
from refdb.scan.types import Scan

STRUCTURES = Path(__file__).resolve().parents[2] / ".." / "shared" / "data" / "structures"

#: COD ids used in the tests, with the names the phases go by.
PHASES = {
    "quartz": ("5000035", "Quartz", "SiO2"),
    "corundum": ("1010914", "Corundum", "Al2O3"),
    "calcite": ("9009668", "Calcite", "CaCO3"),
    "rutile": ("9009083", "Rutile", "TiO2"),
    "anatase": ("9009086", "Anatase", "TiO2"),
    "zincite": ("9008877", "Zincite", "ZnO"),
    "periclase": ("9008671", "Periclase", "MgO"),
    "fluorite": ("9009005", "Fluorite", "CaF2"),
    "hematite": ("1011240", "Hematite", "Fe2O3"),
    "cerianite": ("9009008", "Cerianite", "CeO2"),
    # rock salt PbSe, and two phases whose lines fall on parts of its lattice: zinc-blende GaSb
    # (an fcc lattice of nearly the same cell) and bcc γ-Ca (its lines sit on the rock salt's
    # reflections with even indices)
    "clausthalite": ("9008695", "Clausthalite", "PbSe"),
    "gallium antimonide": ("9008847", "Gallium antimonide", "GaSb"),
    "gamma calcium": ("9008530", "Calcium (bcc)", "Ca"),
    # zinc-blende AlP: the fcc lattice of fluorite to 0.2 %, with other intensities
    "aluminium phosphide": ("9008831", "Aluminium phosphide", "AlP"),
}
#: The phase left out of the shared test library: it plays the unknown.
ABSENT = "hematite"
#: Phases that only the tests asking for them put into a library.
ON_REQUEST = ("clausthalite", "gallium antimonide", "gamma calcium", "aluminium phosphide")


def need_structures() -> None:
    if not STRUCTURES.is_dir():
        pytest.skip("shared structure folder ../shared/data/structures is not present")


def _lp(two_theta_deg: np.ndarray) -> np.ndarray:
    t = np.radians(two_theta_deg)
    return (1 + np.cos(t) ** 2) / (np.sin(t / 2) ** 2 * np.cos(t / 2))


@functools.lru_cache(maxsize=None)
def reference(key: str, entry_id: int | None = None) -> ReferenceData:
    """A computed reference for one of :data:`PHASES`, lines from pymatgen (unscaled |F|²·m·LP)."""
    need_structures()
    from pymatgen.analysis.diffraction.xrd import XRDCalculator
    from pymatgen.core import Structure

    cod, name, formula = PHASES[key]
    path = STRUCTURES / f"{cod}.cif"
    struct = Structure.from_file(str(path))
    lam = 0.70931713  # Mo Kα1: reaches d = 0.50 Å within 2θ ≤ 90°
    calc = XRDCalculator(wavelength=lam)
    pat = calc.get_pattern(struct, scaled=False, two_theta_range=(1.0, 90.0))
    tt = np.asarray(pat.x)
    strength = np.asarray(pat.y) / _lp(tt)  # m·|F|²
    mult = np.array([sum(h["multiplicity"] for h in hk) for hk in pat.hkls], float)
    hkl = np.array([h[0]["hkl"][-3:] if len(h[0]["hkl"]) == 3 else (h[0]["hkl"][0], h[0]["hkl"][1], h[0]["hkl"][3]) for h in pat.hkls])
    d = np.asarray(pat.d_hkls)
    order = np.argsort(-d)
    lat = struct.lattice
    return ReferenceData(
        kind="computed",
        name=name,
        formula=formula,
        formula_reduced=formula,
        elements=tuple(sorted({str(e) for e in struct.composition.elements})),
        lines=PatternLines(d=d[order], hkl=hkl[order], multiplicity=mult[order], f2=(strength / mult)[order]),
        mineral_name=name,
        space_group=struct.get_space_group_info()[0],
        cell=(lat.a, lat.b, lat.c, lat.alpha, lat.beta, lat.gamma),
        volume=float(struct.volume),
        cell_mass=float(struct.composition.weight),
        source="COD",
        source_id=cod,
        structure_text=path.read_text(encoding="utf-8", errors="replace"),
    )


def cu_radiation() -> Radiation:
    return Radiation("Cu", np.array([1.54059292, 1.5444274]), np.array([1.0, 0.5]), ("Ka1", "Ka2"), anode="Cu")


def simulate(
    refs: list[ReferenceData],
    fractions: list[float],
    *,
    radiation: Radiation | None = None,
    two_theta=(10.0, 80.0),
    step: float = 0.02,
    peak_counts: float = 10000.0,
    background: float = 200.0,
    fwhm: float = 0.09,
    eta: float = 0.5,
    zero_shift: float = 0.0,
    seed: int = 1,
) -> tuple[Scan, np.ndarray]:
    """Poisson-noisy scan of a mixture by weight fraction; returns (scan, true scale factors).

    Scale factors follow Hill & Howard (1987): S_p ∝ w_p / (cell mass · volume)_p. The profile
    is a pseudo-Voigt of constant FWHM on a background falling gently with 2θ.
    """
    rad = radiation or cu_radiation()
    x = np.arange(two_theta[0], two_theta[1] + step / 2, step)
    mass = np.array([r.cell_mass * r.volume for r in refs])
    scales = np.asarray(fractions, float) / mass
    unit = np.zeros((len(refs), x.size))
    for p, r in enumerate(refs):
        m_f2 = r.lines.multiplicity * r.lines.f2
        for lam, wt in zip(rad.wavelengths, rad.weights, strict=True):
            s = lam / (2 * r.lines.d)
            ok = s < 1
            tt = 2 * np.degrees(np.arcsin(s[ok])) + zero_shift
            area = m_f2[ok] * wt * _lp(tt - zero_shift)
            dx = (x[None, :] - tt[:, None]) / fwhm
            g = 2 * np.sqrt(np.log(2) / np.pi) / fwhm * np.exp(-4 * np.log(2) * dx**2)
            lor = 2 / (np.pi * fwhm) / (1 + 4 * dx**2)
            unit[p] += (area[:, None] * (eta * lor + (1 - eta) * g)).sum(0)
    k = peak_counts / (scales @ unit).max()
    scales = scales * k
    bkg = background * (1.0 + 0.5 * np.exp(-(x - x[0]) / 15.0))
    mean = bkg + scales @ unit
    rng = np.random.default_rng(seed)
    counts = rng.poisson(mean).astype(float)
    scan = Scan(x, counts, np.sqrt(np.maximum(counts, 1.0)), rad, source="synthetic")
    return scan, scales


def march_dollase(hkl, cell, axis, r, space_group) -> np.ndarray:
    """March–Dollase factor averaged over equivalents (Dollase 1986, J. Appl. Cryst. 19, 267),
    written here independently of refdb: P(α) = (r² cos²α + sin²α/r)^(−3/2)."""
    import gemmi

    a, b, c, al, be, ga = cell
    ca, cb, cg = np.cos(np.radians([al, be, ga]))
    g = np.array([[a * a, a * b * cg, a * c * cb], [a * b * cg, b * b, b * c * ca], [a * c * cb, b * c * ca, c * c]])
    gs = np.linalg.inv(g)
    ops = gemmi.find_spacegroup_by_name(space_group).operations()
    rots = np.array([op.rot for op in ops.sym_ops], float) / 24.0
    out = np.zeros(len(hkl))
    ax = np.asarray(axis, float)
    for rot in rots:  # test helper: clarity over speed
        h = np.asarray(hkl, float) @ rot
        cos2 = (h @ gs @ ax) ** 2 / (np.einsum("ij,jk,ik->i", h, gs, h) * (ax @ gs @ ax))
        out += (r * r * cos2 + (1 - cos2) / r) ** -1.5
    return out / len(rots)


def build_library(path: Path, *, absent: tuple[str, ...] = ("hematite",), keys: tuple[str, ...] | None = None) -> dict[str, int]:
    """A SQLite library at ``path`` with the phases ``keys`` (default: every phase of
    :data:`PHASES` but :data:`ON_REQUEST`) except ``absent``, computed by refdb's own
    structure code; returns key → entry id."""
    need_structures()
    from refdb.library import open_library
    from refdb.structure.reference import reference_from_cif

    ids = {}
    with open_library(path, create=True) as lib:
        for key, (cod, _, _) in PHASES.items():
            if key not in absent and (key in keys if keys is not None else key not in ON_REQUEST):
                ids[key] = lib.add(reference_from_cif(STRUCTURES / f"{cod}.cif")).entry_id
    return ids


def write_xy(scan: Scan, path: Path) -> Path:
    """Write a scan as two text columns (2θ, counts)."""
    np.savetxt(path, np.column_stack([scan.two_theta, scan.counts]), fmt="%.4f")
    return path
