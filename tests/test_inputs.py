"""Input coercion of solve(): labelled inputs are aligned by label, shapes that
do not mean one value per case are refused, bad temperatures are invalid
cases, and tolerances outside what the solver can honour are refused."""

from __future__ import annotations

import math
import warnings

import eqbatch
import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from conftest import REFORMING_SPECIES

FEED = {"CH4": 1.0, "H2O": 3.0, "N2": 0.1}
LNK = {"reforming": 1.0, "shift": 0.5}
ORDERED_FEED = [1.0, 3.0, 0.0, 0.0, 0.0, 0.1]  # FEED in the order of REFORMING_SPECIES


def _isomerisation() -> eqbatch.ReactionSystem:
    """``A = B`` with ``ln K = a + b/T``: ``n_B = K / (1 + K)`` for a 1 mol feed of A."""
    return eqbatch.ReactionSystem(
        ["A", "B"], {"iso": "A = B"}, lnK={"iso": eqbatch.LnKFunction(a=-2.0, b=1500.0)}
    )


# ------------------------------------------------------------- labelled inputs


def test_reversed_series_feed_equals_the_mapping(reforming) -> None:
    series = pd.Series(ORDERED_FEED, index=REFORMING_SPECIES)[::-1]
    assert list(series.index) != list(reforming.species)
    by_label = reforming.solve(series, lnK=LNK, P=5.0)
    by_dict = reforming.solve(FEED, lnK=LNK, P=5.0)
    assert by_label.converged.all()
    np.testing.assert_array_equal(by_label.feed, by_dict.feed)
    np.testing.assert_array_equal(by_label.amounts, by_dict.amounts)
    # a species missing from the labels is zero feed, as in a mapping
    partial = reforming.solve(pd.Series({"N2": 0.1, "H2O": 3.0, "CH4": 1.0}), lnK=LNK, P=5.0)
    np.testing.assert_array_equal(partial.amounts, by_dict.amounts)


def test_dataframe_feed_is_aligned_by_column(reforming) -> None:
    h2o = np.array([2.0, 3.0, 4.0])
    frame = pd.DataFrame({"N2": 0.1, "H2O": h2o, "CH4": 1.0})
    by_label = reforming.solve(frame, lnK=LNK, P=5.0)
    ordered = np.zeros((3, 6))
    ordered[:, 0], ordered[:, 1], ordered[:, 5] = 1.0, h2o, 0.1
    np.testing.assert_array_equal(by_label.feed, ordered)
    np.testing.assert_array_equal(by_label.amounts, reforming.solve(ordered, lnK=LNK, P=5.0).amounts)


def test_structured_array_and_arrow_table_feeds(reforming) -> None:
    h2o = np.array([2.0, 3.0, 4.0])
    ordered = np.zeros((3, 6))
    ordered[:, 0], ordered[:, 1] = 1.0, h2o
    expected = reforming.solve(ordered, lnK=LNK, P=5.0).amounts
    structured = np.zeros(3, dtype=[("H2O", "f8"), ("CH4", "f4")])
    structured["H2O"], structured["CH4"] = h2o, 1.0
    np.testing.assert_array_equal(reforming.solve(structured, lnK=LNK, P=5.0).amounts, expected)
    table = pa.table({"H2O": h2o, "CH4": [1, 1, 1]})
    np.testing.assert_array_equal(reforming.solve(table, lnK=LNK, P=5.0).amounts, expected)
    # a null is a missing value: that case is invalid input, not the batch
    nulls = pa.table({"H2O": [2.0, None, 4.0], "CH4": [1.0, 1.0, 1.0]})
    res = reforming.solve(nulls, lnK=LNK, P=5.0)
    assert res.status.tolist() == [0, eqbatch.Status.INVALID_INPUT, 0]


def test_shuffled_dataframe_of_lnK_equals_the_ordered_array(reforming) -> None:
    lnk = np.column_stack([np.linspace(-3.0, 3.0, 5), np.linspace(2.0, -2.0, 5)])
    frame = pd.DataFrame({"shift": lnk[:, 1], "reforming": lnk[:, 0]})
    by_label = reforming.solve(ORDERED_FEED, lnK=frame, P=5.0)
    ordered = reforming.solve(ORDERED_FEED, lnK=lnk, P=5.0)
    assert by_label.converged.all()
    np.testing.assert_array_equal(by_label.lnK, ordered.lnK)
    np.testing.assert_array_equal(by_label.amounts, ordered.amounts)
    # one case as a Series, and K / log10K forms
    series = pd.Series({"shift": 0.5, "reforming": 1.0})
    expected = reforming.solve(ORDERED_FEED, lnK=[1.0, 0.5], P=5.0).amounts
    np.testing.assert_array_equal(reforming.solve(ORDERED_FEED, lnK=series, P=5.0).amounts, expected)
    np.testing.assert_allclose(
        reforming.solve(ORDERED_FEED, K=np.exp(series), P=5.0).amounts, expected, rtol=1e-12
    )
    np.testing.assert_allclose(
        reforming.solve(ORDERED_FEED, log10K=series / math.log(10), P=5.0).amounts, expected, rtol=1e-12
    )


