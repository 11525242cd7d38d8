"""Energy outputs and energy-balance solves: the outlet's enthalpy and heat
capacity, reaction enthalpies, the duty of an isothermal reactor, a reactor
with a given heat duty, and an inlet given as an enthalpy. Check values are
independent computations in the test (the species' enthalpies summed with
numpy from each data class's own Python formulas, Hess's law) and facts of
the trade named beside them."""

from __future__ import annotations

import numpy as np
import pytest
from eqbatch import CaseInputError, ExtrapolationWarning, ReactionSystem, Status
from test_thermo import SHOMATE

SPECIES = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
FEED = np.array([1.0, 3.0, 0.0, 0.05, 0.0, 0.1])


@pytest.fixture(scope="module")
def reformer() -> ReactionSystem:
    return ReactionSystem(
        SPECIES,
        {"reforming": "CH4 + H2O = CO + 3 H2", "shift": "CO + H2O = CO2 + H2"},
        species_data={s: SHOMATE[s] for s in SPECIES},
    )


def mixture_enthalpy(amounts: np.ndarray, T: np.ndarray) -> np.ndarray:
    """sum n_i h_i(T), kJ, from the Shomate classes' numpy formulas."""
    amounts = np.atleast_2d(amounts)
    return (
        np.array(
            [sum(n[k] * float(SHOMATE[s].h(t)) for k, s in enumerate(SPECIES)) for n, t in zip(amounts, T)]
        )
        / 1000.0
    )


def test_reaction_enthalpies_at_298_k_are_the_textbook_values(reformer) -> None:
    # Steam reforming +206 kJ/mol and water-gas shift -41 kJ/mol at 298 K (common
    # knowledge of the trade, from memory), within 1 kJ/mol; the water data start at
    # 500 K, so 298 K is an extrapolation and says so.
    with pytest.warns(ExtrapolationWarning, match="H2O"):
        res = reformer.solve(FEED, T=298.15, P=1.0)
    np.testing.assert_allclose(res.reaction_enthalpy[0] / 1000.0, [206.0, -41.2], atol=1.0)


def test_outlet_enthalpy_heat_capacity_and_isothermal_duty(reformer) -> None:
    T = np.array([800.0, 1000.0, 1150.0])
    res = reformer.solve(FEED, T=T, P=20.0)
    assert res.converged.all()
    np.testing.assert_allclose(res.enthalpy, mixture_enthalpy(res.amounts, T), rtol=1e-12)
    cp = np.array(
        [sum(n[k] * float(SHOMATE[s].cp(t)) for k, s in enumerate(SPECIES)) for n, t in zip(res.amounts, T)]
    )
    np.testing.assert_allclose(res.heat_capacity, cp / 1000.0, rtol=1e-12)
    # Hess's law: feed and products at the same temperature, so the duty is the
    # sum of extent times reaction enthalpy at T.
    np.testing.assert_allclose(
        res.duty(), np.sum(res.extents * res.reaction_enthalpy, axis=1) / 1000.0, rtol=1e-10
    )
    assert np.all(res.duty() > 0)  # reforming takes heat (fact of the trade)
    # a feed preheated to 700 K: the duty adds the sensible heat from 700 K to T
    hot = res.duty(T_in=700.0)
    feed_at = mixture_enthalpy(np.tile(FEED, (3, 1)), np.full(3, 700.0))
    np.testing.assert_allclose(hot, mixture_enthalpy(res.amounts, T) - feed_at, rtol=1e-11)


def test_a_given_duty_closes_the_energy_balance(reformer) -> None:
    duties = np.array([0.0, 80.0, 150.0, -20.0])  # kJ per case
    res = reformer.solve(FEED, T=900.0, P=20.0, duty=duties, tol=1e-12)
    assert (res.status == Status.CONVERGED).all()
    np.testing.assert_allclose(res.T_in, 900.0)
    feed_h = mixture_enthalpy(FEED, [900.0])[0]
    np.testing.assert_allclose(mixture_enthalpy(res.amounts, res.T) - feed_h, duties, atol=1e-6)
    np.testing.assert_allclose(res.duty(), duties, atol=1e-6)
    # the outlet is at equilibrium at its temperature (an isothermal solve there agrees)
    iso = reformer.solve(FEED, T=res.T, P=20.0, tol=1e-12)
    np.testing.assert_allclose(iso.amounts, res.amounts, rtol=1e-8, atol=1e-12)
    # more heat, hotter outlet; duty 0 is the adiabatic outlet
    assert np.all(np.diff(res.T[[3, 0, 1, 2]]) > 0)
    adiabatic = reformer.solve(FEED, T=900.0, P=20.0, adiabatic=True, tol=1e-12)
    assert float(adiabatic.T[0]) == pytest.approx(float(res.T[0]), rel=1e-10)


def test_inlet_given_as_an_enthalpy(reformer) -> None:
    T_in = np.array([750.0, 950.0])
    H_in = mixture_enthalpy(np.tile(FEED, (2, 1)), T_in)
    by_h = reformer.solve(FEED, H_in=H_in, P=20.0, adiabatic=True, tol=1e-12)
    by_t = reformer.solve(FEED, T=T_in, P=20.0, adiabatic=True, tol=1e-12)
    np.testing.assert_allclose(by_h.T_in, T_in, rtol=1e-10)
    np.testing.assert_allclose(by_h.T, by_t.T, rtol=1e-10)
    # an enthalpy no temperature gives the feed is invalid input, not a guess
    far = reformer.solve(FEED, H_in=[H_in[0], -1e6], P=20.0, adiabatic=True)
    assert far.status.tolist() == [Status.CONVERGED, Status.INVALID_INPUT]


def test_energy_options_are_checked(reformer) -> None:
    with pytest.raises(CaseInputError, match="not both"):
        reformer.solve(FEED, T=900.0, adiabatic=True, duty=10.0)
    with pytest.raises(CaseInputError, match="H_in= is the inlet of an energy balance"):
        reformer.solve(FEED, T=900.0, H_in=-500.0)
    with pytest.raises(CaseInputError, match="one of them"):
        reformer.solve(FEED, T=900.0, H_in=-500.0, adiabatic=True)
    with pytest.raises(CaseInputError, match="needs the temperature"):
        _ = reformer.solve(FEED, lnK=[1.0, 0.5]).enthalpy
    no_data = ReactionSystem(["A", "B"], ["A = B"], check_balance=False)
    with pytest.raises(CaseInputError, match="species data"):
        no_data.solve([1.0, 0.0], lnK=0.0, T=500.0).duty()
