"""Element, tag and kind filters: the 128-bit mask logic against plain Python sets."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from refdb.errors import InputError
from refdb.match.index import build_index
from refdb.match.search import entry_filter, make_filters
from tests.match._search_data import ELEMENT_POOL, synthetic_arrays

ARRAYS = synthetic_arrays(120, seed=11)
INDEX = build_index(ARRAYS)


def slow_filter(required, allowed, excluded, tags, kind) -> np.ndarray:
    out = []
    for m in ARRAYS.meta:
        els = set(m["elements"])
        ok = set(required) <= els
        ok &= allowed is None or els <= set(allowed)
        ok &= not (els & set(excluded))
        ok &= set(tags) <= set(m["tags"])
        ok &= kind in (None, "computed")
        out.append(ok)
    return np.array(out)


elements = st.lists(st.sampled_from(ELEMENT_POOL), max_size=4, unique=True)


@settings(max_examples=150, deadline=None)
@given(req=elements, allowed=st.none() | st.lists(st.sampled_from(ELEMENT_POOL), min_size=3, max_size=12, unique=True),
       excl=elements, tags=st.lists(st.sampled_from(["mineral", "pigment"]), max_size=2, unique=True),
       kind=st.sampled_from([None, "computed", "measured"]))
def test_mask_logic_equals_set_logic(req, allowed, excl, tags, kind):
    if set(req) & set(excl) or (allowed is not None and not set(req) <= set(allowed)):
        with pytest.raises(InputError):
            make_filters(elements_required=req, elements_allowed=allowed, elements_excluded=excl)
        return
    f = make_filters(elements_required=req, elements_allowed=allowed, elements_excluded=excl, tags=tags, kind=kind)
    np.testing.assert_array_equal(entry_filter(INDEX, f), slow_filter(req, allowed, excl, tags, kind))


def test_high_z_elements_use_the_second_word():
    # Og (Z = 118) and U (Z = 92) live in the second 64-bit word.
    f = make_filters(elements_required=["Og"])
    np.testing.assert_array_equal(entry_filter(INDEX, f), slow_filter(["Og"], None, [], [], None))
    assert entry_filter(INDEX, f).any()
    f = make_filters(elements_excluded=["U", "Og"])
    np.testing.assert_array_equal(entry_filter(INDEX, f), slow_filter([], None, ["U", "Og"], [], None))


def test_symbols_are_normalised_and_checked():
    f = make_filters(elements_required=[" fe", "O "])
    assert f.elements_required == ("Fe", "O")
    with pytest.raises(InputError, match="unknown element"):
        make_filters(elements_required=["Xx"])
    with pytest.raises(InputError, match="kind"):
        make_filters(kind="guessed")


def test_unknown_tag_selects_nothing():
    assert not entry_filter(INDEX, make_filters(tags=["no-such-tag"])).any()
