"""``refdb simulate`` run in-process."""

from __future__ import annotations

import csv
import io
import json

import pytest
from typer.testing import CliRunner

from refdb.cli.app import app
from tests.structure._cifs import cubic

runner = CliRunner()


@pytest.fixture
def silicon(tmp_path):
    """Si, a = 5.431144 Å (NIST SRM 640f, check-values §2)."""
    path = tmp_path / "si.cif"
    path.write_text(cubic(5.431144, "F d -3 m:1", [("Si1", "Si", 0, 0, 0, 1, 0.5)], name="si", formula="Si"), encoding="utf-8")
    return path


def test_json_is_a_list_of_reflections_with_the_contract_fields(silicon):
    r = runner.invoke(app, ["simulate", str(silicon), "--json"])
    assert r.exit_code == 0, r.stderr
    data = json.loads(r.stdout)
    rows = data["reflections"]
    assert [(x["h"], x["k"], x["l"]) for x in rows[:3]] == [(1, 1, 1), (2, 2, 0), (3, 1, 1)]
    for key in ("two_theta", "d", "h", "k", "l", "multiplicity", "intensity"):
        assert key in rows[0]
    # check-values §7: Si 111 at 28.4412°, d = 3.135672 Å (SRM 640f a, ITC Cu Kα1); the output
    # rounds 2θ to 4 and d to 5 decimals.
    assert rows[0]["two_theta"] == pytest.approx(28.4412, abs=1e-4)
    assert rows[0]["d"] == pytest.approx(3.13567, abs=1e-5)
    assert max(x["intensity"] for x in rows) == 100.0
    assert data["radiation"]["anode"] == "Cu" and data["reference"]["formula_reduced"] == "Si"


def test_table_for_another_anode_and_range(silicon):
    r = runner.invoke(app, ["simulate", str(silicon), "--anode", "Mo", "--range", "10", "30"])
    assert r.exit_code == 0
    assert "Mo Kα1" in r.stdout and "1 1 1" in r.stdout and "2 2 0" in r.stdout


def test_csv_output(silicon):
    r = runner.invoke(app, ["simulate", str(silicon), "--csv", "--wavelength", "1.5406", "--range", "20", "60"])
    assert r.exit_code == 0
    rows = list(csv.DictReader(io.StringIO(r.stdout)))
    assert [row["h"] + row["k"] + row["l"] for row in rows] == ["111", "220", "311"]


def test_monochromator_and_anomalous_options_change_intensities(silicon):
    base = json.loads(runner.invoke(app, ["simulate", str(silicon), "--json"]).stdout)["reflections"]
    mono = json.loads(runner.invoke(app, ["simulate", str(silicon), "--json", "--monochromator", "26.6"]).stdout)["reflections"]
    anom = json.loads(runner.invoke(app, ["simulate", str(silicon), "--json", "--anomalous"]).stdout)["reflections"]
    assert base[1]["intensity"] != mono[1]["intensity"]
    assert base[1]["intensity"] != anom[1]["intensity"]


def test_plot_writes_a_png(silicon, tmp_path):
    out = tmp_path / "si.png"
    r = runner.invoke(app, ["simulate", str(silicon), "--plot", str(out)])
    assert r.exit_code == 0
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--wavelength", "154.06"], "outside 0.1–5 Å"),
        (["--anode", "Zz"], "unknown anode"),
        (["--d-min", "0.01"], "too small"),
        (["--range", "90", "10"], "empty"),
        (["--csv", "--json"], "choose one"),
    ],
)
def test_bad_options_give_one_line(silicon, args, message):
    r = runner.invoke(app, ["simulate", str(silicon), *args])
    assert r.exit_code == 1
    assert message in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_help_text_exists():
    r = runner.invoke(app, ["simulate", "--help"])
    assert r.exit_code == 0 and "--anode" in r.stdout and "--d-min" in r.stdout
