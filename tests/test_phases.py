"""A phase that vanishes at equilibrium: the case still converges, with the
phase exactly absent and stable."""

from __future__ import annotations

import eqbatch
import numpy as np
import pytest
from conftest import conservation_basis, gibbs, log_residuals
from test_reference import random_system


def random_phase_batch(rng, choose_phases, cases: int, lnk_noise, decades: float):
    """A random system (test_reference.random_system) with the phases
    ``choose_phases(rng, names)`` gives, and ``cases`` random feeds (some
    zeros), ln K (random species data plus ``lnk_noise(rng, shape)``) and
    pressures (``decades`` either side of 1 bar); None if the phases make the
    system invalid."""
    A, names, eqs, mu = random_system(rng)
    try:
        system = eqbatch.ReactionSystem(names, eqs, phases=choose_phases(rng, names))
    except eqbatch.SystemDefinitionError:
        return None
    feed = rng.uniform(0, 2, (cases, len(names))) * (rng.uniform(size=(cases, len(names))) < 0.6)
    feed[feed.sum(1) == 0, 0] = 1.0
    lnK = -(system.stoich @ mu)[None, :] + lnk_noise(rng, (cases, system.n_reactions))
    P = 10 ** rng.uniform(-decades, decades, cases)
    return system, feed, lnK, P


def random_two_phase_batch(rng, liquid_share: float, cases: int, decades: float):
    """:func:`random_phase_batch` with some species liquid, ln K +-20 (normal)."""
    return random_phase_batch(
        rng,
        lambda rng, names: {n: "liquid" for n in names if rng.uniform() < liquid_share},
        cases,
        lambda rng, shape: rng.normal(0, 20, shape),
        decades,
    )


@pytest.mark.parametrize("K", [0.5, 1.0, 1.9])
def test_condensate_above_its_dew_point_is_absent(K: float) -> None:
    # V (gas) = L (liquid, alone in its phase), inert I: y_V = P0 / (K P) would need
    # n_V / (n_V + 1) = 1 / (K P) > 1/2 for K P < 2, more V than there is: no liquid
    # forms, all V stays vapour (closed form).
    system = eqbatch.ReactionSystem(["V", "L", "I"], ["V = L"], phases={"L": "liquid"})
    res = system.solve([1.0, 0.0, 1.0], K=[K], P=1.0)
    assert res.status[0] == eqbatch.Status.CONVERGED
    np.testing.assert_array_equal(res.amounts[0], [1.0, 0.0, 1.0])
    assert res.mole_fractions[0, 1] == 0.0


def test_fed_liquid_that_evaporates_completely() -> None:
    # The same with the liquid fed: at K P = 1 all of it evaporates (y_V = 2/3 < 1).
    system = eqbatch.ReactionSystem(["V", "L", "I"], ["V = L"], phases={"L": "liquid"})
    res = system.solve([0.0, 1.0, 0.5], K=[1.0], P=1.0)
    assert res.status[0] == eqbatch.Status.CONVERGED
    np.testing.assert_allclose(res.amounts[0], [1.0, 0.0, 0.5], atol=1e-14)
    np.testing.assert_allclose(res.extents[0], [-1.0], atol=1e-14)


def test_random_two_phase_systems_converge_and_are_right() -> None:
    rng = np.random.default_rng(123)
    total = converged = 0
    for _ in range(60):
        batch = random_two_phase_batch(rng, liquid_share=0.3, cases=100, decades=2)
        if batch is None:
            continue
        system, feed, lnk, P = batch
        n = len(P)
        res = system.solve(feed, lnK=lnk, P=P)
        total += n
        converged += int(res.converged.sum())
        basis = conservation_basis(system)
        for k in np.flatnonzero(res.converged):
            a = res.amounts[k]
            assert np.all(a >= 0)
            np.testing.assert_allclose(basis @ a, basis @ feed[k], atol=1e-10 * feed[k].sum())
            r = log_residuals(system, a, lnk[k], P[k])
            assert np.all(np.abs(r[np.isfinite(r)]) < 1e-7)
    # Honest statuses for the rest: a few cases where a phase shrinks to the float
    # floor without the absent-phase solution being stable are reported stalled.
    assert converged / total > 0.99


# --- an empty phase must be stable, and repaired cases must be honest -------------


