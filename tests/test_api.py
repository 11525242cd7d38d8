"""The Python surface: broadcasting, K forms, tables, threads, errors."""

from __future__ import annotations

import eqbatch
import numpy as np
import pytest
from conftest import REFORMING_SPECIES

FEED = [1.0, 3.0, 0.0, 0.0, 0.0, 0.1]


def test_shapes_and_broadcasting(reforming) -> None:
    lnk = np.column_stack([np.linspace(-5, 5, 7), np.linspace(2, -2, 7)])
    res = reforming.solve(FEED, lnK=lnk, P=10.0)
    assert res.amounts.shape == (7, 6) and res.extents.shape == (7, 2)
    assert res.mole_fractions.shape == (7, 6)
    assert res.status.shape == res.iterations.shape == res.converged.shape == (7,)
    assert res.amounts.dtype == np.float64 and res.converged.dtype == bool
    # each row equals the same case solved alone
    for k in (0, 3, 6):
        one = reforming.solve(FEED, lnK=lnk[k], P=10.0)
        assert one.amounts.shape == (1, 6)
        np.testing.assert_array_equal(one.amounts[0], res.amounts[k])
    # pressure as the batch dimension
    byp = reforming.solve(FEED, lnK=[1.0, 0.5], P=[1.0, 5.0, 25.0])
    assert len(byp) == 3 and byp.P.tolist() == [1.0, 5.0, 25.0]
    assert byp.feed.shape == (3, 6)


def test_mole_fractions_are_within_each_phase() -> None:
    names = ["A_g", "A_l", "B_l", "N2"]
    system = eqbatch.ReactionSystem(names, ["A_g = A_l"], phases={"A_l": "liquid", "B_l": "liquid"})
    res = system.solve([1.0, 0.0, 1.0, 1.0], lnK=[1.0], P=2.0)
    y = res.mole_fractions[0]
    n = res.amounts[0]
    assert y[0] + y[3] == pytest.approx(1.0) and y[1] + y[2] == pytest.approx(1.0)
    assert y[1] == pytest.approx(n[1] / (n[1] + n[2]))


def test_feed_and_constants_as_mappings(reforming) -> None:
    a = reforming.solve({"CH4": 1.0, "H2O": 3.0, "N2": 0.1}, lnK={"reforming": 1.0, "shift": 0.5})
    b = reforming.solve(FEED, lnK=[1.0, 0.5])
    np.testing.assert_array_equal(a.amounts, b.amounts)
    batch = reforming.solve({"CH4": 1.0, "H2O": [2.0, 3.0, 4.0]}, lnK=[1.0, 0.5])
    assert len(batch) == 3
    with pytest.raises(eqbatch.UnknownSpeciesError, match="'O2'"):
        reforming.solve({"O2": 1.0}, lnK=[1.0, 0.5])
    with pytest.raises(eqbatch.CaseInputError, match="no value for reaction"):
        reforming.solve(FEED, lnK={"reforming": 1.0})


def test_K_log10K_and_lnK_agree(reforming) -> None:
    lnk = np.array([2.5, -0.7])
    a = reforming.solve(FEED, lnK=lnk).amounts
    b = reforming.solve(FEED, K=np.exp(lnk)).amounts
    c = reforming.solve(FEED, log10K=lnk / np.log(10)).amounts
    np.testing.assert_allclose(b, a, rtol=1e-12)
    np.testing.assert_allclose(c, a, rtol=1e-12)
    with pytest.raises(eqbatch.CaseInputError, match="only one of"):
        reforming.solve(FEED, lnK=lnk, K=np.exp(lnk))


def test_input_errors_say_what_is_valid(reforming) -> None:
    with pytest.raises(eqbatch.CaseInputError, match=r"shape \(N, 6\)"):
        reforming.solve([1.0, 2.0], lnK=[1.0, 0.5])
    with pytest.raises(eqbatch.CaseInputError, match=r"shape \(N, 2\)"):
        reforming.solve(FEED, lnK=[1.0, 0.5, 3.0])
    with pytest.raises(eqbatch.CaseInputError, match="give 1 or 3"):
        reforming.solve(np.tile(FEED, (3, 1)), lnK=np.zeros((2, 2)))
    with pytest.raises(eqbatch.CaseInputError, match="no equilibrium constants"):
        reforming.solve(FEED)
    with pytest.raises(eqbatch.CaseInputError, match="threads"):
        reforming.solve(FEED, lnK=[1.0, 0.5], threads=0)


