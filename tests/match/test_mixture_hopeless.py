"""Candidates turned away before refinement (refdb.match.mixture._Context.hopeless).

Scans are simulated independently of refdb (tests/match/_mixture_data.py) from pymatgen's
lines for openly licensed COD structures.
"""

from __future__ import annotations

from refdb.match.mixture import _Context
from refdb.match.refine import DEFAULT_CAGLIOTI, PhaseStart, snip_background

from ._mixture_data import reference, simulate


def _context(scan):
    return _Context(scan, snip_background(scan), DEFAULT_CAGLIOTI, 3, 25.0)


def test_present_phase_goes_on_to_refinement_and_absent_one_does_not():
    quartz, rutile, periclase = reference("quartz", 1), reference("rutile", 2), reference("periclase", 3)
    scan, _ = simulate([quartz, rutile], [0.9, 0.1], seed=3)
    ctx = _context(scan)
    fitted = [quartz]
    starts = [PhaseStart()]
    # Rutile at 10 wt % is in the scan: its lines are there at the start values.
    assert ctx.hopeless(fitted, starts, rutile, PhaseStart()) == ""
    # Periclase (MgO) is not: with quartz fitted, at most a third of its strong lines can
    # carry counts (some may fall on quartz's flanks), so it is turned away unrefined.
    reason = ctx.hopeless(fitted, starts, periclase, PhaseStart())
    assert reason and "before refinement" in reason