def scipy_minimum(system, feed: np.ndarray, lnK: np.ndarray, P: float, rng) -> float:
    """The smallest G/RT found by SLSQP over the extents under n >= 0, from the
    feed and from random feasible starts (independent of eqbatch)."""
    from scipy.optimize import linprog, minimize

    nu = system.stoich
    R = nu.shape[0]
    cons = {"type": "ineq", "fun": lambda x: feed + nu.T @ x, "jac": lambda x: nu.T}
    starts = [np.zeros(R)]
    for _ in range(2):  # vertices of the feasible extents in random directions
        sol = linprog(rng.normal(size=R), A_ub=-nu.T, b_ub=feed, bounds=[(-50, 50)] * R, method="highs")
        if sol.success:
            starts.append(0.5 * sol.x)
    g = -np.linalg.lstsq(nu, lnK, rcond=None)[0]
    phases = np.array(system.phases)

    def slope(x):  # d(G/RT)/d xi = nu (g + ln a)
        n = np.maximum(feed + nu.T @ x, 1e-300)
        ln_a = np.log(n)
        for phase in ("gas", "liquid"):
            mask = phases == phase
            ln_a[mask] -= np.log(n[mask].sum())
            if phase == "gas":
                ln_a[mask] += np.log(P / system.P0)
        return nu @ (g + ln_a)

    best = gibbs(system, feed, lnK, P)
    for x0 in starts:
        sol = minimize(
            lambda x: gibbs(system, np.maximum(feed + nu.T @ x, 0.0), lnK, P),
            x0,
            jac=slope,
            method="SLSQP",
            constraints=[cons],
            options={"ftol": 1e-14, "maxiter": 500},
        )
        amounts = feed + nu.T @ sol.x
        if amounts.min() >= -1e-12 * feed.sum():  # only states that exist count
            best = min(best, gibbs(system, np.maximum(amounts, 0.0), lnK, P))
    return best


def test_liquid_products_that_cannot_coexist_with_their_gas_form_completely() -> None:
    # A = B + C with B and C the only liquid species: made from A they are always
    # x_B = x_C = 1/2, so a_B a_C / a_A = 1/4 < K = e^5 while any A is left (A is
    # alone in its gas, a_A = P/P0 = 1): the reaction runs to completion (closed form).
    system = eqbatch.ReactionSystem(["A", "B", "C"], ["A = B + C"], phases={"B": "liquid", "C": "liquid"})
    res = system.solve([1.0, 0.0, 0.0], lnK=[5.0])
    assert res.status[0] == eqbatch.Status.CONVERGED
    np.testing.assert_allclose(res.amounts[0], [0.0, 1.0, 1.0], atol=1e-14)
    assert "the gas phase is absent" in res.message(0) and "cannot be formed" not in res.message(0)
    assert res.absent_phases(0) == ["gas"]
    # the products' Gibbs energy is the lower of the two states
    lnK = np.array([5.0])
    assert gibbs(system, res.amounts[0], lnK, 1.0) < gibbs(system, np.array([1.0, 0.0, 0.0]), lnK, 1.0)


def test_methanol_and_water_condense_and_the_reaction_completes() -> None:
    # CO2 + 3 H2 = CH3OH + H2O with both products liquid, ln K = 3.75, 50 bar: the
    # gas keeps y_CO2 = 1/4, y_H2 = 3/4 and the liquid x = 1/2 each, so
    # Q = (1/4) / ((1/4)(3/4)^3 50^4) = 3.8e-7 < K = 42.5 wherever the reaction
    # stands: it runs until the gas is gone (closed form).
    system = eqbatch.ReactionSystem(
        ["CO2", "H2", "CH3OH", "H2O"],
        ["CO2 + 3 H2 = CH3OH + H2O"],
        phases={"CH3OH": "liquid", "H2O": "liquid"},
    )
    res = system.solve([1.0, 3.0, 0.0, 0.0], lnK=[3.75], P=50.0)
    assert res.status[0] == eqbatch.Status.CONVERGED
    np.testing.assert_allclose(res.amounts[0], [0.0, 0.0, 1.0, 1.0], atol=1e-14)


