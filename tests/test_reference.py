"""eqbatch against independent references on random multi-reaction systems.

1. The element-potential method: the same equilibrium written as a
   Gibbs-energy minimisation in species amounts under linear conservation
   constraints, whose stationarity conditions (n_i = N exp(A_i . lambda - mu_i)
   / (P/P0)) are solved with scipy.optimize.root in the Lagrange multipliers.
   It shares no code and no formulation with the extent-based engine.
2. A plain damped Newton iteration in extents at 160 significant digits
   (mpmath), for cases with extreme constants where float64 cancellation
   would hide errors of the trace species.
"""

from __future__ import annotations

import eqbatch
import mpmath
import numpy as np
import pytest
import sympy
from scipy.optimize import root


def random_system(rng: np.random.Generator):
    """A random 'element' matrix A (C x S), its integer reaction basis and
    species chemical potentials mu (dimensionless, mu0 / RT)."""
    while True:
        n_species = int(rng.integers(3, 8))
        n_elements = int(rng.integers(1, n_species))
        A = rng.integers(0, 4, size=(n_elements, n_species))
        if np.any(A.sum(axis=0) == 0) or np.linalg.matrix_rank(A) != n_elements:
            continue
        null = sympy.Matrix(A.tolist()).nullspace()
        rows = []
        for vec in null:
            lcm = sympy.ilcm(*[sympy.fraction(v)[1] for v in vec])
            rows.append([float(v * lcm) for v in vec])
        nu = np.array(rows)
        names = [f"X{k}" for k in range(n_species)]  # X is no element symbol
        equations = []
        for row in nu:
            left = " + ".join(f"{-c:g} {n}" for c, n in zip(row, names) if c < 0)
            right = " + ".join(f"{c:g} {n}" for c, n in zip(row, names) if c > 0)
            if not left or not right:
                break
            equations.append(f"{left} = {right}")
        else:
            mu = rng.uniform(-8.0, 8.0, n_species)
            return A.astype(float), names, equations, mu


def element_potential_reference(A, mu, feed, P, P0=1.0):
    """Equilibrium amounts from the element potentials lambda of the
    constraints A n = b: n_i = N x_i, x_i = exp(A_i . lambda - mu_i - ln(P/P0)).

    For a trial total B, x(lambda) solving A x = b / B is the minimiser of the
    strictly convex F(lambda) = sum(x) - b . lambda / B (solved by an exact-
    Hessian trust region); the total is then fixed by sum(x) = 1, which is
    monotone in B (found by Brent's method). A final Newton polish on the
    stationarity equations gives machine precision.
    """
    from scipy.optimize import brentq, minimize

    b = A @ feed
    mu_p = mu + np.log(P / P0)

    def inner(ln_b, lam0):
        scale = np.exp(-ln_b)

        def f(lam):
            x = np.exp(A.T @ lam - mu_p)
            return x.sum() - scale * (b @ lam), A @ x - scale * b

        def hess(lam):
            x = np.exp(A.T @ lam - mu_p)
            return (A * x) @ A.T

        sol = minimize(f, lam0, jac=True, hess=hess, method="trust-exact", options={"gtol": 1e-13})
        return sol.x

    lam = np.zeros(A.shape[0])
    cache = {}

    def excess(ln_b):
        cache[ln_b] = inner(ln_b, lam)
        return np.log(np.exp(A.T @ cache[ln_b] - mu_p).sum())

    ln_total = np.log(feed.sum())
    ln_b = brentq(excess, ln_total - 40.0, ln_total + 40.0, xtol=1e-14)
    lam = cache.get(ln_b, inner(ln_b, lam))

    def amounts(u):
        return np.exp(u[-1] + A.T @ u[:-1] - mu_p)

    def equations(u):
        n = amounts(u)
        return np.concatenate([np.log(A @ n) - np.log(b), [np.log(n.sum()) - u[-1]]])

    sol = root(equations, np.concatenate([lam, [ln_b]]), method="hybr", options={"xtol": 1e-15})
    assert np.max(np.abs(equations(sol.x))) < 1e-12, "reference did not converge"
    return amounts(sol.x)


