"""Sticks moved by a d-scale (refdb.match._phase_lines.PhaseSticks.moved) against Bragg's law
and the Lorentz–polarisation factor written out here from the textbook.

LP = (1 + cos²2θ)/(sin²θ·cos θ) for an unpolarised beam without a monochromator (International
Tables for Crystallography Vol. C, §6.2.5; from memory); with a diffracted-beam monochromator
at 2θ_M the polarisation term becomes (1 + cos²2θ_M·cos²2θ)/(1 + cos²2θ_M) (Azároff 1955, Acta
Cryst. 8, 701; from memory). Only ratios enter, so the normalisation does not matter.
The reference is the seed structure of quartz (seeds/PROVENANCE.md).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from refdb.match._phase_lines import phase_sticks
from refdb.radiation import radiation_for
from refdb.structure import reference_from_cif

SEEDS = Path(__file__).resolve().parents[2] / "seeds" / "structures"


def _lp(two_theta: np.ndarray, mono: float | None) -> np.ndarray:
    t = np.radians(two_theta)
    cm = 1.0 if mono is None else np.cos(np.radians(mono)) ** 2
    return (1.0 + cm * np.cos(t) ** 2) / (np.sin(t / 2.0) ** 2 * np.cos(t / 2.0))


@pytest.mark.parametrize("mono", [None, 26.6])  # 26.6°: graphite 002 for Cu Kα (common practice, no source)
@pytest.mark.parametrize("d_scale", [0.985, 1.0, 1.013])
def test_moved_sticks_follow_bragg_and_lp(d_scale, mono):
    rad = radiation_for("Cu", monochromator_two_theta=mono) if mono else radiation_for("Cu")
    ref = reference_from_cif(SEEDS / "quartz.cif")
    ph = phase_sticks(ref, rad, (10.0, 80.0))
    tt, strength = ph.moved(d_scale)
    expected_tt = 2.0 * np.degrees(np.arcsin(ph.wavelength / (2.0 * ph.d * d_scale)))
    # Bragg's law in double precision: 1e-9° is rounding, far below any measured position.
    np.testing.assert_allclose(tt, expected_tt, rtol=0, atol=1e-9)
    expected = ph.strength * _lp(expected_tt, mono) / _lp(ph.two_theta, mono)
    # Same factors, other order of products: 1e-12 relative is rounding.
    np.testing.assert_allclose(strength, expected, rtol=1e-12)
    assert np.all(strength > 0)
