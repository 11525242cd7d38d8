"""Large output arrays reuse the memory of results already freed: the reuse
must never show a stale value, nor take memory a live view still uses."""

from __future__ import annotations

import gc

import eqbatch
import numpy as np
import pytest
from eqbatch import _core

N = 300_000  # amounts 14.4 MB, extents 4.8 MB: both above the 4 MiB threshold


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
    blocks, held = _core.cached_buffers()
    assert blocks == 2 and held >= N * 8 * 8

    feed, lnK, P = cases(2)
    second = reforming.solve(feed, lnK=lnK, P=P, **options)
    # The freed blocks were taken again (best fit: each by its own size).
    assert (second.amounts.ctypes.data, second.extents.ctypes.data) == addresses
    fresh = in_pieces(reforming, feed, lnK, P, **options)
    assert (fresh["status"] == eqbatch.Status.INVALID_INPUT).sum() > 1_000
    # Bit for bit, NaN rows included: nothing of the first result shows through.
    for name, values in fresh.items():
        assert np.array_equal(getattr(second, name), values, equal_nan=True), name
    assert second.amounts.flags.c_contiguous and second.amounts.flags.writeable


def test_a_much_larger_block_is_not_taken(reforming) -> None:
    eqbatch.release_memory()
    feed, lnK, P = cases(7)
    large = reforming.solve(feed, lnK=lnK, P=P)
    address = large.amounts.ctypes.data
    del large
    gc.collect()
    # Half the cases: the 14.4 MB block is twice what the 7.2 MB amounts need.
    half = reforming.solve(feed[: N // 2], lnK=lnK[: N // 2], P=P[: N // 2])
    assert half.amounts.ctypes.data != address
    # 80 % of the cases: within 1.5x, so the block is used.
    most = reforming.solve(feed[: 4 * N // 5], lnK=lnK[: 4 * N // 5], P=P[: 4 * N // 5])
    assert most.amounts.ctypes.data == address
    reference = in_pieces(reforming, feed[: 4 * N // 5], lnK[: 4 * N // 5], P[: 4 * N // 5])
    assert np.array_equal(most.amounts, reference["amounts"], equal_nan=True)


def test_a_live_view_keeps_its_memory(reforming) -> None:
    eqbatch.release_memory()
    feed, lnK, P = cases(3)
    result = reforming.solve(feed, lnK=lnK, P=P)
    view = result.amounts[10:, 2]
    kept = view.copy()
    del result
    gc.collect()
    # The view holds the amounts block; only the extents block was freed.
    assert _core.cached_buffers() == (1, N * 2 * 8)
    feed, lnK, P = cases(4)
    other = reforming.solve(feed, lnK=lnK, P=P)
    assert np.array_equal(view, kept, equal_nan=True)
    assert not np.shares_memory(other.amounts, view)
    del view
    gc.collect()
    assert _core.cached_buffers() == (1, N * 6 * 8)  # now the amounts block is back


def test_release_memory_empties_the_cache(reforming) -> None:
    feed, lnK, P = cases(5)
    result = reforming.solve(feed, lnK=lnK, P=P)
    del result
    gc.collect()
    held = _core.cached_buffers()[1]
    assert held > 0
    assert eqbatch.release_memory() == held
    assert _core.cached_buffers() == (0, 0)
    assert eqbatch.release_memory() == 0


def test_only_large_outputs_use_the_cache(reforming) -> None:
    feed, lnK, P = cases(6)
    result = reforming.solve(feed, lnK=lnK, P=P)
    assert type(result.amounts.base).__name__ == "OutputBlock"  # 14.4 MB
    assert result.status.flags.owndata  # 0.3 MB: numpy's own
    small = reforming.solve(feed[:1_000], lnK=lnK[:1_000], P=P[:1_000])
    assert small.amounts.flags.owndata
