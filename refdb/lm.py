"""Bounded Levenberg–Marquardt for small, dense least-squares problems.

Peak-group fits have 6–34 parameters and a few hundred points; a general solver's bookkeeping
per iteration (wrappers, scaling vectors, SVDs) costs more there than the model itself. This
solver does the minimum: the damped normal equations

    (JᵀJ + λ D) δ = −Jᵀr

with Marquardt's scaling D = diag(JᵀJ), kept at its running maximum (Moré 1978, in Numerical
Analysis, ed. Watson, Springer LNM 630, 105), and Nielsen's update of λ from the gain
ratio ρ of actual to predicted reduction (Nielsen 1999, IMM-REP-1999-05, Technical University
of Denmark; Madsen, Nielsen & Tingleff 2004, Methods for Non-Linear Least Squares Problems,
§3.2). Box bounds are kept by projection: a parameter sitting on a bound whose gradient points
out of the box is held there for the step (an active set), and the step is clipped to the
box; ρ uses the step actually taken, so a clipped step that does not reduce the model is
rejected like any other.

Stops (as in MINPACK, Moré, Garbow & Hillstrom 1980, ANL-80-74): ``gtol`` — every free column
of J is nearly orthogonal to the residual, max |cos| ≤ gtol; ``ftol`` — an accepted step
reduced χ² by less than ftol relative (or ``cost_atol`` absolute) and the undamped step
would not gain more; ``xtol`` — the step is below xtol·(xtol + ‖x‖).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

#: Status codes of :class:`LMResult`.
STATUS = {0: "evaluation limit reached", 1: "gradient tolerance", 2: "cost tolerance", 3: "step tolerance"}


@dataclass(frozen=True, eq=False)
class LMResult:
    """Outcome of :func:`bounded_lm`.

    Attributes
    ----------
    x : ndarray, shape (p,)
        The solution (within the bounds).
    fun : ndarray, shape (m,)
        Residuals at ``x``.
    jac : ndarray, shape (m, p)
        Jacobian at ``x``.
    nfev : int
        Evaluations of the residual.
    status : int
        0 evaluation limit, 1–3 converged (see :data:`STATUS`).
    """

    x: np.ndarray
    fun: np.ndarray
    jac: np.ndarray
    nfev: int
    status: int

    @property
    def success(self) -> bool:
        return self.status > 0

    @property
    def message(self) -> str:
        return STATUS[self.status]


def bounded_lm(
    residual: Callable[[np.ndarray], np.ndarray],
    jacobian: Callable[[np.ndarray], np.ndarray],
    x0: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    *,
    max_nfev: int = 100,
    ftol: float = 1e-8,
    xtol: float = 1e-8,
    gtol: float = 1e-8,
    cost_atol: float = 0.0,
) -> LMResult:
    """Minimise ½‖r(x)‖² subject to lower ≤ x ≤ upper.

    Parameters
    ----------
    residual : callable
        ``x → r``, shape (m,).
    jacobian : callable
        ``x → J``, shape (m, p). Called only at accepted points, each time right after
        ``residual`` was called at the same ``x`` (a caller computing both together can keep
        the last Jacobian).
    x0 : ndarray, shape (p,)
        Start; moved into the box if outside.
    lower, upper : ndarray, shape (p,)
        Bounds (±inf allowed), lower < upper.
    max_nfev : int
        Most evaluations of ``residual``.
    ftol, xtol, gtol : float
        Relative stopping tolerances (module docstring).
    cost_atol : float
        Also stop when an accepted step, and the undamped step after it, change ‖r‖² by less
        than this (with residuals weighted by 1/σ, a change of 0.01 means the parameters are
        within 0.1 standard uncertainty of the minimum).

    Returns
    -------
    LMResult
    """
    lo = np.asarray(lower, float)
    hi = np.asarray(upper, float)
    x = np.clip(np.asarray(x0, float), lo, hi)
    r = residual(x)
    jac = jacobian(x)
    nfev = 1
    cost = float(r @ r)
    scale = np.zeros(x.size)
    lam, nu = 1e-3, 2.0
    status = 0
    small_reduction = False
    while nfev < max_nfev:
        a = jac.T @ jac
        g = jac.T @ r
        diag = np.diag(a)
        scale = np.maximum(scale, diag)
        pinned = ((x <= lo) & (g > 0)) | ((x >= hi) & (g < 0))
        free = ~pinned
        col_norm = np.sqrt(diag[free])
        r_norm = np.sqrt(cost)
        if r_norm == 0.0 or not free.any():
            status = 1
            break
        with np.errstate(divide="ignore", invalid="ignore"):
            cosines = np.where(col_norm > 0, np.abs(g[free]) / (col_norm * r_norm), 0.0)
        if float(np.max(cosines)) <= gtol:
            status = 1
            break
        d = np.maximum(scale[free], 1e-12 * max(float(scale.max()), 1e-300))
        a_ff, g_f = a[np.ix_(free, free)], g[free]
        if small_reduction and _gauss_newton_gain(a_ff, g_f) <= max(ftol * cost, cost_atol):
            # A heavily damped step can gain little far from the minimum; stop only when the
            # undamped (Gauss–Newton) step would not gain more either.
            status = 2
            break
        small_reduction = False
        accepted = False
        while nfev < max_nfev and not accepted:
            try:
                step_f = np.linalg.solve(a_ff + lam * np.diag(d), -g_f)
            except np.linalg.LinAlgError:
                step_f = np.linalg.lstsq(a_ff + lam * np.diag(d), -g_f, rcond=None)[0]
            trial = x.copy()
            trial[free] = x[free] + step_f
            trial = np.clip(trial, lo, hi)
            step = trial - x
            predicted = -(2.0 * float(g @ step) + float(step @ a @ step))
            if not np.any(step) or lam > 1e16:
                status = 3  # no step left that changes x
                break
            if predicted <= 0.0:
                lam, nu = lam * nu, nu * 2.0
                continue
            r_new = residual(trial)
            nfev += 1
            cost_new = float(r_new @ r_new)
            rho = (cost - cost_new) / predicted
            if rho > 1e-4:
                accepted = True
                reduction = cost - cost_new
                x, r, cost = trial, r_new, cost_new
                jac = jacobian(x)
                lam *= max(1.0 / 3.0, 1.0 - (2.0 * rho - 1.0) ** 3)
                nu = 2.0
                small_reduction = reduction <= max(ftol * cost_new, cost_atol)
                if np.linalg.norm(step) <= xtol * (xtol + np.linalg.norm(x)):
                    status = 3
            else:
                lam, nu = lam * nu, nu * 2.0
                if np.linalg.norm(step) <= xtol * (xtol + np.linalg.norm(x)):
                    status = 3
                    break
        if status:
            break
    return LMResult(x=x, fun=r, jac=jac, nfev=nfev, status=status)


def _gauss_newton_gain(a: np.ndarray, g: np.ndarray) -> float:
    """Reduction of χ² that the undamped step −A⁻¹g predicts, gᵀA⁻¹g (pseudo-inverse)."""
    step = np.linalg.lstsq(a, -g, rcond=1e-12)[0]
    return float(-(2.0 * g @ step + step @ a @ step))


__all__ = ["LMResult", "STATUS", "bounded_lm"]
