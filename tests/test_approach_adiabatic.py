"""Approach to equilibrium and adiabatic solves: the direction a reaction runs,
derivatives that hold the enthalpy balance, and the options a caller gives.

Check values are independent computations in the test: central finite
differences of the solve itself, and the same physics written another way
(a named reaction against its generated reverse)."""

from __future__ import annotations

import numpy as np
import pytest
from eqbatch import InvalidCaseError, ReactionSystem, Status
from eqbatch.approach import approach_temperatures, feed_directions
from eqbatch.cli import main
from eqbatch.demo import reformer_feed, reformer_system
from eqbatch.thermo import CpPolynomial, equilibrium_temperature


@pytest.fixture(scope="module")
def reformer() -> ReactionSystem:
    return reformer_system()


# --- adiabatic derivatives --------------------------------------------------------


def _adiabatic(system, feed, T, P):
    return system.solve(feed, T=T, P=P, adiabatic=True, tol=1e-13)


def test_adiabatic_derivatives_by_inlet_temperature_and_pressure(reformer) -> None:
    # A pre-reformer bed: 700 K inlet, 30 bar, steam to carbon 3.
    feed = reformer_feed(3.0)[0]
    res = reformer.solve(feed, T=700.0, P=30.0, adiabatic=True, sensitivities=True, tol=1e-13)
    assert res.converged[0], res.message(0)
    h = 0.05
    up, down = _adiabatic(reformer, feed, 700.0 + h, 30.0), _adiabatic(reformer, feed, 700.0 - h, 30.0)
    fd_n = (up.amounts[0] - down.amounts[0]) / (2 * h)
    fd_T = float(up.T[0] - down.T[0]) / (2 * h)
    np.testing.assert_allclose(res.sensitivity("T")[0], fd_n, rtol=1e-4, atol=1e-9)
    assert res.sensitivity("T", of="T")[0] == pytest.approx(fd_T, rel=1e-4)
    hp = 0.03
    up, down = _adiabatic(reformer, feed, 700.0, 30.0 + hp), _adiabatic(reformer, feed, 700.0, 30.0 - hp)
    np.testing.assert_allclose(
        res.sensitivity("P")[0], (up.amounts[0] - down.amounts[0]) / (2 * hp), rtol=1e-4, atol=1e-9
    )
    assert res.sensitivity("P", of="T")[0] == pytest.approx(float(up.T[0] - down.T[0]) / (2 * hp), rel=1e-4)
    assert res.sensitivity("lnP", of="T")[0] == pytest.approx(30.0 * res.sensitivity("P", of="T")[0])


def test_adiabatic_derivatives_by_the_feed(reformer) -> None:
    feed = reformer_feed(3.0)[0]
    res = reformer.solve(feed, T=750.0, P=25.0, adiabatic=True, sensitivities=True, tol=1e-13)
    d_feed = res.sensitivity("feed")[0]
    d_T = res.sensitivity("feed", of="T")[0]
    assert d_feed.shape == (6, 6) and d_T.shape == (6,)
    for k in (0, 1):  # methane and steam
        step = np.zeros(6)
        step[k] = 1e-4
        up, down = (
            _adiabatic(reformer, feed + step, 750.0, 25.0),
            _adiabatic(reformer, feed - step, 750.0, 25.0),
        )
        np.testing.assert_allclose(
            d_feed[:, k], (up.amounts[0] - down.amounts[0]) / 2e-4, rtol=1e-4, atol=1e-8
        )
        assert d_T[k] == pytest.approx(float(up.T[0] - down.T[0]) / 2e-4, rel=1e-4)


