"""What a solve's inputs become: contiguous float64 rows for the core.

A feed is ``(N, S)`` in the order of the system's species; equilibrium
constants and starting extents are ``(N, R)`` in the order of its reactions;
pressure and temperature are one value per case. Arrays are taken as they
are where they already fit (the fast path optimisers use); labelled inputs
(a mapping, a pandas Series or DataFrame, a numpy structured array, a pyarrow
Table or RecordBatch) are aligned by label. The options of a solve are
checked here too. A bad input raises :class:`~eqbatch.CaseInputError` (or
:class:`~eqbatch.UnknownSpeciesError`) naming it and what would be valid.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from eqbatch.errors import CaseInputError, UnknownSpeciesError
from eqbatch.kdata import LN10
from eqbatch.spec import ArrayLike, SystemSpec

#: Range of ``tol`` accepted by ``solve()``: above 1e-3 a case "converges" with
#: its K off by more than 0.1 %; below 1e-15 the residual is under the rounding
#: of ln K itself (about |ln K| x 2.2e-16), which no float64 iterate can meet.
TOL_RANGE = (1e-15, 1e-3)

#: Largest ``max_iter`` (the core counts iterations in 32 bits).
MAX_ITER = 2**32 - 1


def checked_options(tol: Any, invalid: Any, max_iter: Any, threads: Any) -> float:
    """``tol`` as a float after checking every option of a solve.

    Raises
    ------
    CaseInputError
        ``tol`` outside :data:`TOL_RANGE`, ``invalid`` not ``"mark"`` or
        ``"raise"``, ``max_iter`` not an integer from 0 to :data:`MAX_ITER`,
        or ``threads`` not a positive integer.
    """
    lo, hi = TOL_RANGE
    if not (type(tol) is float and lo <= tol <= hi):
        valid = isinstance(tol, (int, float, np.integer, np.floating)) and not isinstance(tol, bool)
        if not (valid and lo <= float(tol) <= hi):
            raise CaseInputError(
                f"tol must be a number from {lo:g} to {hi:g} (the largest |ln Q - ln K| accepted per "
                f"reaction; {hi:g} already lets K be off by 0.1 %, and below {lo:g} float64 cannot "
                f"resolve ln K); got {tol!r}"
            )
        tol = float(tol)
    if invalid not in ("mark", "raise"):
        raise CaseInputError(f"invalid must be 'mark' or 'raise', got {invalid!r}")
    if max_iter != 200 and not (
        isinstance(max_iter, (int, np.integer))
        and not isinstance(max_iter, bool)
        and 0 <= max_iter <= MAX_ITER
    ):
        raise CaseInputError(f"max_iter must be an integer from 0 to {MAX_ITER:,}, got {max_iter!r}")
    if threads is not None and not (isinstance(threads, (int, np.integer)) and threads >= 1):
        raise CaseInputError(f"threads must be a positive integer, got {threads!r}")
    return tol


def case_column(value: Any, name: str) -> np.ndarray:
    """A per-case input (``P``, ``T``) as a contiguous float64 ``(N,)`` array.

    Only a scalar, ``(1,)`` or ``(N,)`` is one value per case: a ``(N, 1)``
    column or a ``(N, M)`` grid would broadcast to a grid under numpy's rules,
    so it is refused rather than flattened.
    """
    if type(value) is float or type(value) is int:
        return np.array([value], dtype=np.float64)
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim == 1:
        return arr if arr.flags.c_contiguous else np.ascontiguousarray(arr)
    if arr.ndim == 0:
        return arr.reshape(1)
    raise CaseInputError(
        f"{name} must be a scalar or a 1-D array with one value per case; got shape {arr.shape} "
        "(flatten a column with .ravel(); for a grid, flatten every input alike, e.g. from np.meshgrid)"
    )


def feed_array(spec: SystemSpec, feed: Any) -> np.ndarray:
    """The feed as ``(N, S)`` float64, C-contiguous, in the order of ``spec.species``.

    Raises
    ------
    CaseInputError
        A shape that does not fit, or complex values.
    UnknownSpeciesError
        A label that is not a species.
    """
    # Fast path for what optimisers pass: a float64 vector or matrix.
    if type(feed) is np.ndarray and feed.dtype == np.float64 and feed.shape[-1] == len(spec.species):
        if feed.ndim == 1:
            return feed.reshape(1, -1) if feed.flags.c_contiguous else np.ascontiguousarray(feed)[None]
        if feed.ndim == 2 and feed.flags.c_contiguous:
            return feed
    labelled = _labelled(feed)
    if labelled is not None:
        return _align(*labelled, "feed", spec.species, feed=True)
    if np.iscomplexobj(feed):
        raise CaseInputError("feed has complex values; amounts must be real numbers (mol)")
    arr = np.asarray(feed, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr.reshape(1, -1)
    n_species = len(spec.species)
    if arr.ndim != 2 or arr.shape[1] != n_species:
        raise CaseInputError(
            f"feed must have shape (N, {n_species}) or ({n_species},) in the species order "
            f"{', '.join(spec.species)}; got shape {np.shape(feed)}"
        )
    return arr if arr.flags.c_contiguous else np.ascontiguousarray(arr)


def reaction_rows(spec: SystemSpec, value: Any, name: str) -> np.ndarray:
    """A per-reaction input (``lnK``, ``K``, ``log10K``, ``x0``) as ``(N, R)``
    float64, C-contiguous, in the order of ``spec.labels``.

    Raises
    ------
    CaseInputError
        A shape that does not fit, or labels that are not every reaction's.
    """
    width = len(spec.labels)
    if type(value) is np.ndarray and value.dtype == np.float64 and value.flags.c_contiguous:
        if value.ndim == 2 and value.shape[1] == width:
            return value
        if value.ndim == 1 and width > 1 and value.shape[0] == width:
            return value.reshape(1, -1)
    labelled = _labelled(value)
    if labelled is not None:
        return _align(*labelled, name, spec.labels, feed=False)
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim <= 1 and width == 1:
        arr = arr.reshape(-1, 1)
    elif arr.ndim == 1:
        arr = arr.reshape(1, -1)
    if arr.ndim != 2 or arr.shape[1] != width:
        raise CaseInputError(
            f"{name} must have shape (N, {width}) or ({width},), one column per reaction "
            f"({', '.join(spec.labels)}); got shape {np.shape(value)}"
        )
    return arr if arr.flags.c_contiguous else np.ascontiguousarray(arr)


def lnk_array(spec: SystemSpec, lnK: Any, K: Any, log10K: Any, T: np.ndarray | None) -> np.ndarray:
    """``(N, R)`` ln K of a solve: from ``lnK``, ``K`` or ``log10K`` (at most
    one), else from the system's K data at ``T``, else its constants.

    Raises
    ------
    CaseInputError
        More than one of ``lnK``, ``K``, ``log10K``; none and no K data to use.
    """
    if K is None and log10K is None and type(lnK) in (np.ndarray, list, tuple, float, int):
        return reaction_rows(spec, lnK, "lnK")
    given = [(n, v) for n, v in (("lnK", lnK), ("K", K), ("log10K", log10K)) if v is not None]
    if len(given) > 1:
        raise CaseInputError(f"give only one of lnK=, K=, log10K= (got {', '.join(n for n, _ in given)})")
    if given:
        name, value = given[0]
        arr = reaction_rows(spec, value, name)
        if name == "K":
            with np.errstate(divide="ignore", invalid="ignore"):
                arr = np.log(arr)
        elif name == "log10K":
            arr = arr * LN10
        return arr
    if T is not None:
        return spec.lnK(T.reshape(-1))
    if spec._constant_lnk is not None:
        return spec._constant_lnk
    if spec.needs_T:
        raise CaseInputError("this system's K data depend on temperature: give T= (kelvin)")
    raise CaseInputError(
        "no equilibrium constants: give lnK=, K= or log10K= (one value per reaction, "
        f"{', '.join(spec.labels)}), or T= for a system with K(T) data"
    )


def why_invalid(spec: SystemSpec, feed: np.ndarray, lnk: np.ndarray, P: float, T: float | None = None) -> str:
    """Which rule of the core's input check a case broke (see
    ``Status.INVALID_INPUT``); a bad ``T`` reaches the core as a NaN ln K, so
    it is named before ln K."""
    if not np.all(np.isfinite(feed) & (feed >= 0)):
        return f"the feed has a negative or non-finite amount: {feed.tolist()}"
    if not feed.sum() > 0:
        return "the total feed is zero"
    if T is not None and not 0.0 < T < math.inf:
        return f"the temperature {T} K is not positive and finite"
    if not np.all(np.isfinite(lnk)):
        return f"ln K is not finite: {dict(zip(spec.labels, lnk.tolist()))}"
    return f"the pressure {P} bar is not positive and finite"


def _float_column(column: Any) -> Any:
    """A pandas or Arrow column as float64 with missing values as NaN (an
    invalid case, not an error); anything else is left to ``np.asarray``."""
    module = type(column).__module__
    if module.startswith("pandas"):
        try:
            return column.to_numpy(dtype=np.float64, na_value=np.nan)
        except (TypeError, ValueError):
            return column.to_numpy()
    if module.startswith("pyarrow"):
        return column.to_numpy(zero_copy_only=False)
    return column


def _labelled(value: ArrayLike) -> tuple[list[Any], list[Any]] | None:
    """Labels and columns of an input that carries labels, else None.

    Labelled are: a mapping (label -> value(s)), a pandas Series (one case,
    labels in the index), a pandas DataFrame, a numpy structured array and a
    pyarrow Table or RecordBatch (one column per label, one row per case).
    pandas objects whose labels are the default positions ``0..k-1`` carry no
    labels and are read by position, as arrays are.
    """
    if isinstance(value, Mapping):
        return list(value.keys()), list(value.values())
    module = type(value).__module__
    if isinstance(value, np.ndarray):
        names = value.dtype.names
        return None if names is None else (list(names), [value[name] for name in names])
    if module.startswith("pandas"):
        import pandas as pd

        columns: list[Any] | None
        if isinstance(value, pd.Series):
            axis, columns = value.index, None
        elif isinstance(value, pd.DataFrame):
            axis = value.columns
            columns = [_float_column(value.iloc[:, k]) for k in range(value.shape[1])]
        else:
            return None
        if isinstance(axis, pd.RangeIndex) and axis.start == 0 and axis.step == 1:
            return None
        if columns is None:
            columns = list(_float_column(value))
        return list(axis), columns
    if module.startswith("pyarrow") and hasattr(value, "column_names"):
        return list(value.column_names), [_float_column(c) for c in value.columns]
    return None


def _align(
    labels: list[Any], columns: list[Any], name: str, names: Sequence[str], *, feed: bool
) -> np.ndarray:
    """``(N, len(names))`` float64 from labelled columns, each put in the
    column of its label (see :func:`_labelled`).

    For the feed a species without a label is zero feed; ln K, K, log10K and
    x0 need every reaction label. Unknown or repeated labels are refused,
    naming them and the valid ones.
    """
    position = {label: k for k, label in enumerate(names)}
    unknown = [label for label in labels if label not in position]
    if unknown:
        listed = ", ".join(map(repr, unknown))
        hint = ""
        if any(isinstance(label, (int, np.integer)) for label in unknown):
            hint = "; integer labels other than the default 0..k-1 of pandas are not read as positions"
        if feed:
            verb = "is not a species" if len(unknown) == 1 else "are not species"
            raise UnknownSpeciesError(
                f"{name}: {listed} {verb} of this system (species are {', '.join(names)}){hint}"
            )
        raise CaseInputError(f"{name}: {listed} not reaction label(s) (labels are {', '.join(names)}){hint}")
    if len(set(labels)) != len(labels):
        twice = sorted({str(label) for label in labels if labels.count(label) > 1})
        raise CaseInputError(f"{name}: {', '.join(twice)} given twice")
    if not feed and len(labels) != len(names):
        missing = [label for label in names if label not in labels]
        raise CaseInputError(f"{name}: no value for reaction(s) {', '.join(missing)}")
    values = []
    for label, column in zip(labels, columns):
        if np.iscomplexobj(column):
            raise CaseInputError(f"{name}[{label!r}] is complex; give real numbers: {column!r}")
        try:
            col = np.asarray(column, dtype=np.float64)
        except (TypeError, ValueError):
            raise CaseInputError(f"{name}[{label!r}] is not a number: {column!r}") from None
        if col.ndim > 1:
            raise CaseInputError(
                f"{name}[{label!r}] must be a scalar or 1-D array (one value per case); got shape {col.shape}"
            )
        values.append(col.reshape(-1))
    n = max((v.size for v in values), default=1)
    arr = np.zeros((n, len(names)))
    for label, col in zip(labels, values):
        if col.size not in (1, n):
            raise CaseInputError(
                f"{name}[{label!r}] has {col.size} values but others have {n}; give 1 or {n}"
            )
        arr[:, position[label]] = col
    return arr
