"""Quantities practice quotes, derived from a solve: yields per fed species and
methane slip, checked against the conservation of atoms (a fact of chemistry)
and against the same quantities worked by hand from the wet composition."""

from __future__ import annotations

from importlib import resources

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from eqbatch.cli import main
from eqbatch.demo import reformer_system
from eqbatch.sweeps import sweep


def test_yields_conserve_atoms_and_equal_the_hand_formula() -> None:
    system = reformer_system()  # CH4 H2O CO H2 CO2 N2
    rng = np.random.default_rng(5)
    n = 300
    feed = np.zeros((n, 6))
    feed[:, 0], feed[:, 1], feed[:, 5] = rng.uniform(0.5, 2.0, n), rng.uniform(1.0, 6.0, n), 0.05
    res = system.solve(feed, T=rng.uniform(800.0, 1200.0, n), P=rng.uniform(1.0, 40.0, n))
    assert res.converged.all()
    per_ch4 = res.yields("CH4")
    # by hand: (n_out - n_in) / n_CH4,in
    np.testing.assert_allclose(per_ch4, (res.amounts - feed) / feed[:, :1], rtol=0, atol=1e-15)
    # carbon (CH4, CO, CO2), hydrogen (4 CH4, 2 H2O, 2 H2) and oxygen (H2O, CO, 2 CO2)
    # are conserved: their yields per mol of methane fed sum to zero
    carbon = per_ch4[:, 0] + per_ch4[:, 2] + per_ch4[:, 4]
    hydrogen = 4 * per_ch4[:, 0] + 2 * per_ch4[:, 1] + 2 * per_ch4[:, 3]
    oxygen = per_ch4[:, 1] + per_ch4[:, 2] + 2 * per_ch4[:, 4]
    for balance in (carbon, hydrogen, oxygen):
        assert np.max(np.abs(balance)) < 1e-12
    assert np.all(per_ch4[:, 5] == 0.0)  # the inert
    # a species not fed gives no yields per it
    assert np.isnan(res.yields("CO")).all()


def test_methane_slip_is_the_dry_methane_fraction_by_hand(capsys) -> None:
    system = reformer_system()
    res = system.solve([1.0, 3.0, 0.0, 0.0, 0.0, 0.02], T=1100.0, P=25.0)
    n = res.amounts[0]
    # by hand: methane over the gas without water
    dry = n[0] / (n.sum() - n[1])
    assert float(res.methane_slip[0]) == pytest.approx(dry, rel=1e-14)
    assert main(["solve", "--feed", "CH4=1,H2O=3,N2=0.02", "--T", "1100", "--P", "25", _demo_file()]) == 0
    out = capsys.readouterr().out
    assert f"methane slip: {100 * dry:.4g} mol % CH4, dry basis" in out
    assert "mol per mol CH4 fed" in out


def _demo_file() -> str:
    return str(resources.files("eqbatch").joinpath("data/reformer.toml"))


def test_sweep_yield_columns_conserve_carbon(tmp_path) -> None:
    rng = np.random.default_rng(9)
    n = 200
    cases = {"feed_CH4": rng.uniform(0.5, 2.0, n), "feed_H2O": rng.uniform(1.0, 5.0, n)}
    cases |= {"T_K": rng.uniform(800.0, 1200.0, n), "P_bar": rng.uniform(1.0, 30.0, n)}
    pq.write_table(pa.table(cases), tmp_path / "in.parquet")
    sweep(
        reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", yields_per=["CH4"], quiet=True
    )
    out = pq.read_table(tmp_path / "out.parquet").to_pandas()
    names = [c for c in out.columns if c.startswith("yield_")]
    assert names == ["yield_H2O_per_CH4", "yield_CO_per_CH4", "yield_H2_per_CH4", "yield_CO2_per_CH4"]
    # by hand from the same file's amounts
    np.testing.assert_allclose(out.yield_H2_per_CH4, out.n_H2 / out.feed_CH4, rtol=1e-15)
    # carbon: the methane converted reappears as CO and CO2
    np.testing.assert_allclose(out.yield_CO_per_CH4 + out.yield_CO2_per_CH4, out.conversion_CH4, atol=1e-12)
