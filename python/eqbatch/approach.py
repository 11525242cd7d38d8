"""Approach to equilibrium: each reaction held a temperature difference short
of equilibrium, in the direction it runs in each case.

Design practice quotes how far a reactor outlet is from equilibrium as an
approach temperature: the outlet of a reformer "15 K from equilibrium" has
the composition whose reforming quotient equals K at 15 K below the outlet
temperature. Here each reaction given an approach ``dT`` gets the constant
of the temperature ``dT`` away from ``T`` on the side that holds it short of
equilibrium in the direction it runs at equilibrium in that case (see
:func:`approach_temperatures`).

A reaction whose feed is already within its approach of equilibrium cannot
reach that constant without running backwards, against the direction any
reaction runs (towards equilibrium); it is held at zero extent instead (the
feed's value of it stays as it is). Such cases are solved again without the
held reactions until no approached reaction runs against its direction.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, NamedTuple

import numpy as np

from eqbatch import _core
from eqbatch.equations import cone_directions
from eqbatch.errors import CaseInputError
from eqbatch.kdata import quiet_ranges
from eqbatch.outputs import Outputs
from eqbatch.realgas import ln_coefficients, solve_real
from eqbatch.result import EquilibriumResult
from eqbatch.spec import SystemSpec, compile_system

#: Feeds below this are zero to the core (their reciprocal would overflow):
#: ``TINY_FEED`` of ``eqbatch_core::batch``.
TINY_FEED = 1e-300


class CoreOptions(NamedTuple):
    """The options of a core solve: ``tol``, ``max_iter``, ``threads``, the
    starting extents and ``chain``."""

    tol: float
    max_iter: int
    threads: int | None
    start: np.ndarray | None
    chain: bool


class ApproachSolve:
    """The arrays of a batch solved with approach temperatures: the core's
    outputs, the constants used, each reaction's temperature (``T_eff``) and
    which reactions were held at zero extent (``held``, (N, R) bool), and
    with non-ideal phases the coefficients of the answer (``ln_phi``)."""

    def __init__(
        self,
        outputs: Outputs,
        lnK: np.ndarray,
        T_eff: np.ndarray,
        held: np.ndarray,
        ln_phi: np.ndarray | None = None,
    ) -> None:
        self.amounts, self.extents, self.status, self.iterations, self.absent = outputs
        self.lnK = lnK
        self.T_eff = T_eff
        self.held = held
        #: (N, S) ln phi / ln gamma of a system with non-ideal phases, else None.
        self.ln_phi = ln_phi


def check_approach(system: SystemSpec, approach: Mapping[str, Any]) -> dict[str, Any]:
    """``approach`` checked: known labels with K(T) data, each ``dT`` (one
    value, or an (N,) array of one per case) finite and not negative.

    Parameters
    ----------
    system : SystemSpec or ReactionSystem
    approach : mapping label -> kelvin

    Returns
    -------
    dict of str to float or ndarray

    Raises
    ------
    CaseInputError
        An unknown label, a reaction without K(T) data, or a ``dT`` that is
        not a finite, non-negative number.

    Examples
    --------
    >>> from eqbatch.demo import reformer_system
    >>> check_approach(reformer_system(), {"reforming": 15})
    {'reforming': 15.0}
    """
    out = {}
    for label, dT in approach.items():
        if label not in system.labels:
            raise CaseInputError(
                f"approach: {label!r} is not a reaction label (labels are {', '.join(system.labels)})"
            )
        if not callable(system.lnK_data.get(label)):
            raise CaseInputError(f"approach: reaction {label!r} has no K(T) data to take an approach on")
        try:
            value = np.asarray(dT, dtype=float)
        except (TypeError, ValueError):
            raise CaseInputError(
                f"approach[{label!r}] must be a temperature difference in K, got {dT!r}"
            ) from None
        if value.ndim > 1 or not np.all((value >= 0.0) & (value < math.inf)):
            raise CaseInputError(
                f"approach[{label!r}] = {dT!r}: an approach is a distance from equilibrium, "
                "finite and not negative (K), one value or one per case"
            )
        out[label] = float(value) if value.ndim == 0 else value
    return out


def approach_temperatures(
    system: SystemSpec, T: Any, approach: Mapping[str, float], direction: Any, dh: np.ndarray | None = None
) -> np.ndarray:
    """The temperature at which each reaction's K is taken.

    ``T`` for reactions without an approach; for a reaction given ``dT``
    (K), the temperature ``dT`` away from ``T`` on the side that holds it
    short of equilibrium in the direction it runs. A reaction running
    forward stops short with a smaller K, one running backward with a
    larger one, so the shift is ``-sign(d ln K / dT) * direction * dT``:
    ``T - dT`` for steam reforming run forward (endothermic), ``T + dT`` for
    the shift run forward (exothermic), and ``T - dT`` again for methanation
    written forward but run backward in a reformer. This is the
    design-practice reading of an approach temperature: the outlet is
    "``dT`` away from equilibrium".

    Parameters
    ----------
    system : SystemSpec or ReactionSystem
    T : array_like, shape (N,)
        Temperature, K.
    approach : mapping label -> kelvin
        Checked (see :func:`check_approach`).
    direction : array_like, shape (N, R)
        The sign of each reaction's extent at equilibrium, per case.
    dh : ndarray, shape (N, R), optional
        Reaction enthalpies at ``T`` already evaluated (NaN columns: not
        known); where every approached column is known, no derivative of
        ln K is evaluated.

    Returns
    -------
    ndarray, shape (N, R)

    Examples
    --------
    >>> from eqbatch.demo import reformer_system
    >>> both_forward = [[1, 1]]   # reforming (endothermic) and shift (exothermic) run forward
    >>> approach_temperatures(reformer_system(), [1000.0], {"reforming": 15, "shift": 10}, both_forward)
    array([[ 985., 1010.]])
    """
    direction = np.asarray(direction, dtype=float)
    T = np.asarray(T, dtype=float).reshape(-1)
    n = max(T.shape[0], direction.shape[0])
    T_eff = np.array(np.broadcast_to(T[:, None], (n, system.n_reactions)))
    direction = np.broadcast_to(direction, (n, system.n_reactions))
    T_rows = np.broadcast_to(T, (n,))
    for label in approach:
        if not callable(system.lnK_data[label]):
            raise CaseInputError(f"approach: reaction {label!r} has no K(T) data to take an approach on")
    if not approach:
        return T_eff
    columns = [system.labels.index(label) for label in approach]
    if dh is not None and not np.isnan(dh[:, columns]).all(axis=0).any():
        slopes = dh  # (d ln K / dT = dH / (R T^2): the same sign)
    else:
        with quiet_ranges():  # ln K at the same temperatures reports extrapolation
            slopes = system.dlnK_dT(np.ascontiguousarray(T_rows))
    for j, dT in zip(columns, approach.values()):
        T_eff[:, j] = T_rows - np.sign(slopes[:, j]) * np.nan_to_num(direction[:, j]) * dT
    return T_eff


def feed_directions(system: SystemSpec, feed: np.ndarray, which: np.ndarray) -> np.ndarray:
    """The direction (+1 forward, -1 backward) each reaction ``which`` ((R,)
    bool) runs at equilibrium from each feed (rows of ``feed``), where the
    stoichiometry and the feed's zeros alone fix it; NaN elsewhere.

    In an all-gas ideal system every species a feed can make is present at
    equilibrium, so the extents lie in the open cone where every species
    not fed is positive; where that cone fixes a reaction's sign
    (:func:`eqbatch.equations.cone_directions`, one linear programme per
    zero pattern), the reaction runs that way whatever its K: steam
    reforming from a feed of methane and steam runs forward. Systems with
    other phases (which may be absent) get NaN throughout. Where one zero
    pattern serves every feed the answer is a read-only broadcast of one row.

    Examples
    --------
    >>> from eqbatch.demo import reformer_system
    >>> s = reformer_system()
    >>> feed = np.zeros((1, len(s.species))); feed[0, :2] = (1.0, 3.0)  # CH4 and H2O
    >>> feed_directions(s, feed, np.array([True, True])).tolist()
    [[1.0, 1.0]]
    """
    feed = np.atleast_2d(feed)
    out = np.full((feed.shape[0], system.n_reactions), np.nan)
    reactive = np.any(system.stoich != 0, axis=0)
    if any(p != "gas" for p in system.phases) or not np.any(which):
        return out
    zero = (feed < TINY_FEED) & reactive  # (the core's zero: below 1e-300 a feed is none)
    if (zero == zero[0]).all():  # one pattern (the usual batch): no pattern index
        return np.broadcast_to(cone_directions(system.stoich, zero[0], which), out.shape)
    patterns, inverse = _patterns(zero)
    known = np.array([cone_directions(system.stoich, pattern, which) for pattern in patterns])
    out = known[inverse]
    return out


def _patterns(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct rows of a bool matrix and each row's index among them
    (``np.unique(rows, axis=0, return_inverse=True)``, in linear time for
    up to 16 columns: a million feeds' zero patterns in milliseconds)."""
    if rows.shape[1] > 16:
        patterns, inverse = np.unique(rows, axis=0, return_inverse=True)
        return patterns, inverse.reshape(-1)
    codes = (
        rows @ (1 << np.arange(rows.shape[1], dtype=np.int32)) if rows.shape[1] else np.zeros(len(rows), int)
    )
    seen = np.flatnonzero(np.bincount(codes, minlength=1))
    index = np.zeros(max(int(seen[-1]) + 1 if seen.size else 1, 1), dtype=np.intp)
    index[seen] = np.arange(seen.size)
    patterns = ((seen[:, None] >> np.arange(rows.shape[1])) & 1).astype(bool)
    return patterns, index[codes]


