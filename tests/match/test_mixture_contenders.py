"""Close contenders of a decomposition round: one far behind the best refined one is not
refined (refdb.match.mixture.CONTENDER_REACH), and that changes nothing in the result.

Cerianite (CeO₂, COD 9009008) and fluorite (CaF₂, COD 9009005) share the fluorite structure
type with cells 1 % apart (5.41 and 5.46 Å, from memory), so a d-scale moves one onto the
other's reflections and both come out of the search as candidates; their intensities differ
(cerium scatters far more than calcium). Scans are drawn independently of refdb from
pymatgen's lines (tests/match/_mixture_data.py); the truth is what was drawn.
"""

from __future__ import annotations

import math

import pytest

import refdb.match.mixture as mixture
from refdb.match.mixture import decompose

from ._mixture_data import reference, simulate


_REFINE = mixture._Context.refine
_REACH = mixture.CONTENDER_REACH


def _run(lib, scan, monkeypatch, reach):
    trials = []
    refine = _REFINE

    def counting(self, refs, starts, *, quick=False, evaluations=40):
        if not quick and evaluations == mixture.TRIAL_EVALUATIONS:
            trials.append(refs[-1].name)
        return refine(self, refs, starts, quick=quick, evaluations=evaluations)

    monkeypatch.setattr(mixture._Context, "refine", counting)
    monkeypatch.setattr(mixture, "CONTENDER_REACH", reach)
    return decompose(scan, lib), trials


@pytest.mark.parametrize("seed", [4, 5])
def test_far_contenders_are_skipped_without_changing_the_result(mixture_library, monkeypatch, seed):
    lib, _ = mixture_library
    scan, _ = simulate([reference("cerianite"), reference("quartz")], [0.7, 0.3], zero_shift=0.02, seed=seed)
    every, every_trials = _run(lib, scan, monkeypatch, math.inf)
    res, trials = _run(lib, scan, monkeypatch, _REACH)
    assert {p.name for p in res.phases} == {"Cerianite", "Quartz"}  # what was drawn
    assert [p.entry_id for p in res.phases] == [p.entry_id for p in every.phases]
    # Not bit-equal: each full refinement hands its pseudo-Voigt mixing on as the next one's
    # start, so a refinement less shifts where later ones begin. 1e-4 (0.01 wt %) is a tenth
    # of the weight fractions' standard uncertainty here.
    for p, q in zip(res.phases, every.phases, strict=True):
        assert p.weight_fraction == pytest.approx(q.weight_fraction, abs=1e-4)
    assert res.rwp == pytest.approx(every.rwp, rel=1e-4)
    # Fluorite was refined as a contender when every contender is, and not otherwise.
    assert "Fluorite" in every_trials and "Fluorite" not in trials
    assert len(trials) < len(every_trials)
