"""Equilibrium constants from species thermochemistry, generated reaction
sets, and approach to equilibrium. Sources are named beside each value."""

from __future__ import annotations

import math

import eqbatch
import numpy as np
import pytest
from eqbatch.thermo import NASA7, CpPolynomial, R, Shomate, equilibrium_temperature
from scipy.integrate import quad

# Shomate coefficients (T_min, T_max, A, B, C, D, E, F, G, H), NIST Chemistry
# WebBook (from memory; they reproduce the JANAF values checked below).
SHOMATE = {
    "H2O": Shomate(
        (
            (500, 1700, 30.09200, 6.832514, 6.793435, -2.534480, 0.082139, -250.8810, 223.3967, -241.8264),
            (1700, 6000, 41.96426, 8.622053, -1.499780, 0.098119, -11.15764, -272.1797, 219.7809, -241.8264),
        )
    ),
    "CO": Shomate(
        (
            (298, 1300, 25.56759, 6.096130, 4.054656, -2.671301, 0.131021, -118.0089, 227.3665, -110.5271),
            (1300, 6000, 35.15070, 1.300095, -0.205921, 0.013550, -3.282780, -127.8375, 231.7120, -110.5271),
        )
    ),
    "CO2": Shomate(
        (
            (298, 1200, 24.99735, 55.18696, -33.69137, 7.948387, -0.136638, -403.6075, 228.2431, -393.5224),
            (1200, 6000, 58.16639, 2.720074, -0.492289, 0.038844, -6.447293, -425.9186, 263.6125, -393.5224),
        )
    ),
    "H2": Shomate(
        (
            (298, 1000, 33.066178, -11.363417, 11.432816, -2.772874, -0.158558, -9.980797, 172.707974, 0.0),
            (1000, 2500, 18.563083, 12.257357, -2.859786, 0.268238, 1.977990, -1.147438, 156.288133, 0.0),
        )
    ),
    "CH4": Shomate(
        (
            (298, 1300, -0.703029, 108.4773, -42.52157, 5.862788, 0.678565, -76.84376, 158.7163, -74.87310),
            (1300, 6000, 85.81217, 11.26467, -2.114146, 0.138190, -26.42221, -153.5327, 224.4143, -74.87310),
        )
    ),
    "N2": Shomate(
        (
            (100, 500, 28.98641, 1.853978, -9.647459, 16.63537, 0.000117, -8.671914, 226.4168, 0.0),
            (500, 2000, 19.50583, 19.88705, -8.598535, 1.369784, 0.527601, -4.935202, 212.3900, 0.0),
        )
    ),
    "NH3": Shomate(
        ((298, 1400, 19.99563, 49.77119, -15.37599, 1.921168, 0.189174, -53.30667, 203.8591, -45.89806),)
    ),
}

# NASA 7-coefficient polynomials of H2O, GRI-Mech 3.0 thermo data (from memory).
H2O_NASA = NASA7(
    low=(
        4.19864056e00,
        -2.03643410e-03,
        6.52040211e-06,
        -5.48797062e-09,
        1.77197817e-12,
        -3.02937267e04,
        -8.49032208e-01,
    ),
    high=(
        3.03399249e00,
        2.17691804e-03,
        -1.64072518e-07,
        -9.70419870e-11,
        1.68200992e-14,
        -3.00042971e04,
        4.96677010e00,
    ),
)

T_RANGE = np.linspace(600.0, 1000.0, 9)


def test_shomate_water_by_hand_and_against_janaf() -> None:
    t = 1.0
    A, B, C, D, E, F, G, H = SHOMATE["H2O"].ranges[0][2:]
    assert SHOMATE["H2O"].cp(1000.0) == pytest.approx(A + B * t + C * t**2 + D * t**3 + E / t**2, rel=1e-14)
    assert SHOMATE["H2O"].s(1000.0) == pytest.approx(
        A * math.log(t) + B * t + C * t**2 / 2 + D * t**3 / 3 - E / (2 * t**2) + G
    )
    # NIST-JANAF tables at 1000 K (from memory): Cp 41.27 J/mol/K, H - H298 25.98 kJ/mol, S 232.74 J/mol/K
    assert SHOMATE["H2O"].cp(1000.0) == pytest.approx(41.27, abs=0.05)
    assert (SHOMATE["H2O"].h(1000.0) / 1000 + 241.826) == pytest.approx(25.98, abs=0.05)
    assert SHOMATE["H2O"].s(1000.0) == pytest.approx(232.74, abs=0.05)


