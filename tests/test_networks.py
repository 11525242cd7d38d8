"""Larger networks (more reactions than any kernel with compile-time sizes)
take the vector-lane path with run-time sizes: it must give the equilibrium
the one-case-at-a-time general path gives, and satisfy every equilibrium
condition recomputed from the amounts alone."""

from __future__ import annotations

import eqbatch
import numpy as np
from conftest import log_residuals

SPECIES = ["H2", "CH4", "C2H6", "C2H4", "C2H2", "C3H8", "C3H6", "C4H10", "C4H8"]
EQUATIONS = [
    "2 CH4 = C2H6 + H2",
    "C2H6 = C2H4 + H2",
    "C2H4 = C2H2 + H2",
    "CH4 + C2H6 = C3H8 + H2",
    "C3H8 = C3H6 + H2",
    "2 C2H6 = C4H10 + H2",
    "C4H10 = C4H8 + H2",
]


def test_seven_reactions_on_lanes_agree_with_the_general_path() -> None:
    system = eqbatch.ReactionSystem(SPECIES, EQUATIONS)
    rng = np.random.default_rng(11)
    n = 3_000
    # Demo cases of our own: methane-rich feeds, constants over +-15 (some
    # cases leave species far below 1e-9 of the gas), 0.5-20 bar.
    feed = rng.uniform(0.0, 0.2, (n, len(SPECIES)))
    feed[:, 1] += 1.0
    feed[rng.random(n) < 0.3, 2:] = 0.0
    lnK = rng.uniform(-15.0, 15.0, (n, len(EQUATIONS)))
    P = rng.uniform(0.5, 20.0, n)

    lanes = system.solve(feed, lnK=lnK, P=P)
    # chain=True solves one case at a time on the general path.
    general = system.solve(feed, lnK=lnK, P=P, chain=True)
    assert lanes.converged.all() and general.converged.all()
    share = general.amounts / general.amounts.sum(axis=1, keepdims=True)
    tiny = share < 1e-9
    assert tiny.any(axis=1).sum() > 100  # trace cases are part of the test
    rel = np.abs(lanes.amounts - general.amounts) / np.maximum(general.amounts, 1e-300)
    assert rel[~tiny].max() < 1e-8
    assert rel.max() < 1e-6  # trace species too (they carry fewer digits)
    # Carbon and hydrogen balance: a fact of the trade.
    carbon = np.array([0, 1, 2, 2, 2, 3, 3, 4, 4])
    hydrogen = np.array([2, 4, 6, 4, 2, 8, 6, 10, 8])
    for atoms in (carbon, hydrogen):
        np.testing.assert_allclose(lanes.amounts @ atoms, feed @ atoms, rtol=1e-12)
    # ln Q = ln K for every reaction, recomputed from the amounts alone.
    for k in rng.choice(n, 50, replace=False):
        r = log_residuals(system, lanes.amounts[k], lnK[k], P[k])
        assert np.nanmax(np.abs(r)) < 1e-8
