"""Mixture decomposition end to end: a library built from real COD structures with refdb's own
structure code, scans drawn from lines computed independently by pymatgen (``_mixture_data``).

The two calculators differ slightly (refdb applies the CIF's displacement parameters), which
is what a real scan does too: the tolerances below allow for it.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from refdb.errors import InputError
from refdb.match.mixture import decompose

from ._mixture_data import ABSENT, build_library, reference, simulate


def _names(result):
    return {p.name for p in result.phases}


def test_minor_phase_in_binary(mixture_library):
    lib, ids = mixture_library
    scan, _ = simulate([reference("quartz"), reference("rutile")], [0.95, 0.05], zero_shift=0.02, seed=3)
    res = decompose(scan, lib)
    assert [p.entry_id for p in res.phases] == [ids["quartz"], ids["rutile"]]
    minor = res.phases[1]
    # ±1.5 wt %: the two structure-factor calculators differ by a few % in line intensities
    # (displacement parameters), i.e. ≲ 1 wt % at this level; the statistical u is ~0.1 wt %.
    assert abs(minor.weight_fraction - 0.05) < 0.015
    assert minor.evidence.delta_chi2 > minor.evidence.threshold
    assert minor.evidence.lines_present >= 0.75 * minor.evidence.lines_checked
    assert "strongest lines present" in minor.evidence.text and "its own" in minor.evidence.text
    assert len(res.unexplained) == 0
    json.dumps(res.as_dict(), allow_nan=False)


def test_four_phases(mixture_library):
    lib, _ = mixture_library
    truth = {"Quartz": 0.45, "Corundum": 0.30, "Calcite": 0.17, "Rutile": 0.08}
    refs = [reference(k) for k in ("quartz", "corundum", "calcite", "rutile")]
    scan, _ = simulate(refs, list(truth.values()), zero_shift=-0.03, seed=21)
    res = decompose(scan, lib)
    assert _names(res) == set(truth)
    got = {p.name: p.weight_fraction for p in res.phases}
    # 2 wt %: calculator differences (see module docstring) over four phases.
    for name, w in truth.items():
        assert abs(got[name] - w) < 0.02, name
    assert sum(got.values()) == pytest.approx(1.0)
    assert res.rwp < 0.15 and res.gof < 2.0


def test_absent_phase_shows_as_unexplained_peaks(mixture_library):
    lib, _ = mixture_library
    hem = reference(ABSENT)
    scan, _ = simulate([reference("quartz"), hem], [0.6, 0.4], seed=5)
    res = decompose(scan, lib)
    assert _names(res) == {"Quartz"}  # nothing forced onto the hematite lines
    assert len(res.unexplained) >= 4
    # hematite's three strongest lines (from pymatgen's lines, Cu Kα1) must be among them
    tt = 2 * np.degrees(np.arcsin(1.54059292 / (2 * hem.lines.d)))
    strength = hem.lines.multiplicity * hem.lines.f2 * (1 + np.cos(np.radians(tt)) ** 2) / (
        np.sin(np.radians(tt / 2)) ** 2 * np.cos(np.radians(tt / 2)))
    strongest = tt[np.argsort(-strength)[:3]]
    for t in strongest:
        # 0.1°: about one FWHM; residual peaks are fitted positions of the drawn lines.
        assert np.min(np.abs(res.unexplained.two_theta - t)) < 0.1, t


def test_detection_limit_rises_with_noise(mixture_library):
    lib, ids = mixture_library
    refs = [reference("quartz"), reference("rutile")]
    limits = []
    for counts in (20000.0, 2000.0):  # ten times fewer counts: √10 more relative noise
        scan, _ = simulate(refs, [0.9, 0.1], peak_counts=counts, background=counts / 50, seed=9)
        res = decompose(scan, lib)
        lim = {d.entry_id: d.weight_fraction for d in res.detection_limits}
        limits.append(lim[ids["rutile"]])
    assert 0 < limits[0] < limits[1] < 1
    # With counts scaled by 10 the limit scales by about √10 (3.2); 2–5 allows for the
    # crystalline normalisation and the different fitted backgrounds.
    assert 2.0 < limits[1] / limits[0] < 5.0


def test_internal_standard_gives_absolute_fractions(mixture_library):
    lib, ids = mixture_library
    # Crystalline part: quartz 40, corundum 20, rutile 40 wt %. Declaring the corundum at
    # 10 wt % of the specimen means half the specimen is not crystalline-identified:
    # Chung (1974) J. Appl. Cryst. 7, 526 → quartz 0.2, rutile 0.2, rest 0.5.
    refs = [reference("quartz"), reference("corundum"), reference("rutile")]
    scan, _ = simulate(refs, [0.4, 0.2, 0.4], seed=13)
    res = decompose(scan, lib, standard=(ids["corundum"], 0.10))
    q = res.quantification
    assert q.basis == "absolute"
    got = {p.name: p.weight_fraction for p in res.phases}
    assert got["Corundum"] == pytest.approx(0.10)
    # 0.015: the two calculators' quartz and corundum intensities differ by about 4 % and 1 %
    # (measured while writing this test), i.e. ≤ 0.01 at 0.2, plus fitting noise.
    assert abs(got["Quartz"] - 0.2) < 0.015 and abs(got["Rutile"] - 0.2) < 0.015
    assert abs(q.rest - 0.5) < 0.025 and q.u_rest > 0
    d = res.as_dict()
    assert d["amorphous_or_unidentified"]["weight_fraction"] == pytest.approx(q.rest)
    assert [p for p in d["phases"] if p["internal_standard"]][0]["entry_id"] == ids["corundum"]


def test_background_only_scan_gives_nothing(mixture_library):
    lib, _ = mixture_library
    from refdb.scan.types import Scan

    from ._mixture_data import cu_radiation

    x = np.arange(10.0, 80.0, 0.02)
    counts = np.random.default_rng(4).poisson(300.0 - 2.0 * (x - 10.0)).astype(float)
    scan = Scan(x, counts, np.sqrt(np.maximum(counts, 1.0)), cu_radiation(), source="flat")
    res = decompose(scan, lib)
    assert res.phases == () and res.fit is None and len(res.unexplained) == 0
    assert res.quantification is None and res.detection_limits == ()
    json.dumps(res.as_dict(), allow_nan=False)


def test_bad_options(mixture_library):
    lib, _ = mixture_library
    scan, _ = simulate([reference("zincite")], [1.0], seed=1)
    with pytest.raises(InputError):
        decompose(scan, lib, max_phases=0)
    with pytest.raises(InputError):
        decompose(scan, lib, candidates_per_round=0)
    with pytest.raises(InputError):
        decompose(scan, lib, standard=(10_000, 0.2))


def test_absent_phase_is_not_forced_onto_phases_sharing_its_lattice(tmp_path):
    """An absent rock salt (PbSe, a = 6.12 Å) must not be explained as GaSb (zinc blende,
    a = 6.10 Å) plus bcc γ-Ca (a = 4.38 Å, whose lines fall on the rock salt's even-index
    reflections), nor as GaSb alone: cells from the COD CIFs; the geometry is common practice,
    no source."""
    from refdb.library import open_library

    path = tmp_path / "lib.sqlite"
    build_library(path, absent=("clausthalite",), keys=("quartz", "gallium antimonide", "gamma calcium"))
    pbse = reference("clausthalite")
    scan, _ = simulate([reference("quartz"), pbse], [0.7, 0.3], seed=11)
    with open_library(path) as lib:
        res = decompose(scan, lib)
    assert _names(res) == {"Quartz"}, res.as_dict()["phases"]
    # GaSb's lattice fits the rock salt's lines but not its intensities: the user is told so.
    assert any("lattice of Ga Sb" in n for n in res.notes), res.notes
    # PbSe's strongest line (200, Cu Kα1, weighted by Lorentz-polarisation) is weak in GaSb
    # (f_Ga − f_Sb) and must be reported; 0.1°: about one FWHM.
    tt = 2 * np.degrees(np.arcsin(1.54059292 / (2 * pbse.lines.d)))
    strength = pbse.lines.multiplicity * pbse.lines.f2 * (1 + np.cos(np.radians(tt)) ** 2) / (
        np.sin(np.radians(tt / 2)) ** 2 * np.cos(np.radians(tt / 2)))
    strongest = tt[np.argsort(-np.where(tt < 80.0, strength, 0.0))[:1]]
    for t in strongest:
        assert np.min(np.abs(res.unexplained.two_theta - t)) < 0.1, t
