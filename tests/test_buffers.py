"""Large output arrays reuse the memory of results already freed: the reuse
must never show a stale value, nor take memory a live view still uses."""

from __future__ import annotations

import gc

import eqbatch
import numpy as np
from eqbatch import _core

N = 120_000  # amounts: 120,000 x 6 x 8 bytes = 5.8 MB, above the 4 MiB threshold


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


def in_pieces(system, feed, lnK, P, piece=1_000):
    """The same solve in batches too small for the cache (fresh numpy arrays)."""
    parts = [
        system.solve(feed[k : k + piece], lnK=lnK[k : k + piece], P=P[k : k + piece])
        for k in range(0, len(feed), piece)
    ]
    return np.concatenate([p.amounts for p in parts]), np.concatenate([p.status for p in parts])


def test_reused_output_memory_holds_only_the_new_results(reforming) -> None:
    eqbatch.release_memory()
    feed, lnK, P = cases(1)
    first = reforming.solve(feed, lnK=lnK, P=P)
    address = first.amounts.ctypes.data
    del first
    gc.collect()
    blocks, held = _core.cached_buffers()
    assert blocks >= 1 and held >= N * 6 * 8

    feed, lnK, P = cases(2)
    second = reforming.solve(feed, lnK=lnK, P=P)
    assert second.amounts.ctypes.data == address  # the freed block was taken again
    amounts, status = in_pieces(reforming, feed, lnK, P)
    assert np.array_equal(second.status, status)
    assert (status == eqbatch.Status.INVALID_INPUT).sum() > 100
    # Bit for bit, NaN rows included: nothing of the first result shows through.
    assert np.array_equal(second.amounts, amounts, equal_nan=True)
    assert second.amounts.flags.c_contiguous and second.amounts.flags.writeable


def test_a_live_view_keeps_its_memory(reforming) -> None:
    eqbatch.release_memory()
    feed, lnK, P = cases(3)
    result = reforming.solve(feed, lnK=lnK, P=P)
    view = result.amounts[10:, 2]
    kept = view.copy()
    del result
    gc.collect()
    assert _core.cached_buffers() == (0, 0)  # the view still owns the block
    feed, lnK, P = cases(4)
    other = reforming.solve(feed, lnK=lnK, P=P)
    assert not np.shares_memory(other.amounts, view)
    assert np.array_equal(view, kept, equal_nan=True)
    del view
    gc.collect()
    assert _core.cached_buffers()[0] >= 1


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
    assert type(result.amounts.base).__name__ == "OutputBlock"  # 5.8 MB
    assert result.extents.flags.owndata  # 1.9 MB: numpy's own
    small = reforming.solve(feed[:1_000], lnK=lnK[:1_000], P=P[:1_000])
    assert small.amounts.flags.owndata
