"""Plant units at the Python entry points: temperatures in degC, pressures in
kPa, MPa, atm or psi (absolute or gauge), feeds as amounts, molar flows,
masses or mass flows.

Check values are the unit definitions of the SI brochure (BIPM, 9th ed.) and
NIST Special Publication 811 (1 atm = 101.325 kPa exactly; 1 psi = 6.894757 kPa;
t/degC = T/K - 273.15), the standard atmosphere as the reference of gauge
pressures (common practice), and molar masses from the IUPAC standard atomic
weights (H 1.008, C 12.011, O 15.999; from memory)."""

from __future__ import annotations

from importlib import resources

import numpy as np
import pint
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from eqbatch import CaseInputError, ReactionSystem, SystemDefinitionError
from eqbatch.cli import main
from eqbatch.demo import reformer_system
from eqbatch.sweeps import SweepError, sweep

Q = pint.UnitRegistry().Quantity


@pytest.fixture(scope="module")
def reformer() -> ReactionSystem:
    return reformer_system()


def test_temperatures_and_pressures_in_plant_units(reformer) -> None:
    feed = [1.0, 3.0, 0, 0, 0, 0]
    si = reformer.solve(feed, T=1143.15, P=29.0 + 1.01325)  # 870 degC, 29 bar gauge
    for T, P in (
        ("870C", "29barg"),
        (Q(870.0, "degC"), Q(30.01325, "bar")),
        ("1143.15 K", "3.001325 MPa"),
        ("870 C", f"{(29.0 + 1.01325) * 100 / 6.894757:.9f} psia"),  # NIST SP 811: 1 psi = 6.894757 kPa
    ):
        res = reformer.solve(feed, T=T, P=P)
        assert float(res.T[0]) == pytest.approx(1143.15, abs=1e-12)
        assert float(res.P[0]) == pytest.approx(30.01325, rel=2e-7)  # (the psi value is rounded)
        np.testing.assert_allclose(res.amounts, si.amounts, rtol=1e-6)
    # an array of temperatures as one quantity; atmospheres (1 atm = 101.325 kPa exactly)
    res = reformer.solve(feed, T=Q(np.array([600.0, 700.0]), "degC"), P=Q(2.0, "atm"))
    np.testing.assert_allclose(res.T, [873.15, 973.15], atol=1e-12)
    assert float(res.P[0]) == pytest.approx(2 * 1.01325, rel=1e-15)
    with pytest.raises(CaseInputError, match="unknown temperature unit"):
        reformer.solve(feed, T="870F", P=10.0)
    with pytest.raises(CaseInputError, match="not convertible to bar"):
        reformer.solve(feed, T=900.0, P=Q(3.0, "kg"))


def test_feeds_as_amounts_flows_masses_and_mass_flows(reformer) -> None:
    m_ch4 = (12.011 + 4 * 1.008) / 1000  # kg/mol, from the IUPAC atomic weights
    m_h2o = (2 * 1.008 + 15.999) / 1000
    by_hand = [100_000.0, 5_400.0 / m_h2o, 0, 0, 0, 0]  # mol/h: 100 kmol/h CH4, 5.4 t/h steam
    res = reformer.solve({"CH4": "100 kmol/h", "H2O": "5.4 t/h"}, T=1100.0, P=20.0)
    np.testing.assert_allclose(res.feed[0], by_hand, rtol=1e-12)
    same = reformer.solve(by_hand, T=1100.0, P=20.0)
    np.testing.assert_array_equal(res.amounts, same.amounts)
    assert res.to_arrow().schema.field("n_H2").metadata == {b"unit": b"mol/h"}
    assert same.to_arrow().schema.field("n_H2").metadata == {b"unit": b"mol"}
    masses = reformer.solve({"CH4": Q(1.6043, "kg"), "H2O": "3 kmol"}, T=1100.0, P=20.0)
    np.testing.assert_allclose(masses.feed[0, :2], [1.6043 / m_ch4, 3000.0], rtol=1e-12)
    with pytest.raises(CaseInputError, match="not both"):
        reformer.solve({"CH4": "1 kmol", "H2O": "3 kmol/h"}, T=1100.0, P=20.0)
    labels = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"])
    with pytest.raises(CaseInputError, match="formula"):
        labels.solve({"Xa": "1 kg"}, lnK=0.0)


def test_standard_pressure_with_a_unit() -> None:
    atm = ReactionSystem(["N2", "H2", "NH3"], ["N2 + 3 H2 = 2 NH3"], P0="1 atm")
    assert atm.P0 == pytest.approx(1.01325, rel=1e-15)  # NIST SP 811: 1 atm = 101 325 Pa
    assert ReactionSystem(["N2", "H2", "NH3"], ["N2 + 3 H2 = 2 NH3"], P0="100 kPa").P0 == pytest.approx(1.0)
    with pytest.raises(SystemDefinitionError, match="gauge"):
        ReactionSystem(["N2", "H2", "NH3"], ["N2 + 3 H2 = 2 NH3"], P0="0 barg")


def test_the_command_line_takes_flows_and_says_per_hour(capsys) -> None:
    path = str(resources.files("eqbatch").joinpath("data/reformer.toml"))
    assert main(["solve", path, "--feed", "CH4=100kmol/h,H2O=5.4t/h", "--T", "870C", "--P", "29barg"]) == 0
    out = capsys.readouterr().out
    assert "feed/mol/h" in out and "amount/mol/h" in out and "T = 1143.15 K" in out


def test_sweep_feed_columns_with_units(tmp_path, reformer) -> None:
    m_h2o = (2 * 1.008 + 15.999) / 1000  # kg/mol, IUPAC atomic weights
    T = np.linspace(900.0, 1100.0, 5)
    plant = {"feed_CH4[kmol/h]": np.full(5, 100.0), "feed_H2O[t/h]": np.full(5, 5.4), "T_C": T - 273.15}
    si = {"feed_CH4": np.full(5, 100_000.0), "feed_H2O": np.full(5, 5_400.0 / m_h2o), "T_K": T}
    for name, cols in (("plant", plant), ("si", si)):
        pq.write_table(pa.table(cols), tmp_path / f"{name}.parquet")
        sweep(reformer, tmp_path / f"{name}.parquet", tmp_path / f"{name}_out.parquet", quiet=True)
    a, b = (pq.read_table(tmp_path / f"{n}_out.parquet") for n in ("plant", "si"))
    np.testing.assert_allclose(a.column("n_H2").to_numpy(), b.column("n_H2").to_numpy(), rtol=1e-12)
    assert a.schema.field("feed_CH4[kmol/h]").metadata == {b"unit": b"kmol/h"}  # the input's own unit
    # a flow basis: the amounts out are per hour, and their metadata say so
    assert a.schema.field("n_H2").metadata == {b"unit": b"mol/h"}
    assert b.schema.field("n_H2").metadata == {b"unit": b"mol"}
    pq.write_table(
        pa.table({"feed_CH4[kmol]": [1.0], "feed_H2O[t/h]": [1.0], "T_K": [900.0]}), tmp_path / "x.parquet"
    )
    with pytest.raises(SweepError, match="all amounts or all flows"):
        sweep(reformer, tmp_path / "x.parquet", tmp_path / "x_out.parquet", quiet=True)
    pq.write_table(
        pa.table({"feed_CH4[kmol]": [1.0], "feed_CH4": [1.0], "T_K": [900.0]}), tmp_path / "y.parquet"
    )
    with pytest.raises(SweepError, match="more than one feed column for CH4"):
        sweep(reformer, tmp_path / "y.parquet", tmp_path / "y_out.parquet", quiet=True)
