"""The public API of refdb.structure: names, fixed result shapes, no side effects."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

import refdb.structure as structure
from refdb.radiation import radiation_for
from refdb.records import PatternLines
from tests.structure._cifs import cubic

TEXT = cubic(4.11, "P m -3 m", [("Cs1", "Cs", 0, 0, 0, 1, 1.2), ("Cl1", "Cl", 0.5, 0.5, 0.5, 1, 1.5)])


def test_public_names():
    for name in ("read_crystal", "compute_reflections", "reference_from_cif", "stick_pattern", "draw_profile",
                 "simulate_scan", "Crystal", "Sticks", "corundum_reference", "compute_rir"):
        assert name in structure.__all__ and hasattr(structure, name)


def test_results_are_frozen_dataclasses_with_documented_fields():
    crystal = structure.read_crystal(TEXT)
    sticks = structure.stick_pattern(structure.reference_from_crystal(crystal), radiation_for("Cu"))
    with pytest.raises(dataclasses.FrozenInstanceError):
        crystal.name = "x"  # type: ignore[misc]
    assert [f.name for f in dataclasses.fields(sticks)] == [
        "two_theta", "d", "hkl", "multiplicity", "intensity", "absolute", "line_name", "line_index", "radiation",
    ]
    n = len(sticks)
    assert sticks.d.shape == (n,) and sticks.hkl.shape == (n, 3) and len(sticks.line_name) == n


def test_repeated_calls_agree_and_inputs_are_not_changed():
    crystal = structure.read_crystal(TEXT)
    frac = crystal.frac.copy()
    a = structure.compute_reflections(crystal)
    b = structure.compute_reflections(crystal)
    np.testing.assert_array_equal(a.f2, b.f2)
    np.testing.assert_array_equal(crystal.frac, frac)
    lines = PatternLines(d=a.d.copy(), hkl=a.hkl.copy(), multiplicity=a.multiplicity.copy(), f2=a.f2.copy())
    structure.stick_pattern(lines, radiation_for("Mo"))
    np.testing.assert_array_equal(lines.f2, a.f2)
    np.testing.assert_array_equal(lines.d, a.d)
