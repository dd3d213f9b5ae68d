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

Several independent problems of one size are solved side by side by :func:`bounded_lm_batch`:
each keeps its own damping, active set and stopping state, exactly as if solved alone, but the
normal equations of all of them are formed and solved in stacked numpy calls and their
residuals are evaluated together — dozens of small peak-group fits then cost about as much
Python overhead as one.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

#: Status codes of :class:`LMResult`.
STATUS = {0: "evaluation limit reached", 1: "gradient tolerance", 2: "cost tolerance", 3: "step tolerance"}


@dataclass(frozen=True, eq=False)
class LMResult:
    """Outcome of one problem of :func:`bounded_lm_batch`.

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


def bounded_lm_batch(
    evaluate: Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]],
    x0: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    *,
    fixed: np.ndarray | None = None,
    max_nfev: int | np.ndarray = 100,
    ftol: float = 1e-8,
    xtol: float = 1e-8,
    gtol: float = 1e-8,
    cost_atol: float = 0.0,
) -> list[LMResult]:
    """Minimise ½‖r_b(x_b)‖² subject to lower_b ≤ x_b ≤ upper_b for B independent problems.

    Parameters
    ----------
    evaluate : callable
        ``(x, rows) → (r, J)``: the residuals, shape (n, m), and Jacobians, shape (n, m, p),
        of the problems numbered ``rows`` (int array, shape (n,)) at ``x``, shape (n, p).
        Problems with fewer than m residuals pad theirs with zeros (rows of J zero too).
    x0 : ndarray, shape (B, p)
        Starts; moved into the boxes if outside.
    lower, upper : ndarray, shape (B, p)
        Bounds (±inf allowed), lower < upper.
    fixed : ndarray of bool, shape (B, p), optional
        Parameters held at their start (as if they were not parameters of that problem).
    max_nfev : int or ndarray of int, shape (B,)
        Most evaluations of each problem's residual.
    ftol, xtol, gtol : float
        Relative stopping tolerances (module docstring).
    cost_atol : float
        Also stop when an accepted step, and the undamped step after it, change ‖r‖² by less
        than this (with residuals weighted by 1/σ, a change of 0.01 means the parameters are
        within 0.1 standard uncertainty of the minimum).

    Returns
    -------
    list of LMResult
        One per problem; ``jac`` has zero columns for fixed parameters.
    """
    lo = np.asarray(lower, float)
    hi = np.asarray(upper, float)
    x = np.clip(np.asarray(x0, float), lo, hi)
    n_prob, n_par = x.shape
    held = np.zeros(x.shape, bool) if fixed is None else np.asarray(fixed, bool)
    moving = ~held
    limit = np.broadcast_to(np.asarray(max_nfev), (n_prob,))
    every = np.arange(n_prob)
    r, jac = _evaluate(evaluate, x, every, moving)
    nfev = np.ones(n_prob, int)
    cost = np.sum(r * r, axis=1)
    scale = np.zeros(x.shape)
    lam, nu = np.full(n_prob, 1e-3), np.full(n_prob, 2.0)
    status = np.zeros(n_prob, int)
    done = np.zeros(n_prob, bool)
    small_reduction = np.zeros(n_prob, bool)
    fresh = np.ones(n_prob, bool)  # just moved: the normal equations are due
    a = np.zeros((n_prob, n_par, n_par))
    g = np.zeros(x.shape)
    free = np.zeros(x.shape, bool)
    d = np.ones(x.shape)
    eye = np.eye(n_par, dtype=bool)
    while True:
        done |= nfev >= limit  # status 0 where not converged already
        todo = np.flatnonzero(~done & fresh)
        if todo.size:
            jt = jac[todo]
            jtt = jt.transpose(0, 2, 1)
            a[todo] = jtt @ jt
            g[todo] = (jtt @ r[todo][:, :, None])[:, :, 0]
            diag = np.einsum("bii->bi", a[todo])
            scale[todo] = np.maximum(scale[todo], diag)
            xt, gt = x[todo], g[todo]
            pinned = ((xt <= lo[todo]) & (gt > 0)) | ((xt >= hi[todo]) & (gt < 0)) | held[todo]
            free[todo] = ~pinned
            r_norm = np.sqrt(cost[todo])
            col_norm = np.sqrt(diag)
            with np.errstate(divide="ignore", invalid="ignore"):
                cosines = np.where(~pinned & (col_norm > 0), np.abs(gt) / (col_norm * r_norm[:, None]), 0.0)
            stop = (r_norm == 0.0) | pinned.all(axis=1) | (cosines.max(axis=1) <= gtol)
            status[todo[stop]], done[todo[stop]] = 1, True
            floor = 1e-12 * np.maximum(scale[todo].max(axis=1), 1e-300)
            d[todo] = np.maximum(scale[todo], floor[:, None])
            # A heavily damped step can gain little far from the minimum; stop only when the
            # undamped (Gauss–Newton) step would not gain more either.
            check = todo[~stop & small_reduction[todo]]
            if check.size:
                gain = _gauss_newton_gain(_masked(a[check], free[check], 0.0), np.where(free[check], g[check], 0.0))
                conv = gain <= np.maximum(ftol * cost[check], cost_atol)
                status[check[conv]], done[check[conv]] = 2, True
            small_reduction[todo] = False
            fresh[todo] = False
        # Trial steps; a damping that predicts no reduction is raised without an evaluation.
        pending = np.flatnonzero(~done)
        if not pending.size:
            break
        trial = np.empty((pending.size, n_par))
        predicted = np.empty(pending.size)
        need = np.arange(pending.size)
        while need.size:
            b = pending[need]
            m = _masked(a[b] + lam[b, None, None] * (eye * d[b, None, :]), free[b])
            rhs = np.where(free[b], -g[b], 0.0)
            t = np.clip(x[b] + _solve(m, rhs), lo[b], hi[b])
            step = t - x[b]
            pred = -(2.0 * np.sum(g[b] * step, axis=1) + np.sum(step * (a[b] @ step[:, :, None])[:, :, 0], axis=1))
            stuck = ~step.any(axis=1) | (lam[b] > 1e16)
            status[b[stuck]], done[b[stuck]] = 3, True  # no step left that changes x
            raise_ = ~stuck & (pred <= 0.0)
            lam[b[raise_]] *= nu[b[raise_]]
            nu[b[raise_]] *= 2.0
            ok = ~stuck & ~raise_
            trial[need[ok]], predicted[need[ok]] = t[ok], pred[ok]
            need = need[raise_]
        keep = ~done[pending]
        b, trial, predicted = pending[keep], trial[keep], predicted[keep]
        if not b.size:
            continue
        r_new, jac_new = _evaluate(evaluate, trial, b, moving[b])
        nfev[b] += 1
        cost_new = np.sum(r_new * r_new, axis=1)
        rho = (cost[b] - cost_new) / predicted
        step_norm = np.linalg.norm((trial - x[b]) * moving[b], axis=1)
        acc = rho > 1e-4
        ba = b[acc]
        reduction = cost[ba] - cost_new[acc]
        x[ba], r[ba], jac[ba], cost[ba] = trial[acc], r_new[acc], jac_new[acc], cost_new[acc]
        lam[ba] *= np.maximum(1.0 / 3.0, 1.0 - (2.0 * rho[acc] - 1.0) ** 3)
        nu[ba] = 2.0
        small_reduction[ba] = reduction <= np.maximum(ftol * cost_new[acc], cost_atol)
        fresh[ba] = True
        br = b[~acc]
        lam[br] *= nu[br]
        nu[br] *= 2.0
        # The step tolerance is judged against x after the step when it was taken.
        x_norm = np.linalg.norm(x[b] * moving[b], axis=1)
        tiny = step_norm <= xtol * (xtol + x_norm)
        status[b[tiny]], done[b[tiny]] = 3, True
    return [LMResult(x=x[i], fun=r[i], jac=jac[i], nfev=int(nfev[i]), status=int(status[i])) for i in range(n_prob)]


def _evaluate(evaluate: Callable, x: np.ndarray, rows: np.ndarray, moving: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Residuals and Jacobians, the columns of fixed parameters zeroed."""
    r, jac = evaluate(x, rows)
    jac = np.asarray(jac, float)
    return np.asarray(r, float), jac * moving[:, None, :] if not moving.all() else jac


