"""Adiabatic equilibrium: the outlet temperature at which the mixture is at
equilibrium and its enthalpy equals the inlet's (a reactor bed with no heat
exchange), batched over cases.

Per case, ``f(T) = sum_i n_i(T) h_i(T) - sum_i n0_i h_i(T_in) = 0`` is solved
by Newton's method with the exact derivative
``f'(T) = sum_i n_i c_p,i + sum_i h_i dn_i/dT`` (the equilibrium's temperature
sensitivity), safeguarded by bisection inside the temperature range that all
species' data cover, and warm-started from the previous iterate's extents.
Each iteration is an isothermal solve of the cases not yet balanced, given as
``solve`` (:meth:`ReactionSystem.solve <eqbatch.ReactionSystem.solve>`); the
species' enthalpies and heat capacities come from the core, and the ends of
the data's range are solved only for cases whose step leaves it (a case whose
energy residual has the same sign at that end as at its iterate has no
balancing temperature in the range: ``OUT_OF_RANGE``).
"""

from __future__ import annotations

import warnings
from typing import Any, Protocol

import numpy as np

from eqbatch import outputs
from eqbatch.errors import CaseInputError, ExtrapolationWarning, InvalidCaseError
from eqbatch.inputs import case_column, feed_array, reaction_rows
from eqbatch.realgas import departure_enthalpy
from eqbatch.result import EnergyBalance, EquilibriumResult, Status
from eqbatch.spec import SystemSpec


class IsothermalSolve(Protocol):
    """The isothermal batch solve each temperature iteration calls."""

    def __call__(
        self,
        feed: Any,
        *,
        T: Any = ...,
        lnK: Any = ...,
        P: Any,
        tol: float,
        max_iter: int,
        threads: int | None,
        invalid: str = ...,
        x0: Any = ...,
        sensitivities: bool = ...,
    ) -> EquilibriumResult: ...


def adiabatic_solve(
    system: SystemSpec,
    solve: IsothermalSolve,
    feed: Any,
    T: Any,
    P: Any,
    *,
    tol: float = 1e-10,
    max_iter: int = 200,
    threads: int | None = None,
    invalid: str = "mark",
    x0: Any = None,
    sensitivities: bool = False,
    max_T_iter: int = 60,
    energy_tol: float = 1e-11,
    duty: Any = None,
    H_in: Any = None,
    lnk_shift: np.ndarray | None = None,
) -> EquilibriumResult:
    """The adiabatic outlet of every case (see :meth:`ReactionSystem.solve`
    with ``adiabatic=True``), or with ``duty`` (kJ per case, heat added) the
    outlet of a reactor with that heat duty.

    ``solve`` is the system's isothermal solve; ``tol``, ``max_iter`` and
    ``x0`` apply to every equilibrium solve inside (``x0`` to the first),
    ``invalid="raise"`` raises on the first bad case, and ``max_T_iter``
    bounds the temperature iterations. ``H_in`` (kJ per case, the feed's
    enthalpy on the formation scale) may replace the inlet temperature ``T``:
    the inlet temperature is then the one at which the feed has that
    enthalpy. ``lnk_shift`` ((R,) or (N, R)) is added to every ln K the
    species data give (a Monte Carlo sample of uncertain Gibbs energies;
    constant in T, so d ln K / dT is unchanged).

    With non-ideal phases the enthalpies include the gas's residual and the
    solutions' excess enthalpy (:func:`eqbatch.realgas.departure_enthalpy`),
    at the inlet and at the outlet.

    All-gas ideal systems whose every ln K comes from the species' data go
    first to the core's one Newton iteration on extents and temperature
    together (``eqbatch_core::adiabatic``: the mixture's entropy at the
    given enthalpy is its merit function); the cases it does not settle (a
    trace species, an outlet outside the data's range, bad input) and every
    other system take the nested solve: Newton on the outlet temperature
    around the isothermal solve.
    """
    args: dict[str, Any] = {
        "tol": tol,
        "max_iter": max_iter,
        "threads": threads,
        "max_T_iter": max_T_iter,
        "energy_tol": energy_tol,
    }
    out = None
    if invalid != "raise" and system._energy_table is not None and system.nonideal is None:
        out = _in_core(system, solve, feed, T, P, x0=x0, duty=duty, H_in=H_in, lnk_shift=lnk_shift, **args)
    if out is None:
        given = {"x0": x0, "duty": duty, "H_in": H_in, "lnk_shift": lnk_shift}
        out = _nested(system, solve, feed, T, P, invalid=invalid, **given, **args)
    if sensitivities:
        _attach_sensitivities(system, out, by_enthalpy=H_in is not None, threads=threads)
    return out


