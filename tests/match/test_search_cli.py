"""``refdb search`` in-process: table, JSON contract, plot, filters and one-line errors.

The library holds invented entries (tests/match/_search_data.py); the scan is drawn here with
plain numpy (pseudo-Voigt Kα1 + Kα2 peaks on a flat background, Poisson noise) for one of
them, so that the command must find it.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from refdb.cli.app import app
from refdb.library import open_library
from refdb.records import PatternLines, ReferenceData
from tests.match._search_data import LAMBDA, lp, synthetic_arrays

runner = CliRunner()
ARRAYS = synthetic_arrays(30, seed=31)
TARGET = 12


def _reference(row: int) -> ReferenceData:
    a, b = ARRAYS.line_start[row], ARRAYS.line_start[row + 1]
    m = ARRAYS.meta[row]
    return ReferenceData(
        kind="computed", name=m["name"], formula=m["formula"], formula_reduced=m["formula_reduced"],
        elements=m["elements"], lines=PatternLines(d=ARRAYS.d[a:b], multiplicity=ARRAYS.multiplicity[a:b],
                                                   f2=ARRAYS.f2[a:b]),
        space_group=m["space_group"], sg_number=m["sg_number"], cell=m["cell"], volume=m["volume"],
        source="invented", source_id=m["source_id"], tags=m["tags"],
    )


@pytest.fixture(scope="module")
def library(tmp_path_factory):
    path = tmp_path_factory.mktemp("lib") / "library.sqlite"
    with open_library(str(path), create=True) as lib:
        ids = [lib.add(_reference(r)).entry_id for r in range(len(ARRAYS.meta))]
    return str(path), ids


def _scan_text(row: int, shift: float = 0.03) -> str:
    """Two columns, 2θ and counts, of the invented entry ``row`` (Cu Kα1 + Kα2, ratio 0.5)."""
    a, b = ARRAYS.line_start[row], ARRAYS.line_start[row + 1]
    d = ARRAYS.d[a:b]
    inten = ARRAYS.f2[a:b] * ARRAYS.multiplicity[a:b]
    x = np.arange(10.0, 80.0, 0.02)
    y = np.full(x.size, 80.0)
    for lam, w in ((LAMBDA, 1.0), (1.5444274, 0.5)):
        s = lam / (2 * d)
        ok = s < 1
        tt = 2 * np.degrees(np.arcsin(s[ok])) + shift
        area = inten[ok] * lp(tt) * w
        area = area / (inten * lp(2 * np.degrees(np.arcsin(np.clip(LAMBDA / (2 * d), 0, 1))))).max() * 400
        fw = 0.1
        g = np.exp(-4 * np.log(2) * ((x[None, :] - tt[:, None]) / fw) ** 2) * 2 * np.sqrt(np.log(2) / np.pi) / fw
        lo = (2 / (np.pi * fw)) / (1 + 4 * ((x[None, :] - tt[:, None]) / fw) ** 2)
        y += (area[:, None] * (0.5 * g + 0.5 * lo)).sum(axis=0)
    y = np.random.default_rng(5).poisson(y).astype(float)
    return "\n".join(f"{a:.3f} {b:.0f}" for a, b in zip(x, y)) + "\n"


@pytest.fixture(scope="module")
def scan_file(tmp_path_factory):
    p = tmp_path_factory.mktemp("scan") / "unknown.xy"
    p.write_text(_scan_text(TARGET))
    return p


@pytest.fixture(scope="module")
def peak_file(tmp_path_factory):
    """A peak table (d in Å, relative intensity) of the target's lines above 1 % (Cu Kα1)."""
    a, b = ARRAYS.line_start[TARGET], ARRAYS.line_start[TARGET + 1]
    d = ARRAYS.d[a:b]
    s = LAMBDA / (2 * d)
    tt = 2 * np.degrees(np.arcsin(np.clip(s, 0, 1)))
    inten = ARRAYS.f2[a:b] * ARRAYS.multiplicity[a:b] * lp(tt)
    ok = (s < 1) & (tt > 10) & (tt < 80)
    d, inten = d[ok], 100 * inten[ok] / inten[ok].max()
    keep = inten >= 1
    p = tmp_path_factory.mktemp("peaks") / "unknown-peaks.txt"
    rows = "\n".join(f"{x:.5f} {y:.1f}" for x, y in zip(d[keep], inten[keep]))
    p.write_text("# anode: Cu\n# two_theta_range: 10 80\nd intensity\n" + rows + "\n")
    return p


def test_json_contract_identification_and_plot(library, scan_file, tmp_path):
    url, ids = library
    png = tmp_path / "search.png"
    res = runner.invoke(app, ["--db", url, "search", str(scan_file), "--anode", "Cu", "--json", "--top", "5",
                              "--plot", str(png)])
    assert res.exit_code == 0, res.output
    assert png.stat().st_size > 10_000
    doc = json.loads(res.stdout)
    cands = doc["candidates"]
    assert cands[0]["entry_id"] == ids[TARGET]
    for c in cands:
        for key in ("entry_id", "source_id", "name", "formula", "score", "components"):
            assert key in c
        for key in ("expected_found", "observed_explained", "position", "intensity_agreement", "profile_correlation"):
            assert key in c["components"]
    assert cands[0]["source_id"] == ARRAYS.meta[TARGET]["source_id"]
    assert [c["score"] for c in cands] == sorted((c["score"] for c in cands), reverse=True)
    assert "Screening result" in doc["caution"]
    assert doc["n_entries"] == 30 and doc["profile_checked"] is True


def test_table_from_a_peak_table_shows_candidates_and_caution(library, peak_file):
    url, ids = library
    res = runner.invoke(app, ["--db", url, "search", str(peak_file), "--peak-table", "--top", "3"])
    assert res.exit_code == 0, res.output
    assert ARRAYS.meta[TARGET]["source_id"] in res.stdout
    assert "accredited methods" in res.stdout


def test_filters_exclude_the_target(library, peak_file):
    url, ids = library
    el = ARRAYS.meta[TARGET]["elements"][0]
    res = runner.invoke(app, ["--db", url, "search", str(peak_file), "--peak-table", "--json", "--without", el])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert all(c["entry_id"] != ids[TARGET] for c in doc["candidates"])
    assert doc["filters"]["elements_excluded"] == [el]


def test_peak_table_search_finds_the_target(library, peak_file):
    url, ids = library
    res = runner.invoke(app, ["--db", url, "search", str(peak_file), "--peak-table", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["candidates"][0]["entry_id"] == ids[TARGET]
    assert doc["profile_checked"] is False


@pytest.mark.parametrize("args, text", [
    (["--with", "Qq"], "unknown element"),
    (["--plot", "out.bmp"], "cannot draw"),
])
def test_bad_options_are_one_line_errors(library, scan_file, args, text):
    url, _ = library
    res = runner.invoke(app, ["--db", url, "search", str(scan_file), "--anode", "Cu", *args])
    assert res.exit_code == 1
    assert text in res.stderr and "Traceback" not in res.output
    assert len(res.stderr.strip().splitlines()) == 1


def test_missing_scan_is_a_one_line_error(library, tmp_path):
    url, _ = library
    res = runner.invoke(app, ["--db", url, "search", str(tmp_path / "nope.xy"), "--anode", "Cu"])
    assert res.exit_code != 0 and "Traceback" not in res.output
