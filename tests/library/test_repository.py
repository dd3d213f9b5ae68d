"""The library stores what it is given, finds it by the indexed filters, and refuses bad data."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from refdb.errors import InputError, LibraryError, NotFoundError
from refdb.library import open_library
from refdb.records import PatternLines, ReferenceData
from tests.library._entries import computed_entry, measured_entry


def test_add_get_round_trip(library_url):
    with open_library(library_url, create=True) as lib:
        data = computed_entry(1, tags=("rust", "oxide"))
        res = lib.add(data)
        assert res.created
        e = lib.get(res.entry_id)
        assert e.name == data.name and e.kind == "computed"
        np.testing.assert_array_equal(e.lines.d, data.lines.d)  # doubles stored exactly
        np.testing.assert_array_equal(e.lines.hkl, data.lines.hkl)
        np.testing.assert_array_equal(e.lines.multiplicity, data.lines.multiplicity)
        np.testing.assert_array_equal(e.lines.f2, data.lines.f2)
        assert e.lines.intensity is None
        assert e.tags == ("oxide", "rust")
        assert e.cell == data.cell and e.rir == data.rir and e.cell_mass == data.cell_mass
        assert e.content_hash_value == data.content_hash()


def test_same_structure_twice_is_one_entry(library_url):
    with open_library(library_url, create=True) as lib:
        a = lib.add(computed_entry(2))
        # The same CIF text with Windows line ends and trailing blanks is the same structure.
        text = computed_entry(2).structure_text.replace("\n", "  \r\n")
        b = lib.add(computed_entry(2, structure_text=text, name="another name"))
        assert a.entry_id == b.entry_id and not b.created
        assert lib.count() == 1


def test_element_text_tag_kind_filters(library_url):
    with open_library(library_url, create=True) as lib:
        i1 = lib.add(computed_entry(1)).entry_id  # Fe O
        i2 = lib.add(measured_entry(2, tags=("carbonate",))).entry_id  # C Ca O
        i3 = lib.add(
            computed_entry(3, formula="Fe O O H", formula_reduced="FeHO2", elements=("Fe", "H", "O"), name="goethite-like")
        ).entry_id
        ids = lambda rows: [r.id for r in rows]  # noqa: E731
        assert ids(lib.list(elements_required=["Fe"])) == [i1, i3]
        assert ids(lib.list(elements_required=["Fe", "H"])) == [i3]
        assert ids(lib.list(elements_excluded=["H"])) == [i1, i2]
        assert ids(lib.list(elements_allowed=["Fe", "O"])) == [i1]
        assert ids(lib.list(text="GOETH")) == [i3]
        assert ids(lib.list(text="100%")) == []  # % is matched literally, not as a wildcard
        assert ids(lib.list(tags=["carbonate"])) == [i2]
        assert ids(lib.list(kind="measured")) == [i2]
        with pytest.raises(InputError):
            lib.list(kind="simulated")


def test_stamp_changes_on_add_change_remove(library_url):
    with open_library(library_url, create=True) as lib:
        s0 = lib.stamp()
        eid = lib.add(computed_entry(5)).entry_id
        s1 = lib.stamp()
        lib.set_tags(eid, add=["x"])
        s2 = lib.stamp()
        lib.set_tags(eid, add=["x"])  # no change, no new stamp
        assert lib.stamp() == s2
        lib.remove(eid)
        s3 = lib.stamp()
        assert len({s0, s1, s2}) == 3 and s3 == s0  # empty library again


def test_remove_cascades_to_reflections(library_url):
    with open_library(library_url, create=True) as lib:
        eid = lib.add(computed_entry(7)).entry_id
        lib.add(computed_entry(8))
        lib.remove(eid)
        arr = lib.arrays()
        assert arr.n_entries == 1 and len(arr.d) == 40
        with pytest.raises(NotFoundError):
            lib.get(eid)


def test_arrays_layout(library_url):
    with open_library(library_url, create=True) as lib:
        a = lib.add(computed_entry(1, n_lines=10)).entry_id
        b = lib.add(measured_entry(2, n_lines=5)).entry_id
        arr = lib.arrays()
        assert list(arr.entry_id) == [a, b]
        assert list(arr.line_start) == [0, 10, 15]
        assert list(arr.kind) == [0, 1]
        assert np.isnan(arr.f2[10:]).all() and np.isnan(arr.intensity[:10]).all()
        assert np.isnan(arr.wavelength[0]) and arr.wavelength[1] == pytest.approx(1.5405929)
        assert arr.meta[1]["source_id"] == "std-2"
        assert arr.stamp == lib.stamp()


@pytest.mark.parametrize(
    "bad, message",
    [
        (dict(lines=PatternLines(d=np.array([])), ), "no lines"),
        (dict(lines=PatternLines(d=np.array([2.0, -1.0]), f2=np.ones(2))), "positive"),
        (dict(lines=PatternLines(d=np.array([2.0, 1.0]), f2=np.ones(3))), "3 values"),
        (dict(lines=PatternLines(d=np.array([2.0, 1.0]))), "|F|²"),
        (dict(name="  "), "name"),
    ],
)
def test_bad_entries_leave_no_trace(library_url, bad, message):
    with open_library(library_url, create=True) as lib:
        before = lib.stamp()
        with pytest.raises(InputError, match=message.replace("|", r"\|")):
            lib.add(computed_entry(9, **bad))
        assert lib.count() == 0 and lib.stamp() == before


def test_measured_needs_wavelength(library_url):
    with open_library(library_url, create=True) as lib:
        with pytest.raises(InputError, match="wavelength"):
            lib.add(measured_entry(1, wavelength=None))


def test_missing_library_is_refused(tmp_path):
    with pytest.raises(LibraryError, match="refdb init"):
        open_library(tmp_path / "nothing.sqlite")
    assert not (tmp_path / "nothing.sqlite").exists()  # looking must not create a file


def test_not_a_database(tmp_path):
    p = tmp_path / "notes.sqlite"
    p.write_text("this is not a database\n" * 100)
    with pytest.raises(LibraryError, match="not a refdb library|not a SQLite"):
        open_library(p)


# Hypothesis: whatever valid numbers go in come back bit-identical (SQLite here; the
# PostgreSQL backend is covered by the fixed cases above).
finite = st.floats(min_value=1e-3, max_value=1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(d=st.lists(st.floats(min_value=0.3, max_value=50), min_size=1, max_size=30, unique=True), f2=st.data())
def test_round_trip_property(tmp_path_factory, d, f2):
    path = tmp_path_factory.mktemp("prop") / "lib.sqlite"
    values = f2.draw(st.lists(finite, min_size=len(d), max_size=len(d)))
    d_sorted = np.array(sorted(d, reverse=True))
    data = ReferenceData(
        kind="computed", name="p", formula="Si", formula_reduced="Si", elements=("Si",),
        lines=PatternLines(d=d_sorted, hkl=np.zeros((len(d), 3), int), multiplicity=np.ones(len(d), int), f2=np.array(values)),
        structure_text=f"data_p\n# {d_sorted.tolist()} {values}\n",
    )
    with open_library(path, create=True) as lib:
        e = lib.get(lib.add(data).entry_id)
    np.testing.assert_array_equal(e.lines.d, d_sorted)
    np.testing.assert_array_equal(e.lines.f2, np.array(values))
