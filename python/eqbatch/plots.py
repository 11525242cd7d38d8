"""PNG pictures (matplotlib, imported only when a plot is asked for)."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from eqbatch.columns import parse_output
from eqbatch.errors import CaseInputError
from eqbatch.uncertainty import MonteCarloResult
from eqbatch.units import PRESSURE_COLUMNS, TEMPERATURE_COLUMNS
from eqbatch.where import columns_of, parse_where, where_mask

__all__ = ["histogram", "is_swept_input", "parse_output", "result_plot", "tornado"]


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _save(plt: Any, fig: Any, path: str | Path, dpi: int = 100) -> Path:
    fig.tight_layout()
    path = Path(path)
    fig.savefig(path, dpi=dpi)
    plt.close(fig)
    return path


def histogram(mc: MonteCarloResult, outputs: Sequence[str], path: str | Path) -> Path:
    """Histograms of Monte Carlo outputs, one panel each, with the 5/50/95th
    percentiles marked."""
    plt = _pyplot()
    fig, axes = plt.subplots(1, len(outputs), figsize=(4.2 * len(outputs), 3.4), squeeze=False)
    for ax, name in zip(axes[0], outputs):
        of, what = parse_output(name)
        v = mc.values(of, what)[mc.converged]
        ax.hist(v, bins=60, color="#4477aa", alpha=0.85)
        for q in (5, 50, 95):
            ax.axvline(np.percentile(v, q), color="k", ls="--" if q != 50 else "-", lw=1)
        ax.set_xlabel(name)
        ax.set_ylabel("samples")
        ax.set_title(f"{mc.samples:,} samples")
    return _save(plt, fig, path)


def tornado(mc: MonteCarloResult, output: str, path: str | Path) -> Path:
    """Tornado chart: the output with each reaction's ln K moved by -1 and +1
    standard deviation, largest swing on top."""
    plt = _pyplot()
    of, what = parse_output(output)
    rows = list(mc.tornado(of, what).itertuples())
    base = mc.nominal_value(of, what)
    fig, ax = plt.subplots(figsize=(6.4, 0.6 * len(rows) + 1.4))
    for k, (_label, low, high) in enumerate(reversed(rows)):
        ax.barh(k, low - base, left=base, color="#cc6677")
        ax.barh(k, high - base, left=base, color="#117733")
    ax.set_yticks(range(len(rows)), [r[0] for r in reversed(rows)])
    ax.axvline(base, color="k", lw=1)
    ax.set_xlabel(f"{output} (red: ln K - 1 sigma, green: + 1 sigma)")
    return _save(plt, fig, path)


#: Most rows a plot reads; a larger file is drawn from a random sample of
#: this many (said on the plot).
MAX_PLOT_ROWS = 200_000
#: Above this many distinct ``by`` values the lines take a colour scale, not
#: a legend.
MAX_LEGEND = 10
#: Input columns a sweep may vary (by exact name or prefix; outputs such as
#: ``T_out_K`` are not among them): a plot that does not show them and sees
#: them vary averages over them, and says which.
_SWEPT_PREFIXES = ("feed_", "lnK_", "approach_")
_SWEPT = {*PRESSURE_COLUMNS, *TEMPERATURE_COLUMNS, "T_in_K", "S_C", "adiabatic", "duty_kJ", "H_in_kJ"}


def is_swept_input(name: str) -> bool:
    """Whether a result column is an input a sweep may vary (not an output).

    Examples
    --------
    >>> is_swept_input("feed_CH4"), is_swept_input("T_C"), is_swept_input("T_out_K")
    (True, True, False)
    """
    return name.startswith(_SWEPT_PREFIXES) or name in _SWEPT


def result_plot(
    path: str | Path,
    out: str | Path,
    *,
    x: str,
    y: str,
    by: str | None = None,
    z: str | None = None,
    where: Sequence[str] | None = None,
    size: tuple[float, float] = (6.4, 4.4),
    dpi: int = 100,
    max_rows: int = MAX_PLOT_ROWS,
    notes: list[str] | None = None,
) -> Path:
    """Plot a sweep's output: ``y`` against ``x`` with one line per value of
    ``by`` (a colour scale beyond :data:`MAX_LEGEND` values), or, with ``z``,
    a heat map of ``z`` over the swept ``x`` and ``y``. ``where`` filters
    the rows first (``["P_bar=20", "status_name=converged"]``, see
    :mod:`eqbatch.where`). Where input columns not shown still vary, the
    plotted value is their mean, and the title names them; a file of more
    than ``max_rows`` rows is drawn from a random sample of that many, and
    the title says so (and ``notes``, a list, receives those lines). Writes
    a PNG of ``size`` inches at ``dpi``."""
    import pyarrow.parquet as pq

    conditions = parse_where(where)
    cols = [c for c in (x, y, by, z) if c]
    try:
        names = pq.read_schema(path).names
    except Exception as err:  # pyarrow raises several types for missing and bad files
        raise CaseInputError(f"{path}: not a readable Parquet file ({type(err).__name__})") from None
    missing = [c for c in cols + columns_of(conditions) if c not in names]
    if missing:
        shown = ", ".join(n for n in names if not n.startswith("__"))
        raise CaseInputError(f"{path}: no column {', '.join(map(repr, missing))} (columns are {shown})")
    swept = [n for n in names if is_swept_input(n) and n not in cols]
    read = list(dict.fromkeys(cols + columns_of(conditions) + swept))
    table = pq.read_table(path, columns=read, page_checksum_verification=True)
    total = table.num_rows
    keep = where_mask(conditions, lambda c: table.column(c).to_numpy(zero_copy_only=False), total)
    rows = np.flatnonzero(keep)
    if rows.size == 0:
        raise CaseInputError(f"{path}: no row has {' and '.join(map(str, conditions))}")
    notes = [] if notes is None else notes
    notes += [" and ".join(map(str, conditions))] if conditions else []
    if rows.size > max_rows:
        rows = np.sort(np.random.default_rng(0).choice(rows, size=max_rows, replace=False))
        notes.append(f"a random sample of {max_rows:,} of {int(keep.sum()):,} rows")
    data = {c: table.column(c).to_numpy(zero_copy_only=False)[rows].astype(float) for c in cols}
    varying = [c for c in swept if np.unique(table.column(c).to_numpy(zero_copy_only=False)[rows]).size > 1]
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=size)
    if z is None:
        groups: list[Any] = [None] if by is None else list(np.unique(data[by]))
        scale = by is not None and len(groups) > MAX_LEGEND
        colours = plt.get_cmap("viridis")
        span = (min(groups), max(groups)) if scale else (0.0, 1.0)
        for g in groups:
            mask = np.ones(rows.size, bool) if by is None else data[by] == g
            xs = np.unique(data[x][mask])
            ys = [np.nanmean(data[y][mask & (data[x] == v)]) for v in xs]
            if scale:
                share = (g - span[0]) / (span[1] - span[0]) if span[1] > span[0] else 0.5
                ax.plot(xs, ys, "-", lw=1, color=colours(share))
            else:
                ax.plot(xs, ys, "o-", ms=3, label=None if g is None else f"{by} = {g:g}")
        ax.set_xlabel(x)
        ax.set_ylabel(y)
        if scale:
            mappable = plt.cm.ScalarMappable(cmap=colours, norm=plt.Normalize(*span))
            fig.colorbar(mappable, ax=ax, label=by)
        elif by is not None:
            ax.legend(fontsize=8)
    else:
        x_values, y_values = np.unique(data[x]), np.unique(data[y])
        grid = np.full((y_values.size, x_values.size), np.nan)
        xi = np.searchsorted(x_values, data[x])
        yi = np.searchsorted(y_values, data[y])
        sums = np.zeros_like(grid)
        counts = np.zeros_like(grid)
        np.add.at(sums, (yi, xi), np.nan_to_num(data[z]))
        np.add.at(counts, (yi, xi), 1)
        with np.errstate(invalid="ignore"):
            grid = sums / counts
        mesh = ax.pcolormesh(x_values, y_values, grid, shading="nearest", cmap="viridis")
        fig.colorbar(mesh, ax=ax, label=z)
        ax.set_xlabel(x)
        ax.set_ylabel(y)
    if varying:
        notes.append("each point: mean over " + ", ".join(varying))
    title = Path(path).name + "".join(f"\n{note}" for note in notes)
    ax.set_title(title, fontsize=8)
    ax.grid(True, alpha=0.3)
    return _save(plt, fig, out, dpi)