@pytest.mark.parametrize("seed", range(40))
def test_random_gas_systems_match_element_potential_reference(seed: int) -> None:
    rng = np.random.default_rng(seed)
    A, names, equations, mu = random_system(rng)
    if not equations:
        pytest.fail("generator produced no reactions")
    system = eqbatch.ReactionSystem(names, equations)
    lnK = -(system.stoich @ mu)
    for _ in range(3):
        feed = rng.uniform(0.01, 2.0, len(names))
        P = float(10 ** rng.uniform(-2, 2))
        reference = element_potential_reference(A, mu, feed, P)
        res = system.solve(feed, lnK=lnK, P=P)
        assert res.converged[0], res.message(0)
        total = reference.sum()
        big = reference > 1e-9 * total
        np.testing.assert_allclose(res.amounts[0, big], reference[big], rtol=1e-8)
        np.testing.assert_allclose(res.amounts[0, ~big], reference[~big], rtol=1e-6, atol=1e-12 * total)


def _mp_newton(nu, feed, lnK, P, digits=160):
    """Damped Newton in extents at 160 digits (independent of eqbatch). The
    precision must dwarf the trace amounts, or the Gibbs function cannot see
    their changes."""
    with mpmath.workdps(digits):
        R, S = nu.shape
        nu_mp = [[mpmath.mpf(float(v)) for v in row] for row in nu.tolist()]
        n0 = [mpmath.mpf(float(v)) for v in feed]
        lnk = [mpmath.mpf(float(v)) for v in lnK]
        ln_p = mpmath.log(mpmath.mpf(P))
        xi = [mpmath.mpf(0)] * R

        def amounts(x):
            return [n0[i] + sum(nu_mp[j][i] * x[j] for j in range(R)) for i in range(S)]

        def residual(x):
            n = amounts(x)
            total = sum(n)
            return [
                sum(nu_mp[j][i] * (mpmath.log(n[i]) - mpmath.log(total) + ln_p) for i in range(S)) - lnk[j]
                for j in range(R)
            ]

        def gibbs(x):
            n = amounts(x)
            total = sum(n)
            return (
                sum(v * mpmath.log(v / total) for v in n)
                + total * ln_p
                - sum(x[j] * lnk[j] for j in range(R))
            )

        for _ in range(2000):
            n = amounts(xi)
            res = residual(xi)
            norm = max(abs(r) for r in res)
            if norm < mpmath.mpf(10) ** -40:
                return n
            total = sum(n)
            d = [sum(nu_mp[j][i] for i in range(S)) for j in range(R)]
            H = mpmath.matrix(R, R)
            for j in range(R):
                for k in range(R):
                    H[j, k] = sum(nu_mp[j][i] * nu_mp[k][i] / n[i] for i in range(S)) - d[j] * d[k] / total
            step = mpmath.lu_solve(H, mpmath.matrix([-r for r in res]))
            # Largest step keeping 1 % of every amount (fraction to boundary),
            # then halve until the Gibbs function decreases (exact at 60 digits).
            change = [sum(nu_mp[j][i] * step[j] for j in range(R)) for i in range(S)]
            alpha = mpmath.mpf(1)
            for i in range(S):
                if change[i] < 0:
                    alpha = min(alpha, mpmath.mpf("0.99") * n[i] / -change[i])
            g0 = gibbs(xi)
            while True:
                trial = [xi[j] + alpha * step[j] for j in range(R)]
                if gibbs(trial) < g0:
                    xi = trial
                    break
                alpha /= 2
                if alpha < mpmath.mpf(10) ** -40:
                    raise AssertionError("mp Newton stalled")
        raise AssertionError("mp Newton did not converge")


@pytest.mark.parametrize(
    "lnK",
    [(-150.0, 0.5), (120.0, -90.0), (30.0, 60.0), (-60.0, -60.0), (5.0, 140.0)],
)
def test_extreme_constants_keep_trace_species_to_full_relative_precision(lnK) -> None:
    species = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
    system = eqbatch.ReactionSystem(species, ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"])
    feed = np.array([1.0, 3.0, 0.2, 0.5, 0.1, 0.3])
    P = 7.0
    res = system.solve(feed, lnK=list(lnK), P=P)
    assert res.converged[0], res.message(0)
    reference = np.array([float(v) for v in _mp_newton(system.stoich, feed, lnK, P)])
    # Every species, however small (down to 1e-60 and below), to 1e-8 relative.
    np.testing.assert_allclose(res.amounts[0], reference, rtol=1e-8, atol=0)
    assert reference.min() < 1e-15  # the case really has a trace species
