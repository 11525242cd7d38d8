"""Species thermochemistry evaluated in the core: ln K, d ln K / dT and dH of
species-data reactions come from ``_core.ThermoTable``; they must equal the
Python evaluation of the same data (an independent code path: numpy on each
data class's own formulas), the heat-capacity integrals done by quadrature,
and published equilibria. Sources are named beside each value."""

from __future__ import annotations

import math
import textwrap
import warnings

import eqbatch
import numpy as np
import pytest
from eqbatch.thermo import NASA7, CpPolynomial, MaierKelley, R, Tabulated, ThermoLnK
from scipy.integrate import quad
from scipy.interpolate import CubicSpline
from test_thermo import H2O_NASA, SHOMATE

# Maier-Kelley heat capacities, Cp = a + b T + d / T^2 in J/(mol K) (K. K. Kelley,
# U.S. Bureau of Mines Bulletin 584 (1960), as Perry's handbook tabulates them; from
# memory), with formation data of calcite and lime (Robie and Hemingway 1995 and
# CODATA 1989; from memory).
CACO3 = MaierKelley(a=104.52, b=21.92e-3, d=-25.94e5, dHf=-1207.6, S298=91.7, T_max=1200.0, source="calcite")
CAO = MaierKelley(a=49.62, b=4.52e-3, d=-6.95e5, dHf=-635.1, S298=38.1, T_max=1200.0, source="lime")


def mixed_system() -> eqbatch.ReactionSystem:
    """Every data form in one system: Shomate (two ranges), NASA 7 (two
    ranges), a Cp polynomial and a Maier-Kelley Cp. X's coefficients are
    illustrative inputs (not check values): the tests compare two
    evaluations of the same data."""
    ar = CpPolynomial(a=(2.5,), dHf=0.0, S298=154.85, T_min=200.0, T_max=6000.0)  # NASA Glenn: S298 of Ar
    x = MaierKelley(a=30.0, b=8e-3, c=-1e-6, d=-2.0e5, dHf=-50.0, S298=180.0, T_min=298.15, T_max=3000.0)
    return eqbatch.ReactionSystem(
        ["CH4", "H2O", "CO", "H2", "CO2", "Ar", "X"],
        ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2", "Ar + CO = X"],
        species_data={
            "CH4": SHOMATE["CH4"],
            "H2O": H2O_NASA,
            "CO": SHOMATE["CO"],
            "H2": SHOMATE["H2"],
            "CO2": SHOMATE["CO2"],
            "Ar": ar,
            "X": x,
        },
        P0=1.01325,  # an atmosphere: a non-zero standard-pressure shift for dn != 0
    )


