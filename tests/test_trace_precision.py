"""Trace species against a high-precision reference (tests/precise_reference.py).

The README promises that a species of 1e-60 mol is resolved like one of 1 mol.
These cases break a solver that carries a trace species as a running sum of
O(1) numbers: more species at trace level than there are reactions, so that
some trace species is not the pivot of any basis reaction and its amount is
fixed only by a balance among other traces (H2 = 2 O2 + OH / 2 in steam).
"""

from __future__ import annotations

import eqbatch
import numpy as np
import pytest
from conftest import log_residuals
from precise_reference import as_floats, equilibrium
from scipy.optimize import linprog
from test_reference import random_system

Status = eqbatch.Status

STEAM = (["H2", "O2", "H2O", "OH"], ["2 H2 + O2 = 2 H2O", "H2 + O2 = 2 OH"])
# ln K at 298.15 K from the Gibbs energies of formation of H2O(g), -228.58 kJ/mol,
# and OH, +34.3 kJ/mol (JANAF tables, from memory): 2 x 228.58e3 / (R 298.15) and
# -2 x 34.3e3 / (R 298.15).
STEAM_LNK = [184.42, -27.66]

REFORMER = (["CH4", "H2O", "CO", "H2", "CO2"], ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"])


def test_steam_at_room_temperature_matches_reference_and_its_own_balance() -> None:
    system = eqbatch.ReactionSystem(*STEAM)
    res = system.solve([0.0, 0.0, 1.0, 0.0], lnK=STEAM_LNK, P=1.0)
    assert res.status[0] == Status.CONVERGED, res.message(0)
    reference = as_floats(equilibrium(system.stoich, [0, 0, 1, 0], STEAM_LNK, 1.0))
    # 50-digit reference: H2 2.53e-27, O2 1.26e-27, OH 1.76e-33 (the issue quotes
    # H2 = 2.53e-27 and O2 = 1.26e-27 from an independent mpmath solve too).
    assert reference[0] == pytest.approx(2.53e-27, rel=1e-2)
    np.testing.assert_allclose(res.amounts[0], reference, rtol=1e-8, atol=0)
    h2, o2, _, oh = res.amounts[0]
    # Hydrogen and oxygen balances of a pure-steam feed leave H2 = 2 O2 + OH / 2.
    assert h2 == pytest.approx(2 * o2 + oh / 2, rel=1e-10)


@pytest.mark.parametrize(
    ("lnK", "P"),
    [
        ((-110.0, -110.0), 0.2),  # CO the only carbon product: H2 = 3 CO exactly
        ((-110.0, -5.0), 0.3),
        ((-110.0, 0.0), 0.2),
        ((-300.0, 0.0), 1.0),  # the H2 = 3.2e-26
        ((-700.0, 200.0), 1.0),
        ((200.0, -700.0), 1.0),  # CO2 at 6.6e-305 mol: still inside float64
    ],
)
def test_reformer_traces_keep_relative_precision(lnK, P: float) -> None:
    system = eqbatch.ReactionSystem(*REFORMER)
    feed = [1.0, 3.0, 0.0, 0.0, 0.0]
    res = system.solve(feed, lnK=list(lnK), P=P)
    assert res.status[0] == Status.CONVERGED, res.message(0)
    reference = as_floats(equilibrium(system.stoich, feed, lnK, P, guess=res.amounts[0]))
    np.testing.assert_allclose(res.amounts[0], reference, rtol=1e-8, atol=0)
    ch4, h2o, co, h2, co2 = res.amounts[0]
    # The balances of a CH4 + H2O feed: H2 = 3 CO + 4 CO2, relative to the traces.
    assert h2 == pytest.approx(3 * co + 4 * co2, rel=1e-10)


def _all_reachable(nu: np.ndarray, feed: np.ndarray) -> bool:
    """Whether some extents make every species positive at once (scipy's LP:
    maximise the smallest amount)."""
    R, S = nu.shape
    c = np.zeros(R + 1)
    c[-1] = -1.0
    a_ub = np.hstack([-nu.T, np.ones((S, 1))])
    sol = linprog(c, A_ub=a_ub, b_ub=feed, bounds=[(None, None)] * R + [(0, 1)], method="highs")
    return bool(sol.success and sol.x[-1] > 1e-9)


@pytest.mark.parametrize(("spread", "cases"), [(60.0, 40), (200.0, 40), (700.0, 12)])
def test_random_gas_systems_with_trace_products_match_reference(spread: float, cases: int) -> None:
    # Feeds with zeros make trace products whose balance among themselves is
    # exactly zero; more of them than reactions is the hard case.
    rng = np.random.default_rng(int(spread))
    checked = 0
    while checked < cases:
        A, names, equations, mu = random_system(rng)
        system = eqbatch.ReactionSystem(names, equations)
        feed = rng.uniform(0.1, 2.0, len(names)) * (rng.uniform(size=len(names)) < 0.5)
        if feed.sum() == 0 or not _all_reachable(system.stoich, feed):
            continue
        lnK = rng.uniform(-spread, spread, system.n_reactions)
        P = float(10 ** rng.uniform(-1, 1))
        res = system.solve(feed, lnK=lnK, P=P)
        reference = as_floats(equilibrium(system.stoich, feed, lnK, P, guess=res.amounts[0]))
        if reference.min() < 1e-300:
            continue  # below float64's range: the next test
        assert res.status[0] == Status.CONVERGED, res.message(0)
        np.testing.assert_allclose(res.amounts[0], reference, rtol=1e-8, atol=0)
        checked += 1


def test_species_below_float_range_is_flagged_not_silently_converged() -> None:
    # A = B with ln K = -800: n_B / n_A = exp(-800) = 3.7e-348, below float64.
    system = eqbatch.ReactionSystem(["A", "B"], ["A = B"])
    res = system.solve([1.0, 0.0], lnK=[-800.0])
    assert res.status[0] == Status.UNDERFLOW
    assert res.converged[0]  # every representable amount is at equilibrium
    assert 0 < res.amounts[0, 1] <= 1.0000001e-305  # held at the floor: an upper bound
    assert res.amounts[0, 0] == 1.0
    assert "B would lie below 1e-305 mol" in res.message(0)
    # Just inside the range it is resolved: exp(-690) = 2.6e-300 (closed form).
    res = system.solve([1.0, 0.0], lnK=[-690.0])
    assert res.status[0] == Status.CONVERGED
    assert res.amounts[0, 1] == pytest.approx(np.exp(-690.0), rel=1e-9)


@pytest.mark.parametrize("liquid", [False, True])
def test_converged_cases_meet_every_reaction(liquid: bool) -> None:
    # Random systems at ln K +-50: a case reported CONVERGED meets every
    # reaction among its present species (recomputed here from the amounts);
    # a species held at the float floor makes the case UNDERFLOW instead.
    rng = np.random.default_rng(11 if liquid else 12)
    seen = 0
    for _ in range(25):
        A, names, equations, mu = random_system(rng)
        phases = {name: "liquid" for name in names} if liquid else None
        system = eqbatch.ReactionSystem(names, equations, phases=phases)
        n = 40
        feed = rng.uniform(0, 2, (n, len(names))) * (rng.uniform(size=(n, len(names))) < 0.6)
        feed[feed.sum(1) == 0, 0] = 1.0
        lnK = rng.uniform(-50, 50, (n, system.n_reactions))
        P = 10 ** rng.uniform(-1, 1, n)
        res = system.solve(feed, lnK=lnK, P=P)
        for k in np.flatnonzero(res.status == Status.CONVERGED):
            r = log_residuals(system, res.amounts[k], lnK[k], P[k])
            assert np.all(np.abs(r[np.isfinite(r)]) < 1e-8), (names, equations, feed[k], lnK[k])
            seen += 1
        for k in np.flatnonzero(res.status == Status.UNDERFLOW):
            assert res.amounts[k].min() <= 1.0000001e-305
    assert seen > 500


@pytest.mark.parametrize(
    ("species", "equations", "feed", "lnK"),
    [
        # Stoichiometric CO + 3 H2 in decimals: 0.1 and 0.3 are not exact in
        # binary, and the difference of the nearest doubles (1e-17) is the whole
        # trace of CO left at equilibrium.
        (["CO", "H2", "CH4", "H2O"], ["CO + 3 H2 = CH4 + H2O"], [0.1, 0.3, 0.0, 0.0], [150.0]),
        (["CO", "H2", "CH4", "H2O"], ["CO + 3 H2 = CH4 + H2O"], [0.7, 2.1, 0.0, 0.0], [150.0]),
        (STEAM[0], STEAM[1], [0.1, 0.05, 0.0, 1e-30], STEAM_LNK),
    ],
)
def test_decimal_stoichiometric_feeds_keep_their_traces(species, equations, feed, lnK) -> None:
    system = eqbatch.ReactionSystem(species, equations)
    res = system.solve(feed, lnK=lnK, P=1.0)
    assert res.status[0] == Status.CONVERGED, res.message(0)
    # The reference takes the same doubles as exact inputs (50+ digits).
    reference = as_floats(equilibrium(system.stoich, feed, lnK, 1.0, guess=res.amounts[0]))
    np.testing.assert_allclose(res.amounts[0], reference, rtol=1e-8, atol=0)
