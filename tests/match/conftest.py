"""Fixtures shared by the mixture tests."""

from __future__ import annotations

import pytest

from ._mixture_data import ABSENT, build_library


@pytest.fixture(scope="module")
def mixture_library(tmp_path_factory):
    """(open library, {key: entry id}) of every phase in PHASES but :data:`ABSENT`, built with
    refdb's own structure code from the COD files."""
    from refdb.library import open_library

    path = tmp_path_factory.mktemp("lib") / "lib.sqlite"
    ids = build_library(path, absent=(ABSENT,))
    lib = open_library(path)
    yield lib, ids
    lib.close()