def _masked(m: np.ndarray, free: np.ndarray, diagonal: float = 1.0) -> np.ndarray:
    """Stacked matrices with the rows and columns of non-free parameters zeroed and
    ``diagonal`` put on their diagonal. With 1 there, solving leaves those parameters' steps
    at zero (given a zero right-hand side there) and the free block's solution unchanged."""
    both = free[:, :, None] & free[:, None, :]
    out = np.where(both, m, 0.0)
    idx = np.arange(m.shape[1])
    out[:, idx, idx] = np.where(free, out[:, idx, idx], diagonal)
    return out


def _solve(m: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Stacked ``m⁻¹ rhs``; least squares for any singular matrix of the stack."""
    try:
        return np.linalg.solve(m, rhs[:, :, None])[:, :, 0]
    except np.linalg.LinAlgError:
        out = np.empty_like(rhs)
        for i in range(rhs.shape[0]):
            try:
                out[i] = np.linalg.solve(m[i], rhs[i])
            except np.linalg.LinAlgError:
                out[i] = np.linalg.lstsq(m[i], rhs[i], rcond=None)[0]
        return out


def _gauss_newton_gain(a: np.ndarray, g: np.ndarray) -> np.ndarray:
    """Reduction of χ² that the undamped step −A⁻¹g predicts, gᵀA⁻¹g (pseudo-inverse), for a
    stack of normal matrices whose fixed rows and columns are zero.

    One least-squares solve per matrix: the stacked eigen- or singular-value routines of
    OpenBLAS start threads even for these small matrices, which then spin and doubled the
    CPU time of a peak search (wall time unchanged) where the library runs multithreaded.
    """
    out = np.empty(g.shape[0])
    for i in range(g.shape[0]):
        step = np.linalg.lstsq(a[i], -g[i], rcond=1e-12)[0]
        out[i] = -(2.0 * g[i] @ step + step @ a[i] @ step)
    return out


__all__ = ["LMResult", "STATUS", "bounded_lm_batch"]