def test_outlet_temperature_derivative_by_lnK_has_one_column_per_reaction(reformer) -> None:
    feed = reformer_feed(3.0)[0]
    res = reformer.solve(feed, T=750.0, P=25.0, adiabatic=True, sensitivities=True)
    d_T = res.sensitivity("lnK", of="T")
    assert d_T.shape == (1, 2)
    # More reforming (endothermic) cools the outlet: a larger K of reforming
    # lowers the outlet temperature (the sign every reformer engineer expects).
    assert d_T[0, 0] < 0
    # Isothermal: the temperature is the input itself.
    iso = reformer.solve(feed, T=750.0, P=25.0, sensitivities=True)
    assert iso.sensitivity("T", of="T")[0] == 1.0
    assert np.all(iso.sensitivity("lnK", of="T") == 0.0)


# --- approach ---------------------------------------------------------------------


def test_temperature_derivative_with_approach_uses_the_approach_temperature(reformer) -> None:
    feed = reformer_feed(3.0)[0]
    approach = {"reforming": 20.0, "shift": 10.0}
    res = reformer.solve(feed, T=1000.0, P=20.0, approach=approach, sensitivities=True, tol=1e-13)
    h = 0.01
    up = reformer.solve(feed, T=1000.0 + h, P=20.0, approach=approach, tol=1e-13).amounts[0]
    down = reformer.solve(feed, T=1000.0 - h, P=20.0, approach=approach, tol=1e-13).amounts[0]
    np.testing.assert_allclose(res.sensitivity("T")[0], (up - down) / (2 * h), rtol=1e-6, atol=1e-12)


def test_approach_holds_a_reaction_short_whichever_way_it_is_written(reformer) -> None:
    # The generated set writes methanation (CO + 3 H2 = CH4 + H2O), which runs
    # backwards in a reformer. An approach on it must give what the same
    # approach on reforming written forwards gives.
    auto = ReactionSystem(reformer.species, "auto", species_data=reformer.species_data)
    methanation = next(label for label, row in zip(auto.labels, auto.stoich) if row[auto.index("CH4")] > 0)
    feed, T, P = reformer_feed(3.0)[0], 1050.0, 20.0
    at_equilibrium = reformer.solve(feed, T=T, P=P).conversion("CH4")[0]
    named = reformer.solve(feed, T=T, P=P, approach={"reforming": 10.0}).conversion("CH4")[0]
    generated = auto.solve(feed, T=T, P=P, approach={methanation: 10.0}).conversion("CH4")[0]
    assert named < at_equilibrium
    assert generated == pytest.approx(named, rel=1e-9)


def test_approach_follows_each_case_direction() -> None:
    # The same shift reaction run forwards (CO + H2O fed) and backwards (CO2 + H2
    # fed) in one batch: each case stops 20 K short in its own direction, so the
    # measured composition's equilibrium temperature is T + 20 K for the
    # exothermic forward run and T - 20 K for the endothermic backward run.
    base = reformer_system()
    species = ["CO", "H2O", "CO2", "H2"]
    s = ReactionSystem(
        species, {"shift": "CO + H2O = CO2 + H2"}, species_data={k: base.species_data[k] for k in species}
    )
    feed = np.array([[1.0, 1.0, 0.0, 0.0], [0.0, 0.0, 1.0, 1.0]])
    res = s.solve(feed, T=700.0, P=10.0, approach={"shift": 20.0})
    eq = s.solve(feed, T=700.0, P=10.0)
    assert res.amounts[0, 2] < eq.amounts[0, 2]  # less CO2 made forwards
    assert res.amounts[1, 0] < eq.amounts[1, 0]  # less CO made backwards
    T_eq = equilibrium_temperature(s, res.amounts, P=10.0)[:, 0]
    np.testing.assert_allclose(T_eq, [720.0, 680.0], atol=1e-6)


# --- adiabatic options and messages -------------------------------------------------