def test_nasa_polynomials_by_hand_and_continuous_at_the_break() -> None:
    a = H2O_NASA.high
    T = 1500.0
    assert H2O_NASA.cp(T) / R == pytest.approx(
        a[0] + a[1] * T + a[2] * T**2 + a[3] * T**3 + a[4] * T**4, rel=1e-14
    )
    assert H2O_NASA.h(T) / (R * T) == pytest.approx(
        a[0] + a[1] * T / 2 + a[2] * T**2 / 3 + a[3] * T**3 / 4 + a[4] * T**4 / 5 + a[5] / T, rel=1e-14
    )
    # at 298.15 K: dfH = -241.826 kJ/mol and S = 188.83 J/mol/K (JANAF, from memory)
    assert H2O_NASA.h(298.15) / 1000 == pytest.approx(-241.826, abs=0.01)
    assert H2O_NASA.s(298.15) == pytest.approx(188.83, abs=0.02)
    below, above = 1000.0 * (1 - 1e-12), 1000.0
    for f in (H2O_NASA.cp, H2O_NASA.h, H2O_NASA.s):
        assert f(below) == pytest.approx(f(above), rel=1e-5)
    # the two published forms agree (JANAF-based fits of the same data)
    assert H2O_NASA.cp(1000.0) == pytest.approx(SHOMATE["H2O"].cp(1000.0), rel=2e-3)
    assert H2O_NASA.h(1000.0) == pytest.approx(SHOMATE["H2O"].h(1000.0), rel=1e-4)


def test_cp_polynomial_integrates_its_heat_capacity() -> None:
    data = CpPolynomial(a=(3.5, 1e-3, -2e-7, 0.0, 0.0), dHf=-100.0, S298=200.0)
    dh, _ = quad(lambda x: float(data.cp(x)), 298.15, 900.0)
    ds, _ = quad(lambda x: float(data.cp(x)) / x, 298.15, 900.0)
    assert data.h(900.0) == pytest.approx(-100e3 + dh, rel=1e-12)
    assert data.s(900.0) == pytest.approx(200.0 + ds, rel=1e-12)


def system(species, reactions, **kw):
    return eqbatch.ReactionSystem(species, reactions, species_data={s: SHOMATE[s] for s in species}, **kw)


