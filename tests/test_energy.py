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
    from eqbatch import InvalidCaseError

    with pytest.raises(InvalidCaseError, match=r"case 1: .*H_in = -1e\+06 kJ"):
        reformer.solve(FEED, H_in=[H_in[0], -1e6], P=20.0, adiabatic=True, invalid="raise")


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


# --- sweeps with energy-balance, inlet-temperature and approach columns -------------


def _sweep(system, table, tmp_path, name="cases"):
    import eqbatch
    import pyarrow.parquet as pq

    src, dst = tmp_path / f"{name}.parquet", tmp_path / f"{name}_out.parquet"
    pq.write_table(table, src)
    eqbatch.sweep(system, src, dst, quiet=True)
    return pq.read_table(dst).to_pandas()


def test_sweep_rows_of_every_kind_match_direct_solves(reformer, tmp_path) -> None:
    import pyarrow as pa

    n = 5
    table = pa.table(
        {
            "feed_CH4": [1.0] * n,
            "feed_H2O": [3.0] * n,
            "feed_N2": [0.1] * n,
            "T_K": [900.0, 1000.0, 800.0, 850.0, 950.0],
            "P_bar": [20.0] * n,
            "adiabatic": [False, False, True, False, False],
            "duty_kJ": [np.nan, np.nan, np.nan, 50.0, np.nan],
            "T_in_K": [700.0, 700.0, 820.0, 850.0, 950.0],
            "approach_reforming": [0.0, 10.0, 0.0, 0.0, 0.0],
        }
    )
    out = _sweep(reformer, table, tmp_path)
    feed = {"CH4": 1.0, "H2O": 3.0, "N2": 0.1}
    assert (out["status"] == Status.CONVERGED).all()
    # isothermal rows: outlet enthalpy and the heat from a feed at T_in_K
    iso = reformer.solve(feed, T=[900.0, 950.0], P=20.0)
    np.testing.assert_allclose(out["n_H2"].iloc[[0, 4]], iso.amounts[:, 3], rtol=1e-12)
    np.testing.assert_allclose(
        out["H_out_kJ"].iloc[[0, 4]], mixture_enthalpy(iso.amounts, [900.0, 950.0]), rtol=1e-12
    )
    feed_row = np.array([1.0, 3.0, 0.0, 0.0, 0.0, 0.1])
    expect_heat = mixture_enthalpy(iso.amounts, [900.0, 950.0]) - mixture_enthalpy(
        np.tile(feed_row, (2, 1)), [700.0, 950.0]
    )
    np.testing.assert_allclose(out["heat_kJ"].iloc[[0, 4]], expect_heat, rtol=1e-11)
    np.testing.assert_allclose(out["T_out_K"].iloc[[0, 4]], [900.0, 950.0])
    # an approach row
    app = reformer.solve(feed, T=1000.0, P=20.0, approach={"reforming": 10.0})
    np.testing.assert_allclose(
        out.loc[1, ["n_CH4", "n_H2"]].to_numpy(float), app.amounts[0, [0, 3]], rtol=1e-12
    )
    # the adiabatic row (inlet from T_in_K) and the heated row
    adi = reformer.solve(feed, T=820.0, P=20.0, adiabatic=True)
    heated = reformer.solve(feed, T=850.0, P=20.0, duty=50.0)
    np.testing.assert_allclose(out.loc[[2, 3], "T_out_K"], [adi.T[0], heated.T[0]], rtol=1e-12)
    np.testing.assert_allclose(out.loc[[2, 3], "heat_kJ"], [0.0, 50.0], atol=1e-6)
    # reaction enthalpies at the outlet temperature
    np.testing.assert_allclose(out.loc[2, "dH_reforming"], reformer.dH(adi.T)[0, 0], rtol=1e-12)


def test_sweep_bad_approach_rows_are_invalid_and_bad_columns_are_refused(reformer, tmp_path) -> None:
    import eqbatch
    import pyarrow as pa

    table = pa.table(
        {
            "feed_CH4": [1.0, 1.0],
            "feed_H2O": [3.0, 3.0],
            "T_K": [900.0, 900.0],
            "approach_reforming": [-5.0, 5.0],
        }
    )
    out = _sweep(reformer, table, tmp_path)
    assert out["status"].tolist() == [Status.INVALID_INPUT, Status.CONVERGED]
    typo = table.rename_columns(["feed_CH4", "feed_H2O", "T_K", "approach_reformer"])
    with pytest.raises(eqbatch.SweepError, match="approach_reformer"):
        _sweep(reformer, typo, tmp_path, "typo")
    with_lnk = pa.table({"feed_CH4": [1.0], "lnK_reforming": [1.0], "lnK_shift": [0.5], "adiabatic": [True]})
    with pytest.raises(eqbatch.SweepError, match="drop the lnK_<label> columns"):
        _sweep(reformer, with_lnk, tmp_path, "lnk")


