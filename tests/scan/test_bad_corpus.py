"""Every broken file in tests/data/bad_scans is refused with one line, exit 1, no traceback.

The corpus and the expected messages are ours (invented files); the rule they check is the
project's: bad input gets a clear one-line message and a non-zero exit.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from refdb.cli.app import app
from refdb.errors import InputError
from refdb.radiation import radiation_for
from refdb.scan import load_scan

CORPUS = Path(__file__).resolve().parents[1] / "data" / "bad_scans"

#: File name → a fragment the message must contain.
EXPECTED = {
    "empty.xy": "is empty",
    "comments_only.xy": "has no data lines",
    "binary.xy": "looks like a binary file",
    "latin1.xy": "is not UTF-8 text (byte 0xb0 on line 2)",
    "text_row.xy": "line 27: 'n/a' is not a number",
    "nan_counts.xy": "line 13: counts is nan",
    "inf_angle.xy": "line 8: 2θ is inf",
    "negative_counts.xy": "line 15: negative counts (-15)",
    "duplicate_angles.xy": "lines 10 and 11: 2θ = 20.14° appears twice",
    "too_few_points.xy": "has only 10 points",
    "angle_out_of_range.xy": "is outside (0°, 180°)",
    "radians.xy": "2θ runs from 0.17453 to 1.37881, all below π — this looks like radians",
    "d_list.txt": "looks like a peak list (d-spacings",
    "one_column.xy": "line 3: 1 column where 2 are needed",
    "ragged_rows.xy": "line 33: expected 2 columns, found 1",
    "no_radiation.xy": "does not say which radiation was used",
    "bad_wavelength.xy": "wavelength 154.06 is outside 0.1–5 Å",
    "unknown_anode.xy": "unknown anode 'Xq'",
    "header_mismatch.csv": "the header names 3 columns but the rows have 2",
    "broken_syntax.cif": "is not valid CIF",
    "no_counts.cif": "has no powder data block",
    "range_mismatch.cif": "has 501 points but 30 counts",
    "unknown_counts.cif": "row 13 is '?', not a number",
}


def test_every_corpus_file_has_an_expectation():
    files = {p.name for p in CORPUS.iterdir() if p.name != "README.md"}
    assert files == set(EXPECTED)


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_api_raises_input_error(name):
    with pytest.raises(InputError) as info:
        load_scan(CORPUS / name)
    assert EXPECTED[name] in info.value.one_line()
    assert "\n" not in info.value.one_line()


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_cli_one_line_exit_1(name):
    runner = CliRunner()
    result = runner.invoke(app, ["peaks", str(CORPUS / name)])
    assert result.exit_code == 1, result.output
    assert result.stdout == ""
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("Error: ")
    assert EXPECTED[name] in " ".join(lines[0].split()) or EXPECTED[name] in lines[0]
    assert "Traceback" not in result.output


def test_radiation_given_does_not_hide_file_errors():
    # The option only fills in a missing radiation; a broken row is still refused.
    with pytest.raises(InputError, match="not a number"):
        load_scan(CORPUS / "text_row.xy", radiation=radiation_for("Cu"))
