"""Peer 1: a Python loop over scipy.optimize.root (MINPACK hybrd with the
exact Jacobian) on the extent equations in log form, one case at a time."""

from __future__ import annotations

import numpy as np
from scipy.optimize import root

from .common import MAX_ITER, TOL, Problem, interior_start


def equations(xi, nu, n0, d, ln_p, ln_k):
    n = n0 + nu.T @ xi
    if np.any(n <= 0):
        # Outside the domain: a large residual makes hybrd shorten its step.
        big = np.full(xi.shape, 1e6)
        return big, np.eye(xi.size)
    total = n.sum()
    f = nu @ np.log(n) - d * np.log(total) + d * ln_p - ln_k
    jac = (nu / n) @ nu.T - np.outer(d, d) / total
    return f, jac


def solve_case(nu, n0, ln_k, P, P0, xi0):
    d = nu.sum(axis=1)
    ln_p = np.log(P / P0)
    sol = root(
        equations,
        xi0,
        args=(nu, n0, d, ln_p, ln_k),
        jac=True,
        method="hybr",
        options={"xtol": 1e-13, "maxfev": 20 * MAX_ITER},
    )
    f, _ = equations(sol.x, nu, n0, d, ln_p, ln_k)
    return sol.x, bool(np.max(np.abs(f)) <= TOL), int(sol.nfev)


def solve(problem: Problem, xi0: np.ndarray | None = None):
    if xi0 is None:
        xi0 = interior_start(problem)
    n = problem.n_cases
    extents = np.empty((n, problem.nu.shape[0]))
    converged = np.zeros(n, dtype=bool)
    evaluations = np.zeros(n, dtype=np.int64)
    for k in range(n):
        extents[k], converged[k], evaluations[k] = solve_case(
            problem.nu, problem.feed[k], problem.lnK[k], problem.P[k], problem.P0, xi0[k]
        )
    amounts = problem.feed + extents @ problem.nu
    return amounts, converged, evaluations
