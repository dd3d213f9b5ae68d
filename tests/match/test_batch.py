"""refdb.match.batch: what a worker remembers between scans, and forgetting it between batches."""

from __future__ import annotations

import pytest

from refdb.match import batch
from refdb.match.batch import BatchOptions, run_batch

from ._mixture_data import STRUCTURES, PHASES, build_library, reference, simulate, write_xy


@pytest.fixture()
def library(tmp_path):
    path = tmp_path / "lib.sqlite"
    ids = build_library(path, keys=("quartz", "rutile", "zincite", "periclase"))
    return f"sqlite:///{path}", ids


def test_remembered_entries_serve_what_the_library_serves(library, monkeypatch):
    from refdb.library import open_library

    url, ids = library
    monkeypatch.setattr(batch, "REMEMBERED_ENTRIES", 2)  # smaller than the library: evictions happen
    with open_library(url) as lib:
        remembered = batch._RememberedEntries(lib)
        asks = [
            [ids["quartz"], ids["rutile"]],
            [ids["rutile"], 999_999, ids["zincite"], ids["rutile"]],  # a missing id and a repeat
            [ids["periclase"], ids["quartz"]],
            [],
        ]
        for ask in asks:
            got = remembered.get_many(ask)
            want = lib.get_many(ask)
            assert [e.id for e in got] == [e.id for e in want]
            assert [e.content_hash() for e in got] == [e.content_hash() for e in want]
            assert len(remembered._entries) <= 2
        assert remembered.stamp() == lib.stamp()


def test_each_batch_sees_the_library_as_it_is_now(library, tmp_path):
    from refdb.library import open_library
    from refdb.structure.reference import reference_from_cif

    url, ids = library
    scan, _ = simulate([reference("quartz"), reference("calcite")], [0.6, 0.4], seed=11)
    path = write_xy(scan, tmp_path / "s.xy")
    opts = BatchOptions(library_url=url, mode="search", anode="Cu", top=10)
    first = run_batch([path], opts, workers=1)[0]
    assert first.ok
    assert ids["quartz"] in [c["entry_id"] for c in first.result["candidates"]]
    with open_library(url) as lib:
        calcite = lib.add(reference_from_cif(STRUCTURES / f"{PHASES['calcite'][0]}.cif")).entry_id
    second = run_batch([path], opts, workers=1)[0]
    # The calcite lines in the scan (40 wt %, simulated independently of refdb) are found once
    # calcite is in the library; a batch holding on to the earlier index would not offer it.
    assert calcite not in [c["entry_id"] for c in first.result["candidates"]]
    assert calcite in [c["entry_id"] for c in second.result["candidates"]]
