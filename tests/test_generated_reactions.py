"""Generated reaction sets (``reactions="auto"``) written in the direction they
run from the process feed and labelled from their species.

Check values: the signs of the extents an equilibrium solve finds over a sweep
of a reformer's operating window (700-1200 K, 1-40 bar, steam-to-carbon 1-5:
common practice for steam reformers), and the reactions a chemist writes for
steam reforming and the water-gas shift (facts of the trade)."""

from __future__ import annotations

import numpy as np
import pytest
from eqbatch import ReactionSystem, SystemDefinitionError
from eqbatch.demo import reformer_system
from eqbatch.errors import UnknownSpeciesError


@pytest.fixture(scope="module")
def data():
    given = reformer_system().species_data  # (the demo's NIST WebBook Shomate data)
    return {name: given[name] for name in ("CH4", "H2O", "CO", "H2", "CO2")}


def test_a_reformer_set_runs_forward_from_its_feed_over_the_operating_window(data) -> None:
    species = ["CH4", "H2O", "CO", "H2", "CO2"]
    system = ReactionSystem(species, "auto", feed_species=["CH4", "H2O"], species_data=data)
    # steam reforming and the water-gas shift, as the trade writes them
    assert [str(e) for e in system.equations] == ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"]
    assert system.labels == ("CH4_H2O", "CO_H2O")
    rng = np.random.default_rng(3)
    n = 2000
    feed = np.zeros((n, 5))
    feed[:, 0], feed[:, 1] = 1.0, rng.uniform(1.0, 5.0, n)
    res = system.solve(feed, T=rng.uniform(700.0, 1200.0, n), P=rng.uniform(1.0, 40.0, n))
    assert res.converged.all()
    assert np.all(res.extents > 0.0)  # both run forward in every case
    # without the feed, the set is the formation of methane from the components
    plain = ReactionSystem(species, "auto", species_data=data)
    assert str(plain.equations[0]) == "CO + 3 H2 = CH4 + H2O" and plain.labels[0] == "CO_H2"
    assert np.all(plain.solve(feed, T=900.0, P=10.0).extents[:, 0] < 0.0)


def test_a_system_file_orients_generated_reactions(tmp_path, data) -> None:
    path = tmp_path / "reformer.toml"
    path.write_text(
        'species = ["CH4", "H2O", "CO", "H2", "CO2"]\nreactions = "auto"\nfeed_species = ["CH4", "H2O"]\n'
        '[thermo]\nsource = "chemicals"\n'
    )
    system = ReactionSystem.from_toml(path)
    assert system.labels == ("CH4_H2O", "CO_H2O")
    assert str(system.equations[0]) == "CH4 + H2O = CO + 3 H2"


def test_feed_species_is_checked() -> None:
    with pytest.raises(SystemDefinitionError, match="reactions='auto' only"):
        ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"], feed_species=["CO"])
    with pytest.raises(UnknownSpeciesError, match="CH3OH"):
        ReactionSystem(["CO", "H2O", "CO2", "H2"], "auto", feed_species=["CH3OH"])
