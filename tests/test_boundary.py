"""Where a pure condensed phase just appears (eqbatch.phase_boundary): closed
forms, an independent carbon-activity calculation with scipy, and brute-force
bisection of the solve."""

from __future__ import annotations

import eqbatch
import numpy as np
import pytest
from eqbatch.demo import reformer_system
from eqbatch.speciesdata import MaierKelley
from test_condensed import BOUDOUARD, calcination

# Graphite, Cp = a + b T + d / T^2 (K. K. Kelley, US Bureau of Mines Bulletin 584,
# 1960; from memory) with CODATA S298 = 5.74 J/(mol K), dHf = 0 (reference state).
GRAPHITE = MaierKelley(a=17.15, b=4.27e-3, d=-8.79e5, dHf=0.0, S298=5.74, T_max=2500.0, source="graphite")


def boudouard() -> eqbatch.ReactionSystem:
    return eqbatch.ReactionSystem(BOUDOUARD, ["C + CO2 = 2 CO"], phases={"C": "solid"})


def test_boudouard_boundary_in_a_feed_amount_and_in_pressure_match_closed_forms() -> None:
    # From 1 CO2 + x CO at P: no carbon made, y_CO = x / (1 + x); carbon appears
    # where y_CO^2 P / (1 - y_CO) = K, i.e. x^2 P = K (1 + x) (closed form).
    K = np.array([0.5, 2.0, 8.0])
    P = np.array([1.0, 3.0, 0.5])
    found = eqbatch.phase_boundary(
        boudouard(), "C", "CO", 0.01, 50.0, feed=[0.0, 1.0, 0.0], lnK=np.log(K)[:, None], P=P
    )
    x = (K + np.sqrt(K * K + 4 * P * K)) / (2 * P)
    np.testing.assert_array_equal(found.status, eqbatch.Status.CONVERGED)
    np.testing.assert_allclose(found.value, x, rtol=1e-10)
    assert not found.present_below.any()  # more CO, more carbon
    # at the boundary: no carbon, activity one
    np.testing.assert_array_equal(found.result.amounts[:, 0], 0.0)
    np.testing.assert_allclose(found.result.activities[:, 0], 1.0, rtol=1e-9)
    # In pressure, from 1 CO + 1 CO2: Q = 0.5 P, so carbon appears at P = 2 K.
    found = eqbatch.phase_boundary(
        boudouard(), "C", "P", 0.01, 100.0, feed=[0.0, 1.0, 1.0], lnK=np.log(K)[:, None]
    )
    np.testing.assert_allclose(found.value, 2 * K, rtol=1e-10)


def test_no_boundary_in_the_bracket_is_said_and_gives_nan() -> None:
    found = eqbatch.phase_boundary(boudouard(), "C", "CO", 5.0, 50.0, feed=[0.0, 1.0, 0.0], lnK=np.log(2.0))
    assert found.status[0] == eqbatch.Status.NO_BOUNDARY
    assert np.isnan(found.value[0])


def test_calcination_temperature_against_bisection_of_the_solve() -> None:
    # Where CaCO3 is just used up on heating, from 40 mol CaCO3 in 10, 50 and
    # 200 mol N2 at 1 bar: brute-force bisection of the solve's own phase set
    # (60 halvings) lands on the same temperature.
    system = calcination()
    n2 = np.array([10.0, 50.0, 200.0])
    feed = np.column_stack([np.full(3, 40.0), np.zeros(3), np.zeros(3), n2])
    found = eqbatch.phase_boundary(system, "CaCO3", "T", 900.0, 1200.0, feed=feed, P=1.0)
    np.testing.assert_array_equal(found.status, eqbatch.Status.CONVERGED)
    assert found.present_below.all()
    lo, hi = np.full(3, 900.0), np.full(3, 1200.0)
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        present = system.solve(feed, T=mid, P=1.0, tol=1e-13).present[:, 1]
        lo, hi = np.where(present, mid, lo), np.where(present, hi, mid)
    np.testing.assert_allclose(found.value, 0.5 * (lo + hi), rtol=1e-9)
    # more nitrogen dilutes the CO2: calcite goes at a lower temperature
    assert np.all(np.diff(found.value) < 0)


def gas_equilibrium(steam: float, lnk1: float, lnk2: float, P: float) -> np.ndarray:
    """Reforming + shift from 1 CH4 + ``steam`` H2O at P (bar, P0 = 1) by nested
    brentq on the two extents (scipy; independent of eqbatch): amounts of CH4,
    H2O, CO, H2, CO2."""
    from scipy.optimize import brentq

    def amounts(x1: float, x2: float) -> np.ndarray:
        return np.array([1 - x1, steam - x1 - x2, x1 - x2, 3 * x1 + x2, x2])

    def shift_extent(x1: float) -> float:
        # ln(y_CO2 y_H2 / (y_CO y_H2O)) rises from -inf to +inf over (0, min(x1, steam - x1))
        def f(x2: float) -> float:
            n = amounts(x1, x2)
            return float(np.log(n[4] * n[3] / (n[2] * n[1])) - lnk2)

        top = min(x1, steam - x1)
        return brentq(f, top * 1e-15, top * (1 - 1e-15), xtol=1e-15, rtol=1e-14)

    def g(x1: float) -> float:
        n = amounts(x1, shift_extent(x1))
        y = n / n.sum()
        return float(np.log(y[2] * y[3] ** 3 * P**2 / (y[0] * y[1])) - lnk1)

    top = min(1.0, steam)
    x1 = brentq(g, top * 1e-12, top * (1 - 1e-12), xtol=1e-15, rtol=1e-14)
    return amounts(x1, shift_extent(x1))


