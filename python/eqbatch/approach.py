"""Approach to equilibrium: each reaction held a temperature difference short
of equilibrium, in the direction it runs in each case.

Design practice quotes how far a reactor outlet is from equilibrium as an
approach temperature: the outlet of a reformer "15 K from equilibrium" has
the composition whose reforming quotient equals K at 15 K below the outlet
temperature. Here each reaction given an approach ``dT`` gets the constant
of the temperature ``dT`` away from ``T`` on the side that holds it short of
equilibrium in the direction it runs at equilibrium in that case (see
:func:`eqbatch.thermo.approach_temperatures`).

A reaction whose feed is already within its approach of equilibrium cannot
reach that constant without running backwards, against the direction any
reaction runs (towards equilibrium); it is held at zero extent instead (the
feed's value of it stays as it is). Such cases are solved again without the
held reactions until no approached reaction runs against its direction.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np

from eqbatch import _core
from eqbatch.thermo import approach_temperatures

if TYPE_CHECKING:
    from eqbatch.system import ReactionSystem


class ApproachSolve:
    """The arrays of a batch solved with approach temperatures: the core's
    outputs, the constants used, each reaction's temperature (``T_eff``) and
    which reactions were held at zero extent (``held``, (N, R) bool)."""

    def __init__(self, outputs, lnK, T_eff, held) -> None:
        self.amounts, self.extents, self.status, self.iterations, self.absent = outputs
        self.lnK = lnK
        self.T_eff = T_eff
        self.held = held


def solve(
    system: ReactionSystem,
    approach: Mapping[str, float],
    feed: np.ndarray,
    lnK_eq: np.ndarray,
    T: np.ndarray,
    P: np.ndarray,
    n: int,
    options: tuple,
    bad_T: np.ndarray | None,
    out: tuple | None = None,
) -> ApproachSolve:
    """Solve ``n`` cases with ``approach`` (``{label: dT}``, checked).
    ``lnK_eq`` are the equilibrium constants at ``T``; ``options`` the core's
    ``(tol, max_iter, threads, start, chain)``; ``out`` output arrays for the
    final solve."""
    tol, max_iter, threads, start, chain = options
    core = system._core
    eq_extents = core.solve(feed, lnK_eq, P, n, tol, max_iter, threads, start, chain)[1]
    direction = np.sign(np.nan_to_num(eq_extents))
    T_eff = approach_temperatures(system, T, approach, direction)
    lnK = system.lnK_at(T_eff)
    if bad_T is not None:
        lnK[np.broadcast_to(bad_T, (lnK.shape[0],))] = np.nan
    warm = np.where(np.isfinite(eq_extents), eq_extents, 0.0)
    outputs = list(core.solve(feed, lnK, P, n, tol, max_iter, threads, warm, chain, out))
    held = np.zeros((n, system.n_reactions), dtype=bool)
    approached = np.zeros(system.n_reactions, dtype=bool)
    for label in approach:
        approached[system.labels.index(label)] = True
    for _ in range(system.n_reactions):
        extents = outputs[1]
        against = approached & (direction != 0) & (np.sign(extents) != direction) & ~held
        against &= np.isfinite(extents)
        cases = np.flatnonzero(against.any(axis=1))
        if cases.size == 0:
            break
        held[cases] |= against[cases]
        _solve_held(system, cases, held, feed, lnK, P, tol, max_iter, outputs)
    return ApproachSolve(tuple(outputs), lnK, T_eff, held)


def _rows(array: np.ndarray, cases: np.ndarray) -> np.ndarray:
    return array[cases] if array.shape[0] > 1 else np.repeat(array, cases.size, axis=0)


def _solve_held(system, cases, held, feed, lnK, P, tol, max_iter, outputs) -> None:
    """Solve ``cases`` again with their held reactions removed (grouped by
    which reactions are held), writing into ``outputs`` in place."""
    amounts, extents, status, iterations, absent = outputs
    codes = [0 if p == "gas" else 1 for p in system.phases]
    patterns, groups = np.unique(held[cases], axis=0, return_inverse=True)
    for g, pattern in enumerate(patterns):
        rows = cases[groups.reshape(-1) == g]
        keep = ~pattern
        extents[np.ix_(rows, np.flatnonzero(pattern))] = 0.0
        if not keep.any():
            amounts[rows] = _rows(feed, rows)
            status[rows] = 0
            continue
        reduced = _core.System(np.ascontiguousarray(system.stoich[keep]), codes, system.P0)
        a, e, st, it, ab = reduced.solve(
            np.ascontiguousarray(_rows(feed, rows)),
            np.ascontiguousarray(_rows(lnK, rows)[:, keep]),
            np.ascontiguousarray(_rows(P, rows)),
            rows.size,
            tol,
            max_iter,
        )
        amounts[rows] = a
        extents[np.ix_(rows, np.flatnonzero(keep))] = e
        status[rows] = st
        iterations[rows] = iterations[rows] + it
        absent[rows] = ab


def held_sensitivities(system, result, held: np.ndarray, threads) -> None:
    """Replace the derivatives of cases with held reactions by those of the
    system without them (a held reaction stays held under small changes, so
    its ln K has no effect)."""
    d_lnk, d_lnp, d_feed = result._sens
    codes = [0 if p == "gas" else 1 for p in system.phases]
    cases = np.flatnonzero(held.any(axis=1))
    patterns, groups = np.unique(held[cases], axis=0, return_inverse=True)
    for g, pattern in enumerate(patterns):
        rows = cases[groups.reshape(-1) == g]
        keep = ~pattern
        d_lnk[rows] = 0.0
        if not keep.any():
            d_lnp[rows] = 0.0
            d_feed[rows] = np.eye(system.n_species)
            continue
        reduced = _core.System(np.ascontiguousarray(system.stoich[keep]), codes, system.P0)
        dk, dp, df = reduced.sensitivities(
            np.ascontiguousarray(result.feed[rows]),
            np.ascontiguousarray(result.P[rows]),
            np.ascontiguousarray(result.amounts[rows]),
            np.ascontiguousarray(result.status[rows]),
            np.ascontiguousarray(result.absent[rows]),
            threads,
        )
        d_lnk[np.ix_(rows, np.arange(system.n_species), np.flatnonzero(keep))] = dk
        d_lnp[rows] = dp
        d_feed[rows] = df
