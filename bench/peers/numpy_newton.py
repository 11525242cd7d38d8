"""Peer 2: a numpy-vectorised damped Newton iteration over all cases at once:
batched Jacobians and np.linalg.solve, fraction-to-boundary steps and
backtracking on the residual norm, with converged cases dropped from the
active set."""

from __future__ import annotations

import numpy as np

from .common import MAX_ITER, TOL, Problem, interior_start


def _residual(nu, d, n, ln_p, ln_k):
    total = n.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log(n) @ nu.T - np.log(total)[:, None] * d + ln_p[:, None] * d - ln_k


def solve(problem: Problem, xi0: np.ndarray | None = None):
    nu = problem.nu
    d = nu.sum(axis=1)
    if xi0 is None:
        xi0 = interior_start(problem)
    xi = xi0.copy()
    n0, ln_k = problem.feed, problem.lnK
    ln_p = np.log(problem.P / problem.P0)
    iterations = np.zeros(problem.n_cases, dtype=np.int64)
    converged = np.zeros(problem.n_cases, dtype=bool)
    active = np.arange(problem.n_cases)
    for _ in range(MAX_ITER):
        n = n0[active] + xi[active] @ nu
        f = _residual(nu, d, n, ln_p[active], ln_k[active])
        norm = np.max(np.abs(f), axis=1)
        done = norm <= TOL
        converged[active[done]] = True
        keep = ~done
        active, n, f, norm = active[keep], n[keep], f[keep], norm[keep]
        if active.size == 0:
            break
        total = n.sum(axis=1)
        jac = (
            np.einsum("ri,ni,si->nrs", nu, 1.0 / n, nu)
            - d[None, :, None] * d[None, None, :] / total[:, None, None]
        )
        step = np.linalg.solve(jac, -f[..., None])[..., 0]
        change = step @ nu
        with np.errstate(divide="ignore", invalid="ignore"):
            limit = np.where(change < 0, 0.99 * n / -change, np.inf).min(axis=1)
        alpha = np.minimum(1.0, limit)
        sq = np.sum(f * f, axis=1)
        pending = np.ones(active.size, dtype=bool)
        for _ in range(40):
            trial = n + alpha[:, None] * change
            ft = _residual(nu, d, trial, ln_p[active], ln_k[active])
            ok = np.all(trial > 0, axis=1) & (np.sum(ft * ft, axis=1) <= (1 - 1e-4 * alpha) * sq)
            pending &= ~ok
            if not pending.any():
                break
            alpha = np.where(pending, alpha * 0.5, alpha)
        xi[active] += alpha[:, None] * step
        iterations[active] += 1
    amounts = n0 + xi @ nu
    return amounts, converged, iterations
