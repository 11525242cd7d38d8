"""Peer 4 (issue 14): a "lean" numba kernel written by hand for workload (a)
only, the way a practitioner who needs one system solves it.

System (species order of bench/workloads.py `reforming`):

    CH4, H2O, CO, H2, CO2, N2
    (1) CH4 + H2O = CO + 3 H2        d_1 = +2
    (2) CO + H2O  = CO2 + H2         d_2 =  0

Ideal gas, a_i = y_i P / P0. Unknowns are the two extents; the residuals are
the log forms F_j = ln Q_j - ln K_j of bench/peers/common.py,

    F_j = sum_i nu_ji ln n_i + d_j (ln(P/P0) - ln N) - ln K_j,

with the exact 2x2 Jacobian J_jk = sum_i nu_ji nu_ki / n_i - d_j d_k / N and
its closed-form inverse. Per Newton iteration, one loop over the six species
gives N, F and J together, taking logarithms (and reciprocals) only of the
species that are present (amount > 0) and take part in a reaction (N2 does
not; skipping it changes no bit of F or J). Steps are cut to the boundary
fraction 0.95 (alpha = min(1, 0.95 n_i / -dn_i) over the decreasing species,
so no amount falls below 5 % of its current value); no line search and no
basis change. Converged means max_j |F_j| <= 1e-10 (common.TOL); a case still
above it after 100 Newton steps (cap from the issue) is recorded as not
converged, as is any case whose Jacobian turns singular or non-finite.

Cases run in numba `prange`; fastmath is off (plain IEEE arithmetic), and the
"numpy" error model lets a division by zero give inf/nan as IEEE does instead
of raising (the kernel checks for them).

Unlike the other peers this one does not take the shared interior start: its
own start, extents (0.5, 0.2) x CH4 feed (from the issue), is part of what the
issue asks to measure. See `_start` for when that start is clipped.
"""

from __future__ import annotations

import numba
import numpy as np

from .common import TOL, Problem

MAX_ITER = 100  # Newton-step cap (issue 14 suggests 100)
FRACTION = 0.95  # fraction-to-boundary factor (issue 14)

# Stoichiometry of workload (a), species order CH4, H2O, CO, H2, CO2, N2
# (bench/workloads.py). Module-level arrays are compile-time constants in numba.
NU1 = np.array([-1.0, -1.0, 1.0, 3.0, 0.0, 0.0])
NU2 = np.array([0.0, -1.0, -1.0, 1.0, 1.0, 0.0])
D1 = 2.0  # sum of NU1
D2 = 0.0  # sum of NU2
TAKES_PART = np.array([True, True, True, True, True, False])
NU = np.vstack([NU1, NU2])


@numba.njit(fastmath=False, error_model="numpy", cache=False)
def _start(f):
    """Starting extents (0.5, 0.2) x CH4 feed (issue 14), and whether every
    species that takes part is then present.

    At that start CH4 = 0.5 f0 and CO, H2, CO2 gain 0.3, 1.7 and 0.2 f0, but
    H2O loses 0.7 f0: the start is infeasible when the feed has less than 0.7
    H2O per CH4. Then both extents are scaled down together so that H2O keeps
    half its feed (clipped start; the factor one half is our choice, as in the
    shared interior start of common.py). Workload (a) feeds steam-to-carbon
    1.5-5 (bench/workloads.py), so it never clips there. A feed without CH4 or
    without H2O, or that leaves a reacting species absent at the start, is out
    of this kernel's scope: the caller marks it not converged.
    """
    x1 = 0.5 * f[0]
    x2 = 0.2 * f[0]
    loss = 0.7 * f[0]  # H2O used by the start: x1 + x2
    if f[0] > 0.0 and f[1] - loss <= 0.0:
        t = 0.5 * f[1] / loss
        x1 *= t
        x2 *= t
    ok = True
    for i in range(6):
        if TAKES_PART[i] and not (f[i] + NU1[i] * x1 + NU2[i] * x2 > 0.0):
            ok = False
    return x1, x2, ok


