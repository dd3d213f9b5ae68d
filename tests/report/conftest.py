"""A decomposition result to render: quartz + rutile with an absent hematite, from a library
built from COD structures (see ``tests/match/_mixture_data.py``)."""

from __future__ import annotations

import pytest

from tests.match._mixture_data import build_library, reference, simulate


@pytest.fixture(scope="session")
def mixture_results(tmp_path_factory):
    from refdb.library import open_library
    from refdb.match.mixture import decompose

    path = tmp_path_factory.mktemp("report-lib") / "lib.sqlite"
    build_library(path)
    scan, _ = simulate([reference("quartz"), reference("rutile"), reference("hematite")], [0.7, 0.1, 0.2], seed=8)
    scan_absent_only, _ = simulate([reference("hematite")], [1.0], seed=9)
    with open_library(path) as lib:
        return decompose(scan, lib), decompose(scan_absent_only, lib)