def python_lnk(system: eqbatch.ReactionSystem, T: np.ndarray) -> np.ndarray:
    """ln K of each reaction from its ThermoLnK's numpy evaluation."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", eqbatch.ExtrapolationWarning)
        return np.column_stack([system.lnK_data[label](T) for label in system.labels])


# Range ends of the data (1000 K: NASA T_mid and the H2 Shomate break; 1200 and
# 1300 K: CO2, CO and CH4 breaks) and points either side of them.
BREAKS = np.array([1000.0, 1200.0, 1300.0])
T_TEST = np.sort(
    np.concatenate([np.linspace(310.0, 2400.0, 57), BREAKS, BREAKS * (1 - 1e-13), BREAKS * (1 + 1e-13)])
)


def test_core_lnk_matches_the_python_evaluation_of_every_data_form() -> None:
    system = mixed_system()
    assert system._thermo_table is not None  # the reactions go through the core
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", eqbatch.ExtrapolationWarning)
        core = system.lnK(T_TEST)
        dlnk = system.dlnK_dT(T_TEST)
        dh = system.dH(T_TEST)
    np.testing.assert_allclose(core, python_lnk(system, T_TEST), rtol=1e-12, atol=1e-10)
    for j, label in enumerate(system.labels):
        data = system.lnK_data[label]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", eqbatch.ExtrapolationWarning)
            np.testing.assert_allclose(dh[:, j], data.dH(T_TEST), rtol=1e-12, atol=1e-6)
            np.testing.assert_allclose(dlnk[:, j], data.derivative(T_TEST), rtol=1e-12, atol=1e-15)


def test_core_dlnk_dt_is_the_derivative_of_core_lnk() -> None:
    # central differences of the core's own ln K, inside each range (step 1e-3 K)
    system = mixed_system()
    T = np.array([450.0, 800.0, 1100.0, 1250.0, 1800.0])
    h = 1e-3
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", eqbatch.ExtrapolationWarning)
        fd = (system.lnK(T + h) - system.lnK(T - h)) / (2 * h)
        np.testing.assert_allclose(system.dlnK_dT(T), fd, rtol=1e-6, atol=1e-10)


def test_large_batches_take_the_parallel_path_and_agree_bit_for_bit() -> None:
    system = mixed_system()
    T = np.linspace(400.0, 1500.0, 20_001)  # more than one 4096-case chunk
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", eqbatch.ExtrapolationWarning)
        big = system.lnK(T)
        picks = np.arange(0, T.size, 1999)
        small = np.vstack([system.lnK(T[k : k + 1]) for k in picks])
    assert np.array_equal(big[picks], small)
    np.testing.assert_allclose(big[::500], python_lnk(system, T[::500]), rtol=1e-12, atol=1e-10)


def test_bad_temperatures_give_nan_rows_and_good_ones_are_untouched() -> None:
    system = mixed_system()
    T = np.array([900.0, -5.0, np.nan, np.inf, 0.0, 1100.0])
    out = system.lnK(T)
    assert np.isnan(out[1:5]).all()
    np.testing.assert_allclose(out[[0, 5]], python_lnk(system, T[[0, 5]]), rtol=1e-12)


def test_lnk_at_uses_each_reactions_own_temperature() -> None:
    system = mixed_system()
    T = np.array([[800.0, 600.0, 700.0], [1000.0, 1000.0, 1000.0], [1250.0, -1.0, 900.0]])
    out = system.lnK_at(T)
    for j in range(3):
        good = T[:, j] > 0
        np.testing.assert_allclose(out[good, j], system.lnK(T[good, j])[:, j], rtol=1e-14)
        assert np.isnan(out[~good, j]).all()


def test_maier_kelley_integrates_its_heat_capacity() -> None:
    # H(T) = dHf + int_298.15^T Cp dT and S(T) = S298 + int Cp / T dT (definitions),
    # by scipy quadrature.
    for data in (CACO3, CAO):
        for T in (298.15, 600.0, 1150.0):
            dh, _ = quad(lambda t, d=data: float(d.cp(t)), 298.15, T, epsabs=1e-10, epsrel=1e-13)
            ds, _ = quad(lambda t, d=data: float(d.cp(t)) / t, 298.15, T, epsabs=1e-12, epsrel=1e-13)
            assert float(data.h(T)) == pytest.approx(1000.0 * data.dHf + dh, abs=1e-6)
            assert float(data.s(T)) == pytest.approx(data.S298 + ds, abs=1e-9)
    # Calcite at 298.15 K: Cp 83.5 J/(mol K) (NIST-JANAF, from memory); the
    # correlation (fitted to higher temperatures) is within 3 %.
    assert float(CACO3.cp(298.15)) == pytest.approx(83.5, rel=0.03)


def calcination() -> eqbatch.ReactionSystem:
    # The solids enter ln K with activity one; until pure condensed phases exist, a
    # liquid label keeps them out of the gas standard-pressure shift.
    return eqbatch.ReactionSystem(
        ["CaCO3", "CaO", "CO2"],
        ["CaCO3 = CaO + CO2"],
        phases={"CaCO3": "liquid", "CaO": "liquid"},
        species_data={"CaCO3": CACO3, "CaO": CAO, "CO2": SHOMATE["CO2"]},
    )


def test_calcite_decomposition_pressure_against_baker() -> None:
    # Baker, J. Chem. Soc. 1962, 464 (from memory): log10(P_CO2 / atm) = 7.079 - 38000 / (4.574 T)
    # over 900-1200 K; with activity-one solids K = P_CO2 / 1 bar.
    T = np.linspace(900.0, 1200.0, 7)
    ln_p_bar = math.log(10) * (7.079 - 38000.0 / (4.574 * T)) + math.log(1.01325)
    np.testing.assert_allclose(calcination().lnK(T)[:, 0], ln_p_bar, atol=0.25)
    # without the d / T^2 term (a sign or factor slip there) the answer is far off
    crude = [MaierKelley(a=d.a, b=d.b, dHf=d.dHf, S298=d.S298, T_max=1200.0) for d in (CACO3, CAO)]
    lnk = ThermoLnK(
        {"CaCO3": -1, "CaO": 1, "CO2": 1},
        {"CaCO3": crude[0], "CaO": crude[1], "CO2": SHOMATE["CO2"]},
        phases={"CaCO3": "liquid", "CaO": "liquid"},
    )
    assert np.all(np.abs(lnk(T) - ln_p_bar) > 0.4)


def test_maier_kelley_from_a_system_file(tmp_path) -> None:
    path = tmp_path / "lime.toml"
    path.write_text(
        textwrap.dedent(
            """
            species = ["CaCO3", "CaO", "CO2"]
            [[reactions]]
            equation = "CaCO3 = CaO + CO2"
            [phases]
            CaCO3 = "liquid"
            CaO = "liquid"
            [species_data.CaCO3]
            source = "calcite"
            [species_data.CaCO3.maier_kelley]
            a = 104.52
            b = 21.92e-3
            d = -25.94e5
            dHf = -1207.6
            S298 = 91.7
            T_max = 1200.0
            [species_data.CaO]
            maier_kelley = { a = 49.62, b = 4.52e-3, d = -6.95e5, dHf = -635.1, S298 = 38.1, T_max = 1200.0 }
            source = "lime"
            [species_data.CO2]
            [[species_data.CO2.shomate]]
            T_min = 298
            T_max = 1200
            A = 24.99735
            B = 55.18696
            C = -33.69137
            D = 7.948387
            E = -0.136638
            F = -403.6075
            G = 228.2431
            H = -393.5224
            [[species_data.CO2.shomate]]
            T_min = 1200
            T_max = 6000
            A = 58.16639
            B = 2.720074
            C = -0.492289
            D = 0.038844
            E = -6.447293
            F = -425.9186
            G = 263.6125
            H = -393.5224
            """
        )
    )
    from_file = eqbatch.ReactionSystem.from_toml(path)
    T = np.array([950.0, 1100.0])
    np.testing.assert_array_equal(from_file.lnK(T), calcination().lnK(T))
    with pytest.raises(eqbatch.SystemDefinitionError, match="exactly one of"):
        path.write_text(
            path.read_text().replace(
                "[species_data.CaO]\n", "[species_data.CaO]\ncp_poly = { a = [3.5], dHf = 0.0, S298 = 1.0 }\n"
            )
        )
        eqbatch.ReactionSystem.from_toml(path)


def test_temperature_driven_solve_matches_solve_on_python_lnk() -> None:
    # The solve given T must equal the solve given the Python evaluation's ln K.
    system = eqbatch.ReactionSystem(
        ["CH4", "H2O", "CO", "H2", "CO2"],
        ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"],
        species_data={s: SHOMATE[s] for s in ("CH4", "H2O", "CO", "H2", "CO2")},
    )
    T = np.linspace(750.0, 1150.0, 9)
    feed = {"CH4": 1.0, "H2O": 3.0}
    by_t = system.solve(feed, T=T, P=20.0)
    by_k = system.solve(feed, lnK=python_lnk(system, T), P=20.0)
    assert by_t.converged.all()
    np.testing.assert_allclose(by_t.amounts, by_k.amounts, rtol=1e-10, atol=1e-14)


def test_nasa_break_is_open_above_as_the_python_data_choose_it() -> None:
    # At T_mid exactly the high-range coefficients apply (NASA7 takes T < T_mid as low).
    low_only = NASA7(low=H2O_NASA.low, high=H2O_NASA.low)
    assert float(H2O_NASA.cp(1000.0)) != float(low_only.cp(1000.0))
    system = eqbatch.ReactionSystem(
        ["H2O", "Y"], ["H2O = Y"], check_balance=False, species_data={"H2O": H2O_NASA, "Y": low_only}
    )
    expect = -(
        low_only.h(1000.0) - H2O_NASA.h(1000.0) - 1000.0 * (low_only.s(1000.0) - H2O_NASA.s(1000.0))
    ) / (R * 1000.0)
    assert float(system.lnK(1000.0)[0, 0]) == pytest.approx(float(expect), rel=1e-12, abs=1e-12)


def test_maier_kelley_table_refuses_unknown_keys() -> None:
    from eqbatch.speciesdata import species_data_from_table

    table = {"maier_kelley": {"a": 49.62, "b": 4.52e-3, "D": -6.95e5, "dHf": -635.1, "S298": 38.1}}
    with pytest.raises(eqbatch.SystemDefinitionError, match=r"unknown key\(s\) \['D'\]"):
        species_data_from_table("CaO", table)
    table["maier_kelley"]["d"] = table["maier_kelley"].pop("D")
    assert species_data_from_table("CaO", table) == MaierKelley(
        a=49.62, b=4.52e-3, d=-6.95e5, dHf=-635.1, S298=38.1, source="maier_kelley data for CaO (system file)"
    )


# --- tabulated data -------------------------------------------------------------


def water_table():
    # H2O(g) printed every 100 K from the NIST WebBook Shomate fit (test_thermo.SHOMATE):
    # an independent data set with the JANAF layout; dHf -241.826 kJ/mol (JANAF, from memory).
    T = np.arange(500.0, 1701.0, 100.0)
    shomate = SHOMATE["H2O"]
    h298 = -241.8264  # the fit's H column: its enthalpy at 298.15 K, kJ/mol
    cp = np.round(shomate.cp(T), 3)
    h_rel = np.round(shomate.h(T) / 1000.0 - h298, 3)
    s = np.round(shomate.s(T), 3)
    return T, Tabulated(tuple(T), tuple(cp), tuple(h_rel), tuple(s), dHf=h298, source="H2O table")


def test_tabulated_data_integrate_one_spline_of_cp() -> None:
    # H and S are the integrals of the cubic spline through the tabulated Cp
    # (scipy CubicSpline and quad, independently of the segments).
    T, table = water_table()
    spline = CubicSpline(T, np.array(table.Cp))
    h0, s0 = 1000.0 * (table.dHf + table.H_rel[0]), table.S[0]
    for t in (512.5, 777.0, 1000.0, 1234.5, 1699.0):
        assert float(table.cp(t)) == pytest.approx(float(spline(t)), rel=1e-12)
        assert float(table.h(t)) == pytest.approx(h0 + float(spline.integrate(T[0], t)), abs=1e-7)
        ds, _ = quad(lambda x: float(spline(x)) / x, T[0], t, points=list(T[1:-1]), epsabs=1e-11, limit=200)
        assert float(table.s(t)) == pytest.approx(s0 + ds, abs=1e-9)


def test_tabulated_data_follow_the_function_they_tabulate() -> None:
    # Between the rows the spline reproduces the Shomate fit it was printed from to
    # table precision: Cp within 0.01 J/(mol K), H within 5 J/mol, S within 0.005 J/(mol K).
    _, table = water_table()
    t = np.linspace(510.0, 1690.0, 60)
    np.testing.assert_allclose(table.cp(t), SHOMATE["H2O"].cp(t), atol=0.01)
    np.testing.assert_allclose(table.h(t), SHOMATE["H2O"].h(t), atol=5.0)
    np.testing.assert_allclose(table.s(t), SHOMATE["H2O"].s(t), atol=0.005)
    # and a shift equilibrium built on it agrees with the one on the fit (core path)
    species = ["CO", "H2O", "CO2", "H2"]

    def shift(water):
        data = {s: SHOMATE[s] for s in species} | {"H2O": water}
        return eqbatch.ReactionSystem(species, ["CO + H2O = CO2 + H2"], species_data=data)

    tab, fit = shift(table), shift(SHOMATE["H2O"])
    assert tab._thermo_table is not None
    np.testing.assert_allclose(tab.lnK(t), fit.lnK(t), atol=2e-3)
    np.testing.assert_allclose(tab.lnK(t), python_lnk(tab, t), rtol=1e-12, atol=1e-11)


def test_tabulated_data_refuse_a_table_that_is_not_self_consistent() -> None:
    T, table = water_table()
    with pytest.raises(eqbatch.SystemDefinitionError, match=r"not the integrals of Cp.*kJ/mol"):
        Tabulated(table.T, table.Cp, tuple(1000.0 * h for h in table.H_rel), table.S, dHf=table.dHf)
    with pytest.raises(eqbatch.SystemDefinitionError, match="increasing"):
        Tabulated(table.T[::-1], table.Cp, table.H_rel, table.S, dHf=table.dHf)
    with pytest.raises(eqbatch.SystemDefinitionError, match="same number of rows"):
        Tabulated(table.T[:-1], table.Cp, table.H_rel, table.S, dHf=table.dHf)


def test_tabulated_data_from_a_system_file(tmp_path) -> None:
    T, table = water_table()
    rows = ", ".join
    path = tmp_path / "shift.toml"
    path.write_text(
        'species = ["CO", "H2O", "CO2", "H2"]\n'
        "[[reactions]]\n"
        'equation = "CO + H2O = CO2 + H2"\n'
        "[species_data.H2O]\n"
        'source = "H2O table"\n'
        "[species_data.H2O.tabulated]\n"
        f"T = [{rows(map(repr, table.T))}]\n"
        f"Cp = [{rows(map(repr, table.Cp))}]\n"
        f"H_rel = [{rows(map(repr, table.H_rel))}]\n"
        f"S = [{rows(map(repr, table.S))}]\n"
        f"dHf = {table.dHf!r}\n"
        + "".join(
            f"[species_data.{s}]\ncp_poly = {{ a = [3.5], dHf = {h}, S298 = {s298}, T_max = 2000.0 }}\n"
            for s, h, s298 in (("CO", -110.53, 197.66), ("CO2", -393.52, 213.79), ("H2", 0.0, 130.68))
        )  # CODATA 1989 key values (from memory)
    )
    system = eqbatch.ReactionSystem.from_toml(path)
    assert system.species_data["H2O"] == table
    assert system._thermo_table is not None
    np.testing.assert_allclose(system.lnK(T), python_lnk(system, T), rtol=1e-12, atol=1e-11)


def test_species_data_refuse_slips_a_user_makes(tmp_path) -> None:
    from eqbatch.speciesdata import species_data_from_table

    # a boolean or a quoted number in a system file is not a number
    for bad in ({"a": 49.62, "dHf": True, "S298": 38.1}, {"a": "49.62", "dHf": -635.1, "S298": 38.1}):
        with pytest.raises(eqbatch.SystemDefinitionError, match="is not a number"):
            species_data_from_table("CaO", {"maier_kelley": bad})
    with pytest.raises(eqbatch.SystemDefinitionError, match="missing key 'S298'"):
        species_data_from_table("CaO", {"maier_kelley": {"a": 49.62, "dHf": -635.1}})
    # a NaN coefficient is named with its species when the system is built
    nan_data = {
        "A": CpPolynomial(a=(float("nan"),), dHf=0.0, S298=1.0),
        "B": CpPolynomial(a=(4.0,), dHf=0.0, S298=1.0),
    }
    with pytest.raises(eqbatch.SystemDefinitionError, match="species_data.A: .* finite"):
        eqbatch.ReactionSystem(["A", "B"], ["A = B"], species_data=nan_data, check_balance=False)
    # formation data are required, in kJ/mol
    with pytest.raises(eqbatch.SystemDefinitionError, match="no default"):
        MaierKelley(a=49.62, b=4.52e-3)
    with pytest.raises(eqbatch.SystemDefinitionError, match="kJ/mol"):
        MaierKelley(a=49.62, dHf=-635_100.0, S298=38.1)
    with pytest.raises(eqbatch.SystemDefinitionError, match="same number of rows"):
        Tabulated.from_cp((298.15, 400.0, 500.0), (30.0, 30.0), dHf=0.0, S298=1.0)
    with pytest.raises(eqbatch.SystemDefinitionError, match="increasing"):
        Tabulated.from_cp((500.0, 400.0, 298.15), (30.0,) * 3, dHf=0.0, S298=1.0)
    # H - H298 is zero at 298.15 K by its definition
    T = (298.15, 400.0, 500.0, 600.0)
    good = Tabulated.from_cp(T, (30.0,) * 4, dHf=-10.0, S298=200.0)
    with pytest.raises(eqbatch.SystemDefinitionError, match="not zero"):
        Tabulated(good.T, good.Cp, tuple(h + 1.0 for h in good.H_rel), good.S, dHf=-10.0)
