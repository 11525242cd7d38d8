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
The absent phase is accepted only if it is stable: no composition of it
that the reactions could form from the present species lowers the Gibbs
function (see :func:`implied_fraction_sum`). Otherwise the original status
stands. A repaired case keeps the caller's ``tol`` and ``max_iter``, counts
the repair's iterations, and has exact derivatives on its active set
(:func:`active_set_sensitivities`).
"""

from __future__ import annotations

import numpy as np

from eqbatch.result import Status

_RETRY = (Status.STALLED, Status.ITERATION_LIMIT)

__all__ = ["active_set_sensitivities", "implied_fraction_sum", "repair_vanished_phases"]


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


def _log_activities(system, amounts: np.ndarray, P: float, present: np.ndarray) -> np.ndarray:
    """ln a of the present species (gas ``ln(y P / P0)``, liquid ``ln x``); NaN elsewhere."""
    phases = np.array(system.phases)
    ln_a = np.full(system.n_species, np.nan)
    for phase in ("gas", "liquid"):
        mask = (phases == phase) & present
        total = amounts[mask].sum()
        if total > 0:
            ln_a[mask] = np.log(amounts[mask]) - np.log(total)
            if phase == "gas":
                ln_a[mask] += np.log(P / system.P0)
    return ln_a


def implied_fraction_sum(system, amounts: np.ndarray, lnK: np.ndarray, P: float, absent: np.ndarray) -> float:
    """The smallest sum of the mole fractions that the species of an empty
    phase would have in equilibrium with the present ones: the empty phase
    is stable (it does not form) exactly when this is at most one.

    At an equilibrium with the phase absent, every reaction holds for the
    present species, so the activities of the absent ones must satisfy
    ``nu_abs ln a_abs = ln K - nu_pres ln a_pres``. Where the reactions fix
    them all, the test is the classical one (the implied mole fractions sum
    to at most one). Where they do not (``A = B + C`` with B and C liquid fixes
    only ``ln a_B + ln a_C``), forming the phase lowers the Gibbs function if
    *some* admissible composition does: the smallest ``sum(exp(ln x))`` over
    the solutions (a convex problem on the null space of ``nu_abs``) decides.
    That is the tangent-plane condition for an ideal solution (M. L.
    Michelsen, "The isothermal flash problem. Part I. Stability", Fluid Phase
    Equilibria 9, 1982), written in the reactions' terms.
    """
    from scipy.optimize import minimize
    from scipy.special import logsumexp

    present = ~absent & (amounts > 0)
    ln_a = _log_activities(system, amounts, P, present)
    nu = system.stoich
    nu_abs = nu[:, absent]
    rhs = lnK - nu[:, present] @ ln_a[present]
    particular, *_ = np.linalg.lstsq(nu_abs, rhs, rcond=None)
    # activities to mole fractions: a gas species' activity is y P / P0
    phases = np.array(system.phases)[absent]
    offset = np.where(phases == "gas", np.log(system.P0 / P), 0.0)
    base = particular + offset
    free = _null_space(nu_abs)
    if free.shape[1] == 0:
        return float(np.exp(logsumexp(base)))

    def value(v):
        z = base + free @ v
        m = logsumexp(z)
        return m, free.T @ np.exp(z - m)

    # Stable as soon as some admissible composition sums to below one; the
    # infimum may lie at infinity (a species the reactions cannot make).
    best = minimize(value, np.zeros(free.shape[1]), jac=True, method="BFGS", options={"gtol": 1e-12})
    return float(np.exp(min(best.fun, value(np.zeros(free.shape[1]))[0])))


def _stable_without(system, amounts: np.ndarray, lnK: np.ndarray, P: float, absent: np.ndarray) -> bool:
    """The absent phase would not form (see :func:`implied_fraction_sum`)."""
    return implied_fraction_sum(system, amounts, lnK, P, absent) <= 1.0 + 1e-9


def active_set_sensitivities(
    system, amounts: np.ndarray, P: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact derivatives ``(d n / d ln K (S, R), d n / d ln P (S,), d n / d n0
    (S, S))`` of an equilibrium whose zero species stay zero (a stable absent
    phase stays absent under small changes).

    The reactions are restricted to the combinations ``W`` that leave the
    zero species untouched; the equilibrium conditions ``W^T (nu ln a - ln K)
    = 0`` then give, by the implicit function theorem,
    ``(N^T J N) d eta = W^T d ln K - N^T g d ln P - N^T J d n0`` with ``N = nu^T W``,
    ``J = d ln a / d n`` of the present species (``diag(1/n) - 1/N_phase`` per
    phase) and ``g`` marking the gas species. A fed zero species is moved
    onto the present ones by the reactions where they can take it; where
    they cannot, the added amount stays as it is (the core's convention for
    species the feed cannot react away).
    """
    S, R = system.n_species, system.n_reactions
    nu = system.stoich
    zero = amounts <= 0
    present = ~zero
    W = _null_space(nu[:, zero].T) if zero.any() else np.eye(R)
    N = nu.T @ W  # (S, m); rows of zero species vanish
    N[zero] = 0.0
    phases = np.array(system.phases)
    J = np.zeros((S, S))
    for phase in ("gas", "liquid"):
        mask = (phases == phase) & present
        if mask.any():
            idx = np.flatnonzero(mask)
            J[np.ix_(idx, idx)] = -1.0 / amounts[mask].sum()
            J[idx, idx] += 1.0 / amounts[idx]
    gas = (phases == "gas") & present
    d_lnk = np.zeros((S, R))
    d_feed = np.eye(S)
    if W.shape[1] == 0:
        return d_lnk, np.zeros(S), d_feed
    H = N.T @ J @ N
    d_lnk = N @ np.linalg.solve(H, W.T)
    d_lnp = -N @ np.linalg.solve(H, N.T @ gas.astype(float))
    # feed: first take a zero species' feed onto the present ones where the
    # reactions can (M shift = -e_k on the zero species), then relax
    M = nu[:, zero].T
    for k in range(S):
        move = np.zeros(S)
        move[k] = 1.0
        if zero[k]:
            shift, *_ = np.linalg.lstsq(M, -move[zero], rcond=None)
            candidate = move + nu.T @ shift
            if np.allclose(candidate[zero], 0.0, atol=1e-12):
                move = candidate
                move[zero] = 0.0
            else:
                continue  # it stays where it is added
        d_feed[:, k] = move - N @ np.linalg.solve(H, N.T @ (J @ move))
    return d_lnk, d_lnp, d_feed


