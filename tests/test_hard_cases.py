"""The cases that separate a tool from a toy (DESIGN.md): extreme constants
and pressures, trace feeds beside large inerts, unreachable species, and
every kind of bad input inside a batch."""

from __future__ import annotations

import eqbatch
import numpy as np
import pytest
import sympy
from conftest import REFORMING_REACTIONS, REFORMING_SPECIES, conservation_basis, log_residuals

Status = eqbatch.Status


def test_grid_of_extreme_constants_and_pressures_all_converge() -> None:
    system = eqbatch.ReactionSystem(REFORMING_SPECIES, REFORMING_REACTIONS)
    ln_k = np.linspace(-200.0, 200.0, 21)
    L1, L2, P = (a.reshape(-1) for a in np.meshgrid(ln_k, ln_k, np.logspace(-3, 3, 7), indexing="ij"))
    feed = np.array([1.0, 3.0, 0.0, 0.0, 0.0, 0.1])
    res = system.solve(feed, lnK=np.column_stack([L1, L2]), P=P)
    assert np.all(res.converged), res.summary()
    basis = conservation_basis(system)
    drift = np.abs((res.amounts - feed) @ basis.T)
    assert drift.max() < 1e-12 * feed.sum()
    assert np.all(res.amounts >= 0)


def test_trace_feed_beside_a_large_inert_matches_exact_quadratic() -> None:
    # A = B + C with 1e-12 mol of A beside 1e6 mol of inert at P/P0 = 0.5:
    # x^2 P / ((a - x)(a + x + I)) = K, solved exactly with sympy rationals.
    a, inert, P, K = (
        sympy.Rational(1, 10**12),
        sympy.Integer(10**6),
        sympy.Rational(1, 2),
        sympy.Rational(1, 10**15),
    )
    x = sympy.symbols("x", positive=True)
    roots = sympy.solve(sympy.Eq(x**2 * P, K * (a - x) * (a + x + inert)), x)
    exact = [r for r in roots if 0 < r < a][0]
    system = eqbatch.ReactionSystem(["A", "B", "C", "I"], ["A = B + C"])
    res = system.solve([1e-12, 0.0, 0.0, 1e6], K=[1e-15], P=0.5)
    assert res.converged[0]
    assert res.amounts[0, 1] == pytest.approx(float(exact), rel=1e-10)
    assert res.amounts[0, 0] == pytest.approx(float(a - exact), rel=1e-10)


def test_catalytic_cycle_with_absent_catalyst() -> None:
    # r1: A + X = B, r2: B = X + C, feed A only: X and B cannot be formed (X is
    # needed to make B and B to make X), but A = C (r1 + r2) can run, so at
    # equilibrium n_C / n_A = K1 K2 exactly and X, B are exactly zero.
    system = eqbatch.ReactionSystem(["A", "X", "B", "C"], ["A + X = B", "B = X + C"])
    res = system.solve([1.0, 0.0, 0.0, 0.0], lnK=[1.0, 0.5])
    assert res.status[0] == Status.CONVERGED
    assert res.amounts[0, 1] == 0.0 and res.amounts[0, 2] == 0.0
    assert res.amounts[0, 3] / res.amounts[0, 0] == pytest.approx(np.exp(1.5), rel=1e-9)
    assert "X, B cannot be formed" in res.message(0)


def test_reaction_pinned_by_a_missing_reactant() -> None:
    # A + B = C cannot run without B (and C only comes from it); A = D can.
    system = eqbatch.ReactionSystem(["A", "B", "C", "D"], ["A + B = C", "A = D"])
    res = system.solve([2.0, 0.0, 0.0, 0.0], lnK=[5.0, np.log(3.0)])
    assert res.status[0] == Status.CONVERGED
    np.testing.assert_array_equal(res.amounts[0, 1:3], [0.0, 0.0])
    np.testing.assert_allclose(res.amounts[0, [0, 3]], [0.5, 1.5], rtol=1e-9)


def test_feed_with_nothing_that_can_react_is_returned_unchanged() -> None:
    system = eqbatch.ReactionSystem(REFORMING_SPECIES, REFORMING_REACTIONS)
    feed = np.array([1.0, 0.0, 0.0, 0.0, 0.0, 2.0])  # methane and nitrogen only
    res = system.solve(feed, lnK=[3.0, 0.3])
    assert res.status[0] == Status.CONVERGED and res.iterations[0] == 0
    np.testing.assert_array_equal(res.amounts[0], feed)