def test_adiabatic_solve_honours_invalid_max_iter_and_x0(reformer) -> None:
    feed = reformer_feed(3.0)[0]
    bad = feed.copy()
    bad[0] = -1.0
    with pytest.raises(InvalidCaseError, match="case 1"):
        reformer.solve([feed, bad], T=750.0, P=25.0, adiabatic=True, invalid="raise")
    res = reformer.solve([feed, feed], T=[750.0, -5.0], P=25.0, adiabatic=True)
    assert res.status[0] == Status.CONVERGED
    assert res.status[1] == Status.INVALID_INPUT and np.all(np.isnan(res.amounts[1]))
    assert np.isnan(res.T[1])
    limited = reformer.solve(feed, T=750.0, P=25.0, adiabatic=True, max_iter=1)
    assert not limited.converged[0]
    plain = reformer.solve(feed, T=750.0, P=25.0, adiabatic=True)
    warm = reformer.solve(feed, T=750.0, P=25.0, adiabatic=True, x0=plain.extents)
    assert warm.iterations[0] < plain.iterations[0]
    np.testing.assert_allclose(warm.T, plain.T, rtol=1e-9)


def test_adiabatic_message_counts_temperature_iterations(reformer) -> None:
    res = reformer.solve(reformer_feed(3.0)[0], T=750.0, P=25.0, adiabatic=True)
    steps = int(res.T_iterations[0])
    assert steps >= 1
    assert f"after {steps} temperature iteration" in res.message(0)
    assert f"({int(res.iterations[0])} Newton iterations in all)" in res.message(0)


def test_failed_adiabatic_case_says_so_on_the_solve_screen(tmp_path, capsys) -> None:
    # A = B releasing 60 kJ/mol with data only up to 700 K: from 650 K no outlet
    # inside the data's range balances the enthalpy.
    path = tmp_path / "hot.toml"
    path.write_text(
        'species = ["A", "B"]\n'
        '[[reactions]]\nlabel = "r"\nequation = "A = B"\n'
        "[species_data.A]\ncp_poly = { a = [4.0], dHf = 0.0, S298 = 200.0, T_max = 700.0 }\n"
        "[species_data.B]\ncp_poly = { a = [4.0], dHf = -60.0, S298 = 200.0, T_max = 700.0 }\n"
    )
    data = {
        "A": CpPolynomial(a=(4.0,), dHf=0.0, S298=200.0, T_max=700.0),
        "B": CpPolynomial(a=(4.0,), dHf=-60.0, S298=200.0, T_max=700.0),
    }
    assert (
        ReactionSystem(["A", "B"], ["A = B"], species_data=data)
        .solve([1.0, 0.0], T=650.0, adiabatic=True)
        .status[0]
        == Status.OUT_OF_RANGE
    )
    code = main(["solve", str(path), "--feed", "A=1", "--T", "650", "--adiabatic"])
    out = capsys.readouterr().out
    assert code == 1
    assert "no equilibrium outlet temperature found" in out
    assert "outlet T =" not in out
    assert "NO OUTLET" in out and "no amounts" in out  # the outputs of a case without an outlet are NaN


def test_a_reaction_already_within_its_approach_is_held_at_the_feed() -> None:
    # A = B (exothermic, ln K = -5 + 2000/T) runs backwards at 500 K from
    # A : B = 0.7 : 0.3 (K(500) = e^-1 < 0.3/0.7); at the approach temperature
    # 450 K, K = e^-0.56 > 0.3/0.7, which it could only reach by running
    # forwards, against the direction any reaction runs. It stays at the feed.
    from eqbatch import LnKFunction

    s = ReactionSystem(
        ["A", "B", "L"],
        ["A = B", "A = L"],
        phases={"L": "liquid"},
        lnK={"r1": LnKFunction(a=-5, b=2000), "r2": LnKFunction(a=-8, b=2500)},
    )
    eq = s.solve([0.7, 0.3, 0.0], T=500.0)
    assert eq.extents[0, 0] < 0  # backwards at equilibrium
    res = s.solve([0.7, 0.3, 0.0], T=500.0, approach={"r1": 50.0}, sensitivities=True)
    assert res.converged[0]
    assert res.extents[0, 0] == 0.0 and res.held[0, 0]
    np.testing.assert_allclose(res.amounts[0], [0.7, 0.3, 0.0], rtol=1e-12)
    assert "r1 held at zero extent" in res.message(0)
    # Held under small changes: its ln K has no effect, and the derivatives are finite.
    assert np.all(res.sensitivity("lnK")[0][:, 0] == 0.0)
    assert np.all(np.isfinite(res.sensitivity("feed")))
    # A smaller approach leaves it running backwards, short of equilibrium.
    short = s.solve([0.7, 0.3, 0.0], T=500.0, approach={"r1": 5.0})
    assert eq.extents[0, 0] < short.extents[0, 0] < 0 and not short.held[0, 0]


