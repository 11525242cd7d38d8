"""Where species data come from and what they mean: compounds resolved from
names and formulas (no isomer's data for a condensed formula), and the
standard pressure each data set carries. Sources are named beside each value."""

from __future__ import annotations

import math
import textwrap

import eqbatch
import numpy as np
import pytest
from eqbatch.thermo import NASA7, CpPolynomial, Shomate, chemicals_data
from scipy.constants import R as R_CODATA
from scipy.integrate import quad
from scipy.optimize import brentq
from test_thermo import H2O_NASA, SHOMATE

ATM = 1.01325  # bar per standard atmosphere (definition)

# --- standard pressure of species data -----------------------------------------


def ammonia(P0: float, **data) -> eqbatch.ReactionSystem:
    species_data = {s: SHOMATE[s] for s in ("N2", "H2", "NH3")} | data
    return eqbatch.ReactionSystem(
        ["N2", "H2", "NH3"], ["0.5 N2 + 1.5 H2 = NH3"], P0=P0, species_data=species_data
    )


def ammonia_mole_fraction(ln_k_bar: float, P_bar: float) -> float:
    """NH3 mole fraction from a 1:3 N2/H2 feed by hand: with extent x of
    0.5 N2 + 1.5 H2 = NH3 from (1, 3) mol, K = y_NH3 / (y_N2^0.5 y_H2^1.5) / (P / 1 bar)."""

    def residual(x):
        n2, h2, nh3 = 1 - 0.5 * x, 3 - 1.5 * x, x
        total = n2 + h2 + nh3
        return (
            math.log(nh3 / total)
            - 0.5 * math.log(n2 / total)
            - 1.5 * math.log(h2 / total)
            - (ln_k_bar + math.log(P_bar))
        )

    x = brentq(residual, 1e-12, 2 - 1e-12, xtol=1e-15, rtol=1e-15)
    return x / (4 - x)


def test_species_data_keep_their_1_bar_standard_when_P0_is_an_atmosphere() -> None:
    # NH3 synthesis at 450 C and 10 atm: the data are on 1 bar whatever P0 the
    # system's K data (if any) use, so the physical answer cannot depend on P0.
    T, P = 723.15, 10 * ATM
    bar, atm = ammonia(1.0), ammonia(ATM)
    ln_k_bar = float(bar.lnK(T)[0, 0])
    # ln K on a 1 atm basis = ln K(1 bar) - dn_gas ln(1.01325 / 1), dn_gas = 1 - 0.5 - 1.5 = -1
    dn_gas = -1.0
    assert float(atm.lnK(T)[0, 0]) == pytest.approx(ln_k_bar - dn_gas * math.log(ATM), abs=1e-12)
    # the conversion is a constant in T: d ln K / dT and dH are unchanged, dG follows ln K
    np.testing.assert_allclose(atm.dlnK_dT([600.0, T]), bar.dlnK_dT([600.0, T]), rtol=1e-13)
    np.testing.assert_allclose(atm.dH([600.0, T]), bar.dH([600.0, T]), rtol=1e-13)
    data_lnk = atm.lnK_data["r1"]
    assert float(data_lnk.dG(T)) == pytest.approx(-R_CODATA * T * float(atm.lnK(T)[0, 0]), rel=1e-9)
    # the same physical pressure gives the same composition, equal to a hand solution on 1 bar
    y_hand = ammonia_mole_fraction(ln_k_bar, P)
    for system in (bar, atm):
        res = system.solve([1.0, 3.0, 0.0], T=T, P=P, tol=1e-13)
        assert float(res.mole_fractions[0, 2]) == pytest.approx(y_hand, rel=1e-10)


def test_liquid_species_take_no_pressure_term() -> None:
    # 2 A(g) = B(g) + C(l): dn over gas species is 1 - 2 = -1; C's activity is its
    # liquid mole fraction, whatever the standard pressure.
    data = {
        "A": CpPolynomial(a=(4.0,), dHf=0.0, S298=200.0),
        "B": CpPolynomial(a=(4.0,), dHf=-10.0, S298=190.0),
        "C": CpPolynomial(a=(9.0,), dHf=-30.0, S298=120.0),
    }

    def make(P0):
        return eqbatch.ReactionSystem(
            ["A", "B", "C"], ["2 A = B + C"], phases={"C": "liquid"}, P0=P0, species_data=data
        )

    shift = float(make(ATM).lnK(500.0)[0, 0] - make(1.0).lnK(500.0)[0, 0])
    dn_gas = 1.0 - 2.0
    assert shift == pytest.approx(-dn_gas * math.log(ATM), abs=1e-12)


