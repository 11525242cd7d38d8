"""Adiabatic equilibrium: the outlet temperature at which the mixture is at
equilibrium and its enthalpy equals the inlet's (a reactor bed with no heat
exchange), batched over cases.

Per case, ``f(T) = sum_i n_i(T) h_i(T) - sum_i n0_i h_i(T_in) = 0`` is solved
by Newton's method with the exact derivative
``f'(T) = sum_i n_i c_p,i + sum_i h_i dn_i/dT`` (the equilibrium's temperature
sensitivity), safeguarded by bisection inside the temperature range that all
species' data cover, and warm-started from the previous iterate's extents.
Each iteration is an isothermal solve of every case, given as ``solve``
(:meth:`ReactionSystem.solve <eqbatch.ReactionSystem.solve>`).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from typing import Any, Protocol

import numpy as np

from eqbatch.errors import CaseInputError
from eqbatch.result import EnergyBalance, EquilibriumResult, Status
from eqbatch.spec import SystemSpec
from eqbatch.speciesdata import SpeciesData


class IsothermalSolve(Protocol):
    """The isothermal batch solve each temperature iteration calls."""

    def __call__(
        self,
        feed: Any,
        *,
        T: Any,
        P: Any,
        tol: float,
        max_iter: int,
        threads: int | None,
        invalid: str = ...,
        x0: Any = ...,
        sensitivities: bool = ...,
    ) -> EquilibriumResult: ...


def _enthalpy_data(system: SystemSpec) -> tuple[list[SpeciesData], float, float]:
    missing = [s for s in system.species if s not in system.species_data]
    if missing:
        raise CaseInputError(
            f"adiabatic=True needs species data (enthalpies) for every species; none for {', '.join(missing)}"
        )
    data = [system.species_data[s] for s in system.species]
    lo = max(d.range[0] for d in data)
    hi = min(d.range[1] for d in data)
    return data, lo, hi


def _h(data: Sequence[SpeciesData], T: np.ndarray) -> np.ndarray:
    return np.column_stack([d.h(T) for d in data])


def _cp(data: Sequence[SpeciesData], T: np.ndarray) -> np.ndarray:
    return np.column_stack([d.cp(T) for d in data])


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
) -> EquilibriumResult:
    """The adiabatic outlet of every case (see :meth:`ReactionSystem.solve`
    with ``adiabatic=True``).

    ``solve`` is the system's isothermal solve; ``tol``, ``max_iter`` and
    ``x0`` apply to every equilibrium solve inside (``x0`` to the first),
    ``invalid="raise"`` raises on the first bad case, and ``max_T_iter``
    bounds the temperature iterations.
    """
    data, lo, hi = _enthalpy_data(system)
    options: dict[str, Any] = {"threads": threads, "tol": tol, "max_iter": max_iter}
    base = solve(feed, T=T, P=P, invalid=invalid, x0=x0, **options)
    n = len(base)
    feed_rows = np.asarray(base.feed)
    T_in = np.broadcast_to(np.asarray(base.T, dtype=float), (n,)).copy()
    P_rows = np.asarray(base.P, dtype=float)
    bad = base.status == Status.INVALID_INPUT
    newton = base.iterations.astype(np.int64)
    T_steps = np.zeros(n, dtype=np.int64)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # range warnings: the bracket keeps T inside
        h_in = _h(data, np.where(bad, lo, T_in))
        H_in = np.sum(feed_rows * h_in, axis=1)
        scale = np.sum(np.abs(feed_rows * h_in), axis=1) + 1.0

        def residual(
            Tc: np.ndarray, extents: np.ndarray | None = None
        ) -> tuple[EquilibriumResult, np.ndarray, np.ndarray]:
            r = solve(feed_rows, T=Tc, P=P_rows, sensitivities=True, x0=extents, **options)
            h = _h(data, Tc)
            f = np.sum(r.amounts * h, axis=1) - H_in
            df = np.sum(r.amounts * _cp(data, Tc), axis=1) + np.sum(h * r.sensitivity("T"), axis=1)
            return r, f, df

        a = np.full(n, lo)
        b = np.full(n, hi)
        _, fa, _ = residual(a)
        _, fb, _ = residual(b)
        bracketed = np.isfinite(fa) & np.isfinite(fb) & (np.sign(fa) != np.sign(fb)) | (fa == 0) | (fb == 0)
        bracketed &= ~bad
        Tc = np.clip(np.where(bad, lo, T_in), lo, hi)
        res, f, df = residual(Tc, base.extents)
        newton += res.iterations
        for _ in range(max_T_iter):
            done = ~bracketed | (np.abs(f) <= energy_tol * scale)
            if done.all():
                break
            # keep the bracket [a, b] around the root (f rises with T: the
            # mixture's enthalpy grows with temperature)
            below = f < 0
            a = np.where(below & ~done, np.maximum(a, Tc), a)
            b = np.where(~below & ~done, np.minimum(b, Tc), b)
            with np.errstate(divide="ignore", invalid="ignore"):
                step = Tc - f / df
            inside = np.isfinite(step) & (step > a) & (step < b)
            Tn = np.where(inside, step, 0.5 * (a + b))
            Tc = np.where(done, Tc, Tn)
            res, f, df = residual(Tc, res.extents)
            newton += np.where(done, 0, res.iterations)
            T_steps += ~done
    status = res.status.copy()
    at_equilibrium = res.converged
    status[~bracketed & at_equilibrium] = Status.OUT_OF_RANGE
    not_closed = bracketed & ~(np.abs(f) <= energy_tol * scale) & at_equilibrium
    status[not_closed] = Status.ITERATION_LIMIT
    amounts, extents = res.amounts, res.extents
    if bad.any():
        status[bad] = Status.INVALID_INPUT
        amounts[bad] = np.nan
        extents[bad] = np.nan
        Tc = np.where(bad, np.nan, Tc)
    out = EquilibriumResult(
        system, amounts, extents, None, status, newton.astype(np.uint32), feed_rows, P_rows, Tc, res.lnK
    )
    out.T_iterations = T_steps
    out.absent = res.absent
    if sensitivities:
        assert res._sens is not None  # every residual solve computes them
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            T_safe = np.where(np.isfinite(Tc), Tc, lo)
            out._sens = res._sens
            out._energy = EnergyBalance(
                h_out=_h(data, T_safe),
                h_in=h_in,
                cp_feed=np.sum(feed_rows * _cp(data, np.where(bad, lo, T_in)), axis=1),
                cp_out=_cp(data, T_safe),
                slope_out=system.dlnK_dT(T_safe),
                T_in=T_in,
            )
        for array in out._sens:
            array[~out.converged] = np.nan
    return out