@pytest.mark.parametrize("P", [1e-3, 1e-1, 1.0, 1e2, 1e3])
def test_pressure_extremes_against_closed_form(P: float) -> None:
    # A = 2 B: x = sqrt(K / (K + 4 P)).
    system = eqbatch.ReactionSystem(["A", "B"], ["A = 2 B"])
    res = system.solve([1.0, 0.0], lnK=[2.0], P=P)
    K = np.exp(2.0)
    np.testing.assert_allclose(res.extents[0, 0], np.sqrt(K / (K + 4 * P)), rtol=1e-10)


def test_every_kind_of_bad_case_is_marked_and_the_rest_solved(reforming) -> None:
    n = 12
    feed = np.tile([1.0, 3.0, 0.0, 0.0, 0.0, 0.1], (n, 1))
    lnk = np.tile([2.0, 0.5], (n, 1))
    P = np.full(n, 10.0)
    feed[1, 0] = -1.0  # negative feed
    feed[2, 1] = np.nan  # NaN feed
    feed[3, 1] = np.inf  # infinite feed
    feed[4] = 0.0  # zero total
    lnk[5, 0] = np.nan  # NaN ln K
    lnk[6, 1] = -np.inf  # K = 0
    P[7] = 0.0  # zero pressure
    P[8] = -2.0  # negative pressure
    P[9] = np.nan  # NaN pressure
    P[10] = np.inf  # infinite pressure
    res = reforming.solve(feed, lnK=lnk, P=P)
    bad = np.arange(1, 11)
    assert np.all(res.status[bad] == Status.INVALID_INPUT)
    assert np.all(np.isnan(res.amounts[bad])) and np.all(np.isnan(res.extents[bad]))
    assert np.all(np.isnan(res.mole_fractions[bad]))
    good = [0, 11]
    assert np.all(res.converged[good])
    np.testing.assert_array_equal(res.amounts[0], res.amounts[11])


def test_invalid_raise_names_the_first_bad_case(reforming) -> None:
    feed = np.tile([1.0, 3.0, 0.0, 0.0, 0.0, 0.1], (5, 1))
    feed[3, 2] = -0.5
    with pytest.raises(eqbatch.InvalidCaseError, match="case 3: the feed has a negative"):
        reforming.solve(feed, lnK=[2.0, 0.5], invalid="raise")
    with pytest.raises(eqbatch.InvalidCaseError, match="case 2: the pressure"):
        reforming.solve(feed[:1], lnK=[2.0, 0.5], P=[1.0, 2.0, 0.0], invalid="raise")
    with pytest.raises(eqbatch.InvalidCaseError, match="case 0: ln K is not finite"):
        reforming.solve(feed[:1], K=[0.0, 1.0], invalid="raise")


def test_random_zero_patterns_are_solved_on_their_face() -> None:
    rng = np.random.default_rng(7)
    system = eqbatch.ReactionSystem(REFORMING_SPECIES, REFORMING_REACTIONS)
    n = 3000
    feed = rng.uniform(0, 2, (n, 6)) * (rng.uniform(size=(n, 6)) < 0.5)
    feed[:, 5] += 0.01
    lnk = rng.uniform(-40, 40, (n, 2))
    P = 10 ** rng.uniform(-2, 2, n)
    res = system.solve(feed, lnK=lnk, P=P)
    assert np.all(res.converged), res.summary()
    for k in rng.choice(n, 200, replace=False):
        r = log_residuals(system, res.amounts[k], lnk[k], P[k])
        assert np.all(np.abs(r[np.isfinite(r)]) < 1e-8)


@pytest.mark.parametrize("tiny", [5e-324, 1e-310, 1e-300])
def test_subnormal_amounts_in_the_feed(tiny: float) -> None:
    # A subnormal inert, or a subnormal reactant, must not poison the case: the
    # inert only dilutes, and a reactant below 1e-300 mol counts as absent.
    system = eqbatch.ReactionSystem(["N2", "H2", "NH3", "Ar"], ["0.5 N2 + 1.5 H2 = NH3"])
    clean = system.solve([1.0, 3.0, 0.0, 0.0], lnK=[0.0])
    res = system.solve([[1.0, 3.0, 0.0, tiny], [1.0, 3.0, tiny, 0.0]], lnK=[0.0])
    assert np.all(res.converged)
    np.testing.assert_allclose(res.amounts[:, :3], np.vstack([clean.amounts[0, :3]] * 2), rtol=1e-9)
