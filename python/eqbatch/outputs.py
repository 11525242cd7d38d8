"""Where a solve's output arrays come from: new, the caller's (``out=``), or
those of an earlier result that nothing uses any more.

A batch of a million cases returns about 70 MB of outputs. Arrays that large
come straight from the operating system and go straight back when the result
is freed, so every solve pays to have fresh pages mapped and zeroed; on
virtual machines that hand freed memory back to their host this costs more
than the solve that fills them (about 3 ms per MiB measured on this project's
machine against 0.03 ms for memory the process already holds; see
``bench/RESULTS.md``). A loop of large solves (a Monte Carlo study, an
optimiser's sweep) can avoid it in two ways:

* ``system.solve(..., out=previous)`` writes into the arrays of an earlier
  result of the same system and size (the numpy way);
* by default, the output arrays of a result that is freed while no view of
  them lives are kept (at most :data:`RETAIN` bytes, for :data:`KEEP_FOR`
  seconds) and given to the next solve of the same size.
  :func:`reuse_output_memory` is the switch; :func:`release_memory` empties
  the store.

Reused arrays hold the values of the result they served; the core writes
every output value of every case (its contract, tested with poisoned
outputs), so no stale value reaches a caller.
"""

from __future__ import annotations

import sys
import threading
import time

import numpy as np

#: Output sets smaller than this are always new (the allocator's heap keeps
#: small blocks, so they cost nothing to map).
REUSE_FROM = 4 << 20
#: The most memory kept for reuse.
RETAIN = 1 << 30
#: Arrays unused for this long (seconds) are let go at the next solve.
KEEP_FOR = 30.0

#: The output arrays of a batch: amounts (N, S), extents (N, R), status,
#: iterations and the mask of absent phases (N,).
Outputs = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]

_lock = threading.Lock()
_enabled = True
#: (time freed, key, arrays) of output sets nobody uses, oldest first.
_free: list[tuple[float, tuple[int, int, int], Outputs]] = []


def reuse_output_memory(enabled: bool = True) -> None:
    """Switch the reuse of freed output memory on (the default) or off.

    Off, every solve takes new arrays from the system (and gives them back
    when its result goes), and any memory kept so far is released.

    Parameters
    ----------
    enabled : bool, default True

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.reuse_output_memory(False)
    >>> eqbatch.reuse_output_memory(True)
    """
    global _enabled
    _enabled = bool(enabled)
    if not _enabled:
        release_memory()


def release_memory() -> int:
    """Let go of every output array kept for reuse.

    Returns
    -------
    int
        The bytes let go.

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.release_memory() >= 0
    True
    """
    with _lock:
        gone = list(_free)
        _free.clear()
    return sum(sum(a.nbytes for a in arrays) for _, _, arrays in gone)


def kept() -> tuple[int, int]:
    """``(output sets, bytes)`` kept for reuse now."""
    with _lock:
        return len(_free), sum(sum(a.nbytes for a in arrays) for _, _, arrays in _free)


def _key(n: int, s: int, r: int) -> tuple[int, int, int]:
    return (n, s, r)


def take(n: int, s: int, r: int) -> Outputs | None:
    """A kept output set for ``n`` cases of ``s`` species and ``r``
    reactions, or None (too small to keep, none kept, or reuse off)."""
    if not _enabled or n * (s + r) * 8 < REUSE_FROM:
        _expire()
        return None
    key = _key(n, s, r)
    with _lock:
        found = next((k for k, item in enumerate(_free) if item[1] == key), None)
        arrays = None if found is None else _free.pop(found)[2]
    _expire()
    return arrays


def give_back(arrays: Outputs) -> None:
    """Keep the output set of a result being freed, if nothing else refers
    to any of its arrays (no view, no variable: their reference counts are
    the result's own)."""
    if not _enabled:
        return
    n, s = arrays[0].shape  # (no local names for the arrays: they would count)
    r = arrays[1].shape[1]
    if n * (s + r) * 8 < REUSE_FROM:
        return
    # References to each array: the result being deleted (its attribute),
    # the tuple, the loop variable and getrefcount's argument; any more is a
    # user's view or variable (tests check both ways).
    for array in arrays:
        if sys.getrefcount(array) > 4 or array.base is not None:
            return
    with _lock:
        _free.append((time.monotonic(), _key(n, s, r), arrays))
    _expire()


def _expire() -> None:
    """Let go of sets unused for :data:`KEEP_FOR`, then the oldest beyond
    :data:`RETAIN` bytes."""
    if not _free:  # nothing kept (every small solve passes here: no lock, no clock)
        return
    now = time.monotonic()
    with _lock:
        _free[:] = [item for item in _free if now - item[0] <= KEEP_FOR]
        held = sum(sum(a.nbytes for a in arrays) for _, _, arrays in _free)
        while _free and held > RETAIN:
            _, _, arrays = _free.pop(0)
            held -= sum(a.nbytes for a in arrays)
