"""Ranking and folding of equivalent entries in ``search`` (invented library and peaks)."""

from __future__ import annotations

import numpy as np
import pytest

from refdb.errors import InputError
from refdb.match.index import build_index
from refdb.match.search import group_rows, search
from refdb.records import LibraryArrays
from tests.match._search_data import entry_peaks, make_peaks, synthetic_arrays

BASE = synthetic_arrays(60, seed=41)
TARGET = 7


def _with_copies() -> LibraryArrays:
    """BASE plus two copies of TARGET: one from another source with a cell 0.5 % larger (same
    phase), one with the same lines but another space group (a different phase)."""
    a, b = BASE.line_start[TARGET], BASE.line_start[TARGET + 1]
    n_lines = b - a
    meta = BASE.meta[TARGET]
    same = dict(meta, source_id="other-db-1", cell=tuple(v * 1.005 if i < 3 else v for i, v in enumerate(meta["cell"])),
                volume=meta["volume"] * 1.005**3)
    other_sg = dict(meta, source_id="other-db-2", space_group="P 2 2 2", sg_number=16)
    cat = lambda x: np.concatenate([x, x[a:b], x[a:b]])  # noqa: E731
    start = np.concatenate([BASE.line_start, BASE.line_start[-1] + np.array([n_lines, 2 * n_lines])])
    e = BASE.n_entries
    return LibraryArrays(
        entry_id=np.concatenate([BASE.entry_id, [9001, 9002]]), kind=np.zeros(e + 2, np.int8),
        wavelength=np.full(e + 2, np.nan), line_start=start,
        line_entry=np.repeat(np.arange(e + 2, dtype=np.int32), np.diff(start)), d=cat(BASE.d),
        multiplicity=cat(BASE.multiplicity), f2=cat(BASE.f2), intensity=cat(BASE.intensity),
        meta=BASE.meta + (same, other_sg), stamp="copies",
    )


INDEX = build_index(_with_copies())


def test_equivalent_entry_is_folded_and_a_different_phase_is_not():
    res = search(entry_peaks(BASE, TARGET), INDEX, top=5)
    first = res.candidates[0]
    ids = [c.entry_id for c in res.candidates]
    assert first.entry_id in (int(BASE.entry_id[TARGET]), 9001)
    # The same phase from another source is folded into the first candidate …
    assert set(first.equivalents) | {first.entry_id} == {int(BASE.entry_id[TARGET]), 9001}
    assert 9001 not in ids[1:] and int(BASE.entry_id[TARGET]) not in ids[1:]
    # … but identical lines in another space group are another phase, listed on their own.
    assert 9002 in ids


def test_group_rows_respects_top_and_keeps_order():
    rows = INDEX.row_of([int(BASE.entry_id[TARGET]), 9002, 9001, int(BASE.entry_id[3])]).tolist()
    groups = group_rows(INDEX, rows, 2)
    assert [g[0] for g in groups] == rows[:2]
    assert groups[0][1] == [rows[2]]


def test_candidates_are_best_first_and_counts_are_reported():
    res = search(entry_peaks(BASE, 11, jitter=0.01), INDEX, top=10, elements_excluded=["Og"])
    scores = [c.score for c in res.candidates]
    assert scores == sorted(scores, reverse=True)
    assert res.n_entries == BASE.n_entries + 2
    expected = sum("Og" not in m["elements"] for m in BASE.meta) + 2 * ("Og" not in BASE.meta[TARGET]["elements"])
    assert res.n_considered == expected
    assert len(res.candidates) <= 10
    d = res.to_dict()
    assert d["candidates"][0]["entry_id"] == res.candidates[0].entry_id


@pytest.mark.parametrize("bad", [
    dict(two_theta=[], intensity=[]),
    dict(two_theta=[30.0, 20.0], intensity=[1.0, 1.0]),
    dict(two_theta=[30.0, 190.0], intensity=[1.0, 1.0]),
])
def test_bad_peak_lists_are_input_errors(bad):
    with pytest.raises(InputError):
        search(make_peaks(np.array(bad["two_theta"]), np.array(bad["intensity"])), INDEX)


def test_top_must_be_positive():
    with pytest.raises(InputError):
        search(entry_peaks(BASE, 3), INDEX, top=0)


def test_identical_lines_in_another_space_group_are_reported_as_tied():
    """Entry 9002 has TARGET's lines under another space group: the peaks cannot tell the two
    apart, so the search says the leaders are tied (and a unique match is not)."""
    res = search(entry_peaks(BASE, TARGET), INDEX, top=5)
    ids = [c.entry_id for c in res.candidates]
    assert res.n_tied >= 2 and 9002 in ids[: res.n_tied]
    assert any("cannot tell them apart" in n for n in res.notes)
    assert res.to_dict()["n_tied"] == res.n_tied
    lone = search(entry_peaks(BASE, 11, jitter=0.01), INDEX, top=5)
    assert lone.n_tied == 1 and not any("cannot tell" in n for n in lone.notes)


def test_shortlist_bounds_the_detailed_score():
    peaks = entry_peaks(BASE, 11, jitter=0.01)
    wide = search(peaks, INDEX, top=10, shortlist=50)
    narrow = search(peaks, INDEX, top=10, shortlist=1)
    # One entry scored in detail gives at most one candidate (with its folded equivalents);
    # it is the prefilter's first, which on the target's own peaks is the target's group.
    assert len(narrow.candidates) == 1
    assert narrow.candidates[0].entry_id == wide.candidates[0].entry_id
    with pytest.raises(InputError):
        search(peaks, INDEX, shortlist=0)