def solve(
    system: SystemSpec,
    approach: Mapping[str, float],
    feed: np.ndarray,
    lnK_eq: np.ndarray,
    T: np.ndarray,
    P: np.ndarray,
    n: int,
    options: CoreOptions,
    bad_T: np.ndarray | None,
    out: Outputs | None = None,
    dh: np.ndarray | None = None,
) -> ApproachSolve:
    """Solve ``n`` cases with ``approach`` (``{label: dT}``, checked).
    ``lnK_eq`` are the equilibrium constants at ``T``; ``options`` those of
    the core; ``out`` output arrays for the final solve; ``dh`` the reaction
    enthalpies at ``T`` where known (see :func:`approach_temperatures`)."""
    tol, max_iter, threads, start, chain = options
    core = system._engine
    real = system.nonideal is not None  # (solves with its fugacity/activity coefficients)
    approached = np.zeros(system.n_reactions, dtype=bool)
    for label in approach:
        approached[system.labels.index(label)] = True
    # Each approached reaction's direction: from the feed where the stoichiometry
    # fixes it, else from an equilibrium solve at T (whose extents then start the
    # final solve).
    direction = np.broadcast_to(feed_directions(system, feed, approached), (n, system.n_reactions))
    unknown = np.flatnonzero(np.isnan(direction[:, approached]).any(axis=1))
    direction = np.nan_to_num(direction)
    warm = start
    if unknown.size:
        subset = unknown.size < n
        # (the cases' rows of each input; a broadcast row stays one row)
        f_, k_, p_ = (
            np.ascontiguousarray(_rows(a, unknown) if subset and len(a) > 1 else a) for a in (feed, lnK_eq, P)
        )
        x0 = None if start is None else (_rows(start, unknown) if subset and len(start) > 1 else start)
        m = unknown.size if subset else n
        if real:
            t_ = _rows(T, unknown) if subset and len(T) > 1 else T
            eq_extents = solve_real(system, f_, k_, p_, t_, m, tol, max_iter, threads, x0, core)[0][1]
        else:
            eq_extents = core.solve(f_, k_, p_, m, tol, max_iter, threads, x0, chain)[1]
        eq_direction = np.sign(np.nan_to_num(eq_extents))
        if subset:
            direction = np.array(direction)
            direction[unknown] = eq_direction
            shape = (n, system.n_reactions)
            warm = np.full(shape, np.nan) if start is None else np.array(np.broadcast_to(start, shape))
            warm[unknown] = np.where(np.isfinite(eq_extents), eq_extents, 0.0)
        else:
            direction = eq_direction
            warm = np.where(np.isfinite(eq_extents), eq_extents, 0.0)
    T_eff = approach_temperatures(system, T, approach, direction, dh)
    # (the reactions without an approach keep their constants at T)
    lnK = np.array(np.broadcast_to(lnK_eq, (n, system.n_reactions)))
    lnK[:, approached] = system.lnK_at(T_eff, columns=approached)[:, approached]
    if bad_T is not None:
        lnK[np.broadcast_to(bad_T, (lnK.shape[0],))] = np.nan
    ln_phi = None
    if real:
        solved, ln_phi = solve_real(system, feed, lnK, P, T, n, tol, max_iter, threads, warm, chain=chain)
        if out is not None:  # (the earlier result's arrays receive the values)
            for target, values in zip(out, solved):
                np.copyto(target, values)
            solved = out
    else:
        solved = core.solve(feed, lnK, P, n, tol, max_iter, threads, warm, chain, out)
    held = np.zeros((n, system.n_reactions), dtype=bool)
    for _ in range(system.n_reactions):
        extents = solved[1]
        against = approached & (direction != 0) & (np.sign(extents) != direction) & ~held
        against &= np.isfinite(extents)
        cases = np.flatnonzero(against.any(axis=1))
        if cases.size == 0:
            break
        held[cases] |= against[cases]
        _solve_held(system, cases, held, feed, lnK, P, tol, max_iter, solved, T=T, ln_phi=ln_phi)
    return ApproachSolve(solved, lnK, T_eff, held, ln_phi)