@numba.njit(fastmath=False, error_model="numpy", cache=False)
def _solve_case(f, lnk1, lnk2, ln_p):
    """One case: returns extents, converged flag and Newton steps taken."""
    x1, x2, ok = _start(f)
    if not ok:
        return x1, x2, False, 0
    converged = False
    it = 0
    while True:
        # Residuals and Jacobian sums in one pass over the species.
        total = 0.0
        s1 = 0.0
        s2 = 0.0
        j11 = 0.0
        j12 = 0.0
        j22 = 0.0
        for i in range(6):
            ni = f[i] + NU1[i] * x1 + NU2[i] * x2
            total += ni
            if TAKES_PART[i] and ni > 0.0:
                li = np.log(ni)
                inv = 1.0 / ni
                s1 += NU1[i] * li
                s2 += NU2[i] * li
                j11 += NU1[i] * NU1[i] * inv
                j12 += NU1[i] * NU2[i] * inv
                j22 += NU2[i] * NU2[i] * inv
        ln_y = ln_p - np.log(total)
        r1 = s1 + D1 * ln_y - lnk1
        r2 = s2 + D2 * ln_y - lnk2
        worst = max(abs(r1), abs(r2))
        if worst <= TOL:
            converged = True
            break
        if not (worst < np.inf) or it >= MAX_ITER:  # nan/inf residual, or the cap
            break
        inv_total = 1.0 / total
        j11 -= D1 * D1 * inv_total
        j12 -= D1 * D2 * inv_total
        j22 -= D2 * D2 * inv_total
        det = j11 * j22 - j12 * j12
        if not (det > 0.0 and det < np.inf):  # J is positive definite inside the domain
            break
        # Newton step dx = -J^{-1} r, J^{-1} = [[j22, -j12], [-j12, j11]] / det.
        dx1 = (j12 * r2 - j22 * r1) / det
        dx2 = (j12 * r1 - j11 * r2) / det
        # Fraction to the boundary.
        alpha = 1.0
        for i in range(6):
            dn = NU1[i] * dx1 + NU2[i] * dx2
            if dn < 0.0:
                ni = f[i] + NU1[i] * x1 + NU2[i] * x2
                alpha = min(alpha, FRACTION * ni / -dn)
        x1 += alpha * dx1
        x2 += alpha * dx2
        it += 1
    return x1, x2, converged, it


@numba.njit(parallel=True, fastmath=False, error_model="numpy", cache=False)
def _kernel(feed, ln_k, pressure, p0, amounts, extents, converged, iterations):
    for c in numba.prange(feed.shape[0]):
        f = feed[c]
        x1, x2, ok, it = _solve_case(f, ln_k[c, 0], ln_k[c, 1], np.log(pressure[c] / p0))
        for i in range(6):
            amounts[c, i] = f[i] + NU1[i] * x1 + NU2[i] * x2
        extents[c, 0] = x1
        extents[c, 1] = x2
        converged[c] = ok
        iterations[c] = it


def solve_full(problem: Problem):
    """(amounts, extents, converged, iterations) for workload (a) cases."""
    if problem.nu.shape != NU.shape or not np.array_equal(problem.nu, NU):
        raise ValueError("numba_lean is written for workload (a) only (CH4, H2O, CO, H2, CO2, N2)")
    n = problem.n_cases
    amounts = np.empty((n, 6))
    extents = np.empty((n, 2))
    converged = np.zeros(n, dtype=np.bool_)
    iterations = np.zeros(n, dtype=np.int64)
    _kernel(
        np.ascontiguousarray(problem.feed, dtype=np.float64),
        np.ascontiguousarray(problem.lnK, dtype=np.float64),
        np.ascontiguousarray(problem.P, dtype=np.float64),
        float(problem.P0),
        amounts,
        extents,
        converged,
        iterations,
    )
    return amounts, extents, converged, iterations


def solve(problem: Problem, xi0: np.ndarray | None = None):
    """Same calling convention as the other peers: (amounts, converged,
    iterations). `xi0` is accepted for that convention and not used (this
    peer starts at its own point, see the module docstring)."""
    amounts, _, converged, iterations = solve_full(problem)
    return amounts, converged, iterations