@pytest.mark.parametrize("T", [900.0, 1000.0, 1100.0])
def test_carbon_limit_steam_to_carbon_against_an_independent_carbon_activity(T: float) -> None:
    # A methane reformer at 5 bar with graphite: the least steam per CH4 at
    # which carbon cannot form, where the carbon activity of the carbon-free gas,
    # a_C = K_cracking a_CH4 / a_H2^2, is one. The gas equilibrium and the root in
    # steam are found independently (scipy brentq); ln K from the same data.
    base = reformer_system()
    system = eqbatch.ReactionSystem(
        ["CH4", "H2O", "CO", "H2", "CO2", "C"],
        {"reforming": "CH4 + H2O = CO + 3 H2", "shift": "CO + H2O = CO2 + H2", "cracking": "CH4 = C + 2 H2"},
        phases={"C": "solid"},
        species_data={**{k: base.species_data[k] for k in base.species[:5]}, "C": GRAPHITE},
    )
    P = 5.0
    lnk1, lnk2, lnk3 = system.lnK(T)[0]
    found = eqbatch.phase_boundary(
        system, "C", "H2O", 0.05, 5.0, feed=[1.0, 0.0, 0.0, 0.0, 0.0, 0.0], T=T, P=P
    )
    assert found.status[0] == eqbatch.Status.CONVERGED
    assert found.present_below[0]  # too little steam: carbon

    def ln_carbon_activity(steam: float) -> float:
        n = gas_equilibrium(steam, lnk1, lnk2, P)
        y = n / n.sum()
        return float(lnk3 + np.log(y[0] * P) - 2 * np.log(y[3] * P))

    from scipy.optimize import brentq

    limit = brentq(ln_carbon_activity, 0.05, 5.0, xtol=1e-14, rtol=1e-13)
    assert abs(found.value[0] / limit - 1) < 1e-8, (found.value[0], limit)
    assert 0.05 < limit < 5.0


def test_bad_requests_are_refused_naming_the_problem() -> None:
    system = boudouard()
    with pytest.raises(eqbatch.CaseInputError, match="pure"):
        eqbatch.phase_boundary(system, "CO", "P", 0.1, 1.0, feed=[0.0, 1.0, 1.0], lnK=0.0)
    with pytest.raises(eqbatch.CaseInputError, match="vary"):
        eqbatch.phase_boundary(system, "C", "X", 0.1, 1.0, feed=[0.0, 1.0, 1.0], lnK=0.0)
    with pytest.raises(eqbatch.CaseInputError, match="neither T nor lnK"):
        eqbatch.phase_boundary(system, "C", "T", 900.0, 1000.0, feed=[0.0, 1.0, 1.0], lnK=0.0)
    with pytest.raises(eqbatch.CaseInputError, match="lo < hi"):
        eqbatch.phase_boundary(system, "C", "P", 2.0, 1.0, feed=[0.0, 1.0, 1.0], lnK=0.0)


def test_the_command_line_finds_boundaries_for_every_row_of_a_table(tmp_path, capsys) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq
    from eqbatch.cli import main

    (tmp_path / "boudouard.toml").write_text(
        'species = ["C", "CO2", "CO"]\n'
        "[phases]\n"
        'C = "solid"\n'
        "[[reactions]]\n"
        'label = "boudouard"\n'
        'equation = "C + CO2 = 2 CO"\n'
    )
    K = np.array([0.5, 2.0, 8.0, 40.0])
    pq.write_table(
        pa.table({"feed_CO2": np.ones(4), "feed_CO": np.ones(4), "lnK_boudouard": np.log(K)}),
        tmp_path / "cases.parquet",
    )
    args = [str(tmp_path / name) for name in ("boudouard.toml", "cases.parquet", "limits.parquet")]
    assert main(["boundary", *args, "--species", "C", "--vary", "P", "--lo", "0.1", "--hi", "50"]) == 0
    out = pq.read_table(tmp_path / "limits.parquet").to_pydict()
    # from 1 CO + 1 CO2, carbon appears at P = 2 K (Q = 0.5 P); K = 40 has none below 50 bar
    np.testing.assert_allclose(out["boundary_P_bar"][:3], 2 * K[:3], rtol=1e-10)
    assert np.isnan(out["boundary_P_bar"][3])
    assert out["status"] == [0, 0, 0, int(eqbatch.Status.NO_BOUNDARY)]
    assert out["present_below"][:3] == [False, False, False]
    text = capsys.readouterr().out
    assert "boundary found in 3, none in the bracket in 1" in text
    assert "thermodynamic limit" in text
    # the output is not overwritten unless asked
    assert main(["boundary", *args, "--species", "C", "--vary", "P", "--lo", "0.1", "--hi", "50"]) != 0
    assert "exists" in capsys.readouterr().err
