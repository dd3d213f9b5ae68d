"""``refdb peaks`` in-process: table, JSON contract, CSV, plot, peak tables and options.

Scans are synthetic (tests/scan/_synthetic.py), written to files here; invented data.
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from refdb.cli.app import app
from refdb.cli.scan_cmds import PEAK_FIELDS
from refdb.report.peaks_plot import spread_labels

from ._synthetic import make_scan

CENTRES = [25.0, 40.0, 60.0]


@pytest.fixture(scope="module")
def scan_file(tmp_path_factory):
    syn = make_scan(CENTRES, [60.0, 40.0, 50.0], stop=70.0, seed=8)
    path = tmp_path_factory.mktemp("cli") / "syn.xy"
    body = "\n".join(f"{a:.3f} {b:.0f}" for a, b in zip(syn.two_theta, syn.counts, strict=True))
    path.write_text("# invented scan for the CLI tests\n" + body + "\n", encoding="utf-8")
    return path


def run(*args):
    return CliRunner().invoke(app, ["peaks", *map(str, args)])


def test_json_contract(scan_file):
    result = run(scan_file, "--anode", "Cu", "--json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert {"source", "radiation", "parameters", "peaks", "standard", "warnings"} <= set(data)
    assert [list(p) for p in data["peaks"]] == [list(PEAK_FIELDS)] * len(CENTRES)
    np.testing.assert_allclose([p["two_theta"] for p in data["peaks"]], CENTRES, atol=0.01)
    assert data["radiation"]["anode"] == "Cu"


def test_table_and_csv(scan_file):
    table = run(scan_file, "--anode", "Cu")
    assert table.exit_code == 0 and "3 peaks in syn.xy" in table.stdout and "2θ (°)" in table.stdout
    out = run(scan_file, "--anode", "Cu", "--csv")
    rows = list(csv.DictReader(io.StringIO(out.stdout)))
    assert len(rows) == 3 and list(rows[0]) == list(PEAK_FIELDS)


def test_plot_written(scan_file, tmp_path):
    target = tmp_path / "peaks.png"
    result = run(scan_file, "--anode", "Cu", "--plot", target)
    assert result.exit_code == 0, result.output
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    bad = run(scan_file, "--anode", "Cu", "--plot", tmp_path / "peaks.bmp")
    assert bad.exit_code == 1 and "cannot draw" in bad.stderr


def test_no_radiation_and_both(scan_file):
    result = run(scan_file)
    assert result.exit_code == 1 and "--anode Cu or --wavelength 1.5406" in result.stderr
    both = run(scan_file, "--anode", "Cu", "--wavelength", "1.54")
    assert both.exit_code == 1 and "not both" in both.stderr


def test_internal_standard_option(scan_file):
    # The scan's own 40° peak as a one-line "standard": zero shift only, near 0.
    result = run(scan_file, "--anode", "Cu", "--standard-two-theta", "40.0", "--json")
    assert result.exit_code == 0, result.output
    std = json.loads(result.stdout)["standard"]
    assert std["n_matched"] == 1 and abs(std["zero_shift"]) < 0.01  # position u ~ 0.001°


def test_peak_table_input(tmp_path):
    path = tmp_path / "t.txt"
    path.write_text("d I\n3.135672 100\n1.920199 55\n", encoding="utf-8")
    result = run(path, "--peak-table", "--anode", "Cu", "--json")
    assert result.exit_code == 0, result.output
    peaks = json.loads(result.stdout)["peaks"]
    # Si 111 and 220 from check-values §7, given to 4 decimals.
    np.testing.assert_allclose([p["two_theta"] for p in peaks], [28.4412, 47.3007], atol=6e-5)
    assert peaks[0]["u_two_theta"] is None


def test_bad_options(scan_file):
    assert run(scan_file, "--anode", "Cu", "--format", "raw").exit_code == 2
    r = run(scan_file, "--anode", "Cu", "--background", "magic")
    assert r.exit_code == 1 and "unknown background method" in r.stderr
    r = run(scan_file, "--anode", "Cu", "--min-significance", "0")
    assert r.exit_code == 1 and "min_significance" in r.stderr


def test_help_lists_formats_and_methods():
    result = CliRunner().invoke(app, ["peaks", "--help"])
    assert result.exit_code == 0
    text = " ".join(result.stdout.split())
    for name in ("xy", "csv", "pdcif", "snip", "asls", "rolling-ball"):
        assert name in text


def test_stdin_input(scan_file):
    result = CliRunner().invoke(app, ["peaks", "-", "--anode", "Cu", "--json"], input=scan_file.read_text())
    assert result.exit_code == 0, result.output
    assert json.loads(result.stdout)["source"] == "<stdin>"


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(min_value=5.0, max_value=90.0), min_size=1, max_size=40))
def test_label_positions_keep_their_gap(positions):
    # Invariant of the label layout: sorted, inside the axis, at least one gap apart whenever
    # the axis has room for all labels (40 × 1.0° < 85°).
    xs = spread_labels(np.sort(positions), 5.0, 90.0, 1.0)
    assert np.all(xs >= 5.0) and np.all(xs <= 90.0)
    assert np.all(np.diff(xs) >= 1.0 - 1e-9)
