"""Adiabatic solves in the core's one Newton iteration (extents and outlet
temperature together, the mixture's entropy at the given enthalpy as merit
function) and the nested solve it hands its hard cases to.

Check values are independent computations in the test: a dissociation's
adiabatic outlet by scipy's brentq on its closed form, and the nested solve
(Newton on the outlet temperature around the isothermal solve, a different
algorithm) on the same cases."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from eqbatch import CaseInputError, ExtrapolationWarning, ReactionSystem, Status
from eqbatch.adiabatic import _nested, adiabatic_solve
from eqbatch.demo import reformer_system
from eqbatch.thermo import CpPolynomial
from scipy.optimize import brentq

R = 8.314462618  # J/(mol K), CODATA 2018 (exact)


@pytest.fixture(scope="module")
def reformer() -> ReactionSystem:
    return reformer_system()


def _cases(system: ReactionSystem, n: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    feed = np.zeros((n, len(system.species)))
    feed[:, system.species.index("CH4")] = 1.0
    feed[:, system.species.index("H2O")] = rng.uniform(1.5, 5.0, n)
    return feed, rng.uniform(700.0, 1200.0, n), rng.uniform(1.0, 40.0, n)


def _by_nested(system: ReactionSystem, feed, T, P, **kw):
    args = {"tol": 1e-10, "max_iter": 200, "threads": None, "invalid": "mark", "x0": None}
    args |= {"max_T_iter": 60, "energy_tol": 1e-11, "duty": None, "H_in": None, "lnk_shift": None}
    return _nested(system, system.solve, feed, T, P, **(args | kw))


def test_the_core_settles_the_demo_reformer_and_agrees_with_the_nested_solve(reformer) -> None:
    feed, T, P = _cases(reformer, 400, 1)
    table, lo, hi = reformer._energy_table
    h_in = reformer._species_h_cp(T)[0]
    H = np.sum(feed * h_in, axis=1)
    # the kernel alone: every case of this workload settles there (no hand-back)
    kernel = reformer._engine.adiabatic(
        table, lo, hi, feed, H, np.zeros(400), T, P, None, None, 1e-10, 200, None
    )
    assert np.all(kernel[3] == Status.CONVERGED)
    # ln K at each outlet from the core: what system.lnK gives at the outlet T
    # (the same data summed in another order: equal to rounding)
    np.testing.assert_allclose(kernel[5], reformer.lnK(kernel[2]), rtol=0, atol=1e-12)
    # the feed's enthalpy summed in the core (enthalpy None) instead of given:
    # the same outlets (the two sums differ in the last bits only), and a duty
    # (heat, J) moves the outlet as the same enthalpy given does
    heat = np.linspace(-2e4, 2e4, 400)
    for added in (np.zeros(400), heat):
        given = reformer._engine.adiabatic(
            table, lo, hi, feed, H + added, added, T, P, None, None, 1e-10, 200, None
        )
        summed = reformer._engine.adiabatic(
            table, lo, hi, feed, None, added, T, P, None, None, 1e-10, 200, None
        )
        assert np.all(summed[3] == Status.CONVERGED)
        assert np.max(np.abs(summed[2] - given[2])) < 1e-8 and np.allclose(
            summed[0], given[0], rtol=1e-9, atol=1e-14
        )
    res = reformer.solve(feed, T=T, P=P, adiabatic=True)
    ref = _by_nested(reformer, feed, T, P)
    assert res.converged.all() and ref.converged.all()
    assert np.max(np.abs(res.T - ref.T)) < 1e-6
    assert np.allclose(res.amounts, ref.amounts, rtol=1e-8, atol=1e-12)
    # the energy balance closes: outlet enthalpy at the outlet T equals the feed's at the inlet T
    h_out = reformer._species_h_cp(res.T)[0]
    assert np.allclose(np.sum(res.amounts * h_out, axis=1), H, rtol=1e-11, atol=1e-6)
    # each reaction at equilibrium at the outlet temperature
    x = res.amounts / res.amounts.sum(axis=1, keepdims=True)
    lnx = np.log(np.where(x > 0, x, 1.0))  # (the unfed inert N2 is in no reaction)
    lnQ = lnx @ reformer.stoich.T + np.outer(np.log(P), reformer.stoich.sum(axis=1))
    assert np.max(np.abs(lnQ - reformer.lnK(res.T))) < 1e-9


def test_a_dissociation_outlet_matches_brentq_on_the_closed_form() -> None:
    # A2 = 2 A with constant heat capacities (illustrative data: dH298 = +150 kJ/mol,
    # dS298 = +120 J/(mol K)), 1 mol A2 (+ 0.5 mol inert N2) at 1500-2600 K and 0.5-20 bar.
    # By hand: K = 4 xi^2 P / ((1 - xi)(1 + xi + 0.5)) solved for xi in closed form at each T,
    # and the enthalpy balance sum n h(T) = sum n0 h(T_in) solved for T by brentq.
    cp = {"A2": 4.5, "A": 2.5, "N2": 3.5}  # Cp / R
    dHf = {"A2": 0.0, "A": 75.0, "N2": 0.0}  # kJ/mol
    S298 = {"A2": 200.0, "A": 160.0, "N2": 191.6}  # J/(mol K)
    data = {sp: CpPolynomial(a=(cp[sp],), dHf=dHf[sp], S298=S298[sp], T_min=200.0, T_max=6000.0) for sp in cp}
    system = ReactionSystem(["A2", "A", "N2"], ["A2 = 2 A"], species_data=data, check_balance=False)

    def h(sp: str, T: float) -> float:
        return 1000.0 * dHf[sp] + cp[sp] * R * (T - 298.15)

    def s(sp: str, T: float) -> float:
        return S298[sp] + cp[sp] * R * np.log(T / 298.15)

    def extent(T: float, P: float) -> float:
        dG = 2 * (h("A", T) - T * s("A", T)) - (h("A2", T) - T * s("A2", T))
        k = np.exp(-dG / (R * T)) / P  # K / P, so k = 4 xi^2 / ((1 - xi)(1.5 + xi))
        # 4 xi^2 = k (1.5 - 0.5 xi - xi^2): (4 + k) xi^2 + 0.5 k xi - 1.5 k = 0
        a, b, c = 4.0 + k, 0.5 * k, -1.5 * k
        return (-b + np.sqrt(b * b - 4 * a * c)) / (2 * a)

    def outlet(T_in: float, P: float) -> float:
        H_in = h("A2", T_in) + 0.5 * h("N2", T_in)

        def balance(T: float) -> float:
            xi = extent(T, P)
            return (1 - xi) * h("A2", T) + 2 * xi * h("A", T) + 0.5 * h("N2", T) - H_in

        return brentq(balance, 300.0, 6000.0, xtol=1e-12, rtol=1e-15)

    rng = np.random.default_rng(7)
    T_in, P = rng.uniform(1500.0, 2600.0, 40), rng.uniform(0.5, 20.0, 40)
    res = system.solve([1.0, 0.0, 0.5], T=T_in, P=P, adiabatic=True, tol=1e-12)
    assert res.converged.all()
    for k in range(T_in.size):
        T_out = outlet(T_in[k], P[k])
        assert float(res.T[k]) == pytest.approx(T_out, rel=1e-10)
        assert float(res.extents[k, 0]) == pytest.approx(extent(T_out, P[k]), rel=1e-9)
    assert np.all(res.T < T_in)  # dissociation absorbs heat: the outlet is cooler


def test_cases_the_kernel_hands_back_are_solved_by_the_nested_path(reformer) -> None:
    # A methane slip below the kernel's share floor (1e-9 of the gas: a steam-rich feed,
    # a hot inlet, ln K of reforming raised by 25) and a bad feed, in one batch with
    # ordinary cases. (Outlets beyond the data's range, which the kernel also hands
    # back, are checked in test_approach_adiabatic.py.)
    feed, T, P = _cases(reformer, 6, 2)
    feed[0, reformer.species.index("H2O")] = 40.0
    T[0] = 1200.0
    shift = np.zeros((6, reformer.n_reactions))
    shift[0, 0] = 25.0
    feed[1] = np.nan
    res = reformer.solve(feed, T=T, P=P, adiabatic=True)
    assert res.status[1] == Status.INVALID_INPUT and np.isnan(res.T[1])
    table, lo, hi = reformer._energy_table
    H = np.sum(np.nan_to_num(feed) * reformer._species_h_cp(T)[0], axis=1)
    kernel = reformer._engine.adiabatic(
        table,
        lo,
        hi,
        np.nan_to_num(feed),
        H,
        np.zeros(6),
        T,
        P,
        np.ascontiguousarray(shift),
        None,
        1e-10,
        200,
        None,
    )
    assert kernel[3][0] == Status.STALLED  # the trace methane: not the kernel's case

    good = np.array([0, 2, 3, 4, 5])
    both = adiabatic_solve(reformer, reformer.solve, feed[good], T[good], P[good], lnk_shift=shift[good])
    ref = _by_nested(reformer, feed[good], T[good], P[good], lnk_shift=shift[good])
    assert both.converged.all()
    assert both.amounts[0, reformer.species.index("CH4")] < 1e-9 * both.amounts[0].sum()
    assert np.max(np.abs(both.T - ref.T)) < 1e-6
    assert np.allclose(both.amounts, ref.amounts, rtol=1e-8, atol=1e-14)
    # the constants reported: ln K at each outlet plus the case's shift (the
    # kernel's for the settled cases, the nested solve's for the trace case)
    np.testing.assert_allclose(both.lnK, reformer.lnK(both.T) + shift[good], rtol=0, atol=1e-9)


def test_kernel_results_do_not_depend_on_the_thread_count(reformer) -> None:
    feed, T, P = _cases(reformer, 3000, 3)
    one = reformer.solve(feed, T=T, P=P, adiabatic=True, threads=1)
    two = reformer.solve(feed, T=T, P=P, adiabatic=True, threads=2)
    assert np.array_equal(one.T, two.T) and np.array_equal(one.amounts, two.amounts)
    assert np.array_equal(one.iterations, two.iterations)


def test_options_labelled_starts_and_inlet_ranges_as_an_isothermal_solve_takes_them(reformer) -> None:
    feed = [1.0, 3.0, 0.0, 0.0, 0.0, 0.0]
    # options are checked as for an isothermal solve (the kernel settling every case
    # must not let a tol of 0.5 through)
    with pytest.raises(CaseInputError, match="tol must be a number"):
        reformer.solve(feed, T=900.0, P=10.0, adiabatic=True, tol=0.5)
    with pytest.raises(CaseInputError):
        reformer.solve(feed, T=900.0, P=10.0, adiabatic=True, max_iter=-1)
    # a start labelled by reaction, at the answer: no Newton step needed (the kernel's
    # convergence test is on the reactions as given, so at most one polishing step)
    res = reformer.solve(feed, T=900.0, P=10.0, adiabatic=True)
    start = dict(zip(reformer.labels, res.extents[0].tolist()))
    again = reformer.solve(feed, T=900.0, P=10.0, adiabatic=True, x0=start)
    assert again.converged[0] and again.iterations[0] <= 1
    assert float(again.T[0]) == pytest.approx(float(res.T[0]), abs=1e-7)
    # an inlet below the species data's range is said once, as a solve at that T says it
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        reformer.solve(feed, T=400.0, P=10.0, adiabatic=True)
    ranges = [w for w in caught if issubclass(w.category, ExtrapolationWarning)]
    assert ranges and len({str(w.message) for w in ranges}) == len(ranges)