def test_shift_lnK_from_species_data_matches_moe() -> None:
    # Moe (1962): ln K = 4577.8 / T - 4.33 (from memory); dn = 0, so no basis correction.
    s = system(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    np.testing.assert_allclose(s.lnK(T_RANGE)[:, 0], 4577.8 / T_RANGE - 4.33, atol=0.2)


def test_reforming_lnK_matches_xu_froment() -> None:
    # Xu and Froment (1989): ln K = 30.114 - 26830 / T, atm^2 basis (from memory); data are on 1 bar.
    s = system(["CH4", "H2O", "CO", "H2"], ["CH4 + H2O = CO + 3 H2"])
    ln_k_atm = s.lnK(T_RANGE)[:, 0] - 2 * math.log(1.01325)
    np.testing.assert_allclose(ln_k_atm, 30.114 - 26830.0 / T_RANGE, atol=0.2)


def test_ammonia_lnK_matches_gillespie_and_beattie() -> None:
    # Gillespie and Beattie (1930), atm^-1 basis (from memory):
    # log10 K = 2250.322/T - 0.85340 - 1.51049 log10 T - 25.8987e-5 T + 14.8961e-8 T^2
    s = system(["N2", "H2", "NH3"], ["0.5 N2 + 1.5 H2 = NH3"])
    T = T_RANGE
    log10k = 2250.322 / T - 0.85340 - 1.51049 * np.log10(T) - 25.8987e-5 * T + 14.8961e-8 * T**2
    ln_k_atm = s.lnK(T)[:, 0] + math.log(1.01325)  # dn = -1
    np.testing.assert_allclose(ln_k_atm, math.log(10) * log10k, atol=0.2)


def test_accessors_are_consistent() -> None:
    s = system(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    T = np.array([700.0, 900.0])
    np.testing.assert_allclose(s.dG(T)[:, 0], -R * T * s.lnK(T)[:, 0])
    # dH from the species enthalpies directly
    dh = SHOMATE["CO2"].h(T) + SHOMATE["H2"].h(T) - SHOMATE["CO"].h(T) - SHOMATE["H2O"].h(T)
    np.testing.assert_allclose(s.dH(T)[:, 0], dh, rtol=1e-12)
    # shift is exothermic, about -41 kJ/mol at 298 K (fact of the trade) and still so here
    assert np.all(s.dH(T) < -30e3)


def test_generated_reactions_count_independence_and_same_equilibrium() -> None:
    species = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
    auto = system(species, "auto")
    assert auto.n_reactions == 6 - 4 + 0  # 6 species, rank of the C/H/O/N element matrix is 4
    assert np.linalg.matrix_rank(auto.stoich) == auto.n_reactions
    hand = system(species, ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"])
    feed = [1.0, 3.0, 0.0, 0.0, 0.0, 0.1]
    a = auto.solve(feed, T=[800.0, 1000.0], P=[5.0, 30.0])
    b = hand.solve(feed, T=[800.0, 1000.0], P=[5.0, 30.0])
    np.testing.assert_allclose(a.amounts, b.amounts, rtol=1e-9, atol=1e-14)


def test_approach_round_trip() -> None:
    species = ["CH4", "H2O", "CO", "H2", "CO2"]
    s = system(species, {"reforming": "CH4 + H2O = CO + 3 H2", "shift": "CO + H2O = CO2 + H2"})
    T = np.array([950.0, 1100.0])
    res = s.solve([1.0, 3.0, 0.0, 0.0, 0.0], T=T, P=20.0, approach={"reforming": 15.0, "shift": 10.0})
    T_eq = equilibrium_temperature(s, res.amounts, P=20.0)
    # reforming is endothermic: it stops at the equilibrium of T - 15 K; the shift
    # (exothermic) at that of T + 10 K.
    np.testing.assert_allclose(T_eq[:, 0], T - 15.0, atol=1e-6)
    np.testing.assert_allclose(T_eq[:, 1], T + 10.0, atol=1e-6)
    plain = s.solve([1.0, 3.0, 0.0, 0.0, 0.0], T=T, P=20.0)
    np.testing.assert_allclose(
        equilibrium_temperature(s, plain.amounts, P=20.0), np.column_stack([T, T]), atol=1e-6
    )
    assert np.all(res.conversion("CH4") < plain.conversion("CH4"))


def test_temperature_sensitivity_with_species_data() -> None:
    s = system(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    res = s.solve([1, 1, 0, 0], T=800.0, sensitivities=True)
    h = 1e-3
    up = s.solve([1, 1, 0, 0], T=800.0 + h, tol=1e-13).amounts[0]
    down = s.solve([1, 1, 0, 0], T=800.0 - h, tol=1e-13).amounts[0]
    np.testing.assert_allclose(res.sensitivity("T")[0], (up - down) / (2 * h), rtol=1e-5)


KEYS = ("T_min", "T_max", "A", "B", "C", "D", "E", "F", "G", "H")


def test_system_file_with_species_data_and_auto_reactions(tmp_path, capsys) -> None:
    def shomate_rows(name):
        return ", ".join(
            "{ " + ", ".join(f"{k} = {v!r}" for k, v in zip(KEYS, map(float, r))) + " }"
            for r in SHOMATE[name].ranges
        )

    lines = ['species = ["CO", "H2O", "CO2", "H2"]', 'reactions = "auto"']
    for name in ("CO", "H2O", "CO2", "H2"):
        lines += [
            f"[species_data.{name}]",
            f'source = "NIST WebBook Shomate ({name})"',
            f"shomate = [{shomate_rows(name)}]",
        ]
    path = tmp_path / "shift.toml"
    path.write_text("\n".join(lines) + "\n")
    s = eqbatch.ReactionSystem.from_toml(path)
    assert s.equations == ("CO + H2O = CO2 + H2",)
    np.testing.assert_allclose(
        s.lnK(900.0), system(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"]).lnK(900.0)
    )
    from eqbatch.cli import main

    assert main(["thermo", str(path), "--T", "600:1000:5"]) == 0
    out = capsys.readouterr().out
    assert "dH/(kJ/mol)" in out and "ln K" in out and "NIST WebBook Shomate (CO)" in out
    lnk_900 = f"{s.lnK(900.0)[0, 0]:.5g}"
    assert lnk_900 in out


def methanator():
    species = ["CO", "H2O", "CO2", "H2", "CH4", "N2"]
    return eqbatch.ReactionSystem(species, "auto", species_data={s: SHOMATE[s] for s in species})


def test_adiabatic_energy_balance_and_isothermal_consistency() -> None:
    s = methanator()
    feed = np.array([[0.003, 0.0, 0.001, 0.74, 0.006, 0.25], [0.02, 0.01, 0.01, 0.70, 0.01, 0.25]])
    res = s.solve(feed, T=[573.0, 600.0], P=25.0, adiabatic=True)
    assert np.all(res.converged)
    h_in = np.array(
        [sum(f[k] * SHOMATE[sp].h(T) for k, sp in enumerate(s.species)) for f, T in zip(feed, [573.0, 600.0])]
    )
    h_out = np.array(
        [sum(n[k] * SHOMATE[sp].h(T) for k, sp in enumerate(s.species)) for n, T in zip(res.amounts, res.T)]
    )
    np.testing.assert_allclose(h_out, h_in, rtol=1e-8)
    iso = s.solve(feed, T=res.T, P=25.0)
    np.testing.assert_allclose(iso.amounts, res.amounts, rtol=1e-8, atol=1e-15)


def test_methanator_temperature_rise_rule_of_thumb() -> None:
    # Rule of thumb for methanators: about 74 K of adiabatic rise per mol % of CO
    # and 60 K per mol % of CO2 converted (common practice, from memory).
    s = methanator()
    feed = [0.003, 0.0, 0.001, 0.74, 0.006, 0.25]  # 0.3 % CO, 0.1 % CO2
    res = s.solve(feed, T=573.0, P=25.0, adiabatic=True)
    assert float(res.T[0] - 573.0) == pytest.approx(0.3 * 74 + 0.1 * 60, rel=0.15)


def test_adiabatic_outside_the_data_range_is_reported() -> None:
    data = {
        "A": CpPolynomial(a=(4.0,), dHf=0.0, S298=200.0, T_max=700.0),
        "B": CpPolynomial(a=(4.0,), dHf=-60.0, S298=200.0, T_max=700.0),
    }
    s = eqbatch.ReactionSystem(["A", "B"], ["A = B"], species_data=data)
    res = s.solve([[1.0, 0.0], [0.001, 1.0]], T=650.0, adiabatic=True)
    assert res.status[0] == eqbatch.Status.OUT_OF_RANGE and "temperature range" in res.message(0)
    assert res.status[1] == eqbatch.Status.CONVERGED
    # no outlet: NaN outputs, not the last iterate (which would read as an answer)
    assert np.isnan(res.T[0]) and np.isnan(res.amounts[0]).all() and np.isfinite(res.amounts[1]).all()


# --- the chemicals data source -------------------------------------------------


def chem(species, equation):
    return eqbatch.ReactionSystem(species, [equation], thermo="chemicals")


def test_chemicals_source_against_published_correlations() -> None:
    T = T_RANGE
    # water-gas shift, Moe (1962), from memory
    wgs = chem(["CO", "H2O", "CO2", "H2"], "CO + H2O = CO2 + H2").lnK(T)[:, 0]
    np.testing.assert_allclose(wgs, 4577.8 / T - 4.33, atol=0.2)
    # ammonia, Gillespie and Beattie (1930), atm basis, from memory
    nh3 = chem(["N2", "H2", "NH3"], "0.5 N2 + 1.5 H2 = NH3").lnK(T)[:, 0] + math.log(1.01325)
    log10k = 2250.322 / T - 0.85340 - 1.51049 * np.log10(T) - 25.8987e-5 * T + 14.8961e-8 * T**2
    np.testing.assert_allclose(nh3, math.log(10) * log10k, atol=0.2)
    # methanol from CO, Graaf, Stamhuis and Beenackers (1986): log10 K = 5139/T - 12.621, bar^-2 (from memory)
    meoh = chem(["CO", "H2", "CH3OH"], "CO + 2 H2 = CH3OH").lnK(T)[:, 0]
    np.testing.assert_allclose(meoh, math.log(10) * (5139.0 / T - 12.621), atol=0.2)
    # steam reforming, Xu and Froment (1989), atm^2 basis, from memory
    smr = chem(["CH4", "H2O", "CO", "H2"], "CH4 + H2O = CO + 3 H2").lnK(T)[:, 0] - 2 * math.log(1.01325)
    np.testing.assert_allclose(smr, 30.114 - 26830.0 / T, atol=0.2)


def test_chemicals_source_records_provenance_and_warns_outside_range(tmp_path) -> None:
    s = chem(["N2", "H2", "NH3"], "0.5 N2 + 1.5 H2 = NH3")
    source = s.species_data["NH3"].source
    assert "NIST-JANAF" in source and "200-6000 K" in source and "(JANAF)" in source
    with pytest.warns(
        eqbatch.ExtrapolationWarning, match=r"species data of 'NH3' \(chemicals: ammonia.*200-6000 K"
    ):
        s.lnK(7000.0)
    # user data override the source species by species
    own = CpPolynomial(a=(4.0,), dHf=-46.0, S298=192.0, source="my own NH3")
    mixed = eqbatch.ReactionSystem(
        ["N2", "H2", "NH3"], ["0.5 N2 + 1.5 H2 = NH3"], thermo="chemicals", species_data={"NH3": own}
    )
    assert mixed.species_data["NH3"].source == "my own NH3" and "chemicals" in mixed.species_data["N2"].source
    path = tmp_path / "nh3.toml"
    path.write_text('species = ["N2", "H2", "NH3"]\nreactions = "auto"\n[thermo]\nsource = "chemicals"\n')
    from_file = eqbatch.ReactionSystem.from_toml(path)
    assert from_file.equations == ("N2 + 3 H2 = 2 NH3",)
    np.testing.assert_allclose(from_file.lnK(800.0)[0, 0], 2 * s.lnK(800.0)[0, 0], rtol=1e-12)
    with pytest.raises(eqbatch.SystemDefinitionError, match="no compound found for species 'Xq'"):
        eqbatch.ReactionSystem(["N2", "Xq"], ["N2 = Xq"], thermo="chemicals", check_balance=False)


def test_equilibrium_temperature_at_a_break_of_the_species_data() -> None:
    # Shomate fits join at 1000 K (H2) and 1200 K (CO2) with a small step in ln K; a
    # composition solved exactly at a break lies in that step. Its equilibrium
    # temperature is the break (the temperature of the solve), not NaN.
    species = ["CH4", "H2O", "CO", "H2", "CO2"]
    s = system(species, ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"])
    feed = {"CH4": 1.0, "H2O": 3.0}
    for T in (1000.0, 1200.0):
        res = s.solve(feed, T=T, P=20.0, tol=1e-12)
        found = equilibrium_temperature(s, res.amounts, 20.0)
        np.testing.assert_allclose(found, T, atol=0.01)
