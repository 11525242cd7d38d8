"""Case tables for sweeps: full factorial grids and space-filling samples
(Latin hypercube, Sobol) of the swept columns, reproducible with a seed."""

from __future__ import annotations

import os
from collections.abc import Mapping
from typing import Any

import numpy as np

from eqbatch.errors import CaseInputError


def make_grid(
    ranges: Mapping[str, tuple[float, float, int]],
    *,
    constants: Mapping[str, float] | None = None,
    sample: str | None = None,
    n: int | None = None,
    seed: int | None = None,
    log: tuple[str, ...] = (),
) -> Any:
    """A case table (``pyarrow.Table``).

    Parameters
    ----------
    ranges : mapping column -> (low, high, count)
        Swept columns. Without ``sample`` the table is the full factorial
        grid of ``count`` evenly spaced values per column (first column
        slowest); with ``sample`` the counts are ignored.
    constants : mapping column -> value, optional
        Columns with the same value in every row.
    sample : {"lhs", "sobol"}, optional
        A space-filling sample of ``n`` rows (``scipy.stats.qmc``).
    seed : int, optional
        Seed of the sampler (the same seed gives the same table).
    log : tuple of column names
        Columns spaced or sampled evenly in the logarithm (for pressures).

    Examples
    --------
    >>> t = make_grid({"T_K": (800, 1000, 3), "P_bar": (1, 10, 2)}, constants={"feed_CH4": 1.0})
    >>> t.num_rows, t.column("T_K").to_pylist()[:3]
    (6, [800.0, 800.0, 900.0])
    """
    import pyarrow as pa

    if not ranges:
        raise CaseInputError("give at least one swept column")
    names = list(ranges)
    lows = np.array([float(ranges[c][0]) for c in names])
    highs = np.array([float(ranges[c][1]) for c in names])
    is_log = np.array([c in log for c in names])
    if np.any(is_log & ((lows <= 0) | (highs <= 0))):
        raise CaseInputError("a logarithmic range needs positive bounds")
    lo = np.where(is_log, np.log(np.where(is_log, lows, 1.0)), lows)
    hi = np.where(is_log, np.log(np.where(is_log, highs, 1.0)), highs)
    if sample is None:
        axes = []
        for c, a, b in zip(names, lo, hi):
            count = int(ranges[c][2])
            if count < 1:
                raise CaseInputError(f"{c}: the count must be at least 1")
            axes.append(np.linspace(a, b, count))
        mesh = np.meshgrid(*axes, indexing="ij")
        unit = np.column_stack([m.reshape(-1) for m in mesh])
        values = unit
    else:
        from scipy.stats import qmc

        if n is None or n < 1:
            raise CaseInputError("a sample needs n >= 1 rows")
        if sample == "lhs":
            sampler = qmc.LatinHypercube(d=len(names), seed=seed)
        elif sample == "sobol":
            sampler = qmc.Sobol(d=len(names), scramble=True, seed=seed)
        else:
            raise CaseInputError(f"sample must be 'lhs' or 'sobol', got {sample!r}")
        values = qmc.scale(sampler.random(n), lo, hi) if np.any(hi > lo) else np.tile(lo, (n, 1))
    values = np.array(values, dtype=float)
    values[:, is_log] = np.exp(values[:, is_log])
    rows = values.shape[0]
    columns = {c: values[:, k] for k, c in enumerate(names)}
    for c, v in (constants or {}).items():
        if c in columns:
            raise CaseInputError(f"{c} is both swept and constant")
        columns[c] = np.full(rows, float(v))
    return pa.table(columns)


def write_grid(path: str | os.PathLike[str], table: Any) -> None:
    """Write a case table to Parquet, or to CSV with a header row where
    ``path`` ends in ``.csv`` (atomically: a temporary name, then rename)."""
    import pyarrow.csv
    import pyarrow.parquet as pq

    path = os.fspath(path)
    tmp = os.path.join(os.path.dirname(os.path.abspath(path)), f".{os.path.basename(path)}.tmp")
    if path.lower().endswith(".csv"):
        pyarrow.csv.write_csv(table, tmp)
    else:
        pq.write_table(table, tmp, write_page_checksum=True)
    with open(tmp, "rb") as written:
        os.fsync(written.fileno())
    os.replace(tmp, path)