def test_an_empty_phase_never_hides_a_lower_gibbs_energy() -> None:
    # Random two-phase systems (ln K +-20): wherever eqbatch leaves a phase empty,
    # no state that scipy's SLSQP finds has a lower Gibbs energy.
    rng = np.random.default_rng(1)
    empty = 0
    for _ in range(40):
        if empty >= 40:
            break
        batch = random_two_phase_batch(rng, liquid_share=0.4, cases=12, decades=1)
        if batch is None or len(set(batch[0].phases)) < 2:
            continue
        system, feed, lnK, P = batch
        res = system.solve(feed, lnK=lnK, P=P)
        liquid = np.array(system.phases) == "liquid"
        for k in np.flatnonzero(res.converged):
            a = res.amounts[k]
            if not (np.all(a[liquid] == 0) or np.all(a[~liquid] == 0)):
                continue
            empty += 1
            ours = gibbs(system, a, lnK[k], P[k])
            theirs = scipy_minimum(system, feed[k], lnK[k], P[k], rng)
            assert ours <= theirs + 1e-7 * (1 + abs(theirs)), (system, feed[k], lnK[k], P[k])
    assert empty >= 20


def test_repaired_cases_honour_max_iter_and_count_their_iterations() -> None:
    # A = B in the gas, A = L condensing: K_L = 0.5 < a_L / a_A = 3 at coexistence,
    # so no liquid forms (the case first stalls as L shrinks, then is repaired).
    system = eqbatch.ReactionSystem(["A", "B", "L"], ["A = B", "A = L"], phases={"L": "liquid"})
    lnK = [np.log(2.0), np.log(0.5)]
    res = system.solve([1.0, 0.0, 0.0], lnK=lnK)
    assert res.status[0] == eqbatch.Status.CONVERGED
    np.testing.assert_allclose(res.amounts[0], [1 / 3, 2 / 3, 0.0], rtol=1e-12)  # n_B / n_A = 2
    assert res.absent_phases(0) == ["liquid"]
    # max_iter bounds each attempt: the first one and the one with the liquid absent.
    for budget in range(int(res.iterations[0]) + 1):
        limited = system.solve([1.0, 0.0, 0.0], lnK=lnK, max_iter=budget)
        assert limited.iterations[0] <= 2 * budget
    # No budget at all: the case cannot be passed off as converged.
    assert not system.solve([1.0, 0.0, 0.0], lnK=lnK, max_iter=0).converged[0]


def test_repaired_cases_have_exact_derivatives() -> None:
    system = eqbatch.ReactionSystem(["A", "B", "L", "I"], ["A = B", "A = L"], phases={"L": "liquid"})
    lnK = np.array([np.log(2.0), np.log(0.5)])
    feed = np.array([1.0, 0.0, 0.0, 0.5])
    res = system.solve(feed, lnK=lnK, P=2.0, sensitivities=True)
    assert res.status[0] == eqbatch.Status.CONVERGED and res.amounts[0, 2] == 0.0
    for wrt in ("lnK", "P", "feed"):
        assert np.all(np.isfinite(res.sensitivity(wrt)))
    h = 1e-6
    d_lnk = res.sensitivity("lnK")[0]
    for j in range(2):
        step = np.zeros(2)
        step[j] = h
        up = system.solve(feed, lnK=lnK + step, P=2.0, tol=1e-13).amounts[0]
        down = system.solve(feed, lnK=lnK - step, P=2.0, tol=1e-13).amounts[0]
        np.testing.assert_allclose(d_lnk[:, j], (up - down) / (2 * h), atol=1e-8)
    for k in (0, 3):
        step = np.zeros(4)
        step[k] = h
        up = system.solve(feed + step, lnK=lnK, P=2.0, tol=1e-13).amounts[0]
        down = system.solve(feed - step, lnK=lnK, P=2.0, tol=1e-13).amounts[0]
        np.testing.assert_allclose(res.sensitivity("feed")[0][:, k], (up - down) / (2 * h), atol=1e-8)
    # the liquid L absent: the derivative by its feed moves it into the gas as A
    step = np.zeros(4)
    step[2] = h
    up = system.solve(feed + step, lnK=lnK, P=2.0, tol=1e-13).amounts[0]
    np.testing.assert_allclose(res.sensitivity("feed")[0][:, 2], (up - res.amounts[0]) / h, atol=1e-6)


