"""Whole-profile refinement against synthetic scans of real structures.

Reference lines: pymatgen's XRD calculator on COD structures (independent calculator, see
``_mixture_data``). Scans: drawn by the test helper, not by the code under test.
"""

from __future__ import annotations

import numpy as np
import pytest

from refdb.errors import InputError
from refdb.geometry import peak_shift
from refdb.match.quant import quantify
from refdb.match.refine import PhaseStart, caglioti_from_widths, refine_mixture
from refdb.records import PatternLines

from ._mixture_data import march_dollase, reference, simulate

FOUR = ("quartz", "corundum", "calcite", "rutile")


@pytest.fixture(scope="module")
def four_phase():
    refs = [reference(k) for k in FOUR]
    truth = [0.50, 0.30, 0.15, 0.05]
    scan, scales = simulate(refs, truth, zero_shift=0.03, seed=7)
    fit = refine_mixture(scan, refs, caglioti=(0.0, 0.0, 0.08**2))
    return refs, truth, scan, scales, fit


def test_weight_fractions_recovered(four_phase):
    refs, truth, scan, _, fit = four_phase
    q = quantify(np.array([p.scale for p in fit.phases]), fit.scale_covariance, refs, scan.radiation)
    # 1.5 wt %: the fitted uncertainties are 0.1–0.4 wt % (Poisson noise at 10⁴ counts), and
    # the model differs from the generator in the truncated Lorentzian tails (≤ 0.8 % of a
    # line's area beyond ±40 FWHM) and the background form; 1.5 wt % is half the 3 wt % goal of the benchmark.
    np.testing.assert_allclose(q.weight_fraction, truth, atol=0.015)
    assert q.method == "cell" and q.basis == "crystalline"
    assert np.isclose(q.weight_fraction.sum(), 1.0)
    # the stated uncertainties are honest: every error within 4 u (plus the tail bias 0.5 wt %)
    assert np.all(np.abs(q.weight_fraction - truth) < 4 * q.u_weight_fraction + 0.005)


def test_scales_and_quality(four_phase):
    _, _, _, scales, fit = four_phase
    ratio = np.array([p.scale for p in fit.phases]) / scales
    # 3 %: each scale is set by thousands of counts; the truncated tails bias them ≤ 0.8 %.
    np.testing.assert_allclose(ratio, 1.0, atol=0.03)
    # A correct model on Poisson data gives χ²/ν ≈ 1 ± √(2/ν) ≈ ±0.025 for ν ≈ 3500; allow
    # 0.85–1.25 for the small model differences named above.
    assert 0.85 < fit.gof < 1.25
    assert fit.rwp > 0 and fit.rexp > 0 and np.isclose(fit.gof, (fit.rwp / fit.rexp) ** 2, rtol=1e-9)
    assert np.allclose(fit.calculated, fit.background + fit.phase_profiles.sum(axis=0))


def test_line_positions_recovered(four_phase):
    refs, *_, fit = four_phase
    # Zero shift, displacement and the d-scales are nearly interchangeable in a mixture with no
    # internal standard; what the data fix is where each line ends up. The generator shifted
    # every line by +0.03°. 0.006°: a fifteenth of the FWHM, well above the statistical u.
    from refdb.radiation import two_theta_from_d

    lam = 1.54059292
    for ref, p in zip(refs, fit.phases, strict=True):
        d = ref.lines.d[(ref.lines.d > 1.2) & (ref.lines.d < 3.5)]
        tt_true = two_theta_from_d(d, lam) + 0.03
        tt_fit = two_theta_from_d(d * p.d_scale, lam)
        tt_fit = tt_fit + peak_shift(tt_fit, zero_shift=p.zero_shift, displacement=p.displacement)
        assert np.max(np.abs(tt_fit - tt_true)) < 0.006, p.name


def test_d_scale_recovered():
    base = reference("corundum")
    dilated = _with_d(base, base.lines.d * 1.004)
    scan, _ = simulate([dilated], [1.0], seed=3)
    fit = refine_mixture(scan, [base], caglioti=(0.0, 0.0, 0.08**2), starts=[PhaseStart(d_scale=1.0)])
    # ±3e-4: shifts of 0.01–0.03° at 2θ 25–80°, well resolved with 0.02° steps.
    assert abs(fit.phases[0].d_scale - 1.004) < 3e-4
    assert fit.phases[0].u_d_scale < 3e-4


def test_scales_only_is_fast_path_and_same_shape(four_phase):
    refs, _, scan, _, fit = four_phase
    quick = refine_mixture(scan, refs, caglioti=(0.0, 0.0, 0.08**2), refine=False,
                           starts=[PhaseStart(zero_shift=0.03) for _ in refs])
    assert len(quick.phases) == len(fit.phases)
    assert quick.message == "scales only"
    assert quick.gof >= fit.gof * 0.99  # refining cannot make the fit clearly worse


def test_inputs_not_mutated_and_repeatable():
    refs = [reference("zincite"), reference("periclase")]
    scan, _ = simulate(refs, [0.6, 0.4], seed=11)
    before = scan.counts.copy(), refs[0].lines.d.copy()
    a = refine_mixture(scan, refs, max_evaluations=10)
    b = refine_mixture(scan, refs, max_evaluations=10)
    assert np.array_equal(scan.counts, before[0]) and np.array_equal(refs[0].lines.d, before[1])
    assert np.array_equal(a.calculated, b.calculated)


def test_bad_input():
    refs = [reference("zincite")]
    scan, _ = simulate(refs, [1.0], seed=2)
    with pytest.raises(InputError):
        refine_mixture(scan, [])
    with pytest.raises(InputError):
        refine_mixture(scan, refs, background=np.zeros(5))
    with pytest.raises(InputError):
        refine_mixture(scan, refs, starts=[PhaseStart(), PhaseStart()])


def test_texture_refined_on_textured_scan():
    ref = reference("calcite")
    r_true = 0.8
    factor = march_dollase(ref.lines.hkl, ref.cell, (1, 0, 4), r_true, ref.space_group)
    textured = _with_f2(ref, ref.lines.f2 * factor)
    scan, _ = simulate([textured], [1.0], seed=5)
    fit = refine_mixture(scan, [ref], caglioti=(0.0, 0.0, 0.08**2), starts=[PhaseStart(texture_axis=(1, 0, 4))])
    # 0.03: r is set by intensity ratios of many lines measured to ~1 %.
    assert abs(fit.phases[0].texture_ratio - r_true) < 0.03


def test_caglioti_from_widths():
    tt = np.linspace(20, 120, 12)
    t = np.tan(np.radians(tt) / 2)
    fw = np.sqrt(0.02 * t * t - 0.01 * t + 0.006)
    np.testing.assert_allclose(caglioti_from_widths(tt, fw), (0.02, -0.01, 0.006), atol=1e-9)
    u, v, w = caglioti_from_widths(tt[:3], fw[:3])  # too few peaks: a constant width
    assert u == 0 and v == 0 and w > 0


def _with_d(ref, d):
    from dataclasses import replace

    return replace(ref, lines=PatternLines(d=d, hkl=ref.lines.hkl, multiplicity=ref.lines.multiplicity, f2=ref.lines.f2))


def _with_f2(ref, f2):
    from dataclasses import replace

    return replace(ref, lines=PatternLines(d=ref.lines.d, hkl=ref.lines.hkl, multiplicity=ref.lines.multiplicity, f2=f2))