# --- adiabatic outlets against a closed form ---------------------------------------


def _isomer_outlet(T_in: float, dH: float, cp_r: float = 4.0) -> float:
    """Adiabatic outlet of A = B from 1 mol A, by hand: equal constant Cp (cp_r R)
    and equal entropies, so ln K = -dH / (R T) and x_B = K / (1 + K); the
    enthalpy balance is x_B (-dH) = cp_r R (T - T_in). Root by brentq."""
    from scipy.optimize import brentq

    R = 8.314462618

    def balance(T: float) -> float:
        K = np.exp(-dH / (R * T))
        return K / (1 + K) * (-dH) - cp_r * R * (T - T_in)

    return brentq(balance, 50.0, 5000.0, xtol=1e-13, rtol=1e-15)


def test_adiabatic_outlets_in_one_batch_match_the_closed_form_or_say_out_of_range() -> None:
    # Exothermic (dH = -20 kJ/mol) and endothermic (+5 kJ/mol) isomerisations, with
    # data valid 300-1500 K. In one batch: inlets inside the range; an inlet below it
    # that balances inside (the first iterate starts at the range's end); an
    # endothermic case whose outlet falls below 300 K (out of range on the low side)
    # and an exothermic one that rises above 1500 K (high side).
    def system(dH_kJ: float) -> ReactionSystem:
        data = {
            "A": CpPolynomial(a=(4.0,), dHf=0.0, S298=200.0, T_min=300.0, T_max=1500.0),
            "B": CpPolynomial(a=(4.0,), dHf=dH_kJ, S298=200.0, T_min=300.0, T_max=1500.0),
        }
        return ReactionSystem(["A", "B"], ["A = B"], species_data=data, check_balance=False)

    for dH, inlets, beyond in ((-20.0, [400.0, 900.0, 290.0], 1490.0), (5.0, [600.0, 1200.0, 1450.0], 310.0)):
        s = system(dH)
        T = np.array(inlets + [beyond])
        res = s.solve(np.tile([1.0, 0.0], (T.size, 1)), T=T, P=1.0, adiabatic=True, tol=1e-12)
        for k, T_in in enumerate(inlets):
            assert res.status[k] == Status.CONVERGED, (dH, T_in, res.message(k))
            assert float(res.T[k]) == pytest.approx(_isomer_outlet(T_in, 1000.0 * dH), rel=1e-9)
        outlet = _isomer_outlet(beyond, 1000.0 * dH)
        assert not (300.0 <= outlet <= 1500.0)  # the hand calculation leaves the range
        assert res.status[-1] == Status.OUT_OF_RANGE, res.message(T.size - 1)