def repair_vanished_phases(system, result, *, tol: float = 1e-10, max_iter: int = 200) -> np.ndarray:
    """Re-solve, in place, the stalled cases of ``result`` whose equilibrium
    has one phase absent (see the module docs), with the caller's ``tol`` and
    ``max_iter`` (the iteration budget left after the first attempt).
    Returns the indices of the repaired cases; their iteration counts
    include the repair's Newton steps."""
    from eqbatch import _core

    phases = np.array(system.phases)
    if len(set(system.phases)) < 2:
        return np.zeros(0, dtype=np.intp)
    todo = np.flatnonzero(np.isin(result.status, [int(s) for s in _RETRY]))
    if todo.size == 0:
        return todo
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
    repaired = []
    for k in todo:
        feed, lnk, P = np.asarray(feed_all[k]), np.asarray(lnk_all[k]), float(p_all[k])
        for phase in ("liquid", "gas"):
            absent, W, core = cache[phase]
            shift = _shifted_feed(system.stoich, feed, absent)
            if shift is None:
                continue
            xi_shift, start = shift
            steps = 0
            if core is None:
                if W.shape[1] != 0:
                    continue
                amounts, xi, status = start, xi_shift, Status.CONVERGED
            else:
                budget = max(int(max_iter) - int(result.iterations[k]), 0)
                a, e, st, it = core.solve(start[None, :], (W.T @ lnk)[None, :], np.array([P]), 1, tol, budget)
                if st[0] not in (Status.CONVERGED, Status.UNDERFLOW):
                    continue
                amounts, xi, status, steps = a[0], xi_shift + W @ e[0], Status(int(st[0])), int(it[0])
            if not _stable_without(system, amounts, lnk, P, absent):
                continue
            result.amounts[k] = amounts
            result.extents[k] = xi
            result.status[k] = status
            result.iterations[k] += steps
            result.absent_phase[int(k)] = phase
            repaired.append(k)
            break
    # Mole fractions follow from the repaired amounts when first read.
    result.mole_fractions = None
    return np.array(repaired, dtype=np.intp)