def test_sweep_energy_outputs_on_request(reformer, tmp_path) -> None:
    import eqbatch
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.table(
        {"feed_CH4": [1.0, 1.0], "feed_H2O": [3.0, 3.0], "T_K": [900.0, 1100.0], "P_bar": [5.0, 5.0]}
    )
    src = tmp_path / "plain.parquet"
    pq.write_table(table, src)
    eqbatch.sweep(reformer, src, tmp_path / "lean.parquet", quiet=True)
    eqbatch.sweep(reformer, src, tmp_path / "rich.parquet", quiet=True, energy=True)
    lean, rich = pq.read_table(tmp_path / "lean.parquet"), pq.read_table(tmp_path / "rich.parquet")
    assert "H_out_kJ" not in lean.column_names
    assert rich.column_names[-4:] == ["H_out_kJ", "heat_kJ", "dH_reforming", "dH_shift"]
    res = reformer.solve({"CH4": 1.0, "H2O": 3.0}, T=[900.0, 1100.0], P=5.0)
    # feed and outlet at T: the heat is the heat of reaction (Hess's law)
    np.testing.assert_allclose(
        rich.column("heat_kJ").to_numpy(),
        np.sum(res.extents * reformer.dH([900.0, 1100.0]), axis=1) / 1000,
        rtol=1e-10,
    )
    no_data = ReactionSystem(
        ["CH4", "H2O", "CO", "H2"], ["CH4 + H2O = CO + 3 H2"], lnK=[{"a": 30.0, "b": -27000.0}]
    )
    with pytest.raises(eqbatch.SweepError, match="energy outputs need species data"):
        eqbatch.sweep(no_data, src, tmp_path / "none.parquet", quiet=True, energy=True)


def test_inlet_enthalpy_derivatives_hold_the_enthalpy_not_the_temperature(reformer) -> None:
    # With H_in fixed, adding feed water adds no enthalpy: d T_out / d n0(H2O) by central
    # differences of solves at the same H_in (an independent computation).
    H_in = mixture_enthalpy(FEED, [900.0])
    res = reformer.solve(FEED, H_in=H_in, P=20.0, adiabatic=True, sensitivities=True, tol=1e-13)
    dT = res.sensitivity("feed", of="T")
    h = 1e-4
    k = SPECIES.index("H2O")
    up, down = FEED.copy(), FEED.copy()
    up[k] += h
    down[k] -= h
    T_up, T_down = (reformer.solve(f, H_in=H_in, P=20.0, adiabatic=True, tol=1e-13).T[0] for f in (up, down))
    assert float(dT[0, k]) == pytest.approx((T_up - T_down) / (2 * h), rel=1e-5)
    with pytest.raises(CaseInputError, match="enthalpy"):
        res.sensitivity("T")


def test_a_duty_that_is_not_a_number_is_invalid_input(reformer) -> None:
    from eqbatch import InvalidCaseError

    res = reformer.solve(FEED, T=900.0, P=20.0, duty=[10.0, np.inf, np.nan])
    assert res.status.tolist() == [Status.CONVERGED, Status.INVALID_INPUT, Status.INVALID_INPUT]
    with pytest.raises(InvalidCaseError, match="case 1: duty"):
        reformer.solve(FEED, T=900.0, P=20.0, duty=[10.0, np.inf], invalid="raise")


