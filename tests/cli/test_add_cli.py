"""Importing references: CIF folders and measured peak lists, as a user types them."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from refdb.cli.app import app
from refdb.library import open_library

REPO = Path(__file__).resolve().parents[2]
SEEDS = REPO / "seeds" / "structures"
BAD_CIFS = REPO / "tests" / "data" / "bad_cifs"
runner = CliRunner()


def run(*args: str, db: str):
    return runner.invoke(app, ["--db", db, *args], catch_exceptions=False)


def test_add_cif_folder_twice_is_a_no_op(tmp_path):
    db = str(tmp_path / "lib.sqlite")
    r = run("add", "cif", str(SEEDS), "--tag", "seed", "--json", db=db)
    assert r.exit_code == 0
    doc = json.loads(r.stdout)
    n = len(list(SEEDS.glob("*.cif")))
    assert len(doc["imported"]) == n and doc["failed"] == []
    with open_library(db) as lib:
        stamp = lib.stamp()
        quartz = next(x for x in lib.list(text="quartz"))
        e = lib.get(quartz.id)
    # Provenance travels with the entry: the citation and our licence line of the seed file.
    assert e.kind == "computed" and e.source_id == "quartz" and "CC0" in (e.licence or "")
    assert e.structure_text is not None and "data_" in e.structure_text  # the CIF itself is kept
    assert e.tags == ("seed",)
    again = json.loads(run("add", "cif", str(SEEDS), "--json", db=db).stdout)
    assert again["imported"] == [] and len(again["already_present"]) == n
    with open_library(db) as lib:
        assert lib.stamp() == stamp


def test_bad_cif_corpus_leaves_library_unchanged(tmp_path):
    db = str(tmp_path / "lib.sqlite")
    run("add", "cif", str(SEEDS / "halite.cif"), db=db)
    with open_library(db) as lib:
        before = lib.stamp()
    bad = sorted(BAD_CIFS.glob("*.cif"))
    assert len(bad) >= 15
    r = run("add", "cif", *map(str, bad), "--json", db=db)
    assert r.exit_code == 1  # nothing could be imported
    doc = json.loads(r.stdout)
    assert len(doc["failed"]) == len(bad)
    for item in doc["failed"]:
        assert item["reason"] and "\n" not in item["reason"] and "Traceback" not in item["reason"]
    with open_library(db) as lib:
        assert lib.stamp() == before and lib.count() == 1


def test_add_cif_missing_path(tmp_path):
    r = run("add", "cif", str(tmp_path / "nowhere"), db=str(tmp_path / "lib.sqlite"))
    assert r.exit_code == 1 and "no such file or folder" in r.stderr


def test_add_measured_peak_list(tmp_path):
    # A lab's own calcite standard, written as d (Å) and intensity; the numbers are the
    # strongest calcite lines as commonly tabulated (from memory: 104 at 3.035 Å = 100).
    peaks = tmp_path / "calcite-std.txt"
    peaks.write_text("d intensity\n3.035 100\n2.285 18\n2.095 18\n1.913 17\n1.875 17\n3.86 12\n2.495 14\n")
    db = str(tmp_path / "lib.sqlite")
    r = run("add", "measured", str(peaks), "--name", "Calcite (lab standard)", "--formula", "CaCO3",
            "--anode", "Cu", "--rir", "3.2", "--json", db=db)
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["created"] and doc["lines"] == 7
    with open_library(db) as lib:
        e = lib.get(doc["entry_id"])
    assert e.kind == "measured" and e.elements == ("C", "Ca", "O") and e.formula_reduced == "CCaO3"
    assert e.wavelength == pytest.approx(1.54059292) and e.rir == 3.2
    assert list(e.lines.d) == sorted(e.lines.d, reverse=True) and e.lines.intensity.max() == 100.0
    again = json.loads(run("add", "measured", str(peaks), "--name", "Calcite (lab standard)", "--formula",
                           "CaCO3", "--anode", "Cu", "--rir", "3.2", "--json", db=db).stdout)
    assert again["entry_id"] == doc["entry_id"] and not again["created"]


@pytest.mark.parametrize(
    "extra, message",
    [
        ((), "say which radiation"),
        (("--anode", "Cu", "--formula-x", "1"), "No such option"),
    ],
)
def test_add_measured_errors(tmp_path, extra, message):
    peaks = tmp_path / "p.txt"
    peaks.write_text("# d intensity\n3.0 100\n2.0 50\n")
    r = runner.invoke(app, ["--db", str(tmp_path / "l.sqlite"), "add", "measured", str(peaks), "--name", "x",
                            "--formula", "CaCO3", *extra])
    assert r.exit_code != 0 and message in (r.stderr + r.stdout)


def test_add_measured_bad_formula(tmp_path):
    peaks = tmp_path / "p.txt"
    peaks.write_text("3.0 100\n2.0 50\n")
    r = run("add", "measured", str(peaks), "--name", "x", "--formula", "Qq2O", "--anode", "Cu", "--positions", "d",
            db=str(tmp_path / "l.sqlite"))
    assert r.exit_code == 1 and "unknown element 'Qq'" in r.stderr