def _in_core(
    system: SystemSpec,
    solve: IsothermalSolve,
    feed: Any,
    T: Any,
    P: Any,
    *,
    tol: float,
    max_iter: int,
    threads: int | None,
    max_T_iter: int,
    energy_tol: float,
    x0: Any,
    duty: Any,
    H_in: Any,
    lnk_shift: np.ndarray | None,
) -> EquilibriumResult | None:
    """The core's one Newton iteration on every case, the nested solve on
    those it leaves; None where the inputs do not broadcast (the nested
    solve then reports them as it always has)."""
    energy = system._energy_table
    assert energy is not None
    table, lo, hi = energy
    try:
        feed_rows = feed_array(system, feed)
        P_rows = system._p0_row if P is None else case_column(P, "P")
        T_rows = case_column(T, "T") if H_in is None else np.full(1, np.nan)
        heat = np.zeros(1) if duty is None else 1000.0 * case_column(duty, "duty")
        H_rows = None if H_in is None else 1000.0 * case_column(H_in, "H_in")
        shift = None if lnk_shift is None else np.atleast_2d(np.asarray(lnk_shift, dtype=float))
        start = None if x0 is None else reaction_rows(system, x0, "x0")  # (labelled by reaction too)
        sizes = [feed_rows.shape[0], P_rows.shape[0], T_rows.shape[0], heat.shape[0]]
        sizes += [] if start is None else [start.shape[0]]
        sizes += [] if H_rows is None else [H_rows.shape[0]]
        sizes += [] if shift is None else [shift.shape[0]]
        n = max(sizes)
        if any(k not in (1, n) for k in sizes) or any(
            a is not None and (a.ndim != 2 or a.shape[1] != system.n_reactions) for a in (shift, start)
        ):
            return None
    except CaseInputError:
        return None

    def rows(a: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
        return np.array(np.broadcast_to(a, shape), dtype=float, order="C")  # (a writable copy)

    # (the feed is only read: no copy of a million rows where it has its shape)
    fits = (
        feed_rows.shape == (n, system.n_species) and feed_rows.dtype == float and feed_rows.flags.c_contiguous
    )
    feed_rows = feed_rows if fits else rows(feed_rows, (n, system.n_species))
    P_rows, heat = rows(P_rows, (n,)), rows(heat, (n,))
    if H_rows is None:
        T_in = rows(T_rows, (n,))
        system._report_ranges(T_in)  # an inlet outside the species data's range is said, as by a solve at T
        enthalpy = None  # the feed's at T_in plus the heat, summed in the core
    else:
        H_feed = rows(H_rows, (n,))
        T_in = _feed_temperature(system._species_h_cp, feed_rows, H_feed, lo, hi)
        enthalpy = np.ascontiguousarray(H_feed + heat)
    shift_rows = None if shift is None else rows(shift, (n, system.n_reactions))
    start_rows = None if start is None else rows(start, (n, system.n_reactions))
    reused = outputs.take(n, system.n_species, system.n_reactions)  # (memory a freed result held)
    amounts, extents, T_out, status, iterations, lnK = system._engine.adiabatic(
        table,
        lo,
        hi,
        feed_rows,
        enthalpy,
        heat,
        np.ascontiguousarray(T_in),
        P_rows,
        shift_rows,
        start_rows,
        tol,
        max_iter,
        threads,
        None if reused is None else reused[:4],
    )
    # A converged case closed its energy balance to 1e-13 of T in the core
    # (tests/test_adiabatic_core.py checks the balance of the outputs; so
    # ``energy_tol`` only applies to the nested solve's cases),
    # and its ln K at the outlet are those system.lnK gives there (plus the shift).
    settled = status == Status.CONVERGED
    T_steps = iterations.astype(np.int64)  # every Newton step also moves the temperature
    absent = np.zeros(n, dtype=np.uint64) if reused is None else reused[4]
    absent.fill(0)
    left = np.flatnonzero(~settled)
    if left.size:
        with warnings.catch_warnings():
            # (the inlets' range was said above, once; the nested solve would say it again)
            warnings.simplefilter("ignore", ExtrapolationWarning)
            rest = _nested(
                system,
                solve,
                feed_rows[left],
                T_in[left] if H_rows is None else None,
                P_rows[left],
                tol=tol,
                max_iter=max_iter,
                threads=threads,
                invalid="mark",
                x0=None if start_rows is None else start_rows[left],
                max_T_iter=max_T_iter,
                energy_tol=energy_tol,
                duty=None if duty is None else heat[left] / 1000.0,
                H_in=None if H_rows is None else H_feed[left] / 1000.0,
                lnk_shift=None if shift_rows is None else shift_rows[left],
            )
        assert rest.T is not None and rest.T_in is not None and rest.T_iterations is not None
        amounts[left], extents[left], status[left] = rest.amounts, rest.extents, rest.status
        T_out[left], lnK[left], T_in[left] = rest.T, rest.lnK, rest.T_in
        absent[left] = rest.absent
        iterations[left] += rest.iterations
        T_steps[left] = rest.T_iterations
    out = EquilibriumResult(system, amounts, extents, None, status, iterations, feed_rows, P_rows, T_out, lnK)
    out.T_iterations = T_steps
    out.T_in = T_in
    out.absent = absent
    return out


def _nested(
    system: SystemSpec,
    solve: IsothermalSolve,
    feed: Any,
    T: Any,
    P: Any,
    *,
    tol: float,
    max_iter: int,
    threads: int | None,
    invalid: str,
    x0: Any,
    max_T_iter: int,
    energy_tol: float,
    duty: Any,
    H_in: Any,
    lnk_shift: np.ndarray | None,
) -> EquilibriumResult:
    """The nested solve (see the module docs) of every case."""
    _, lo, hi = system._enthalpy_data()
    species = system._species_h_cp
    options: dict[str, Any] = {"threads": threads, "tol": tol, "max_iter": max_iter}
    H_given = None
    real = system.nonideal is not None
    if H_in is not None:
        feed = feed_array(system, feed)
        H_given = 1000.0 * case_column(H_in, "H_in")
        P_given = case_column(P, "P")
        m = max(feed.shape[0], H_given.shape[0], P_given.shape[0] if real else 1)
        feed = np.ascontiguousarray(np.broadcast_to(feed, (m, system.n_species)))
        H_given = np.ascontiguousarray(np.broadcast_to(H_given, (m,)))
        departure = None
        if real:  # (the feed's real enthalpy: its departure at the inlet counts)
            P_rows_in = np.broadcast_to(P_given, (m,))
            feed_in = feed

            def departure(T_: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
                return departure_enthalpy(system, feed_in, T_, P_rows_in, threads)

        T = _feed_temperature(species, feed, H_given, lo, hi, departure=departure)
        if invalid == "raise" and np.isnan(T).any():
            k = int(np.argmax(np.isnan(T)))
            raise InvalidCaseError(
                f"case {k}: no temperature between {0.5 * lo:g} and {2 * hi:g} K gives the feed the "
                f"enthalpy H_in = {H_given[k] / 1000.0:g} kJ"
            )
    heat = None if duty is None else 1000.0 * case_column(duty, "duty")
    if heat is not None and heat.shape[0] > 1:  # one case per duty: the inlet temperature sets the rows
        T_rows = case_column(T, "T")
        if T_rows.shape[0] not in (1, heat.shape[0]):
            raise CaseInputError(f"duty has {heat.shape[0]} cases and T has {T_rows.shape[0]}")
        T = np.ascontiguousarray(np.broadcast_to(T_rows, heat.shape))
    if lnk_shift is None:
        base = solve(feed, T=T, P=P, invalid=invalid, x0=x0, **options)
    else:
        T_given = case_column(T, "T")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the range is reported by the temperature iterations' bracket
            lnk0 = system.lnK(T_given) + lnk_shift
        # (a non-ideal solve needs T for its coefficients)
        base = solve(feed, lnK=lnk0, T=T_given if real else None, P=P, invalid=invalid, x0=x0, **options)
    n = len(base)
    if heat is not None and heat.shape[0] not in (1, n):
        raise CaseInputError(f"duty has {heat.shape[0]} cases and the other inputs {n}")
    feed_rows = np.ascontiguousarray(
        np.broadcast_to(np.asarray(base.feed, dtype=float), (n, system.n_species))
    )
    T_in = np.broadcast_to(np.asarray(base.T if lnk_shift is None else T_given, dtype=float), (n,)).copy()
    shift = None if lnk_shift is None else np.broadcast_to(lnk_shift, (n, system.n_reactions))
    P_rows = np.ascontiguousarray(np.broadcast_to(np.asarray(base.P, dtype=float), (n,)))
    bad = base.status == Status.INVALID_INPUT
    if heat is not None:
        bad_heat = ~np.isfinite(np.broadcast_to(heat, (n,)))
        if bad_heat.any() and invalid == "raise":
            raise InvalidCaseError(f"case {int(np.argmax(bad_heat))}: duty must be a finite heat, kJ")
        bad = bad | bad_heat
    newton = base.iterations.astype(np.int64)
    T_steps = np.zeros(n, dtype=np.int64)
    heat = np.zeros(n) if heat is None else np.broadcast_to(heat, (n,))
    # the state of every case at its current temperature iterate
    Tc = np.clip(np.where(bad, lo, T_in), lo, hi)
    amounts, extents = np.array(base.amounts), np.array(base.extents)
    status = np.array(base.status)
    absent = np.array(base.absent) if base.absent is not None else np.zeros(n, dtype=np.uint64)
    lnK = np.array(base.lnK)
    f, df = np.full(n, np.nan), np.full(n, np.nan)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # range warnings: the bracket keeps T inside
        h_in, cp_in = species(np.where(bad, lo, T_in))
        H_feed = np.sum(feed_rows * h_in, axis=1) if H_given is None else np.broadcast_to(H_given, (n,))
        if real and H_given is None:  # the feed is a real gas (or solution) at its inlet
            H_feed = (
                H_feed + departure_enthalpy(system, feed_rows, np.where(bad, lo, T_in), P_rows, threads)[0]
            )
        scale = np.sum(np.abs(feed_rows * h_in), axis=1) + np.abs(heat) + 1.0
        H_in = H_feed + heat  # the outlet's enthalpy: the feed's plus the heat added

        def evaluate(rows: np.ndarray, Tr: np.ndarray, start: np.ndarray | None) -> tuple[np.ndarray, ...]:
            """Solve ``rows`` at ``Tr``: amounts, extents, status, iterations,
            absent, ln K, and the energy residual and its exact derivative
            ``sum n cp + sum h dn/dT`` (``dn/dT = dn/dlnK . dlnK/dT``)."""
            fr, pr = feed_rows[rows], P_rows[rows]
            if shift is None:
                r = solve(fr, T=Tr, P=pr, x0=start, **options)
            else:
                lnk_r = system.lnK(Tr) + shift[rows]
                r = solve(fr, lnK=lnk_r, T=Tr if real else None, P=pr, x0=start, **options)
            ab = r.absent if r.absent is not None else np.zeros(rows.size, dtype=np.uint64)
            fv, dfv = _residual_at(system, fr, pr, r.amounts, r.status, ab, Tr, H_in[rows], threads)
            return r.amounts, r.extents, r.status, r.iterations, ab, r.lnK, fv, dfv

        def update(rows: np.ndarray, Tr: np.ndarray, start: np.ndarray | None) -> None:
            a_, e_, st_, it_, ab_, lk_, f_, df_ = evaluate(rows, Tr, start)
            Tc[rows], amounts[rows], extents[rows], status[rows] = Tr, a_, e_, st_
            absent[rows], lnK[rows], f[rows], df[rows] = ab_, lk_, f_, df_
            newton[rows] += it_

        rows = np.flatnonzero(~bad)
        moved = rows[Tc[rows] != T_in[rows]]  # inlets outside the data's range start at its end
        if moved.size:
            update(moved, Tc[moved], extents[moved])
        kept = np.setdiff1d(rows, moved)
        if kept.size:  # the first solve is the solve at the inlet temperature: only f and f' are new
            f[kept], df[kept] = _residual_at(
                system,
                feed_rows[kept],
                P_rows[kept],
                amounts[kept],
                status[kept],
                absent[kept],
                Tc[kept],
                H_in[kept],
                threads,
            )
        # the bracket [a, b] around the root (f rises with T: the mixture's
        # enthalpy grows with temperature); the data's ends are evaluated only
        # when a step needs them, and a case whose root lies beyond one is out
        # of range
        a, b = np.full(n, lo), np.full(n, hi)
        f_lo, f_hi = np.full(n, np.nan), np.full(n, np.nan)
        out_of_range = np.zeros(n, dtype=bool)
        for _ in range(max_T_iter):
            done = bad | out_of_range | (np.abs(f) <= energy_tol * scale)
            if done.all():
                break
            below = f < 0
            a = np.where(below & ~done, np.maximum(a, Tc), a)
            b = np.where(~below & ~done, np.minimum(b, Tc), b)
            with np.errstate(divide="ignore", invalid="ignore"):
                step = Tc - f / df
            inside = np.isfinite(step) & (step > a) & (step < b)
            for end, f_end, need in ((lo, f_lo, ~below & (a == lo)), (hi, f_hi, below & (b == hi))):
                ask = np.flatnonzero(~done & ~inside & need & np.isnan(f_end))
                if ask.size:
                    _, _, st_end, it_end, _, _, f_at_end, _ = evaluate(
                        ask, np.full(ask.size, end), extents[ask]
                    )
                    newton[ask] += it_end
                    solved = (st_end == Status.CONVERGED) | (st_end == Status.UNDERFLOW)
                    # same sign at the end as here: no root between them (decided only from an
                    # equilibrium at the end; otherwise the end stays a bisection bound)
                    f_end[ask] = np.where(solved & np.isfinite(f_at_end), f_at_end, 0.0)
                    out_of_range[ask] = (f_end[ask] != 0.0) & (np.sign(f_end[ask]) == np.sign(f[ask]))
                    done |= out_of_range
            active = np.flatnonzero(~done)
            if active.size == 0:
                break
            Tn = np.where(inside, step, 0.5 * (a + b))[active]
            update(active, Tn, extents[active])
            T_steps[active] += 1
    at_equilibrium = (status == Status.CONVERGED) | (status == Status.UNDERFLOW)
    status[out_of_range & at_equilibrium] = Status.OUT_OF_RANGE
    not_closed = ~out_of_range & ~(np.abs(f) <= energy_tol * scale) & at_equilibrium
    status[not_closed] = Status.ITERATION_LIMIT
    # no outlet (out of range) or bad input: NaN outputs, so that nothing downstream
    # (a duty, a plot) reads the last iterate as an answer
    bad_out = bad | (status == Status.OUT_OF_RANGE)
    if bad.any():
        status[bad] = Status.INVALID_INPUT
    if bad_out.any():
        amounts[bad_out] = np.nan
        extents[bad_out] = np.nan
        Tc = np.where(bad_out, np.nan, Tc)
    out = EquilibriumResult(
        system, amounts, extents, None, status, newton.astype(np.uint32), feed_rows, P_rows, Tc, lnK
    )
    out.T_iterations = T_steps
    out.T_in = T_in
    out.absent = absent
    return out


def _attach_sensitivities(
    system: SystemSpec, out: EquilibriumResult, *, by_enthalpy: bool, threads: int | None
) -> None:
    """The exact derivatives of every settled case, holding the enthalpy
    balance (the core's isothermal ones and the energy terms
    :class:`EnergyBalance` combines them with); NaN elsewhere."""
    _, lo, _ = system._enthalpy_data()
    bad = out.status == Status.INVALID_INPUT
    solved = np.where(out.converged, Status.CONVERGED, Status.ITERATION_LIMIT).astype(np.uint8)
    solved[bad] = Status.INVALID_INPUT
    amounts = np.where(np.isfinite(out.amounts), out.amounts, 0.0)
    absent = out.absent if out.absent is not None else np.zeros(len(out), dtype=np.uint64)
    feed_rows = np.ascontiguousarray(out.feed, dtype=float)
    P_rows = np.ascontiguousarray(out.P, dtype=float)
    out._sens = system._engine.sensitivities(
        feed_rows, P_rows, amounts, solved, np.ascontiguousarray(absent), threads
    )
    assert out.T_in is not None and out.T is not None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        T_safe = np.where(np.isfinite(out.T), out.T, lo)
        h_out, cp_out = system._species_h_cp(T_safe)
        h_in, cp_in = system._species_h_cp(np.where(np.isfinite(out.T_in), out.T_in, lo))
        out._energy = EnergyBalance(
            h_out=h_out,
            h_in=np.zeros_like(h_in) if by_enthalpy else h_in,  # H_in fixed: the feed adds no enthalpy
            cp_feed=np.sum(feed_rows * cp_in, axis=1),
            cp_out=cp_out,
            slope_out=system.dlnK_dT(T_safe),
            T_in=out.T_in,
            by_enthalpy=by_enthalpy,
        )
    for array in out._sens:
        array[~out.converged] = np.nan


def _residual_at(
    system: SystemSpec,
    feed: np.ndarray,
    P: np.ndarray,
    amounts: np.ndarray,
    status: np.ndarray,
    absent: np.ndarray,
    T: np.ndarray,
    H_in: np.ndarray,
    threads: int | None,
) -> tuple[np.ndarray, np.ndarray]:
    """The energy residual ``sum n h(T) - H_in`` of solved cases at ``T`` and
    its exact derivative along the equilibrium, ``sum n cp + sum h dn/dT``
    with ``dn/dT = dn/dlnK . dlnK/dT`` (the core's derivatives without the
    feed columns). With non-ideal phases the residual adds the departure
    enthalpy of the amounts, and the derivative its change with ``T`` at
    fixed amounts and the ideal mixture's ``dn/dT``."""
    h, cp = system._species_h_cp(T)
    dk = system._engine.sensitivities(
        np.ascontiguousarray(feed),
        np.ascontiguousarray(P),
        np.ascontiguousarray(amounts),
        np.ascontiguousarray(status),
        np.ascontiguousarray(absent),
        threads,
        with_feed=False,
    )[0]
    dn_dT = np.einsum("nsr,nr->ns", dk, system.dlnK_dT(T))
    f = np.sum(amounts * h, axis=1) - H_in
    df = np.sum(amounts * cp, axis=1) + np.sum(h * dn_dT, axis=1)
    if system.nonideal is not None:
        # (df then leaves out the departure's change through the amounts:
        # a Newton step a little short, which the bracket keeps safe)
        departure, d_departure = departure_enthalpy(system, amounts, T, P, threads)
        f, df = f + departure, df + d_departure
    return f, df


def _feed_temperature(
    species: Any,
    feed: np.ndarray,
    H: np.ndarray,
    lo: float,
    hi: float,
    iterations: int = 100,
    departure: Any = None,
) -> np.ndarray:
    """The temperature at which each feed (N, S) has the enthalpy ``H`` (J):
    Newton on ``sum n0 h(T) - H`` (rising with T, by ``sum n0 cp``) from the
    middle of the data's range, kept inside the bracket from half the data's
    lowest temperature to twice their highest; NaN where no temperature there
    fits or the iteration does not close. ``departure(T)``, where given,
    adds the feed's departure enthalpy and its derivative (a real gas; at
    the bracket's ends only where it has a value there)."""

    def extra(T_: np.ndarray, end: bool = False) -> tuple[np.ndarray, np.ndarray]:
        if departure is None:
            return np.zeros(n), np.zeros(n)
        value, slope = departure(T_)
        return (np.nan_to_num(value), np.nan_to_num(slope)) if end else (value, slope)

    n = feed.shape[0]
    a, b = np.full(n, 0.5 * lo), np.full(n, 2.0 * hi)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        f_a = np.sum(feed * species(a)[0], axis=1) + extra(a, end=True)[0] - H
        f_b = np.sum(feed * species(b)[0], axis=1) + extra(b, end=True)[0] - H
        ok = np.isfinite(H) & (f_a <= 0) & (f_b >= 0)
        T = np.where(ok, 0.5 * (lo + hi), np.nan)
        for _ in range(iterations):
            h, cp = species(np.where(ok, T, lo))
            dep, d_dep = extra(np.where(ok, T, lo))
            f = np.sum(feed * h, axis=1) + dep - H
            if np.all(~ok | (np.abs(f) <= 1e-12 * (np.sum(np.abs(feed * h), axis=1) + 1.0))):
                break
            a = np.where(f < 0, T, a)
            b = np.where(f > 0, T, b)
            with np.errstate(divide="ignore", invalid="ignore"):
                step = T - f / (np.sum(feed * cp, axis=1) + d_dep)
            T = np.where(ok, np.where((step > a) & (step < b), step, 0.5 * (a + b)), np.nan)
        h = species(np.where(ok, T, lo))[0]
        dep = extra(np.where(ok, T, lo))[0]
        closed = np.abs(np.sum(feed * h, axis=1) + dep - H) <= 1e-9 * (np.sum(np.abs(feed * h), axis=1) + 1.0)
    return np.where(ok & closed, T, np.nan)
