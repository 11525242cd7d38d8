"""Output arrays: a caller's (``out=``) or those of a freed result of the same
size, reused. The reuse must never show a stale value, nor take memory that a
live view or variable still uses."""

from __future__ import annotations

import gc

import eqbatch
import numpy as np
import pytest
from eqbatch import outputs
from eqbatch.demo import reformer_system

N = 300_000  # amounts 14.4 MB, extents 4.8 MB: above the 4 MiB threshold


def cases(seed: int, n: int = N) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Demo cases of our own: varied feeds, constants and pressures, with
    some invalid rows and some zero patterns (which take other code paths)."""
    rng = np.random.default_rng(seed)
    feed = np.zeros((n, 6))
    feed[:, 0] = 1.0
    feed[:, 1] = rng.uniform(1.5, 5.0, n)
    feed[:, 5] = rng.uniform(0.0, 1.0, n)
    feed[rng.random(n) < 0.01, 0] = -1.0  # invalid: negative feed
    feed[rng.random(n) < 0.01, 1] = 0.0  # no steam: reforming pinned
    lnK = np.column_stack([rng.uniform(-12, 12, n), rng.uniform(-3, 4, n)])
    P = rng.uniform(1.0, 40.0, n)
    return feed, lnK, P


def in_pieces(system, feed, lnK, P, piece=2_000, **options):
    """The same solve in batches too small for the cache (fresh numpy arrays)."""

    def cut(k, value):
        return value[k : k + piece] if isinstance(value, np.ndarray) else value

    parts = [
        system.solve(
            feed[k : k + piece],
            lnK=lnK[k : k + piece],
            P=P[k : k + piece],
            **{name: cut(k, value) for name, value in options.items()},
        )
        for k in range(0, len(feed), piece)
    ]
    return {
        name: np.concatenate([getattr(p, name) for p in parts])
        for name in ("amounts", "extents", "status", "iterations")
    }


def set_bytes(n: int) -> int:
    """Bytes of one output set of the reforming system (6 species, 2 reactions):
    amounts, extents, status (uint8), iterations (uint32), absent (uint64)."""
    return n * (6 * 8 + 2 * 8 + 1 + 4 + 8)


@pytest.mark.parametrize(
    "options",
    [{}, {"threads": 1}, {"max_iter": 2}, {"x0": "previous"}],
    ids=["default", "one thread", "iteration limit", "warm starts"],
)
def test_reused_output_memory_holds_only_the_new_results(reforming, options) -> None:
    eqbatch.release_memory()
    feed, lnK, P = cases(1)
    first = reforming.solve(feed, lnK=lnK, P=P)
    addresses = (first.amounts.ctypes.data, first.extents.ctypes.data)
    if options.get("x0") == "previous":
        options = {"x0": np.nan_to_num(first.extents) * 0.5}
    del first
    gc.collect()
    assert outputs.kept() == (1, set_bytes(N))

    feed, lnK, P = cases(2)
    second = reforming.solve(feed, lnK=lnK, P=P, **options)
    # The freed set was taken again.
    assert (second.amounts.ctypes.data, second.extents.ctypes.data) == addresses
    fresh = in_pieces(reforming, feed, lnK, P, **options)
    assert (fresh["status"] == eqbatch.Status.INVALID_INPUT).sum() > 1_000
    # Bit for bit, NaN rows included: nothing of the first result shows through.
    for name, values in fresh.items():
        assert np.array_equal(getattr(second, name), values, equal_nan=True), name
    assert second.amounts.flags.c_contiguous and second.amounts.flags.writeable


def test_out_writes_into_an_earlier_result(reforming) -> None:
    feed, lnK, P = cases(8, 5_000)
    first = reforming.solve(feed, lnK=lnK, P=P)
    _ = first.mole_fractions  # computed, and must be forgotten
    address = first.amounts.ctypes.data
    feed2, lnK2, P2 = cases(9, 5_000)
    second = reforming.solve(feed2, lnK=lnK2, P=P2, out=first)
    assert second.amounts.ctypes.data == address
    fresh = reforming.solve(feed2, lnK=lnK2, P=P2)
    for name in ("amounts", "extents", "status", "iterations"):
        assert np.array_equal(getattr(second, name), getattr(fresh, name), equal_nan=True), name
    np.testing.assert_array_equal(first.mole_fractions, fresh.mole_fractions)  # recomputed
    with pytest.raises(eqbatch.CaseInputError, match="out="):
        reforming.solve(feed2[:10], lnK=lnK2[:10], P=P2[:10], out=first)
    other = eqbatch.ReactionSystem(["A", "B"], ["A = B"])
    with pytest.raises(eqbatch.CaseInputError, match="out="):
        other.solve([1.0, 0.0], lnK=[0.0], out=first)


def test_a_live_view_keeps_its_memory(reforming) -> None:
    eqbatch.release_memory()
    feed, lnK, P = cases(3)
    result = reforming.solve(feed, lnK=lnK, P=P)
    view = result.amounts[10:, 2]
    kept = view.copy()
    del result
    gc.collect()
    # The view holds the amounts: the set is not kept for reuse.
    assert outputs.kept() == (0, 0)
    feed, lnK, P = cases(4)
    other = reforming.solve(feed, lnK=lnK, P=P)
    assert np.array_equal(view, kept, equal_nan=True)
    assert not np.shares_memory(other.amounts, view)


def test_release_memory_empties_the_store_and_the_switch_stops_reuse(reforming) -> None:
    feed, lnK, P = cases(5)
    result = reforming.solve(feed, lnK=lnK, P=P)
    del result
    gc.collect()
    held = outputs.kept()[1]
    assert held == set_bytes(N)
    assert eqbatch.release_memory() == held
    assert outputs.kept() == (0, 0)
    assert eqbatch.release_memory() == 0
    eqbatch.reuse_output_memory(False)
    try:
        result = reforming.solve(feed, lnK=lnK, P=P)
        del result
        gc.collect()
        assert outputs.kept() == (0, 0)
    finally:
        eqbatch.reuse_output_memory(True)


def test_only_large_outputs_are_kept(reforming) -> None:
    eqbatch.release_memory()
    feed, lnK, P = cases(6)
    small = reforming.solve(feed[:1_000], lnK=lnK[:1_000], P=P[:1_000])
    del small
    gc.collect()
    assert outputs.kept() == (0, 0)


def test_an_adiabatic_solve_reuses_freed_outputs_without_stale_values() -> None:
    # The adiabatic kernel writes into a freed output set too (a million cases
    # would otherwise map 70 MB of fresh pages a call); the values must be
    # those of the same solve in pieces too small to reuse anything, invalid
    # cases (NaN, zero absent masks) included.
    system = reformer_system()
    n = 70_000  # 70,000 x 8 columns x 8 bytes: above the 4 MiB threshold
    rng = np.random.default_rng(9)
    feed = np.zeros((n, len(system.species)))
    feed[:, system.species.index("CH4")] = 1.0
    feed[:, system.species.index("H2O")] = rng.uniform(1.5, 5.0, n)
    feed[rng.random(n) < 0.01, 0] = -1.0  # invalid
    T, P = rng.uniform(700.0, 1100.0, n), rng.uniform(1.0, 40.0, n)
    eqbatch.release_memory()
    first = system.solve(feed[::-1].copy(), T=T[::-1].copy(), P=P, adiabatic=True)
    first.absent[:] = 7  # poison what the next solve takes
    addresses = first.amounts.ctypes.data
    del first
    gc.collect()
    second = system.solve(feed, T=T, P=P, adiabatic=True)
    assert second.amounts.ctypes.data == addresses  # the freed set was taken
    assert (second.status == eqbatch.Status.INVALID_INPUT).sum() > 300
    assert not second.absent.any()
    pieces = [
        system.solve(feed[k : k + 5000], T=T[k : k + 5000], P=P[k : k + 5000], adiabatic=True)
        for k in range(0, n, 5000)
    ]
    for name in ("amounts", "extents", "status", "iterations", "T"):
        values = np.concatenate([getattr(p, name) for p in pieces])
        assert np.array_equal(getattr(second, name), values, equal_nan=True), name
