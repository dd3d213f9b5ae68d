"""Weight fractions checked against hand-worked examples of the published formulas."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from refdb.errors import InputError
from refdb.match.quant import mass_weights, quantify, weight_fractions
from refdb.radiation import radiation_for
from refdb.records import PatternLines, ReferenceData


def _computed(name, cell_mass, volume, rir=None):
    lines = PatternLines(d=np.array([3.0, 2.0]), multiplicity=np.array([6, 12]), f2=np.array([100.0, 50.0]))
    return ReferenceData(kind="computed", name=name, formula=name, formula_reduced=name, elements=("O",),
                         lines=lines, cell_mass=cell_mass, volume=volume, rir=rir)


def _measured(name, d, rir, wavelength=1.54059292):
    lines = PatternLines(d=np.array([d, d / 1.5]), intensity=np.array([100.0, 40.0]))
    return ReferenceData(kind="measured", name=name, formula=name, formula_reduced=name, elements=("O",),
                         lines=lines, rir=rir, wavelength=wavelength)


CU = radiation_for("Cu")


def test_hill_howard_hand_example():
    """Hill & Howard (1987), J. Appl. Cryst. 20, 467: w_p = S_p (ZMV)_p / Σ S_k (ZMV)_k.

    Worked by hand: phase A has ZM = 100 g/mol, V = 50 Å³ → ZMV = 5000; phase B has
    ZM = 400, V = 250 → 100 000. With S_A = 2×10⁻³ and S_B = 5×10⁻⁵ the products are 10 and 5,
    so w_A = 10/15 = 2/3 and w_B = 1/3.
    """
    refs = [_computed("A", 100.0, 50.0), _computed("B", 400.0, 250.0)]
    q = quantify(np.array([2e-3, 5e-5]), np.zeros((2, 2)), refs, CU)
    assert q.method == "cell"
    np.testing.assert_allclose(q.weight_fraction, [2 / 3, 1 / 3], rtol=1e-12)
    np.testing.assert_allclose(q.u_weight_fraction, 0.0)


def test_chung_matrix_flushing_hand_example():
    """Chung (1974), J. Appl. Cryst. 7, 519: X_i = (I_i/k_i) / Σ_j (I_j/k_j).

    Worked by hand: I_1 = 500, k_1 = 1.0 (corundum itself); I_2 = 1700, k_2 = 3.4 → both
    I/k are 500, so X_1 = X_2 = 0.5. With the scans' strongest-line intensity per unit scale
    equal to 100 (a measured entry whose strongest line is 100, same wavelength as the scan),
    scales 5 and 17 give these intensities.
    """
    refs = [_measured("corundum-like", 2.085, 1.0), _measured("other", 2.81, 3.4)]
    q = quantify(np.array([5.0, 17.0]), np.zeros((2, 2)), refs, radiation_for(wavelength=1.54059292))
    assert q.method == "rir"
    np.testing.assert_allclose(q.weight_fraction, [0.5, 0.5], rtol=1e-9)


def test_chung_internal_standard_hand_example():
    """Chung (1974), J. Appl. Cryst. 7, 526: X_i = (X_c / k_i)(I_i / I_c).

    Worked by hand: 20 wt % corundum (k_c = 1) added; phase i has k_i = 2.0 and
    I_i/I_c = 1.5 → X_i = 0.2/2 × 1.5 = 0.15. The rest, 1 − 0.2 − 0.15 = 0.65, is amorphous
    or unidentified.
    """
    refs = [_measured("corundum", 2.085, 1.0), _measured("i", 3.34, 2.0)]
    q = quantify(np.array([10.0, 15.0]), np.zeros((2, 2)), refs, radiation_for(wavelength=1.54059292),
                 standard=(0, 0.2))
    assert q.basis == "absolute"
    np.testing.assert_allclose(q.weight_fraction, [0.2, 0.15], rtol=1e-9)
    assert q.rest == pytest.approx(0.65, rel=1e-9)


def test_rir_converts_between_wavelengths():
    # The same phase measured once with Co and once with Cu radiation, used on a Cu scan. Its
    # line in the scan has one intensity I; Chung's X depends only on I/k, so scales that give
    # equal I must give equal fractions. The Co entry's scale is larger by LP(Co)/LP(Cu) at
    # the line (LP = (1 + cos²2θ)/(sin²θ cos θ), no monochromator; common practice, no source).
    def lp(lam, d):
        th = np.arcsin(lam / (2 * d))
        return (1 + np.cos(2 * th) ** 2) / (np.sin(th) ** 2 * np.cos(th))

    a = _measured("a", 2.5, 2.0, wavelength=1.7889960)
    b = _measured("b", 2.5, 2.0, wavelength=1.54059292)
    s_a = lp(1.7889960, 2.5) / lp(1.54059292, 2.5)
    q = quantify(np.array([s_a, 1.0]), np.zeros((2, 2)), [a, b], radiation_for(wavelength=1.54059292))
    np.testing.assert_allclose(q.weight_fraction, [0.5, 0.5], rtol=1e-9)


def test_uncertainty_matches_monte_carlo():
    # Independent check of the propagation: sample scales from their covariance and take the
    # spread of the fractions. 20 000 draws → the sampled σ is good to about 0.5 %; allow 5 %
    # for the curvature of the ratio at 3 % relative scale uncertainty.
    a = np.array([5000.0, 1.0e5, 2.0e4])
    s = np.array([2e-3, 5e-5, 1e-4])
    cov = np.diag((0.03 * s) ** 2)
    cov[0, 1] = cov[1, 0] = 0.3 * 0.03 * s[0] * 0.03 * s[1]
    w, u, _, _ = weight_fractions(s, cov, a)
    rng = np.random.default_rng(0)
    draws = rng.multivariate_normal(s, cov, size=20000)
    m = draws * a
    sampled = (m / m.sum(axis=1, keepdims=True)).std(axis=0)
    np.testing.assert_allclose(u, sampled, rtol=0.05)


def test_standard_uncertainty_matches_monte_carlo():
    a = np.array([5000.0, 1.0e5, 2.0e4])
    s = np.array([2e-3, 5e-5, 1e-4])
    cov = np.diag((0.02 * s) ** 2)
    w, u, rest, u_rest = weight_fractions(s, cov, a, standard_index=0, standard_fraction=0.25)
    rng = np.random.default_rng(1)
    d = rng.multivariate_normal(s, cov, size=20000)
    big_w = 0.25 * d * a / (d[:, :1] * a[0])
    np.testing.assert_allclose(u[1:], big_w[:, 1:].std(axis=0), rtol=0.05)  # same 5 % as above
    assert u[0] == 0.0
    np.testing.assert_allclose(u_rest, (1 - big_w.sum(axis=1)).std(), rtol=0.05)
    assert rest == pytest.approx(1 - w.sum())


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.floats(1e-6, 1e3), min_size=1, max_size=6),
    st.floats(1e-3, 1e3),
)
def test_fractions_sum_to_one_and_ignore_overall_scale(scales, factor):
    s = np.array(scales)
    a = np.linspace(1.0, 3.0, s.size) * 1e4
    w, u, _, _ = weight_fractions(s, np.zeros((s.size, s.size)), a)
    assert w.sum() == pytest.approx(1.0, rel=1e-9)
    w2, *_ = weight_fractions(s * factor, np.zeros((s.size, s.size)), a)
    np.testing.assert_allclose(w, w2, rtol=1e-9)
    assert np.all((w >= 0) & (w <= 1))


def test_auto_falls_back_and_notes_unquantifiable():
    refs = [_computed("A", 100.0, 50.0), _measured("m", 2.0, None)]
    a, method, notes = mass_weights(refs, CU)
    assert method == "cell" and np.isnan(a[1]) and "m" in notes[0]
    q = quantify(np.array([1e-3, 2.0]), np.zeros((2, 2)), refs, CU)
    assert q.weight_fraction[0] == pytest.approx(1.0) and np.isnan(q.weight_fraction[1])


def test_bad_method_and_standard():
    refs = [_computed("A", 100.0, 50.0), _computed("B", 400.0, 250.0)]
    with pytest.raises(InputError):
        quantify(np.ones(2), np.zeros((2, 2)), refs, CU, method="magic")
    with pytest.raises(InputError):
        quantify(np.ones(2), np.zeros((2, 2)), refs, CU, standard=(0, 1.5))
    with pytest.raises(InputError):
        quantify(np.array([0.0, 1.0]), np.zeros((2, 2)), refs, CU, standard=(0, 0.2))
    with pytest.raises(InputError):
        quantify(np.ones(2), np.zeros((2, 2)), refs, CU, standard=(5, 0.2))