def _rows(array: np.ndarray, cases: np.ndarray) -> np.ndarray:
    return array[cases] if array.shape[0] > 1 else np.repeat(array, cases.size, axis=0)


def _without(system: SystemSpec, keep: np.ndarray) -> _core.System:
    """The compiled system of the reactions ``keep`` (bool, (R,)) only."""
    return compile_system(system.stoich[keep], system.phases, system.P0)


def _solve_held(
    system: SystemSpec,
    cases: np.ndarray,
    held: np.ndarray,
    feed: np.ndarray,
    lnK: np.ndarray,
    P: np.ndarray,
    tol: float,
    max_iter: int,
    outputs: Outputs,
    *,
    T: np.ndarray,
    ln_phi: np.ndarray | None,
) -> None:
    """Solve ``cases`` again with their held reactions removed (grouped by
    which reactions are held), writing into ``outputs`` in place; with
    non-ideal phases (``ln_phi`` not None) at temperatures ``T``, updating
    the coefficients ``ln_phi``."""
    amounts, extents, status, iterations, absent = outputs
    patterns, groups = np.unique(held[cases], axis=0, return_inverse=True)
    for g, pattern in enumerate(patterns):
        rows = cases[groups.reshape(-1) == g]
        keep = ~pattern
        extents[np.ix_(rows, np.flatnonzero(pattern))] = 0.0
        if not keep.any():
            amounts[rows] = _rows(feed, rows)
            status[rows] = 0
            if ln_phi is not None:  # (the coefficients of the feed itself)
                ln_phi[rows] = ln_coefficients(system, amounts[rows], _rows(T, rows), _rows(P, rows), None)
            continue
        args = (
            np.ascontiguousarray(_rows(feed, rows)),
            np.ascontiguousarray(_rows(lnK, rows)[:, keep]),
            np.ascontiguousarray(_rows(P, rows)),
        )
        if ln_phi is not None:
            reduced, T_rows = _without(system, keep), _rows(T, rows)
            found, phi = solve_real(system, *args, T_rows, rows.size, tol, max_iter, None, None, reduced)
            a, e, st, it, ab = found
            ln_phi[rows] = phi
        else:
            a, e, st, it, ab = _without(system, keep).solve(*args, rows.size, tol, max_iter)
        amounts[rows] = a
        extents[np.ix_(rows, np.flatnonzero(keep))] = e
        status[rows] = st
        iterations[rows] = iterations[rows] + it
        absent[rows] = ab


def held_sensitivities(
    system: SystemSpec, result: EquilibriumResult, held: np.ndarray, threads: int | None
) -> None:
    """Replace the derivatives of cases with held reactions by those of the
    system without them (a held reaction stays held under small changes, so
    its ln K has no effect)."""
    assert result._sens is not None and result.absent is not None  # a solve with sensitivities
    d_lnk, d_lnp, d_feed = result._sens
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
        dk, dp, df = _without(system, keep).sensitivities(
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
