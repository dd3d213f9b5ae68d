"""``refdb unmix`` and ``refdb batch`` in-process, as a user would type them."""

from __future__ import annotations

import csv
import io
import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from refdb.cli.app import app

from ._mixture_data import build_library, reference, simulate, write_xy

runner = CliRunner()


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    root = tmp_path_factory.mktemp("cli")
    db = str(root / "lib.sqlite")
    ids = build_library(root / "lib.sqlite")
    scans = root / "scans"
    scans.mkdir()
    scan, _ = simulate([reference("quartz"), reference("rutile")], [0.9, 0.1], seed=4)
    good = write_xy(scan, scans / "a_good.xy")
    (scans / "b_bad.xy").write_text("2theta counts\n10.0 abc\n", encoding="utf-8")
    scan2, _ = simulate([reference("zincite"), reference("periclase")], [0.5, 0.5], seed=6)
    write_xy(scan2, scans / "c_good.xy")
    return db, ids, good, scans


def run(db, *args):
    return runner.invoke(app, ["--db", db, *args], catch_exceptions=False)


def test_unmix_json_contract(setup):
    db, ids, good, _ = setup
    r = run(db, "unmix", str(good), "--anode", "Cu", "--json")
    assert r.exit_code == 0, r.stderr
    data = json.loads(r.stdout)
    assert isinstance(data["phases"], list) and len(data["phases"]) == 2
    for p in data["phases"]:
        assert {"entry_id", "source_id", "name", "formula", "weight_fraction"} <= set(p)
        assert 0.0 <= p["weight_fraction"] <= 1.0
    assert [p["entry_id"] for p in data["phases"]] == [ids["quartz"], ids["rutile"]]
    assert "accredited methods" in data["caution"]
    assert data["fit"]["rwp"] > 0 and data["library_stamp"]


def test_unmix_table_report_and_plot(setup, tmp_path):
    db, _, good, _ = setup
    html, png = tmp_path / "r.html", tmp_path / "p.png"
    r = run(db, "unmix", str(good), "--anode", "Cu", "--report", str(html), "--plot", str(png))
    assert r.exit_code == 0, r.stderr
    assert "Quartz" in r.stdout and "Rutile" in r.stdout and "accredited methods" in r.stdout
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    text = html.read_text(encoding="utf-8")
    assert "http://" not in text and "https://" not in text and "accredited methods" in text


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--standard", "twelve"], "--standard"),
        (["--standard", "999:0.2"], "not in the library"),
        (["--quant", "magic"], "quantification method"),
        (["--plot", "figure.bmp"], "cannot write a plot"),
    ],
)
def test_unmix_bad_options_one_line_error(setup, args, needle, tmp_path, monkeypatch):
    db, _, good, _ = setup
    monkeypatch.chdir(tmp_path)
    r = run(db, "unmix", str(good), "--anode", "Cu", *args)
    assert r.exit_code == 1
    assert needle in r.stderr and "Traceback" not in r.stderr
    assert r.stderr.strip().splitlines()[-1].startswith("Error:")


def test_unmix_bad_scan_and_missing_library(setup, tmp_path):
    db, _, _, scans = setup
    r = run(db, "unmix", str(scans / "b_bad.xy"), "--anode", "Cu")
    assert r.exit_code == 1 and r.stderr.strip().splitlines()[-1].startswith("Error:")
    assert "Traceback" not in r.stderr
    r = run(str(tmp_path / "nowhere.sqlite"), "unmix", str(setup[2]), "--anode", "Cu")
    assert r.exit_code == 1 and "no refdb library" in r.stderr


def test_batch_skips_bad_scan_and_goes_on(setup, tmp_path):
    db, ids, _, scans = setup
    out = tmp_path / "summary.csv"
    r = run(db, "batch", str(scans), "--anode", "Cu", "--summary", str(out), "--reports", str(tmp_path / "rep"))
    assert r.exit_code == 0, r.stderr
    rows = list(csv.DictReader(io.StringIO(out.read_text(encoding="utf-8"))))
    assert [row["scan"] for row in rows] == ["a_good.xy", "b_bad.xy", "c_good.xy"]
    assert [row["status"] for row in rows] == ["ok", "error", "ok"]
    assert "b_bad.xy" in r.stderr and "2 of 3 scans analysed" in r.stderr
    assert rows[0]["entry_ids"] == f"{ids['quartz']};{ids['rutile']}"
    assert sorted(int(i) for i in rows[2]["entry_ids"].split(";")) == sorted([ids["zincite"], ids["periclase"]])
    assert (tmp_path / "rep" / "a_good.html").is_file() and not (tmp_path / "rep" / "b_bad.html").exists()


def test_batch_search_mode_json_in_process(setup):
    db, ids, good, scans = setup
    r = run(db, "batch", str(good), str(scans / "b_bad.xy"), "--mode", "search", "--anode", "Cu",
            "--workers", "1", "--json")
    assert r.exit_code == 0
    data = json.loads(r.stdout)
    assert data[0]["status"] == "ok" and data[0]["result"]["candidates"][0]["entry_id"] == ids["quartz"]
    assert data[1]["status"] == "error" and data[1]["error"]


def test_commands_have_help():
    for name in ("unmix", "batch"):
        r = runner.invoke(app, [name, "--help"])
        assert r.exit_code == 0 and len(r.stdout) > 200


@settings(max_examples=80, deadline=None)
@given(st.integers(1, 10**9), st.floats(0.0001, 0.9999))
def test_standard_option_round_trip(entry, fraction):
    from refdb.cli.mixture_cmds import _standard

    ident, value = _standard(f"{entry}:{fraction!r}")
    assert ident == entry and value == pytest.approx(fraction, rel=1e-12)
    ident, value = _standard(f"{entry}:{100 * fraction!r}%")
    assert ident == entry and value == pytest.approx(fraction, rel=1e-9)


@given(st.text(max_size=20).filter(lambda t: ":" not in t))
def test_standard_option_without_colon_is_refused(text):
    from refdb.cli.mixture_cmds import _standard
    from refdb.errors import InputError

    if not text:
        assert _standard(text) is None
        return
    with pytest.raises(InputError):
        _standard(text)
