"""Condensed species' data from ``thermo="chemicals"``: a solid or liquid
species gets the pure solid's or liquid's standard state, never the gas's,
checked against handbook values and reference formulations."""

from __future__ import annotations

import math

import eqbatch
import numpy as np
import pytest
from eqbatch.compounds import chemicals_data
from eqbatch.errors import SystemDefinitionError

R = 8.314462618  # J/(mol K), CODATA 2018


def test_graphite_gets_solid_data_not_the_carbon_atom_gas() -> None:
    # CH4 = C(graphite) + 2 H2 at 1000 K: dG = -dfG(CH4, 1000 K) = -19.492
    # kJ/mol (NIST-JANAF Thermochemical Tables, 4th ed. 1998, methane table;
    # from memory), so ln K = 2.344. Graphite's reference state has dfH = 0;
    # the carbon atom gas (dfH 716.7 kJ/mol) would give ln K near -65.
    system = eqbatch.ReactionSystem(
        species=["CH4", "H2", "C"], reactions=["CH4 = C + 2 H2"], phases={"C": "solid"}, thermo="chemicals"
    )
    assert system.lnK(1000.0)[0, 0] == pytest.approx(19492.0 / (R * 1000.0), abs=0.05)
    graphite = chemicals_data("C", None, "solid")
    assert graphite.dHf == 0.0
    # graphite Cp(298.15 K) = 8.517 J/(mol K) (NIST-JANAF, from memory); diamond's is 6.1
    assert float(graphite.cp(298.15)) == pytest.approx(8.517, abs=0.01)
    assert "solid" in graphite.source and "JANAF" in graphite.source


def test_liquid_water_vapour_pressure_against_iapws() -> None:
    # H2O(l) = H2O(g): K = f_sat / P0; at low pressure f_sat is close to the
    # saturation pressure of the IAPWS-95 formulation (chemicals.iapws).
    from chemicals.iapws import iapws95_Psat

    system = eqbatch.ReactionSystem(
        species=["H2O_liq", "H2O"],
        formulas={"H2O_liq": "H2O"},
        reactions=["H2O_liq = H2O"],
        phases={"H2O_liq": "pure_liquid"},
        thermo="chemicals",
    )
    T = np.array([298.15, 323.15, 348.15, 373.15])
    psat = np.array([iapws95_Psat(t) for t in T]) / 1e5  # bar
    np.testing.assert_allclose(np.exp(system.lnK(T)[:, 0]), psat, rtol=0.02)
    # and in a solve: steam in nitrogen below its dew point condenses to Psat / P
    res = system.solve([0.0, 1.0], T=323.15, P=1.0)  # pure steam at 50 C, 1 bar
    assert res.converged.all() and res.present[0, 1]
    assert res.amounts[0, 0] > 0.99  # almost all condenses (nothing else in the gas)


def test_calcite_from_chemicals_against_baker() -> None:
    # CaCO3 = CaO + CO2 with the package's calcite (Perry's Table 2-151 Cp, to
    # 1033 K) and lime (JANAF): the CO2 pressure over both solids against Baker,
    # J. Chem. Soc. 1962, 464 (from memory): log10(P / atm) = 7.079 - 38000 / (4.574 T),
    # within the band tests/test_condensed.py uses for hand-entered data.
    system = eqbatch.ReactionSystem(
        species=["CaCO3", "CaO", "CO2"],
        reactions=["CaCO3 = CaO + CO2"],
        phases={"CaCO3": "solid", "CaO": "solid"},
        thermo="chemicals",
    )
    T = np.linspace(900.0, 1030.0, 6)
    p_baker = 10 ** (7.079 - 38000.0 / (4.574 * T)) * 1.01325  # bar
    np.testing.assert_allclose(system.lnK(T)[:, 0], np.log(p_baker), atol=0.25)


def test_sulfur_melts_where_the_handbook_says() -> None:
    # S(s) = S(l) has K = 1 at the melting point: 388.36 K for rhombic sulfur,
    # 392 K for monoclinic (CRC Handbook, from memory). Solid data are Perry's
    # monoclinic correlation with CRC's entropy, liquid data JANAF's.
    system = eqbatch.ReactionSystem(
        species=["S_s", "S_l"],
        formulas={"S_s": "S", "S_l": "S"},
        reactions=["S_s = S_l"],
        phases={"S_s": "solid", "S_l": "pure_liquid"},
        thermo="chemicals",
    )
    T = np.linspace(370.0, 392.0, 221)  # Perry's correlation reaches 392 K
    lnk = system.lnK(T)[:, 0]
    assert np.all(np.diff(lnk) > 0)  # melting absorbs heat
    t_melt = T[np.argmax(lnk > 0)]
    assert 386.0 <= t_melt <= 394.0


def test_methane_cracks_to_carbon_without_steam_but_not_with_it() -> None:
    # Facts of the trade (common practice): methane alone at 1000 K and 1 bar
    # deposits carbon; a steam-to-carbon ratio of 3 at 1100 K does not.
    system = eqbatch.ReactionSystem(
        species=["CH4", "H2O", "CO", "CO2", "H2", "C"],
        reactions=["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2", "CH4 = C + 2 H2"],
        phases={"C": "solid"},
        thermo="chemicals",
    )
    res = system.solve([[1.0, 0.0, 0, 0, 0, 0], [1.0, 3.0, 0, 0, 0, 0]], T=[1000.0, 1100.0], P=1.0)
    assert res.converged.all()
    c = system.phase_index[5]
    assert res.present[0, c] and res.amounts[0, 5] > 0.5
    assert not res.present[1, c] and res.activities[1, 5] < 1.0


def test_a_condensed_species_without_condensed_data_is_refused() -> None:
    # the package has methane's gas data but no solid heat capacity for it:
    # refusing beats silently using the gas's
    with pytest.raises(SystemDefinitionError, match="no solid heat capacity"):
        chemicals_data("CH4", None, "solid")
    assert math.isfinite(chemicals_data("CH4").dHf)  # the gas is served