def test_labelled_x0_is_aligned_by_reaction_label(reforming) -> None:
    solved = reforming.solve(ORDERED_FEED, lnK=[1.0, 0.5], P=2.0)
    extents = solved.extents[0]
    assert extents[0] != extents[1]
    # with no iteration allowed the result is the start itself, so it shows which start was used
    start = pd.Series(extents, index=reforming.labels)[::-1]
    res = reforming.solve(ORDERED_FEED, lnK=[1.0, 0.5], P=2.0, x0=start, max_iter=0)
    np.testing.assert_array_equal(res.extents[0], extents)
    assert res.status[0] == eqbatch.Status.CONVERGED
    as_dict = reforming.solve(ORDERED_FEED, lnK=[1.0, 0.5], P=2.0, x0=dict(start), max_iter=0)
    np.testing.assert_array_equal(as_dict.extents[0], extents)


def test_unknown_labels_raise_naming_them(reforming) -> None:
    bad_feed = pd.Series({"CH4": 1.0, "O2": 0.5, "Ar": 0.1})
    with pytest.raises(eqbatch.UnknownSpeciesError, match=r"'O2', 'Ar'.*species are CH4, H2O"):
        reforming.solve(bad_feed, lnK=LNK)
    with pytest.raises(eqbatch.UnknownSpeciesError, match="'T_K'"):
        reforming.solve(pd.DataFrame({"CH4": [1.0], "T_K": [900.0]}), lnK=LNK)
    with pytest.raises(eqbatch.CaseInputError, match=r"'methanation'.*labels are reforming, shift"):
        reforming.solve(FEED, lnK=pd.Series({"reforming": 1.0, "shift": 0.5, "methanation": 2.0}))
    # every reaction needs its constant; the missing one is named
    with pytest.raises(eqbatch.CaseInputError, match="no value for reaction.*shift"):
        reforming.solve(FEED, lnK=pd.DataFrame({"reforming": [1.0, 2.0]}))
    with pytest.raises(eqbatch.CaseInputError, match="x0.*no value for reaction.*reforming"):
        reforming.solve(FEED, lnK=LNK, x0=pd.Series({"shift": 0.1}))
    # a non-default integer index is not a position: refused, not read in order
    with pytest.raises(eqbatch.UnknownSpeciesError, match="5"):
        reforming.solve(pd.Series(ORDERED_FEED)[::-1], lnK=LNK)
    with pytest.raises(eqbatch.CaseInputError, match="twice"):
        reforming.solve(pd.Series([1.0, 3.0], index=["CH4", "CH4"]), lnK=LNK)
    with pytest.raises(eqbatch.CaseInputError, match="'CH4'.*not a number"):
        reforming.solve(pd.DataFrame({"CH4": ["one"], "H2O": [3.0]}), lnK=LNK)


def test_default_positions_are_read_in_order(reforming) -> None:
    # pandas objects without labels (a default 0..k-1 index) are read like arrays
    expected = reforming.solve(ORDERED_FEED, lnK=[1.0, 0.5], P=5.0).amounts
    res = reforming.solve(pd.Series(ORDERED_FEED), lnK=pd.Series([1.0, 0.5]), P=5.0)
    np.testing.assert_array_equal(res.amounts, expected)
    frame = pd.DataFrame(np.array([ORDERED_FEED, ORDERED_FEED]))
    np.testing.assert_array_equal(
        reforming.solve(frame, lnK=[1.0, 0.5], P=5.0).amounts, np.vstack([expected] * 2)
    )


# ------------------------------------------------------------- P and T shapes


@pytest.mark.parametrize("shape", [(2, 2), (3, 1), (1, 1)])
def test_pressure_must_be_one_value_per_case(reforming, shape) -> None:
    with pytest.raises(eqbatch.CaseInputError, match=rf"P must be a scalar or a 1-D array.*{shape}"):
        reforming.solve(ORDERED_FEED, lnK=LNK, P=np.ones(shape))
    # the accepted shapes
    assert len(reforming.solve(ORDERED_FEED, lnK=LNK, P=np.float64(2.0))) == 1
    assert len(reforming.solve(ORDERED_FEED, lnK=LNK, P=np.ones(1))) == 1
    assert len(reforming.solve(ORDERED_FEED, lnK=LNK, P=np.ones(3)[::-1])) == 3


