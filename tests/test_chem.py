"""Formula parsing and Hill formulas (Hill 1900, J. Am. Chem. Soc. 22, 478: C, H, then A–Z)."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from refdb.chem import hill_formula, parse_formula, split_element_list
from refdb.errors import InputError


@pytest.mark.parametrize(
    "text, counts",
    [
        ("Fe3O4", {"Fe": 3, "O": 4}),
        ("Fe3 O4", {"Fe": 3, "O": 4}),
        ("CaSO4·2H2O", {"Ca": 1, "S": 1, "O": 6, "H": 4}),  # gypsum
        ("Zn5(OH)8Cl2*H2O", {"Zn": 5, "O": 9, "H": 10, "Cl": 2}),  # simonkolleite
        ("Ba2 Cu3 O6.9 Y", {"Ba": 2, "Cu": 3, "O": 6.9, "Y": 1}),  # decimal, not a hydrate dot
        ("Ca0.5Mg0.5CO3", {"Ca": 0.5, "Mg": 0.5, "C": 1, "O": 3}),
        ("C3 D3 O7 Sr", {"C": 3, "H": 3, "O": 7, "Sr": 1}),  # deuterium counts as H
    ],
)
def test_parse(text, counts):
    assert parse_formula(text) == pytest.approx(counts)


@pytest.mark.parametrize(
    "counts, hill",
    [
        ({"Fe": 24, "O": 32}, "Fe3O4"),
        ({"Ca": 1, "C": 1, "O": 3}, "CCaO3"),  # carbon first in Hill order
        ({"O": 1, "H": 2}, "H2O"),  # no carbon: plain alphabetical order
        ({"O": 2, "H": 2}, "HO"),  # reduced by the common divisor
        ({"Ba": 2, "Cu": 3, "O": 6.9, "Y": 1}, "Ba2Cu3O6.9Y"),  # non-integers are not reduced
    ],
)
def test_hill(counts, hill):
    assert hill_formula(counts) == hill


@pytest.mark.parametrize("bad", ["", "Xx2", "Fe(OH", "Fe)2", "2", "Fe$"])
def test_bad_formulas(bad):
    with pytest.raises(InputError):
        parse_formula(bad)


def test_element_lists():
    assert split_element_list("fe, O;cl") == ("Cl", "Fe", "O")
    with pytest.raises(InputError):
        split_element_list("Fe,Qq")


ELEMENTS = ["H", "C", "N", "O", "Na", "Mg", "Al", "Si", "S", "Cl", "K", "Ca", "Fe", "Zn"]


@given(st.dictionaries(st.sampled_from(ELEMENTS), st.integers(1, 40), min_size=1, max_size=6))
def test_hill_round_trip(counts):
    # Writing then reading a formula gives the same proportions (reduced by the common divisor).
    back = parse_formula(hill_formula(counts))
    k = next(iter(counts))
    ratio = counts[k] / back[k]
    assert set(back) == set(counts)
    assert all(abs(back[e] * ratio - counts[e]) < 1e-9 for e in counts)
