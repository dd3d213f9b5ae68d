"""Search index: build, save/load round trip, stamp-triggered rebuild, strong-line table.

The strong-line table is checked against a slow, obvious per-entry computation written here
(Bragg's law and the Bragg–Brentano LP factor, (1 + cos²2θ)/(sin²θ cos θ), as given in
pymatgen's XRDCalculator and in ../shared/check-values.md §6).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from refdb.errors import LibraryError
from refdb.match.index import (
    STRONG_LINES,
    SORTED_MIN_WEIGHT,
    STRONG_MAX_TWO_THETA,
    build_index,
    element_mask,
    load_index,
    read_index,
)
from refdb.records import LibraryArrays
from tests.match._search_data import LAMBDA, lp, synthetic_arrays


class FakeLibrary:
    """The three methods load_index needs, over fixed arrays and a settable stamp."""

    def __init__(self, arrays: LibraryArrays, cache: Path) -> None:
        self._arrays = arrays
        self._cache = cache
        self.builds = 0

    def stamp(self) -> str:
        return self._arrays.stamp

    def arrays(self) -> LibraryArrays:
        self.builds += 1
        return self._arrays

    def cache_dir(self) -> Path:
        return self._cache


def test_round_trip_keeps_every_array(tmp_path):
    arrays = synthetic_arrays(40, seed=2)
    idx = build_index(arrays)
    idx.strong_lines(LAMBDA)
    idx.save(tmp_path / "ix")
    back = read_index(tmp_path / "ix")
    for name in ("entry_id", "kind", "line_start", "line_entry", "d", "strength", "elements", "sg_number", "cell"):
        np.testing.assert_array_equal(np.asarray(getattr(back, name)), np.asarray(getattr(idx, name)), err_msg=name)
    assert back.tag_names == idx.tag_names
    assert back.stamp == arrays.stamp
    assert [back.text_of("name", r) for r in range(40)] == [m["name"] for m in arrays.meta]
    assert back.tags_of(0) == tuple(sorted(arrays.meta[0]["tags"]))
    s1, s2 = idx.strong_lines(LAMBDA), back.strong_lines(LAMBDA)
    np.testing.assert_array_equal(np.asarray(s2.sorted_log_d), s1.sorted_log_d)
    # The reflection arrays are memory-mapped (read-only views of the file), not read in.
    assert not back.d.flags.owndata and not back.d.flags.writeable
    assert not list(tmp_path.glob("*.tmp-*"))


def test_strength_is_multiplicity_times_f2_and_d_is_float32():
    arrays = synthetic_arrays(5, seed=4)
    idx = build_index(arrays)
    # float32 keeps ~7 significant digits: relative 1e-6 is the rounding of the stored value.
    np.testing.assert_allclose(idx.strength, arrays.f2 * arrays.multiplicity, rtol=1e-6)
    assert idx.d.dtype == np.float32 and idx.strength.dtype == np.float32


def test_load_index_caches_and_rebuilds_when_the_stamp_changes(tmp_path):
    arrays = synthetic_arrays(30, seed=5, stamp="first")
    lib = FakeLibrary(arrays, tmp_path)
    a = load_index(lib)
    assert lib.builds == 1 and a.stamp == "first"
    b = load_index(lib)
    assert lib.builds == 1, "a matching stamp must reuse the cached index"
    assert b.n_entries == 30
    lib._arrays = synthetic_arrays(31, seed=5, stamp="second")
    c = load_index(lib)
    assert lib.builds == 2 and c.stamp == "second" and c.n_entries == 31
    manifest = json.loads((tmp_path / "search-index-v1" / "manifest.json").read_text())
    assert manifest["stamp"] == "second"


def test_corrupt_cache_is_rebuilt(tmp_path):
    lib = FakeLibrary(synthetic_arrays(10, seed=6, stamp="x"), tmp_path)
    load_index(lib)
    (tmp_path / "search-index-v1" / "d.npy").write_bytes(b"not an array")
    idx = load_index(lib)
    assert lib.builds == 2 and idx.n_entries == 10


def test_unwritable_cache_still_gives_an_index(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("a file where the cache folder should be")
    lib = FakeLibrary(synthetic_arrays(8, seed=7), blocker)
    idx = load_index(lib)
    assert idx.n_entries == 8


def test_inconsistent_offsets_are_a_library_error():
    arrays = synthetic_arrays(3, seed=1)
    bad = LibraryArrays(**{**arrays.__dict__, "line_start": arrays.line_start[::-1].copy()})
    with pytest.raises(LibraryError):
        build_index(bad)


def test_row_of_unknown_id_is_a_library_error():
    idx = build_index(synthetic_arrays(3, seed=1))
    assert list(idx.row_of([30, 10])) == [2, 0]
    with pytest.raises(LibraryError):
        idx.row_of([11])


def test_element_mask_bits():
    m = element_mask(["H", "Og", "Gd"])
    # Z = 1 → bit 0 of word 0; Og Z = 118 → bit 53 of word 1; Gd Z = 64 → bit 63 of word 0.
    assert int(m[0]) == (1 | (1 << 63)) and int(m[1]) == 1 << 53


def _slow_strong(arrays: LibraryArrays, row: int, lam: float) -> tuple[np.ndarray, np.ndarray]:
    a, b = arrays.line_start[row], arrays.line_start[row + 1]
    d = arrays.d[a:b]
    tt = 2 * np.degrees(np.arcsin(np.clip(lam / (2 * d), 0, 1)))
    inten = arrays.f2[a:b] * arrays.multiplicity[a:b] * lp(tt)
    ok = tt <= STRONG_MAX_TWO_THETA
    d, inten = d[ok], inten[ok]
    order = np.argsort(-inten, kind="stable")[:STRONG_LINES]
    return d[order], inten[order] / inten.max()


@pytest.mark.parametrize("lam", [LAMBDA, 0.70931713])
def test_strong_table_matches_slow_per_entry_computation(lam):
    arrays = synthetic_arrays(25, seed=8)
    table = build_index(arrays).strong_lines(lam)
    for row in range(25):
        d, w = _slow_strong(arrays, row, lam)
        got_d = np.exp(table.log_d[row][np.isfinite(table.log_d[row])])
        # Same set of lines (order among equal intensities may differ); float32 storage: 1e-6.
        np.testing.assert_allclose(np.sort(got_d), np.sort(d), rtol=1e-6)
        # 1e-4: weights are float32 ratios; lines of nearly equal d and intensity may trade
        # places, which moves a weight in the 5th digit.
        np.testing.assert_allclose(np.sort(table.weight[row][: d.size]), np.sort(w), rtol=1e-4)
    flat = table.log_d.reshape(-1)
    np.testing.assert_array_equal(flat[table.sorted_slot], table.sorted_log_d)
    strong_enough = np.isfinite(flat) & (table.weight.reshape(-1) >= SORTED_MIN_WEIGHT)
    assert np.array_equal(np.sort(table.sorted_slot), np.flatnonzero(strong_enough))
    assert np.all(np.diff(table.sorted_log_d) >= 0)


def test_strong_tables_are_cached_per_wavelength(tmp_path):
    lib = FakeLibrary(synthetic_arrays(12, seed=9), tmp_path)
    idx = load_index(lib)
    idx.strong_lines(0.70931713)
    assert list((tmp_path / "search-index-v1").glob("strong*_0.7093_log_d.npy"))
    again = load_index(lib)
    np.testing.assert_array_equal(np.asarray(again.strong_lines(0.70931713).log_d),
                                  np.asarray(idx.strong_lines(0.70931713).log_d))


def test_measured_entries_are_converted_to_the_query_wavelength():
    """A measured line keeps its d; its intensity gains LP(λ_query)/LP(λ_own)."""
    d = np.array([3.0, 2.0])
    inten = np.array([100.0, 50.0])
    arrays = LibraryArrays(
        entry_id=np.array([1]), kind=np.array([1], dtype=np.int8), wavelength=np.array([LAMBDA]),
        line_start=np.array([0, 2]), line_entry=np.zeros(2, np.int32), d=d,
        multiplicity=np.zeros(2, np.int32), f2=np.full(2, np.nan), intensity=inten,
        meta=({"name": "m", "elements": ("Fe",)},), stamp="m",
    )
    idx = build_index(arrays)
    tt, out = idx.line_intensity(np.zeros(2, np.int64), np.arange(2), 0.70931713)
    t_own = 2 * np.degrees(np.arcsin(LAMBDA / (2 * d)))
    t_new = 2 * np.degrees(np.arcsin(0.70931713 / (2 * d)))
    # Pure arithmetic on float32-stored inputs: 1e-6 relative.
    np.testing.assert_allclose(out, inten * lp(t_new) / lp(t_own), rtol=1e-6)
    np.testing.assert_allclose(tt, t_new, rtol=1e-6)
