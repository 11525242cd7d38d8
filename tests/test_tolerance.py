"""``tol`` means one thing on every path.

The general solve stops when ``|ln Q - ln K| <= tol`` for every reaction of
its per-case basis (the reactions rewritten so that each has one species of
its own, a pivot, with coefficient 1). The vector-lane path iterates on the
reactions as given; it must stop only where that criterion holds for
whichever basis the general solve could have chosen. The check below
recomputes, from the amounts alone, the residuals of the reactions as given
and transforms them into every possible basis with numpy: the basis
reactions are ``nu[:, P]^-1 nu``, so their residuals are ``nu[:, P]^-1 r``.
"""

from __future__ import annotations

import itertools

import eqbatch
import numpy as np
from conftest import log_residuals

SPECIES = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
EQUATIONS = ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"]


def worst_basis_residual(nu: np.ndarray, r: np.ndarray) -> float:
    """Largest |residual| of any basis reaction, over every pivot set."""
    reactive = [i for i in range(nu.shape[1]) if np.any(nu[:, i] != 0)]
    worst = 0.0
    for pivots in itertools.combinations(reactive, nu.shape[0]):
        block = nu[:, pivots]
        if abs(np.linalg.det(block)) < 1e-9:
            continue
        worst = max(worst, float(np.abs(np.linalg.solve(block, r)).max()))
    return worst


def test_lane_results_meet_tol_in_every_basis() -> None:
    system = eqbatch.ReactionSystem(SPECIES, EQUATIONS)
    rng = np.random.default_rng(5)
    n = 4_000
    # Demo cases of our own: steam reforming feeds, ln K over a range that
    # spans reformer and shift conditions, 1-40 bar.
    feed = np.zeros((n, len(SPECIES)))
    feed[:, 0] = 1.0
    feed[:, 1] = rng.uniform(1.5, 5.0, n)
    feed[:, 2:5] = rng.uniform(0.0, 0.3, (n, 3))
    feed[:, 5] = rng.uniform(0.0, 1.0, n)
    lnK = np.column_stack([rng.uniform(-6.0, 12.0, n), rng.uniform(-1.0, 4.0, n)])
    P = rng.uniform(1.0, 40.0, n)
    # A loose tolerance, so that final iterates land near it rather than far
    # below it.
    tol = 1e-4
    res = system.solve(feed, lnK=lnK, P=P, tol=tol)
    assert res.converged.all()
    nu = np.asarray(system.stoich, dtype=float)
    worst = max(
        worst_basis_residual(nu, log_residuals(system, res.amounts[k], lnK[k], P[k])) for k in range(n)
    )
    # (1 + 1e-9): the recomputation's own rounding
    assert worst <= tol * (1 + 1e-9), worst
