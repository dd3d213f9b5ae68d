"""Two entries of one lattice: the swap test of the decomposition (refdb.match.mixture._swap_trial).

Fluorite (CaF₂, COD 9009005) and zinc-blende AlP (COD 9008831) have face-centred cubic cells
equal to 0.2 %, so their reflections coincide; their intensities differ (fluorite's 220 is
nearly as strong as its 111, AlP's 111 leads clearly; from memory, and not relied on: the
scans below are drawn from pymatgen's intensities). Whichever is accepted first makes the
other look like a patch on its misfit. Scans are simulated independently of refdb
(tests/match/_mixture_data.py) from pymatgen's lines.
"""

from __future__ import annotations

from refdb.match.mixture import _Context, _carry, _swap_trial
from refdb.match.refine import DEFAULT_CAGLIOTI, PhaseStart, snip_background

from ._mixture_data import reference, simulate


def _alp_accepted_fluorite_tried(present: str):
    """Calcite with 5 wt % of ``present``; calcite and AlP refined; fluorite added to them."""
    calcite, fluorite, alp = reference("calcite", 1), reference("fluorite", 2), reference("aluminium phosphide", 3)
    scan, _ = simulate([calcite, {"fluorite": fluorite, "aluminium phosphide": alp}[present]], [0.95, 0.05], seed=12)
    ctx = _Context(scan, snip_background(scan), DEFAULT_CAGLIOTI, 3, 25.0)
    accepted = [calcite, alp]
    fit = ctx.refine(accepted, [PhaseStart(), PhaseStart()])
    carried = _carry(fit, [PhaseStart(), PhaseStart()])
    trial = ctx.refine(accepted + [fluorite], carried + [PhaseStart()], evaluations=20)
    return ctx, accepted, carried, trial, fluorite, fit.chi2


def test_the_entry_whose_intensities_fit_takes_the_place_of_the_one_accepted_first():
    ctx, refs, carried, trial, fluorite, chi2_now = _alp_accepted_fluorite_tried("fluorite")
    swapped = _swap_trial(ctx, refs, carried, trial, 1, fluorite, PhaseStart(), chi2_now)
    assert swapped is not None
    fit, _, verdict, q = swapped
    assert q == 1 and verdict.ok
    # The true phase explains the scan better with as many parameters: a lower χ², by more
    # than the 25 the acceptance threshold asks of a whole phase (its 111:220 ratio is right).
    assert fit.chi2 < chi2_now - 25.0


def test_the_phase_that_is_there_is_kept():
    ctx, refs, carried, trial, fluorite, chi2_now = _alp_accepted_fluorite_tried("aluminium phosphide")
    assert _swap_trial(ctx, refs, carried, trial, 1, fluorite, PhaseStart(), chi2_now) is None