def test_each_data_set_carries_its_standard_pressure(tmp_path, capsys) -> None:
    # Data tabulated on 1 atm (as JANAF tables before 1982): P_ref = 1.01325 bar.
    # With P0 = 1 bar only NH3's term remains: -(+1) ln(1 / 1.01325).
    nh3_atm = Shomate(SHOMATE["NH3"].ranges, source="NH3 on 1 atm", P_ref=ATM)
    mixed = ammonia(1.0, NH3=nh3_atm)
    ln_k_bar = float(ammonia(1.0).lnK(700.0)[0, 0])
    assert float(mixed.lnK(700.0)[0, 0]) == pytest.approx(ln_k_bar - math.log(1.0 / ATM), abs=1e-12)
    # every data set on the system's own P0: no conversion
    all_atm = eqbatch.ReactionSystem(
        ["N2", "H2", "NH3"],
        ["0.5 N2 + 1.5 H2 = NH3"],
        P0=ATM,
        species_data={s: Shomate(SHOMATE[s].ranges, P_ref=ATM) for s in ("N2", "H2", "NH3")},
    )
    assert float(all_atm.lnK(700.0)[0, 0]) == pytest.approx(ln_k_bar, abs=1e-12)
    # the other two forms take it as well
    assert NASA7(H2O_NASA.low, H2O_NASA.high, P_ref=ATM).P_ref == ATM
    assert CpPolynomial(a=(3.5,), dHf=0.0, S298=100.0).P_ref == 1.0
    with pytest.raises(eqbatch.SystemDefinitionError, match="P_ref"):
        CpPolynomial(a=(3.5,), dHf=0.0, S298=100.0, P_ref=-1.0)

    # a system file says the same with P_ref beside source
    def rows(name):
        keys = ("T_min", "T_max", "A", "B", "C", "D", "E", "F", "G", "H")
        return ", ".join(
            "{ " + ", ".join(f"{k} = {float(v)!r}" for k, v in zip(keys, r)) + " }"
            for r in SHOMATE[name].ranges
        )

    text = 'species = ["N2", "H2", "NH3"]\nP0 = 1.0\n[[reactions]]\nequation = "0.5 N2 + 1.5 H2 = NH3"\n'
    for name in ("N2", "H2", "NH3"):
        text += f'[species_data.{name}]\nsource = "WebBook Shomate {name}"\nshomate = [{rows(name)}]\n'
    text += f"P_ref = {ATM}\n"  # belongs to the last table, NH3
    path = tmp_path / "nh3.toml"
    path.write_text(text)
    from_file = eqbatch.ReactionSystem.from_toml(path)
    assert from_file.species_data["NH3"].P_ref == ATM and from_file.species_data["N2"].P_ref == 1.0
    assert float(from_file.lnK(700.0)[0, 0]) == pytest.approx(float(mixed.lnK(700.0)[0, 0]), abs=1e-12)
    # a misspelt key is refused, not ignored
    path.write_text(text.replace("P_ref =", "Pref ="))
    with pytest.raises(eqbatch.SystemDefinitionError, match="Pref"):
        eqbatch.ReactionSystem.from_toml(path)
    # and `eqbatch thermo` says which standard pressure each data set has and that ln K is converted
    path.write_text(text.replace("P0 = 1.0", f"P0 = {ATM}"))
    from eqbatch.cli import main

    assert main(["thermo", str(path), "--T", "600:800:3"]) == 0
    out = capsys.readouterr().out
    assert "P_ref = 1 bar" in out and f"P_ref = {ATM:g} bar" in out
    assert "converted" in out


# --- compounds resolved from names and formulas ----------------------------------

ETHYLENE_HYDRATION = (["C2H4", "H2O", "C2H5OH"], ["C2H4 + H2O = C2H5OH"])


def ln_k_from_chemicals(nu_by_cas: dict[str, float], T: float) -> float:
    """ln K at 1 bar straight from the chemicals package's data, by the
    documented choice of source (a JANAF Cp table with JANAF formation data,
    else the TRC ideal-gas correlation, else Poling's polynomial; formation
    data otherwise first-ranked), each Cp integrated with scipy's quad from
    the package's own function or table (the table through scipy's
    CubicSpline): an independent reference for the data source."""
    from chemicals.heat_capacity import Cp_data_Poling, Cp_dict_JANAF_gas, TRC_gas_data, TRCCp
    from chemicals.reaction import Hfg, Hfg_methods, S0g, S0g_methods
    from scipy.interpolate import CubicSpline

    dh = ds = 0.0
    for cas, nu in nu_by_cas.items():
        janaf = cas in Cp_dict_JANAF_gas and "JANAF" in Hfg_methods(cas) and "JANAF" in S0g_methods(cas)
        if janaf:
            rows = np.array(Cp_dict_JANAF_gas[cas])
            rows = rows[:, rows[0] >= 200.0]
            spline = CubicSpline(rows[0], rows[1])

            def cp(x, spline=spline):
                return float(spline(x))

        elif cas in TRC_gas_data.index:
            coef = [float(TRC_gas_data.loc[cas, f"a{i}"]) for i in range(8)]

            def cp(x, coef=coef):
                return TRCCp(x, *coef)

        else:
            a = [float(Cp_data_Poling.loc[cas, f"a{i}"]) for i in range(5)]

            def cp(x, a=a):
                return R_CODATA * sum(c * x**i for i, c in enumerate(a))

        method = "JANAF" if janaf else None
        dh += nu * (Hfg(cas, method=method) + quad(cp, 298.15, T)[0])
        ds += nu * (S0g(cas, method=method) + quad(lambda x, cp=cp: cp(x) / x, 298.15, T)[0])
    return -(dh - T * ds) / (R_CODATA * T)


