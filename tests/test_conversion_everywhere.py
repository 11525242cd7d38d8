"""Conversion of every fed species that reacts, whichever side a reaction
writes it on (issue 12, item 1): generated reactions (``reactions = "auto"``)
write methane as a product of methanation."""

from __future__ import annotations

import re
from pathlib import Path

import eqbatch
import numpy as np
import pytest
from eqbatch.cli import main
from eqbatch.uncertainty import monte_carlo

REFORMER = Path(eqbatch.__file__).parent / "data" / "reformer.toml"


@pytest.fixture
def auto_file(tmp_path) -> Path:
    """The demo's species data with generated reactions."""
    text = REFORMER.read_text()
    head, _, data = text.partition("[species_data.CH4]")
    species = re.search(r"^species = .*$", head, re.M).group(0)
    path = tmp_path / "auto.toml"
    path.write_text(f'{species}\nreactions = "auto"\n\n[species_data.CH4]{data}')
    return path


def _table(out: str, header: str) -> dict[str, list[str]]:
    lines = out.splitlines()
    start = next(k for k, line in enumerate(lines) if line.startswith(header))
    rows = {}
    for line in lines[start + 2 :]:
        if not line.strip() or line.startswith("("):
            break
        cells = line.split()
        rows[cells[0]] = cells[1:]
    return rows


def test_auto_system_writes_methane_as_a_product(auto_file) -> None:
    system = eqbatch.ReactionSystem.from_toml(auto_file)
    assert "CH4" not in system.reactants()  # the reason conversion went missing
    assert system.equations[0] == "CO + 3 H2 = CH4 + H2O"


def test_solve_screen_shows_conversion_of_every_fed_reacting_species(auto_file, capsys) -> None:
    code = main(["solve", str(auto_file), "--feed", "CH4=1,H2O=3,H2=0.5,N2=0.02", "--T", "1000", "--P", "20"])
    out = capsys.readouterr().out
    assert code == 0
    species = _table(out, "species")
    conversion = _table(out, "fed species")
    assert set(conversion) == {"CH4", "H2O", "H2"}  # N2 is fed but inert
    for name, (value, unit) in conversion.items():
        feed, amount = float(species[name][1]), float(species[name][2])
        assert unit == "%"
        assert float(value) == pytest.approx(100 * (feed - amount) / feed, rel=2e-4, abs=1e-3)
    # reforming makes hydrogen: its conversion is negative (net production)
    assert float(conversion["H2"][0]) < 0 and float(conversion["CH4"][0]) > 0
    assert "negative" in out


def test_uncertainty_ranks_a_species_that_a_generated_reaction_makes(auto_file, tmp_path, capsys) -> None:
    system = eqbatch.ReactionSystem.from_toml(auto_file)
    mc = monte_carlo(
        system, feed={"CH4": 1.0, "H2O": 3.0}, T=1000.0, P=20.0, dG_sigma={"CO_H2": 3.0}, samples=400, seed=2
    )
    np.testing.assert_array_equal(mc.values("conversion", "CH4"), 1.0 - mc.amounts[:, 0] / 1.0)
    rows = {label: (first, sampled) for label, first, sampled in mc.ranking("conversion", "CH4").itertuples()}
    # only the methanation reaction CO_H2 (generated: CO + 3 H2 = CH4 + H2O) is uncertain,
    # so it carries all of the variance to first order
    assert rows["CO_H2"][0] == pytest.approx(1.0, abs=1e-12) and rows["CO_H2O"][0] == 0.0
    assert rows["CO_H2O"][1] == pytest.approx(0.0, abs=1e-12)
    assert rows["CO_H2"][1] > 0.9
    with pytest.raises(eqbatch.CaseInputError, match="'N2' is not among the conversion outputs"):
        mc.ranking("conversion", "N2")
    code = main(
        [
            "uncertainty",
            str(auto_file),
            "--feed",
            "CH4=1,H2O=3",
            "--T",
            "1000",
            "--P",
            "20",
            "--dG-sigma",
            "CO_H2=3",
            "--samples",
            "400",
            "--output",
            "conversion_CH4",
            "--limit",
            "conversion_CH4>=0.3",
            "--plots",
            str(tmp_path),
        ]
    )
    out = capsys.readouterr().out
    assert code == 0
    assert "Which reaction matters for conversion_CH4" in out and "P(conversion_CH4 >= 0.3)" in out
    assert "CH4" in _table(out[out.index("Conversion of fed species") :], "output")


def test_sweep_writes_the_conversion_of_methane_under_generated_reactions(auto_file, tmp_path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    cases = tmp_path / "cases.parquet"
    pq.write_table(
        pa.table(
            {"feed_CH4": [1.0, 1.0], "feed_H2O": [3.0, 2.5], "T_K": [1000.0, 1100.0], "P_bar": [20.0, 20.0]}
        ),
        cases,
    )
    out = tmp_path / "out.parquet"
    system = eqbatch.ReactionSystem.from_toml(auto_file)
    eqbatch.sweep(system, cases, out, quiet=True)
    table = pq.read_table(out)
    assert "conversion_CH4" in table.column_names
    # The same conversion the result object computes for these cases.
    res = system.solve({"CH4": [1.0, 1.0], "H2O": [3.0, 2.5]}, T=[1000.0, 1100.0], P=20.0)
    np.testing.assert_allclose(table.column("conversion_CH4").to_numpy(), res.conversion("CH4"), rtol=1e-12)