def test_species_that_cannot_form_do_not_decide_phase_stability() -> None:
    # V (liquid, vapour pressure e^-19 bar as G) with Z = V + Y, where neither Z
    # nor Y can form from a V feed. A gas of pure G at 1 bar is far above that
    # vapour pressure, so no gas forms and V stays liquid whatever the ln K of
    # the reaction that cannot run (closed form).
    system = eqbatch.ReactionSystem(["V", "G", "Z", "Y"], ["V = G", "Z = V + Y"], phases={"V": "liquid"})
    for lnK_blocked in (-80.0, 0.0, 80.0):
        res = system.solve([1.0, 0.0, 0.0, 0.0], lnK=[-19.0, lnK_blocked], P=1.0)
        assert res.status[0] == eqbatch.Status.CONVERGED
        np.testing.assert_array_equal(res.amounts[0], [1.0, 0.0, 0.0, 0.0])
    # A = L with L liquid alone in its phase (a_L = 1 once it forms): coexistence
    # needs a_A = a_L / K = e^2, above the a_A = 1 of pure A at P0, so no liquid
    # forms; L + Z = Y cannot run (closed form).
    system = eqbatch.ReactionSystem(["A", "L", "Z", "Y"], ["A = L", "L + Z = Y"], phases={"L": "liquid"})
    res = system.solve([1.0, 0.0, 0.0, 0.0], lnK=[-2.0, -5.0])
    assert res.status[0] == eqbatch.Status.CONVERGED
    np.testing.assert_array_equal(res.amounts[0], [1.0, 0.0, 0.0, 0.0])


def test_derivatives_of_an_absent_phase_case_with_trace_species() -> None:
    # A = B, A = C in the gas with ln K 40 (A a trace of e^-40), and A = L with
    # L liquid that does not form: the derivatives are those of the gas-only
    # system A = B, A = C (an independent solve of that system).
    system = eqbatch.ReactionSystem(["A", "B", "C", "L"], ["A = B", "A = C", "A = L"], phases={"L": "liquid"})
    res = system.solve([1.0, 1.0, 1.0, 0.0], lnK=[40.0, 40.0, 0.0], sensitivities=True)
    assert res.status[0] == eqbatch.Status.CONVERGED and res.amounts[0, 3] == 0.0
    gas = eqbatch.ReactionSystem(["A", "B", "C"], ["A = B", "A = C"])
    ref = gas.solve([1.0, 1.0, 1.0], lnK=[40.0, 40.0], sensitivities=True)
    np.testing.assert_allclose(
        res.sensitivity("lnK")[0][:3, :2], ref.sensitivity("lnK")[0], rtol=1e-9, atol=0
    )
    np.testing.assert_array_equal(res.sensitivity("lnK")[0][:, 2], 0.0)  # L stays absent


def test_a_phase_vanishing_slowly_is_still_found_absent() -> None:
    # The first attempt spends its whole budget on a liquid shrinking towards
    # zero; the absent-phase attempt gets the caller's max_iter too, and the
    # result is the lowest Gibbs energy scipy finds.
    system = eqbatch.ReactionSystem(
        ["X0", "X1", "X2", "X3"],
        ["X0 = 3 X1", "X0 = 3 X2", "X0 = X3"],
        phases={"X1": "liquid", "X3": "liquid"},
    )
    feed, lnK, P = np.array([0.6, 0.0, 0.0, 0.3]), np.array([12.5, 36.9, 14.5]), 0.12
    res = system.solve(feed, lnK=lnK, P=P)
    assert res.converged[0] and res.absent_phases(0) == ["liquid"]
    ours = gibbs(system, res.amounts[0], lnK, P)
    assert ours <= scipy_minimum(system, feed, lnK, P, np.random.default_rng(0)) + 1e-7


def test_a_phase_lost_on_the_way_is_formed_again() -> None:
    # The first Newton attempt lets the one-species liquid X0 shrink towards the
    # float floor although it belongs at equilibrium (without it the implied
    # mole fraction of X0 is e^8.9, far above one); the case is solved again from
    # the equilibrium without the liquid plus a little of it. Checked against
    # scipy's SLSQP minimum of the Gibbs energy and against every reaction.
    system = eqbatch.ReactionSystem(
        [f"X{k}" for k in range(6)],
        ["3 X0 + 3 X1 = 9 X2 + 1 X3", "8 X2 = 2 X0 + 2 X1 + 1 X4", "5 X0 + 4 X1 = 13 X2 + 2 X5"],
        phases={"X0": "liquid"},
    )
    feed = np.array([0.884, 1.56, 0.0, 0.0, 1.357, 1.894])
    lnK, P = np.array([-10.16, 41.42, -48.96]), 0.043
    res = system.solve(feed, lnK=lnK, P=P)
    assert res.status[0] == eqbatch.Status.CONVERGED, res.message(0)
    assert res.amounts[0, 0] > 1e-3 and res.absent_phases(0) == []
    r = log_residuals(system, res.amounts[0], lnK, P)
    assert np.all(np.abs(r) < 1e-8)
    assert (
        gibbs(system, res.amounts[0], lnK, P)
        <= scipy_minimum(system, feed, lnK, P, np.random.default_rng(0)) + 1e-7
    )


