"""Broken CIFs: each gives its own clear InputError, and ``refdb simulate`` prints one line.

The corpus is tests/data/bad_cifs (written for these tests; see its README).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from refdb.cli.app import app
from refdb.errors import InputError
from refdb.structure import read_crystal, reference_from_cif
from tests.structure._cifs import cubic

CORPUS = Path(__file__).resolve().parents[1] / "data" / "bad_cifs"

EXPECTED = {
    "empty.cif": "is empty",
    "blank_lines.cif": "is empty",
    "binary.cif": "binary file",
    "not_a_cif.cif": "not a CIF",
    "broken_syntax.cif": "not a readable CIF",
    "no_atoms.cif": "no atom coordinates",
    "cartesian_only.cif": "Cartesian but no fractional",
    "unknown_element.cif": "unknown element",
    "negative_length.cif": "not physical",
    "lengths_in_nm.cif": "not nm",
    "angles_do_not_close.cif": "do not close a cell",
    "angles_in_radians.cif": "do not close a cell",
    "volume_mismatch.cif": "_cell_volume 80.0",
    "no_cell.cif": "no unit cell",
    "unknown_space_group.cif": "unknown space group",
    "no_symmetry.cif": "no space group or symmetry operations",
    "bad_symmetry_operation.cif": "unreadable symmetry operation",
    "cell_contradicts_group.cif": "does not have the symmetry",
    "occupancy_above_one.cif": "occupancy outside 0–1",
    "missing_coordinate.cif": "missing coordinates",
    "all_sites_empty.cif": "zero occupancy",
    "text_length.cif": "is not a number",
}


def test_corpus_is_complete():
    assert sorted(p.name for p in CORPUS.glob("*.cif")) == sorted(EXPECTED)


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_each_broken_cif_has_its_own_message(name):
    with pytest.raises(InputError) as info:
        reference_from_cif(CORPUS / name)
    text = info.value.one_line()
    assert EXPECTED[name] in text
    assert "\n" not in text


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_cli_prints_one_line_and_exits_1(name):
    result = CliRunner().invoke(app, ["simulate", str(CORPUS / name)])
    assert result.exit_code == 1
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error:") and EXPECTED[name] in lines[0]
    assert "Traceback" not in result.stderr


def test_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="not found"):
        read_crystal(tmp_path / "nothing.cif")


def test_latin1_file_is_read_with_a_warning(tmp_path):
    """CIF 1.1 is ASCII, but older files carry Latin-1 author names: read them, say so."""
    text = cubic(4.11, "P m -3 m", [("Cs1", "Cs", 0, 0, 0), ("Cl1", "Cl", 0.5, 0.5, 0.5)])
    text = text.replace("data_test\n", "data_test\nloop_\n_publ_author_name\n'Müller, J.'\n")
    path = tmp_path / "latin1.cif"
    path.write_bytes(text.encode("latin-1"))
    crystal = read_crystal(path)
    assert "Müller" in crystal.citation
    assert any("Latin-1" in w for w in crystal.warnings)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=400) | st.text(max_size=400))
def test_arbitrary_bytes_never_escape_as_other_errors(tmp_path_factory, data):
    """Whatever the file holds, the reader either succeeds or raises InputError."""
    path = tmp_path_factory.mktemp("fuzz") / "x.cif"
    path.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
    try:
        read_crystal(path)
    except InputError:
        pass


@settings(max_examples=60, deadline=None)
@given(cut=st.integers(min_value=0, max_value=600))
def test_truncated_cifs_never_escape_as_other_errors(tmp_path_factory, cut):
    """A valid CIF cut anywhere either still reads or raises InputError (never a traceback)."""
    text = cubic(4.11, "P m -3 m", [("Cs1", "Cs", 0, 0, 0, 1, 0.8), ("Cl1", "Cl", 0.5, 0.5, 0.5, 1, 0.9)])
    path = tmp_path_factory.mktemp("cut") / "x.cif"
    path.write_text(text[:cut], encoding="utf-8")
    try:
        read_crystal(path)
    except InputError:
        pass