def test_results_are_bit_identical_for_any_thread_count(reforming) -> None:
    rng = np.random.default_rng(3)
    n = 5000
    feed = np.column_stack([np.ones(n), rng.uniform(1.5, 5, n), np.zeros((n, 3)), rng.uniform(0, 1, n)])
    lnk = rng.uniform(-20, 20, (n, 2))
    P = rng.uniform(1, 40, n)
    runs = [reforming.solve(feed, lnK=lnk, P=P, threads=t) for t in (1, 2, None)]
    for other in runs[1:]:
        assert runs[0].amounts.tobytes() == other.amounts.tobytes()
        assert runs[0].extents.tobytes() == other.extents.tobytes()
        assert runs[0].iterations.tobytes() == other.iterations.tobytes()


def test_tables(reforming) -> None:
    res = reforming.solve(FEED, lnK=[[1.0, 0.5], [2.0, 0.1]], P=3.0)
    df = res.to_pandas()
    assert list(df.columns[:6]) == [f"feed_{s}" for s in REFORMING_SPECIES]
    for col in ("P_bar", "lnK_reforming", "n_H2", "y_H2", "extent_shift", "status", "iterations"):
        assert col in df.columns
    np.testing.assert_array_equal(df["n_H2"].to_numpy(), res.amounts[:, 3])
    table = res.to_arrow(inputs=False)
    assert table.num_rows == 2 and "feed_CH4" not in table.column_names
    np.testing.assert_array_equal(table.column("y_CO").to_numpy(), res.mole_fractions[:, 2])


def test_temperature_dependent_K_and_accessors() -> None:
    shift = eqbatch.LnKFunction(a=-4.33, b=4577.8)
    system = eqbatch.ReactionSystem(
        ["CO", "H2O", "CO2", "H2"], {"wgs": "CO + H2O = CO2 + H2"}, lnK={"wgs": shift}
    )
    T = np.array([600.0, 800.0])
    np.testing.assert_allclose(system.lnK(T)[:, 0], 4577.8 / T - 4.33)
    res = system.solve([1, 1, 0, 0], T=T)
    np.testing.assert_allclose(res.lnK[:, 0], 4577.8 / T - 4.33)
    # explicit ln K wins over K(T)
    override = system.solve([1, 1, 0, 0], T=T, lnK=[0.0])
    np.testing.assert_allclose(override.conversion("CO"), 0.5, rtol=1e-9)


def test_status_enum_and_messages(reforming) -> None:
    assert [s.value for s in eqbatch.Status] == [0, 1, 2, 3, 4, 5, 6, 7, 8]
    res = reforming.solve([[1, 3, 0, 0, 0, 0], [-1, 3, 0, 0, 0, 0]], lnK=[1.0, 0.5])
    assert res.summary() == "1 converged, 1 invalid input"
    assert "invalid input" in res.message(1)
    limited = reforming.solve(FEED, lnK=[30.0, -30.0], max_iter=1)
    assert limited.status[0] == eqbatch.Status.ITERATION_LIMIT
    assert np.all(np.isfinite(limited.amounts))  # the last iterate, not NaN


def test_chained_starts_on_a_sorted_grid() -> None:
    from eqbatch.demo import reformer_feed, reformer_system

    system = reformer_system()
    T = np.repeat(np.linspace(800, 1200, 100), 10)
    P = np.tile(np.linspace(1, 40, 10), 100)
    plain = system.solve(reformer_feed(3.0), T=T, P=P)
    chained = system.solve(reformer_feed(3.0), T=T, P=P, chain=True)
    one = system.solve(reformer_feed(3.0), T=T, P=P, chain=True, threads=1)
    np.testing.assert_allclose(chained.amounts, plain.amounts, rtol=1e-9, atol=1e-14)
    assert chained.iterations.mean() < 0.9 * plain.iterations.mean()
    assert chained.amounts.tobytes() == one.amounts.tobytes()  # still independent of threads


def test_the_vector_path_is_reported_as_one_of_the_compiled_variants() -> None:
    # The benchmark prints it beside its figures (AVX-512 and AVX2 machines differ).
    assert eqbatch._core.VECTOR_PATH in {"avx512", "avx2", "portable"}
