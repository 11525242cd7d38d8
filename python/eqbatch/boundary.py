"""Where a pure condensed phase just appears: the carbon limit and its kin.

:func:`phase_boundary` finds, per case, the value of one input (the
temperature, the pressure, or one species' feed) at which a pure condensed
species is exactly at its limit: activity 1 and amount 0. On one side of the
boundary the species is present; on the other it is absent with an activity
below 1. The search brackets the boundary with the user's ``[lo, hi]`` and
narrows it by the Illinois variant of regula falsi (M. Dowell and P. Jarratt,
"A modified regula falsi method for computing the root of an equation", BIT
11, 1971) on a function that is continuous through the boundary and changes
sign there:

* ``ln a`` of the species where it is absent (negative; the implied activity
  of :attr:`EquilibriumResult.activities`),
* its amount over the total feed where it is present (positive).

Every iteration is one batched solve of the cases still open (the core
decides the phases of each), so a million-case carbon-limit study costs a few
dozen batch solves. Equilibrium is a thermodynamic limit: a carbon-free
equilibrium does not mean a carbon-free reactor (kinetics, local conditions
and catalyst decide that); designers apply their own margins and codes.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from eqbatch.columns import FEED, LNK, PRESSURE, STATUS, TEMPERATURE
from eqbatch.errors import CaseInputError
from eqbatch.spec import PURE_KINDS
from eqbatch.status import CONVERGED_CODES, Status

if TYPE_CHECKING:
    from eqbatch.result import EquilibriumResult
    from eqbatch.system import ReactionSystem

#: Relative width of the bracket at which the search stops.
BRACKET_TOL = 1e-12


@dataclass
class PhaseBoundary:
    """The outcome of :func:`phase_boundary`, per case.

    Attributes
    ----------
    value : ndarray, shape (N,)
        The value of ``vary`` at the boundary (K, bar or mol); NaN where there
        is none in the bracket or a solve failed.
    status : ndarray of uint8, shape (N,)
        ``Status.CONVERGED`` where found, ``Status.NO_BOUNDARY`` where the phase
        is present at both ends of the bracket or at neither, else the status
        of the solve that failed.
    present_below : ndarray of bool, shape (N,)
        Whether the phase is present below the boundary (at ``lo``) rather
        than above it.
    iterations : int
        Batched solves the search took.
    result : EquilibriumResult
        The equilibrium at ``value`` (the species at zero amount, activity 1;
        rows without a boundary are those at ``lo``).
    """

    species: str
    vary: str
    value: np.ndarray
    status: np.ndarray
    present_below: np.ndarray
    iterations: int
    result: EquilibriumResult


def phase_boundary(
    system: ReactionSystem,
    species: str,
    vary: str,
    lo: Any,
    hi: Any,
    *,
    feed: Any,
    T: Any = None,
    P: Any = None,
    lnK: Any = None,
    K: Any = None,
    log10K: Any = None,
    max_iter: int = 100,
    threads: int | None = None,
) -> PhaseBoundary:
    """Where the pure condensed ``species`` just appears, per case.

    Parameters
    ----------
    system : ReactionSystem
    species : str
        A species whose phase is ``"solid"`` or ``"pure_liquid"``.
    vary : str
        ``"T"`` (K; the K data come from the system's data at each trial),
        ``"P"`` (bar) or the name of a species whose feed amount is varied
        (mol).
    lo, hi : float or array_like, shape (N,)
        The bracket, per case or for all.
    feed, T, P, lnK, K, log10K
        The other inputs, as for :meth:`ReactionSystem.solve` (at most one of
        ``lnK``, ``K``, ``log10K``; with ``vary="T"``, no ``T`` or K; with
        ``vary="P"``, no ``P``).
    max_iter : int, default 100
        Batched solves before the cases still open are given up
        (``Status.ITERATION_LIMIT``).
    threads : int, optional

    Returns
    -------
    PhaseBoundary

    Raises
    ------
    eqbatch.CaseInputError
        An unknown or non-pure species, an unknown ``vary``, or inputs that
        clash with it.

    Examples
    --------
    Boudouard, C + CO2 = 2 CO with K = 2 at 1 bar, from 1 mol CO2 and some CO:
    graphite forms once y_CO^2 / y_CO2 exceeds K, that is above 1 + sqrt(3)
    mol CO (y_CO = sqrt(3) - 1 solves y^2 / (1 - y) = 2):

    >>> import numpy as np
    >>> from eqbatch import ReactionSystem, phase_boundary
    >>> system = ReactionSystem(["C", "CO2", "CO"], ["C + CO2 = 2 CO"], phases={"C": "solid"})
    >>> found = phase_boundary(system, "C", "CO", 0.1, 10.0, feed=[0.0, 1.0, 0.0], lnK=np.log(2.0))
    >>> round(float(found.value[0]), 9), found.present_below.tolist()
    (2.732050808, [False])
    """
    given = [name for name, v in (("lnK", lnK), ("K", K), ("log10K", log10K)) if v is not None]
    if len(given) > 1:
        raise CaseInputError(f"phase_boundary: give one of lnK, K, log10K, not {' and '.join(given)}")
    if K is not None:
        with np.errstate(divide="ignore", invalid="ignore"):
            lnK = np.log(np.asarray(K, dtype=float))
    elif log10K is not None:
        lnK = np.asarray(log10K, dtype=float) * np.log(10.0)
    names = system.species
    if species not in names:
        raise CaseInputError(f"phase_boundary: {species!r} is not a species (species are {', '.join(names)})")
    k = names.index(species)
    if system.phases[k] not in PURE_KINDS:
        raise CaseInputError(
            f"phase_boundary: {species!r} is in the {system.phases[k]} phase; a boundary needs a pure "
            "condensed species (phases solid or pure_liquid)"
        )
    if vary not in ("T", "P") and vary not in names:
        raise CaseInputError(f"phase_boundary: vary must be 'T', 'P' or a species name, got {vary!r}")
    if vary == "T" and (T is not None or lnK is not None):
        raise CaseInputError(
            "phase_boundary: with vary='T' give neither T nor lnK (K comes from the data at T)"
        )
    if vary == "P" and P is not None:
        raise CaseInputError("phase_boundary: with vary='P' give no P")
    feed_arr = np.atleast_2d(np.asarray(feed, dtype=float))
    sizes = [feed_arr.shape[0], np.size(lo), np.size(hi), np.size(T), np.size(P)]
    if lnK is not None and np.ndim(lnK) == 2:
        sizes.append(np.shape(lnK)[0])
    n = max(sizes)
    lo_arr = np.broadcast_to(np.asarray(lo, dtype=float), (n,)).copy()
    hi_arr = np.broadcast_to(np.asarray(hi, dtype=float), (n,)).copy()
    if np.any(~(lo_arr < hi_arr)):
        raise CaseInputError("phase_boundary: every bracket needs lo < hi")
    feed_arr = np.broadcast_to(feed_arr, (n, len(names))).copy()
    per_case = {
        "T": None if T is None else _rows(T, n, None),
        "P": None if P is None else _rows(P, n, None),
        "lnK": None if lnK is None else _rows(lnK, n, system.n_reactions),
    }
    column = names.index(vary) if vary in names else -1

    def signed(value: np.ndarray, idx: np.ndarray) -> tuple[np.ndarray, EquilibriumResult]:
        """The search function at ``value`` for cases ``idx``, and the solve."""
        f = feed_arr[idx].copy()
        kwargs: dict[str, Any] = {key: None if v is None else v[idx] for key, v in per_case.items()}
        if vary == "T":
            kwargs["T"] = value
        elif vary == "P":
            kwargs["P"] = value
        else:
            f[:, column] = value
        res = system.solve(f, tol=1e-13, threads=threads, **kwargs)
        amount = res.amounts[:, k]
        with np.errstate(divide="ignore", invalid="ignore"):
            out = np.where(amount > 0, amount / f.sum(axis=1), np.log(res.activities[:, k]))
        out[~np.isin(res.status, CONVERGED_CODES)] = np.nan
        return out, res

    everything = np.arange(n)
    f_lo, res_lo = signed(lo_arr, everything)
    f_hi, _ = signed(hi_arr, everything)
    status = np.full(n, Status.CONVERGED, dtype=np.uint8)
    failed = np.isnan(f_lo) | np.isnan(f_hi)
    status[failed] = np.where(np.isnan(f_lo), res_lo.status, Status.STALLED)[failed]
    none = ~failed & (np.sign(f_lo) == np.sign(f_hi)) & (f_lo != 0) & (f_hi != 0)
    status[none] = Status.NO_BOUNDARY
    value = np.full(n, np.nan)
    value[f_lo == 0] = lo_arr[f_lo == 0]
    value[f_hi == 0] = hi_arr[f_hi == 0]
    open_ = np.flatnonzero(~failed & ~none & (f_lo != 0) & (f_hi != 0))
    a, b, fa, fb = lo_arr[open_], hi_arr[open_], f_lo[open_], f_hi[open_]
    iterations = 2
    while open_.size and iterations < max_iter:
        c = b - fb * (b - a) / (fb - fa)
        inside = (c > np.minimum(a, b)) & (c < np.maximum(a, b))
        c = np.where(inside, c, 0.5 * (a + b))
        fc, _ = signed(c, open_)
        iterations += 1
        bad = np.isnan(fc)
        if bad.any():
            status[open_[bad]] = Status.STALLED
        # Illinois: keep the bracket; halve the stale end's value when the
        # same end is kept twice
        flip = np.sign(fc) == np.sign(fb)
        fa = np.where(flip, fa * 0.5, fb)
        a = np.where(flip, a, b)
        b, fb = c, fc
        done = bad | (fc == 0) | (np.abs(b - a) <= BRACKET_TOL * np.maximum(np.abs(a), np.abs(b)))
        value[open_[done & ~bad]] = b[done & ~bad]
        keep = ~done
        open_, a, b, fa, fb = open_[keep], a[keep], b[keep], fa[keep], fb[keep]
    status[open_] = Status.ITERATION_LIMIT
    found = ~np.isnan(value) & (status == Status.CONVERGED)
    status[~found & (status == Status.CONVERGED)] = Status.STALLED
    at = np.where(found, value, lo_arr)
    _, result = signed(at, everything)
    return PhaseBoundary(
        species=species,
        vary=vary,
        value=np.where(found, value, np.nan),
        status=status,
        present_below=f_lo > 0,
        iterations=iterations + 1,
        result=result,
    )


def _rows(value: Any, n: int, width: int | None) -> np.ndarray:
    """``value`` with one row per case: (N,) for a per-case number
    (``width`` None), (N, width) for a per-case vector (one row, or a number
    for one reaction, repeated)."""
    arr = np.asarray(value, dtype=float)
    if width is None:
        return np.broadcast_to(arr, (n,)).copy()
    if arr.ndim < 2:
        arr = arr.reshape(1, -1)
    return np.broadcast_to(arr, (n, width)).copy()


def boundary_file(
    system: ReactionSystem,
    src: str | Path,
    dst: str | Path,
    species: str,
    vary: str,
    lo: float,
    hi: float,
    *,
    threads: int | None = None,
    overwrite: bool = False,
) -> PhaseBoundary:
    """:func:`phase_boundary` for every row of a Parquet case table.

    The input has a sweep's columns (``feed_<species>``, missing ones zero;
    ``P_bar``, default P0; ``T_K``; ``lnK_<label>``, all or none), less the
    one being varied. The output is the input with ``boundary_<column>`` (the
    varied column's name: ``boundary_T_K``, ``boundary_P_bar`` or
    ``boundary_feed_<species>``), ``present_below`` and ``status`` added. The
    table is read whole (sweeps stream; a boundary search revisits every
    case dozens of times).

    Raises
    ------
    eqbatch.CaseInputError
        Missing or clashing columns, an existing output without
        ``overwrite``, or a bad request (see :func:`phase_boundary`).
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    src, dst = Path(src), Path(dst)
    if dst.exists() and not overwrite:
        raise CaseInputError(f"{dst} exists; pass overwrite=True (--overwrite) to replace it")
    table = pq.read_table(src)
    names = table.column_names
    varied = TEMPERATURE if vary == "T" else PRESSURE if vary == "P" else FEED + vary
    if varied in names:
        raise CaseInputError(f"{src}: column {varied!r} is what the search varies; drop it")
    n = table.num_rows

    def column(name: str) -> np.ndarray:
        return np.asarray(table.column(name).to_numpy(zero_copy_only=False), dtype=float)

    feed = np.column_stack(
        [column(FEED + sp) if FEED + sp in names else np.zeros(n) for sp in system.species]
    )
    lnk_cols = [LNK + label for label in system.labels]
    given = [c for c in lnk_cols if c in names]
    if given and len(given) != len(lnk_cols):
        raise CaseInputError(f"{src}: give every lnK_<label> column or none")
    lnK = np.column_stack([column(c) for c in lnk_cols]) if given else None
    T = column(TEMPERATURE) if TEMPERATURE in names else None
    P = column(PRESSURE) if PRESSURE in names else None
    if vary != "P" and P is None:
        P = np.full(n, system.P0)
    found = phase_boundary(system, species, vary, lo, hi, feed=feed, T=T, P=P, lnK=lnK, threads=threads)
    out = (
        table.append_column("boundary_" + varied, pa.array(found.value))
        .append_column("present_below", pa.array(found.present_below))
        .append_column(STATUS, pa.array(found.status, type=pa.uint8()))
    )
    tmp = dst.with_name(f".{dst.name}.tmp")
    pq.write_table(out, tmp)
    os.replace(tmp, dst)
    return found
