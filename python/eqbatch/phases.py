"""Phases that vanish at equilibrium.

With both an ideal-gas mixture and an ideal liquid solution, the minimum of
the Gibbs function can lie where one phase has no material at all (a
condensate above its dew point, a liquid species alone in its phase whose
vapour pressure is not reached). The Newton iteration then drives that
phase's amounts towards zero without meeting the equilibrium conditions, and
the case ends stalled or at the iteration limit.

For such cases each phase is tried absent in turn: the phase's species are
set to zero (moving their feed through the reactions, found by a linear
programme, when they were fed), the reactions are restricted to the
combinations that leave them at zero, and the remaining system is solved.
The absent phase is accepted only if it is stable: the activities its
species would have at that equilibrium (from any reaction linking them to
present species) sum, as mole fractions, to at most one, the classical
phase-stability condition for an ideal solution. Otherwise the original
status stands.
"""

from __future__ import annotations

import numpy as np

from eqbatch.result import Status

_RETRY = (Status.STALLED, Status.ITERATION_LIMIT)


def _null_space(m: np.ndarray, tol: float = 1e-12) -> np.ndarray:
    if m.size == 0:
        return np.eye(m.shape[1])
    _, sv, vt = np.linalg.svd(m)
    rank = int(np.sum(sv > tol * max(sv.max(), 1.0)))
    return vt[rank:].T


def _shifted_feed(
    nu: np.ndarray, feed: np.ndarray, absent: np.ndarray
) -> tuple[np.ndarray, np.ndarray] | None:
    """Extents that take the absent species to zero while keeping the others
    non-negative (a linear programme), and the shifted feed they give."""
    if not np.any(feed[absent] > 0):
        return np.zeros(nu.shape[0]), feed.copy()
    from scipy.optimize import linprog

    R = nu.shape[0]
    present = ~absent
    # maximise the smallest present amount, so the start is as interior as it can be
    c = np.zeros(R + 1)
    c[-1] = -1.0
    a_ub = np.hstack([-nu[:, present].T, np.ones((int(present.sum()), 1))])
    b_ub = feed[present]
    a_eq = np.hstack([nu[:, absent].T, np.zeros((int(absent.sum()), 1))])
    b_eq = -feed[absent]
    sol = linprog(
        c,
        A_ub=a_ub,
        b_ub=b_ub,
        A_eq=a_eq,
        b_eq=b_eq,
        bounds=[(None, None)] * R + [(0.0, None)],
        method="highs",
    )
    if not sol.success:
        return None
    xi = sol.x[:R]
    shifted = feed + nu.T @ xi
    shifted[absent] = 0.0
    shifted[np.abs(shifted) < 1e-14 * max(feed.sum(), 1.0)] = 0.0
    if np.any(shifted < 0):
        return None
    return xi, shifted


def _stable_without(system, amounts: np.ndarray, lnK: np.ndarray, P: float, absent: np.ndarray) -> bool:
    """The absent phase would not form: its species' implied mole fractions sum to <= 1."""
    phases = np.array(system.phases)
    ln_a = np.full(system.n_species, np.nan)
    for phase in ("gas", "liquid"):
        mask = (phases == phase) & ~absent
        total = amounts[mask].sum()
        if total > 0:
            with np.errstate(divide="ignore"):
                ln_a[mask] = np.log(amounts[mask]) - np.log(total)
            if phase == "gas":
                ln_a[mask] += np.log(P / system.P0)
    ln_a[amounts <= 0] = np.nan
    implied = {}
    for j in range(system.n_reactions):
        row = system.stoich[j]
        for i in np.flatnonzero(absent & (row != 0)):
            others = (row != 0) & (np.arange(system.n_species) != i)
            if np.all(np.isfinite(ln_a[others])):
                implied[i] = (lnK[j] - row[others] @ ln_a[others]) / row[i]
    if not implied:
        return True  # nothing links the phase to what is present: it cannot form
    total = 0.0
    for i, value in implied.items():
        if phases[i] == "gas":
            value -= np.log(P / system.P0)
        total += np.exp(min(value, 700.0))
    return total <= 1.0 + 1e-9


def repair_vanished_phases(system, result) -> None:
    """Re-solve, in place, the stalled cases of ``result`` whose equilibrium
    has one phase absent (see the module docs)."""
    from eqbatch import _core

    phases = np.array(system.phases)
    if len(set(system.phases)) < 2:
        return
    todo = np.flatnonzero(np.isin(result.status, [int(s) for s in _RETRY]))
    if todo.size == 0:
        return
    codes = [0 if p == "gas" else 1 for p in system.phases]
    cache: dict[str, tuple] = {}
    for phase in ("liquid", "gas"):
        absent = phases == phase
        W = _null_space(system.stoich[:, absent].T)
        if W.shape[1] == 0:
            cache[phase] = (absent, W, None)
            continue
        nu_red = W.T @ system.stoich
        nu_red[:, absent] = 0.0
        nu_red[np.abs(nu_red) < 1e-12] = 0.0
        try:
            core = _core.System(np.ascontiguousarray(nu_red), codes, system.P0)
        except Exception:  # the reduced combinations are degenerate: this phase cannot go
            core = None
        cache[phase] = (absent, W, core)
    feed_all, lnk_all, p_all = result.feed, result.lnK, result.P
    for k in todo:
        feed, lnk, P = np.asarray(feed_all[k]), np.asarray(lnk_all[k]), float(p_all[k])
        for phase in ("liquid", "gas"):
            absent, W, core = cache[phase]
            shift = _shifted_feed(system.stoich, feed, absent)
            if shift is None:
                continue
            xi_shift, start = shift
            if core is None:
                if W.shape[1] != 0:
                    continue
                amounts, xi = start, xi_shift
                status = Status.CONVERGED
            else:
                a, e, st, it = core.solve(start[None, :], (W.T @ lnk)[None, :], np.array([P]), 1, 1e-10, 200)
                if st[0] != Status.CONVERGED:
                    continue
                amounts, xi, status = a[0], xi_shift + W @ e[0], Status.CONVERGED
            if not _stable_without(system, amounts, lnk, P, absent):
                continue
            result.amounts[k] = amounts
            result.extents[k] = xi
            result.status[k] = status
            break
    # Mole fractions follow from the repaired amounts when first read.
    result.mole_fractions = None
