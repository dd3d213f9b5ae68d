"""Export → load → export is byte-identical, and a damaged export adds nothing."""

from __future__ import annotations

import io

import pytest

from refdb.errors import InputError
from refdb.library import open_library
from refdb.library.transfer import export_library, load_export
from tests.library._entries import computed_entry, measured_entry


def _export(lib) -> str:
    buf = io.StringIO()
    export_library(lib, buf)
    return buf.getvalue()


def test_export_load_export_identical(library_url, tmp_path):
    with open_library(library_url, create=True) as lib:
        for i in range(4):
            lib.add(computed_entry(i, tags=("t%d" % i,)))
        lib.add(measured_entry(9, rir=2.5, notes="run on 2026-11-30, Cu tube"))
        lib.set_tags(2, add=["extra"])
        first = _export(lib)
    with open_library(tmp_path / "copy.sqlite", create=True) as other:
        added, present = load_export(other, io.StringIO(first))
        assert (added, present) == (5, 0)
        assert _export(other) == first
        # Loading again adds nothing.
        assert load_export(other, io.StringIO(first)) == (0, 5)


def test_damaged_export_adds_nothing(sqlite_url, tmp_path):
    with open_library(sqlite_url, create=True) as lib:
        lib.add(computed_entry(1))
        lib.add(computed_entry(2))
        text = _export(lib)
    lines = text.splitlines()
    # Edit the second entry's structure (its identity); a computed entry's lines derive from it.
    lines[2] = lines[2].replace("# synthetic 2", "# synthetic 3", 1)
    with open_library(tmp_path / "b.sqlite", create=True) as other:
        with pytest.raises(InputError, match="content hash"):
            load_export(other, io.StringIO("\n".join(lines) + "\n"))
        assert other.count() == 0
        with pytest.raises(InputError, match="not a refdb library export"):
            load_export(other, io.StringIO("hello\n"))
        with pytest.raises(InputError, match="malformed"):
            load_export(other, io.StringIO(lines[0] + "\n{broken\n"))
        assert other.count() == 0
