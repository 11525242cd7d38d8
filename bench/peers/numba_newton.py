"""Peer 3: a numba @njit(parallel=True) damped Newton loop specialised to the
system: the stoichiometry and the sizes are compile-time constants of the
kernel, cases run in prange, each with fraction-to-boundary steps and
backtracking on the residual norm."""

from __future__ import annotations

import numba
import numpy as np

from .common import MAX_ITER, TOL, Problem, interior_start

_KERNELS: dict = {}
PARALLEL = True


def make_kernel(nu: np.ndarray):
    key = nu.tobytes() + bytes(nu.shape)
    if key in _KERNELS:
        return _KERNELS[key]
    R, S = nu.shape
    NU = np.ascontiguousarray(nu, dtype=np.float64)
    D = NU.sum(axis=1)
    tol, max_iter = TOL, MAX_ITER

    @numba.njit(inline="always", fastmath=False)
    def residual(n, ln_p, ln_k, out):
        total = 0.0
        for i in range(S):
            total += n[i]
        ln_total = np.log(total)
        sq = 0.0
        worst = 0.0
        for j in range(R):
            v = (ln_p - ln_total) * D[j] - ln_k[j]
            for i in range(S):
                if NU[j, i] != 0.0:
                    v += NU[j, i] * np.log(n[i])
            out[j] = v
            sq += v * v
            worst = max(worst, abs(v))
        return sq, worst, total

    @numba.njit
    def solve_one(c, feed, ln_k, ln_p, xi0, amounts, converged, iterations):
        # One case; kept out of the prange body, where numba's parfor pass
        # mis-handles the loop-carried scalars of this iteration.
        if True:
            xi = xi0[c].copy()
            n = np.empty(S)
            trial = np.empty(S)
            change = np.empty(S)
            f = np.empty(R)
            ft = np.empty(R)
            jac = np.empty((R, R))
            step = np.empty(R)
            for i in range(S):
                v = feed[c, i]
                for j in range(R):
                    v += NU[j, i] * xi[j]
                n[i] = v
            sq, worst, total = residual(n, ln_p[c], ln_k[c], f)
            it = 0
            ok = worst <= tol
            while not ok and it < max_iter:
                for j in range(R):
                    for k in range(R):
                        v = -D[j] * D[k] / total
                        for i in range(S):
                            if NU[j, i] != 0.0 and NU[k, i] != 0.0:
                                v += NU[j, i] * NU[k, i] / n[i]
                        jac[j, k] = v
                    step[j] = -f[j]
                # Gaussian elimination with partial pivoting (R is small).
                for col in range(R):
                    piv = col
                    for r in range(col + 1, R):
                        if abs(jac[r, col]) > abs(jac[piv, col]):
                            piv = r
                    if piv != col:
                        for k in range(R):
                            jac[col, k], jac[piv, k] = jac[piv, k], jac[col, k]
                        step[col], step[piv] = step[piv], step[col]
                    for r in range(col + 1, R):
                        m = jac[r, col] / jac[col, col]
                        for k in range(col, R):
                            jac[r, k] -= m * jac[col, k]
                        step[r] -= m * step[col]
                for col in range(R - 1, -1, -1):
                    v = step[col]
                    for k in range(col + 1, R):
                        v -= jac[col, k] * step[k]
                    step[col] = v / jac[col, col]
                alpha = 1.0
                for i in range(S):
                    v = 0.0
                    for j in range(R):
                        v += NU[j, i] * step[j]
                    change[i] = v
                    if v < 0.0:
                        alpha = min(alpha, 0.99 * n[i] / -v)
                accepted = False
                for _ in range(40):
                    positive = True
                    for i in range(S):
                        trial[i] = n[i] + alpha * change[i]
                        if trial[i] <= 0.0:
                            positive = False
                    if positive:
                        sq_t, worst_t, total_t = residual(trial, ln_p[c], ln_k[c], ft)
                        if sq_t <= (1.0 - 1e-4 * alpha) * sq:
                            accepted = True
                            break
                    alpha *= 0.5
                if not accepted:
                    break
                for j in range(R):
                    xi[j] += alpha * step[j]
                    f[j] = ft[j]
                for i in range(S):
                    n[i] = trial[i]
                sq, worst, total = sq_t, worst_t, total_t
                it += 1
                ok = worst <= tol
            for i in range(S):
                amounts[c, i] = n[i]
            converged[c] = ok
            iterations[c] = it

    @numba.njit(parallel=PARALLEL)
    def kernel(feed, ln_k, ln_p, xi0, amounts, converged, iterations):
        for c in numba.prange(feed.shape[0]):
            solve_one(c, feed, ln_k, ln_p, xi0, amounts, converged, iterations)

    _KERNELS[key] = kernel
    return kernel


def solve(problem: Problem, xi0: np.ndarray | None = None):
    if xi0 is None:
        xi0 = interior_start(problem)
    kernel = make_kernel(problem.nu)
    n = problem.n_cases
    amounts = np.empty((n, problem.nu.shape[1]))
    converged = np.zeros(n, dtype=np.bool_)
    iterations = np.zeros(n, dtype=np.int64)
    kernel(
        np.ascontiguousarray(problem.feed),
        np.ascontiguousarray(problem.lnK),
        np.log(problem.P / problem.P0),
        np.ascontiguousarray(xi0),
        amounts,
        converged,
        iterations,
    )
    return amounts, converged, iterations