# A random gas + liquid network (bench.workloads.random_network(n_reactions=9, seed=9),
# a third of its species liquid, ln K spread +-50).
NETWORK_SPECIES = ["X0", "X1", "X2", "X3", "X4", "X5", "X6", "X7", "X8", "X9", "X10", "X11", "X12"]
NETWORK_EQUATIONS = [
    "1 X2 + 3 X3 = 2 X4",
    "2 X0 + 3 X1 + 3 X2 + 3 X3 = 2 X5",
    "2 X0 + 1 X1 + 3 X2 + 3 X3 = 2 X6",
    "3 X0 + 2 X1 + 1 X2 = 2 X7",
    "2 X0 + 1 X1 + 3 X2 + 3 X3 = 2 X8",
    "2 X0 + 3 X1 + 2 X2 = 2 X9",
    "3 X0 + 3 X2 + 3 X3 = 2 X10",
    "3 X0 + 2 X1 + 1 X2 + 3 X3 = 2 X11",
    "3 X0 + 2 X2 + 3 X3 = 2 X12",
]
NETWORK_LIQUID = ["X0", "X1", "X5", "X6", "X9", "X11", "X12"]


@pytest.mark.parametrize(
    "feed, lnK, P",
    [
        # a small gas phase (about 0.026 of 9 mol): from a generic start the gas
        # collapses, and held absent it is unstable
        (
            [
                0.29417420030962316,
                0.2681654925941327,
                0.906327824670275,
                0.4827348614131633,
                0.7074548031518766,
                0.5597317004715281,
                0.8264045366289907,
                0.2987268730634432,
                0.8308034538263424,
                0.7793723969112725,
                0.36255142922849604,
                0.5341632308493014,
                0.27308202565463324,
            ],
            [
                20.120699170752914,
                -61.25361477499236,
                57.27935048179829,
                0.32755275710431064,
                -28.11652485056522,
                -57.584511344121154,
                2.9087431875822176,
                -18.74215293715118,
                0.18782644740732835,
            ],
            5.559400675090287,
        ),
        # a small liquid phase: held absent it is 1.5 times over-saturated, and
        # introduced with too much of a generic point it collapsed again
        (
            [
                0.5356305618370537,
                0.8786790199403988,
                0.7902707300457305,
                0.2076104897304833,
                0.554442987348482,
                0.5292437632323355,
                0.5290483637199537,
                0.6514329105175252,
                0.8936304371791931,
                0.6247957284208715,
                0.9931268211031515,
                0.36210545986356085,
                0.8809628107452927,
            ],
            [
                11.567063263417493,
                -14.232423326741738,
                -30.18203830756401,
                40.74058023305899,
                36.697049284268694,
                -31.138554461543496,
                28.508116485266015,
                36.100765076133754,
                32.950126385961276,
            ],
            9.936364795738493,
        ),
    ],
    ids=["small gas", "small liquid"],
)
def test_a_small_phase_that_a_generic_start_loses_is_found(feed, lnK, P) -> None:
    # The answer must be converged with both phases present, every reaction met,
    # and no independent minimisation (scipy SLSQP, several starts) lower.
    system = eqbatch.ReactionSystem(
        NETWORK_SPECIES,
        NETWORK_EQUATIONS,
        phases=dict.fromkeys(NETWORK_LIQUID, "liquid"),
        check_balance=False,
    )
    feed, lnK = np.array(feed), np.array(lnK)
    res = system.solve(feed, lnK=lnK, P=P)
    assert res.converged[0] and res.present[0].all()
    r = log_residuals(system, res.amounts[0], lnK, P)
    assert np.all(np.abs(r[np.isfinite(r)]) < 1e-7)
    rng = np.random.default_rng(0)
    assert gibbs(system, res.amounts[0], lnK, P) <= scipy_minimum(system, feed, lnK, P, rng) + 1e-7
