"""Prepared solves (``system.prepare()``): the optimiser's repeated call.

The reference for every check is an independent computation: the closed form
of an isomerisation, or ``system.solve`` on the same inputs (the prepared
path must give the same bits, not merely close values).
"""

from __future__ import annotations

import numpy as np
import pytest
from eqbatch import CaseInputError, ReactionSystem, Status
from eqbatch.demo import reformer_feed, reformer_system


def _bits(a: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(a).view(np.uint64 if a.dtype == np.float64 else a.dtype)


def test_repeated_calls_follow_the_closed_form_of_an_isomerisation() -> None:
    # A = B at equilibrium: x_B = K / (1 + K) (closed form of K = x_B / x_A).
    system = ReactionSystem(["A", "B"], ["A = B"])
    run = system.prepare()
    seen = []
    for lnk in np.linspace(-5.0, 5.0, 21):
        res = run.solve([1.0, 0.0], lnK=[lnk])
        K = np.exp(lnk)
        assert res.amounts[0, 1] == pytest.approx(K / (1 + K), rel=1e-10)
        assert res.mole_fractions[0, 1] == pytest.approx(K / (1 + K), rel=1e-10)
        seen.append(res)
    assert all(r is seen[0] for r in seen)  # one result object, overwritten


@pytest.mark.parametrize("cases", [1, 3, 37])
def test_same_bits_as_solve(cases: int) -> None:
    system = reformer_system()
    rng = np.random.default_rng(5)
    T = rng.uniform(800.0, 1150.0, cases)
    P = rng.uniform(1.0, 30.0, cases)
    feed = reformer_feed(rng.uniform(1.5, 4.5, cases))
    lnk = system.lnK(T)
    run = system.prepare(cases, sensitivities=True)
    for k in range(2):  # the second call overwrites the first's arrays
        ours = run.solve(feed, lnK=lnk + k, P=P)
        ref = system.solve(feed, lnK=lnk + k, P=P, sensitivities=True)
        for name in ("amounts", "extents", "status", "iterations"):
            np.testing.assert_array_equal(_bits(getattr(ours, name)), _bits(getattr(ref, name)), err_msg=name)
        np.testing.assert_array_equal(ours.sensitivity("lnK"), ref.sensitivity("lnK"))
        np.testing.assert_array_equal(ours.sensitivity("P"), ref.sensitivity("P"))
        np.testing.assert_array_equal(ours.mole_fractions, ref.mole_fractions)
        assert (ours.status == 0).all()


@pytest.mark.parametrize("cases", [1, 2, 9, 37])
def test_the_fast_path_writes_every_output_where_solve_does(cases: int) -> None:
    # float64 arrays and a float P take the core's two-buffer call (statuses,
    # iterations and absent masks packed in one word buffer; derivatives in a
    # third): every output must equal solve()'s, an invalid case's status and
    # NaNs included.
    system = reformer_system()
    rng = np.random.default_rng(cases)
    feed = reformer_feed(rng.uniform(1.5, 4.5, cases))
    feed[cases // 2, 0] = -1.0  # invalid: status INVALID_INPUT, NaN outputs
    lnk = system.lnK(rng.uniform(800.0, 1150.0, cases))
    run = system.prepare(cases, sensitivities=True)
    for P in (3.0, 25.0):  # the second call overwrites the first's buffers
        ours = run.solve(feed, lnK=lnk, P=P)
        ref = system.solve(feed, lnK=lnk, P=P, sensitivities=True)
        for name in ("amounts", "extents", "status", "iterations", "absent"):
            np.testing.assert_array_equal(_bits(getattr(ours, name)), _bits(getattr(ref, name)), err_msg=name)
        # the derivatives (written into one prepared buffer) too, NaN rows included
        for by in ("lnK", "P", "feed"):
            np.testing.assert_array_equal(_bits(ours.sensitivity(by)), _bits(ref.sensitivity(by)), err_msg=by)
        assert ours.status[cases // 2] == Status.INVALID_INPUT
        others = np.arange(cases) != cases // 2
        assert (ours.status[others] == 0).all() and (ours.iterations[others] > 0).all()
        assert ours.P.tolist() == [P] * cases
    # one feed row (1-D) for every case, derivatives included
    one_row = run.solve(feed[0], lnK=lnk, P=7.0)
    ref = system.solve(np.tile(feed[0], (cases, 1)), lnK=lnk, P=7.0, sensitivities=True)
    np.testing.assert_array_equal(_bits(one_row.amounts), _bits(ref.amounts))
    np.testing.assert_array_equal(_bits(one_row.sensitivity("feed")), _bits(ref.sensitivity("feed")))


def test_temperature_input_and_one_row_broadcast() -> None:
    system = reformer_system()
    feed = reformer_feed(3.0)[0]
    run = system.prepare(4)
    T = np.array([850.0, 900.0, 950.0, 1000.0])
    ours = run.solve(feed, T=T, P=20.0)
    ref = system.solve(feed, T=T, P=20.0)
    np.testing.assert_array_equal(ours.amounts, ref.amounts)
    np.testing.assert_array_equal(ours.lnK, ref.lnK)
    # A temperature that is not positive marks its case invalid, as in solve().
    bad = run.solve(feed, T=np.array([900.0, -1.0, 950.0, 1000.0]), P=20.0)
    assert bad.status.tolist() == [0, Status.INVALID_INPUT, 0, 0]
    assert np.isnan(bad.amounts[1]).all()


def test_wrong_shapes_and_options_are_refused() -> None:
    system = ReactionSystem(["A", "B"], ["A = B"])
    run = system.prepare(2)
    with pytest.raises(CaseInputError, match="3 cases"):
        run.solve(np.ones((3, 2)), lnK=[0.0])
    with pytest.raises(CaseInputError, match="feed must have shape"):
        run.solve([1.0, 0.0, 0.0], lnK=[0.0])
    with pytest.raises(CaseInputError, match="tol"):
        system.prepare(tol=1.0)
    with pytest.raises(CaseInputError, match="cases"):
        system.prepare(0)


def test_float64_arrays_go_straight_to_the_core(monkeypatch: pytest.MonkeyPatch) -> None:
    # The optimiser's call (float64 arrays, a float P) must not pass through
    # the general input conversion; anything else still may.
    from eqbatch import prepared

    system = ReactionSystem(["A", "B"], ["A = B"])
    run = system.prepare()

    def refuse(*args: object) -> None:
        raise AssertionError("general conversion used")

    monkeypatch.setattr(prepared, "feed_array", refuse)
    res = run.solve(np.array([1.0, 0.0]), lnK=np.array([np.log(3.0)]), P=2.0)
    assert res.amounts[0].tolist() == pytest.approx([0.25, 0.75], rel=1e-9)  # K = x_B / x_A = 3; tol 1e-10
    assert res.feed.tolist() == [[1.0, 0.0]] and res.P.tolist() == [2.0]
    with pytest.raises(AssertionError, match="general conversion"):
        run.solve([1.0, 0.0], lnK=np.array([0.0]))  # a list takes the general path