def test_temperature_must_be_one_value_per_case() -> None:
    system = _isomerisation()
    with pytest.raises(eqbatch.CaseInputError, match=r"T must be a scalar or a 1-D array.*\(2, 2\)"):
        system.solve([1.0, 0.0], T=np.full((2, 2), 700.0))


# ------------------------------------------------------------- bad temperatures


@pytest.mark.parametrize("bad", [-5.0, 0.0, math.nan, math.inf])
def test_non_positive_or_non_finite_temperature_is_invalid_input(bad) -> None:
    system = _isomerisation()
    res = system.solve([1.0, 0.0], T=[700.0, bad, 900.0])
    assert res.status.tolist() == [0, eqbatch.Status.INVALID_INPUT, 0]
    assert np.isnan(res.amounts[1]).all() and np.isnan(res.extents[1]).all()
    # the other cases are solved normally (closed form n_B = K / (1 + K))
    K = np.exp(-2.0 + 1500.0 / np.array([700.0, 900.0]))
    np.testing.assert_allclose(res.amounts[[0, 2], 1], K / (1 + K), rtol=1e-10)
    with pytest.raises(eqbatch.InvalidCaseError, match=rf"case 1: the temperature {bad} K is not positive"):
        system.solve([1.0, 0.0], T=[700.0, bad, 900.0], invalid="raise")
    # also when the constants are given and T only labels the case
    given = system.solve([1.0, 0.0], T=bad, lnK=[0.0])
    assert given.status[0] == eqbatch.Status.INVALID_INPUT


def test_bad_temperature_gives_nan_constants() -> None:
    system = _isomerisation()
    T = np.array([-5.0, 0.0, 600.0])
    lnk = system.lnK(T)[:, 0]
    assert np.isnan(lnk[:2]).all() and lnk[2] == pytest.approx(-2.0 + 1500.0 / 600.0, rel=1e-15)
    slope = system.dlnK_dT(T)[:, 0]
    assert np.isnan(slope[:2]).all() and slope[2] == pytest.approx(-1500.0 / 600.0**2, rel=1e-15)
    constant = eqbatch.ReactionSystem(["A", "B"], ["A = B"], lnK={"r1": 1.0})
    assert np.isnan(constant.lnK([-5.0])).all()
    # a temperature that is not one is not "outside the fitted range" either
    fitted = eqbatch.LnKFunction(a=-2.0, b=1500.0, T_min=500.0, T_max=900.0)
    ranged = eqbatch.ReactionSystem(["A", "B"], ["A = B"], lnK={"r1": fitted})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert np.isnan(ranged.lnK([-5.0])).all() and np.isnan(ranged.dlnK_dT([-5.0])).all()


# ------------------------------------------------------------- tolerance


@pytest.mark.parametrize("tol", [1e300, 0.0, 0, -1e-10, math.nan, math.inf, 1e-2, 1e-17, "1e-8"])
def test_tolerance_outside_the_sane_range_is_refused(reforming, tol) -> None:
    with pytest.raises(eqbatch.CaseInputError, match="tol must be"):
        reforming.solve(ORDERED_FEED, lnK=LNK, tol=tol)


@pytest.mark.parametrize("tol", [1e-3, 1e-6, np.float64(1e-12), 1e-15])
def test_tolerance_within_the_range_is_accepted(tol) -> None:
    res = _isomerisation().solve([1.0, 0.0], lnK=[0.5], tol=tol)
    assert res.converged[0]
    # closed form n_B = K / (1 + K); the residual ln(n_B / n_A) - ln K is within tol
    assert abs(math.log(res.amounts[0, 1] / res.amounts[0, 0]) - 0.5) <= max(tol, 1e-15)


@pytest.mark.parametrize("max_iter", [99_999_999_999, -1, 2.5, True])
def test_max_iter_outside_what_the_core_counts_is_refused(max_iter) -> None:
    # The core counts iterations in 32 bits: a larger budget is refused by name,
    # not passed on as an overflow.
    system = eqbatch.ReactionSystem(["A", "B"], ["A = B"])
    with pytest.raises(eqbatch.CaseInputError, match="max_iter"):
        system.solve([1.0, 0.0], lnK=[0.0], max_iter=max_iter)