def test_sweep_energy_outputs_with_lnk_columns_and_contradictory_rows(reformer, tmp_path) -> None:
    import pyarrow as pa

    lnk = reformer.lnK([900.0])[0]
    table = pa.table(
        {
            "feed_CH4": [1.0],
            "feed_H2O": [3.0],
            "T_K": [900.0],
            "T_in_K": [700.0],
            "lnK_reforming": [lnk[0]],
            "lnK_shift": [lnk[1]],
        }
    )
    import pyarrow.parquet as pq
    from eqbatch.sweeps import sweep_file

    notes: list[str] = []
    pq.write_table(table, tmp_path / "lnk.parquet")
    sweep_file(reformer, tmp_path / "lnk.parquet", tmp_path / "lnk_out.parquet", quiet=True, say=notes.append)
    assert any("consistent only if those constants come from the same data" in note for note in notes)
    out = pq.read_table(tmp_path / "lnk_out.parquet").to_pandas()
    res = reformer.solve({"CH4": 1.0, "H2O": 3.0}, T=900.0)
    np.testing.assert_allclose(out["H_out_kJ"], mixture_enthalpy(res.amounts, [900.0]), rtol=1e-10)
    both = pa.table(
        {
            "feed_CH4": [1.0, 1.0],
            "feed_H2O": [3.0, 3.0],
            "T_K": [800.0, 800.0],
            "adiabatic": [True, True],
            "duty_kJ": [0.0, 25.0],
        }
    )
    out = _sweep(reformer, both, tmp_path, "both")
    assert out["status"].tolist() == [Status.CONVERGED, Status.INVALID_INPUT]


def test_sweep_empty_feed_temperature_falls_back_to_T_K_and_failed_balances_are_nan(
    reformer, tmp_path
) -> None:
    import pyarrow as pa

    table = pa.table(
        {
            "feed_CH4": [1.0] * 4,
            "feed_H2O": [3.0] * 4,
            "T_K": [800.0, 800.0, 900.0, 900.0],
            "adiabatic": [True, True, False, False],
            "T_in_K": [None, 820.0, None, 700.0],
        },
        schema=pa.schema(
            [
                ("feed_CH4", pa.float64()),
                ("feed_H2O", pa.float64()),
                ("T_K", pa.float64()),
                ("adiabatic", pa.bool_()),
                ("T_in_K", pa.float64()),
            ]
        ),
    )
    out = _sweep(reformer, table, tmp_path, "fallback")
    assert (out["status"] == Status.CONVERGED).all()
    by_t = reformer.solve({"CH4": 1.0, "H2O": 3.0}, T=[800.0, 820.0], P=1.0, adiabatic=True)
    np.testing.assert_allclose(out.loc[[0, 1], "T_out_K"], by_t.T, rtol=1e-12)
    iso = reformer.solve({"CH4": 1.0, "H2O": 3.0}, T=900.0, P=1.0)
    np.testing.assert_allclose(out.loc[2, "heat_kJ"], iso.duty()[0], rtol=1e-12)  # feed at T_K
    assert out.loc[3, "heat_kJ"] > out.loc[2, "heat_kJ"]  # a colder feed takes more heat
    # a duty no temperature in the data's range can take: OUT_OF_RANGE with NaN outputs
    far = pa.table({"feed_CH4": [1.0], "feed_H2O": [3.0], "T_K": [900.0], "duty_kJ": [-1e5]})
    row = _sweep(reformer, far, tmp_path, "far")
    assert row["status"].tolist() == [Status.OUT_OF_RANGE]
    assert np.isnan(row.loc[0, ["T_out_K", "n_CH4", "heat_kJ"]].to_numpy(float)).all()


def test_sweep_inlet_enthalpy_column(reformer, tmp_path) -> None:
    import pyarrow as pa

    H = float(mixture_enthalpy(FEED, [760.0])[0])  # the feed's enthalpy at 760 K, by numpy
    table = pa.table(
        {
            "feed_CH4": [1.0, 1.0],
            "feed_H2O": [3.0, 3.0],
            "feed_H2": [0.05, 0.05],
            "feed_N2": [0.1, 0.1],
            "T_K": [800.0, 800.0],
            "adiabatic": [True, True],
            "H_in_kJ": [H, None],
        }
    )
    out = _sweep(reformer, table, tmp_path, "h_in")
    assert (out["status"] == Status.CONVERGED).all()
    by_t = reformer.solve(FEED, T=[760.0, 800.0], P=1.0, adiabatic=True)
    np.testing.assert_allclose(out["T_out_K"], by_t.T, rtol=1e-9)  # row 1 falls back to T_K


def test_energy_balance_tables_name_the_inlet_and_the_outlet(reformer) -> None:
    # as in sweeps: T_K is the inlet temperature and T_out_K the outlet's
    res = reformer.solve(FEED, T=[800.0, 900.0], P=20.0, adiabatic=True)
    table = res.to_pandas()
    np.testing.assert_allclose(table["T_K"], [800.0, 900.0])
    np.testing.assert_allclose(table["T_out_K"], res.T)
    assert "T_out_K" not in reformer.solve(FEED, T=900.0, P=20.0).to_pandas()