def test_directions_fixed_by_the_feed_are_those_equilibrium_takes(reformer) -> None:
    # Where the species a feed lacks fix the sign of a reaction's extent (an approach
    # solve then needs no solve at T to find it), the sign is the one an equilibrium
    # solve finds, whatever the constants: checked against the solve on random ln K.
    sp = reformer.species
    rng = np.random.default_rng(11)
    expected = {
        ("CH4", "H2O"): [1.0, 1.0],  # reforming and shift run forward
        ("CO", "H2"): [-1.0, 1.0],  # methanation: reforming backward; CO2 only from the shift
        ("CO", "H2O"): [-1.0, 1.0],  # CH4 only from reforming run backward
    }
    both = np.array([True, True])
    for fed, want in expected.items():
        feed = np.zeros((200, len(sp)))
        for name in fed:
            feed[:, sp.index(name)] = rng.uniform(0.1, 5.0, 200)
        found = feed_directions(reformer, feed, both)
        assert np.array_equal(found, np.tile(want, (200, 1))), fed
        res = reformer.solve(feed, lnK=rng.uniform(-15.0, 15.0, (200, 2)), P=rng.uniform(0.5, 50.0, 200))
        assert res.converged.all()
        assert np.array_equal(np.sign(res.extents), found), fed
    # a feed below 1e-300 is no feed to the core: the same directions as an exact zero
    tiny = np.zeros((1, len(sp)))
    tiny[0, sp.index("CO")], tiny[0, sp.index("H2")] = 1e-310, 1.0
    exact = np.where(tiny < 1e-300, 0.0, tiny)
    assert np.array_equal(
        feed_directions(reformer, tiny, both), feed_directions(reformer, exact, both), equal_nan=True
    )
    # every species fed: nothing is fixed, and the approach solve finds the direction by a solve
    full = np.ones((1, len(sp)))
    assert np.isnan(feed_directions(reformer, full, both)).all()


def test_an_approach_batch_mixing_fixed_and_solved_directions_solves_each_case_alone(reformer) -> None:
    # Rows whose direction the feed fixes skip the solve at T; the others take it. A
    # case's answer must not depend on which other cases share its batch.
    sp = reformer.species
    feed = np.zeros((6, len(sp)))
    feed[:, sp.index("CH4")], feed[:, sp.index("H2O")] = 1.0, 3.0
    feed[1::2, sp.index("CO2")] = 0.2  # with CO2 fed the shift's direction is left to a solve
    feed[1::2, sp.index("CO")] = 0.1
    T, P = np.linspace(800.0, 1100.0, 6), np.linspace(5.0, 30.0, 6)
    batch = reformer.solve(feed, T=T, P=P, approach={"reforming": 15.0, "shift": 10.0})
    for k in range(6):
        alone = reformer.solve(feed[k], T=T[k], P=P[k], approach={"reforming": 15.0, "shift": 10.0})
        assert np.array_equal(batch.amounts[k], alone.amounts[0]), k
        assert np.array_equal(batch.lnK[k], alone.lnK[0]), k
    # one starting row for every case, in the same mixed batch
    started = reformer.solve(feed, T=T, P=P, approach={"reforming": 15.0, "shift": 10.0}, x0=[0.3, 0.1])
    assert started.converged.all()
    assert np.allclose(started.amounts, batch.amounts, rtol=1e-8)


def test_approach_sides_from_the_evaluated_enthalpies_equal_those_from_van_t_hoff(reformer) -> None:
    # An approach solve takes each reaction's side from the reaction enthalpies of
    # its one ln K evaluation; d ln K / dT = dH / (R T^2) (van 't Hoff) must put every
    # approach temperature on the same side. Reforming is endothermic and the shift
    # exothermic over the whole range (facts of the trade).
    rng = np.random.default_rng(21)
    T = np.linspace(650.0, 1250.0, 60)
    direction = rng.choice([-1.0, 1.0], (60, 2))
    dh = np.full((60, 2), np.nan)
    lnk = reformer._lnK_rows(T, dh)
    assert np.array_equal(lnk, reformer.lnK(T))
    assert (dh[:, 0] > 0).all() and (dh[:, 1] < 0).all()
    approach = {"reforming": 15.0, "shift": 10.0}
    ours = approach_temperatures(reformer, T, approach, direction, dh)
    assert np.array_equal(ours, approach_temperatures(reformer, T, approach, direction))
    assert np.array_equal(ours[:, 0], T - 15.0 * direction[:, 0])
    assert np.array_equal(ours[:, 1], T + 10.0 * direction[:, 1])