def test_condensed_formula_is_the_compound_not_an_isomer() -> None:
    species, reactions = ETHYLENE_HYDRATION
    T = 523.15
    system = eqbatch.ReactionSystem(species, reactions, thermo="chemicals")
    K = math.exp(float(system.lnK(T)[0, 0]))
    # Ethylene hydration at 250 C: K of order 1e-2 (Smith, Van Ness and Abbott,
    # Introduction to Chemical Engineering Thermodynamics, ethylene hydration example; from memory)
    assert 3e-3 < K < 3e-2
    # CAS registry numbers: ethylene 74-85-1, water 7732-18-5, ethanol 64-17-5
    reference = ln_k_from_chemicals({"74-85-1": -1, "7732-18-5": -1, "64-17-5": 1}, T)
    # the TRC correlations are sampled every 100 K and splined: 1e-4 in ln K
    assert float(system.lnK(T)[0, 0]) == pytest.approx(reference, abs=1e-4)
    source = system.species_data["C2H5OH"].source
    assert "ethanol" in source and "64-17-5" in source
    # ethylene converts at 35 bar (the reproducer gave zero conversion)
    res = system.solve({"C2H4": 1, "H2O": 5}, T=T, P=35.0)
    assert res.converged[0] and float(res.conversion("C2H4")[0]) > 0.05
    # the other ways of writing ethanol give the same data
    other = eqbatch.ReactionSystem(["C2H4", "H2O", "CH3CH2OH"], ["C2H4 + H2O = CH3CH2OH"], thermo="chemicals")
    named = eqbatch.ReactionSystem(
        ["C2H4", "H2O", "ethanol"],
        ["C2H4 + H2O = ethanol"],
        thermo="chemicals",
        formulas={"ethanol": "C2H5OH"},
    )
    label = eqbatch.ReactionSystem(
        ["C2H4", "H2O", "EtOH_g"], ["C2H4 + H2O = EtOH_g"], thermo="chemicals", formulas={"EtOH_g": "C2H5OH"}
    )
    for s in (other, named, label):
        assert float(s.lnK(T)[0, 0]) == pytest.approx(reference, abs=1e-4)


@pytest.mark.parametrize(
    "name, compound, cas",
    [
        # CAS registry numbers (outside reference)
        ("CH3COOH", "acetic acid", "64-19-7"),
        ("HCOOH", "formic acid", "64-18-6"),
        ("CH3OCH3", "dimethyl ether", "115-10-6"),
        ("CH3OH", "methanol", "67-56-1"),
        ("CH3CH2CH2OH", "1-propanol", "71-23-8"),
        ("CH3COCH3", "acetone", "67-64-1"),
        ("C6H6", "benzene", "71-43-2"),
    ],
)
def test_structural_formulas_resolve_to_their_compound(name, compound, cas) -> None:
    source = chemicals_data(name).source
    assert compound in source and cas in source


@pytest.mark.parametrize(
    "name, listed, not_listed",
    [
        # CAS registry numbers: butane 106-97-8, isobutane 75-28-5, 1-propanol 71-23-8,
        # 2-propanol 67-63-0, methoxyethane 540-67-0, ethanol 64-17-5, dimethyl ether 115-10-6
        ("C4H10", ["butane (106-97-8)", "isobutane (75-28-5)"], []),
        ("C3H7OH", ["1-propanol (71-23-8)", "isopropanol (67-63-0)"], ["540-67-0"]),
        ("C2H6O", ["ethanol (64-17-5)", "dimethyl ether (115-10-6)"], []),
    ],
)
def test_ambiguous_formula_is_refused_with_the_candidates(name, listed, not_listed) -> None:
    with pytest.raises(eqbatch.SystemDefinitionError) as info:
        chemicals_data(name)
    message = str(info.value)
    for text in listed:
        assert text in message
    for text in not_listed:
        assert text not in message
    assert "formulas=" in message and "species_data" in message


