"""The analytic Jacobian of the mixture model against central differences of the model itself.

The check is numerical and independent of the derivation: it differentiates
Σ_p S_p·Y_p(θ), as :meth:`refdb.match.refine._Model.profile` draws it, by central differences
in each parameter. References are computed by refdb from seed structures (calcite, quartz,
corundum: written from their publications, see seeds/PROVENANCE.md).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import refdb.structure.pattern as pattern
from refdb.match.refine import PhaseStart, _Model, _model_jacobian, _prepared
from refdb.radiation import radiation_for
from refdb.structure import reference_from_cif

SEEDS = Path(__file__).resolve().parents[2] / "seeds" / "structures"
GRID = np.arange(10.0, 80.0 + 1e-9, 0.02)
#: Central-difference steps: η enters linearly (any step is exact); shifts and log-width move
#: a line by ≤ 1e-5° or widen it by 1e-5 of itself; a d-scale step of 1e-7 moves lines by
#: ≤ 2e-5° (d2θ/ds ≤ 160° at 80°); the March–Dollase factor is smooth in r.
STEPS = {"eta": 1e-3, "d_scale": 1e-7, "texture_r": 1e-4}
STEP = 1e-5


@pytest.fixture(scope="module")
def refs():
    return [reference_from_cif(SEEDS / f"{name}.cif") for name in ("calcite", "quartz", "corundum")]


@pytest.fixture
def smooth_windows(monkeypatch):
    """Draw every line over the whole grid. With windows, a grid point that crosses a window
    edge between θ − h and θ + h makes the windowed sum jump (by ≤ 1/6401 of a Lorentzian's
    height), which a difference quotient turns into a spike of that size over 2h; the analytic
    derivative is that of the sum between such jumps. Without windows the model is smooth and
    the difference quotient converges to the same derivative. (The windowed case is checked
    line by line in tests/structure/test_pattern_derivatives.py, away from window edges.)"""
    monkeypatch.setattr(pattern, "PROFILE_HALF_WINDOW", 1e4)
    monkeypatch.setattr(pattern, "GAUSSIAN_HALF_WINDOW", 1e4)


@pytest.mark.parametrize("per_phase_shift", [False, True])
@pytest.mark.parametrize("texture", [None, (1, 0, 4)])
@pytest.mark.parametrize("monochromator", [None, 26.6])
def test_analytic_jacobian_matches_central_differences(refs, smooth_windows, per_phase_shift, texture, monochromator):
    rad = radiation_for("Cu", monochromator_two_theta=monochromator)  # Kα1 + Kα2
    starts = [
        PhaseStart(zero_shift=0.02, displacement=-0.04, d_scale=1.003, width_scale=0.8, texture_axis=texture),
        PhaseStart(zero_shift=-0.01, displacement=0.03, d_scale=0.998, width_scale=1.5),
        PhaseStart(d_scale=1.02),  # on its upper bound: the derivative needs no one-sided step
    ]
    # A Caglioti function whose width changes along the scan, so that ∂w/∂c matters.
    model = _Model(GRID, rad, [_prepared(r, rad, GRID) for r in refs], starts, (0.01, -0.004, 0.004), per_phase_shift)
    theta = model.x0.copy()
    theta[model.idx_eta] = 0.35
    theta[model.idx_d[2]] = model.hi[model.idx_d[2]]
    if texture is not None:
        theta[model.idx_r[0]] = 0.8
    scales = np.array([1.0, 0.6, 0.3])
    jac = _model_jacobian(model, theta, scales, [model.derivatives(p, theta) for p in range(len(refs))])

    def total(t: np.ndarray) -> np.ndarray:
        return sum(scales[p] * model.profile(p, t) for p in range(len(refs)))

    # The profile drawn with the derivatives is the one drawn alone (the refinement takes it
    # from there): same sums in another order, so equal to rounding.
    for p in range(len(refs)):
        np.testing.assert_allclose(model.derivatives(p, theta)[1].profile, model.profile(p, theta), rtol=1e-12,
                                   atol=1e-12 * np.max(model.profile(p, theta)))

    for i, name in enumerate(model.names):
        h = STEPS.get(name.split("[")[0], STEP)
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        fd = (total(up) - total(down)) / (2.0 * h)
        # Truncation error of the central difference, h²/6·|f‴|, is about 5·(δ/w)² of the
        # column for lines moved by δ ≤ 2e-5° with FWHM w ≥ 0.045°: ≤ 1e-6. 1e-5 of the
        # column's largest value leaves a margin of 10, and still catches the smallest
        # term, the Lorentz–polarisation change with d-scale (0.2–0.3 % of its column).
        assert np.max(np.abs(jac[:, i] - fd)) <= 1e-5 * np.max(np.abs(fd)), name


def test_phases_with_zero_scale_contribute_nothing(refs):
    rad = radiation_for("Cu")
    model = _Model(GRID, rad, [_prepared(r, rad, GRID) for r in refs[:2]], [PhaseStart(), PhaseStart()], (0.0, 0.0, 0.005), False)
    jac = _model_jacobian(model, model.x0, np.array([0.0, 1.0]), [model.derivatives(p, model.x0) for p in range(2)])
    assert not jac[:, [model.idx_d[0], model.idx_w[0]]].any()
    assert jac[:, [model.idx_d[1], model.idx_w[1], model.idx_eta]].any(axis=0).all()
