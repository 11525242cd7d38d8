"""What every peer shares: the problem, the equations and the starting rule.

All peers solve the same extent equations in log form, for ideal gases,

    F_j(xi) = sum_i nu_ji ln n_i - d_j ln N + d_j ln(P/P0) - ln K_j = 0,
    n = n0 + nu^T xi,  N = sum n,  d_j = sum_i nu_ji,

with the exact Jacobian J = nu diag(1/n) nu^T - d d^T / N, and start from the
same strictly interior point eqbatch uses: along a direction that makes every
product reachable from the feed positive (a small linear programme per zero
pattern), halfway to the first reactant it would use up. Converged means
max_j |F_j| <= tol.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import linprog

TOL = 1e-10
MAX_ITER = 200


@dataclass
class Problem:
    name: str
    nu: np.ndarray  # (R, S)
    feed: np.ndarray  # (N, S)
    lnK: np.ndarray  # (N, R)
    P: np.ndarray  # (N,)
    P0: float = 1.0
    species: tuple[str, ...] = ()
    equations: tuple[str, ...] = ()

    @property
    def n_cases(self) -> int:
        return self.feed.shape[0]

    def subset(self, n: int) -> Problem:
        return Problem(
            self.name, self.nu, self.feed[:n], self.lnK[:n], self.P[:n], self.P0, self.species, self.equations
        )


def reach_direction(nu: np.ndarray, zero: np.ndarray) -> np.ndarray:
    """Direction d with (nu^T d)_k >= 1 for every zero-feed species that can
    be made, found by the same linear programme as eqbatch (scipy.linprog)."""
    r = nu.shape[0]
    ks = np.flatnonzero(zero & np.any(nu != 0, axis=0))
    if ks.size == 0:
        return np.zeros(r)
    m = ks.size
    # variables: d (free, r), s (m) in [0, 1]; maximise sum s, s_k <= (nu^T d)_k
    c = np.concatenate([np.zeros(r), -np.ones(m)])
    a_ub = np.hstack([-nu[:, ks].T, np.eye(m)])
    bounds = [(None, None)] * r + [(0.0, 1.0)] * m
    sol = linprog(c, A_ub=a_ub, b_ub=np.zeros(m), bounds=bounds, method="highs")
    return sol.x[:r]


def interior_start(problem: Problem) -> np.ndarray:
    """(N, R) strictly interior starting extents (see module docstring)."""
    nu, feed = problem.nu, problem.feed
    xi0 = np.zeros((feed.shape[0], nu.shape[0]))
    zero = feed == 0
    patterns, inverse = np.unique(zero, axis=0, return_inverse=True)
    for p, pattern in enumerate(patterns):
        rows = np.flatnonzero(inverse.reshape(-1) == p)
        d = reach_direction(nu, pattern)
        change = nu.T @ d
        if not np.any(change != 0):
            continue
        with np.errstate(divide="ignore"):
            ratio = np.where(change < 0, feed[rows] / -np.where(change < 0, change, 1.0), np.inf)
        t = 0.5 * ratio.min(axis=1)
        xi0[rows] = t[:, None] * d[None, :]
    return xi0