def test_compound_without_data_is_named_not_replaced_by_an_isomer() -> None:
    # CH3CHO is acetaldehyde (75-07-0), served by the TRC correlation; its isomer
    # ethylene oxide (75-21-8) must not stand in. Glycerol (56-81-5) has no gas
    # heat capacity in the package: the error names it.
    source = chemicals_data("CH3CHO").source
    assert "acetaldehyde" in source and "75-07-0" in source and "75-21-8" not in source
    with pytest.raises(eqbatch.SystemDefinitionError, match="glycerol") as info:
        chemicals_data("glycerol")
    assert "56-81-5" in str(info.value)


def test_name_and_formula_must_agree() -> None:
    # MeOH is methanol, CH4O: a formula C2H6O beside it is a contradiction, not a choice
    with pytest.raises(eqbatch.SystemDefinitionError, match="methanol"):
        chemicals_data("MeOH", "C2H6O")
    # and the whole system refuses an ambiguous species the same way
    with pytest.raises(eqbatch.SystemDefinitionError, match="isobutane"):
        eqbatch.ReactionSystem(["C4H10", "C2H4", "H2"], ["C4H10 = 2 C2H4 + H2"], thermo="chemicals")


def test_compound_names_are_shown_by_thermo_and_solve(tmp_path, capsys) -> None:
    path = tmp_path / "hydration.toml"
    path.write_text(
        textwrap.dedent("""
        species = ["C2H4", "H2O", "C2H5OH"]
        [[reactions]]
        label = "hydration"
        equation = "C2H4 + H2O = C2H5OH"
        [thermo]
        source = "chemicals"
    """)
    )
    from eqbatch.cli import main

    assert main(["thermo", str(path), "--T", "500:550:2"]) == 0
    out = capsys.readouterr().out
    line = next(x for x in out.splitlines() if x.strip().startswith("C2H5OH:"))
    assert "ethanol" in line and "64-17-5" in line
    assert main(["solve", str(path), "--feed", "C2H4=1,H2O=5", "--T", "523.15", "--P", "35"]) == 0
    out = capsys.readouterr().out
    section = out[out.index("species data") :]
    line = next(x for x in section.splitlines() if x.strip().startswith("C2H5OH"))
    assert "ethanol" in line and "64-17-5" in line
    assert "ethene" in section or "ethylene" in section


# --- high-temperature data: JANAF tables through chemicals ------------------------


def test_chemicals_water_matches_the_janaf_table_at_1000_k() -> None:
    # NIST-JANAF Thermochemical Tables, H2O(g) at 1000 K (from memory): Cp 41.268 J/(mol K),
    # H - H298 26.000 kJ/mol (the NIST WebBook Shomate fit gives the same, see the
    # speciesdata doctest), S 232.738 J/(mol K); and at 3000 K, Cp 55.74 J/(mol K).
    water = chemicals_data("H2O")
    assert "NIST-JANAF" in water.source and water.range == (200.0, 6000.0)
    assert float(water.cp(1000.0)) == pytest.approx(41.268, abs=0.005)
    assert (float(water.h(1000.0)) / 1000 - water.dHf) == pytest.approx(26.000, abs=0.005)
    assert float(water.s(1000.0)) == pytest.approx(232.738, abs=0.01)
    assert float(water.cp(3000.0)) == pytest.approx(55.74, abs=0.1)


def test_methane_air_flame_with_radicals_from_chemicals() -> None:
    # Stoichiometric methane-air (O2:N2 = 1:3.76) from 298 K at 1 atm: adiabatic
    # flame temperature with dissociation 2226 K (S. R. Turns, An Introduction to
    # Combustion, equilibrium adiabatic flame temperatures; from memory). Without
    # dissociation it would be about 2330 K (same source): the radicals and NO matter.
    species = ["CH4", "O2", "N2", "H2O", "CO2", "CO", "H2", "OH", "H", "O", "NO"]
    flame = eqbatch.ReactionSystem(species, "auto", thermo="chemicals")
    assert "hydroxyl" in flame.species_data["OH"].source
    res = flame.solve({"CH4": 1.0, "O2": 2.0, "N2": 7.52}, T=298.15, P=ATM, adiabatic=True)
    assert res.status[0] == eqbatch.Status.CONVERGED, res.message(0)
    assert float(res.T[0]) == pytest.approx(2226.0, abs=15.0)
    y = dict(zip(species, res.mole_fractions[0]))
    assert y["OH"] > 1e-3 and y["NO"] > 1e-3 and y["CO"] > 1e-3  # dissociated, as flames are
    # the energy balance holds with the same data (numpy sums of the data classes)
    h = lambda T: np.array([float(flame.species_data[s].h(T)) for s in species])  # noqa: E731
    feed = np.array([1.0, 2.0, 7.52] + [0.0] * 8)
    assert float(res.amounts[0] @ h(res.T[0])) == pytest.approx(float(feed @ h(298.15)), abs=1e-3)
