"""A study report: one self-contained HTML page a team can read, from a
sweep's results (and, in Python, a Monte Carlo study).

The page holds the system (species and phases, reactions, where each
species' data come from and over which temperatures), the ranges of the
cases, the count of cases by status with its name, plots of the conversion
of the fed species and of the main mole fractions against the most varied
input column, uncertainty results where a study is given, and the cautions.
Plots are PNGs inside the page (``data:`` addresses), so the file can be
mailed or archived alone.
"""

from __future__ import annotations

import base64
import html
import json
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from eqbatch.errors import CaseInputError
from eqbatch.hazards import caution
from eqbatch.plots import is_swept_input, result_plot
from eqbatch.status import status_words
from eqbatch.sweeps import system_digest
from eqbatch.system import ReactionSystem
from eqbatch.uncertainty import MonteCarloResult

_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 60rem; margin: 2rem auto; color: #222; }
h1 { font-size: 1.5rem; } h2 { font-size: 1.15rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5rem 0; } td, th { padding: 0.2rem 0.6rem; text-align: left; }
th { background: #eef; } tr:nth-child(even) td { background: #f7f7f7; }
.caution { background: #fff4e0; border-left: 4px solid #e09000; padding: 0.6rem 1rem; }
.note { color: #555; font-size: 0.9rem; } img { max-width: 100%; }
"""

#: Most mole fractions plotted: the largest by their mean over the cases.
_KEY_FRACTIONS = 3


def study_report(
    results: str | Path,
    out: str | Path,
    *,
    system: ReactionSystem | None = None,
    uncertainty: MonteCarloResult | None = None,
    title: str | None = None,
) -> Path:
    """Write the study report of a sweep's ``results`` (Parquet) to ``out``
    (HTML); see the module docs.

    Parameters
    ----------
    results : path
        A sweep's output file.
    out : path
        The HTML file to write.
    system : ReactionSystem, optional
        The system the sweep solved: its species, reactions, data and
        cautions go in the report (and whether it is the one the file was
        made with, by the sweep's record). Without it the report says so.
    uncertainty : MonteCarloResult, optional
        A Monte Carlo study to report beside the sweep.
    title : str, optional

    Returns
    -------
    Path
        ``out``.

    Raises
    ------
    CaseInputError
        ``results`` is not a readable Parquet file.
    """
    import pyarrow.parquet as pq

    path = Path(results)
    try:
        pf = pq.ParquetFile(path)
    except Exception as err:  # pyarrow raises several types for missing and bad files
        raise CaseInputError(f"{path}: not a readable Parquet file ({type(err).__name__})") from None
    names = pf.schema_arrow.names
    record = _record(pf)
    parts = [f"<h1>{html.escape(title or f'Equilibrium study: {path.name}')}</h1>"]
    parts.append(
        f"<p class='note'>{pf.metadata.num_rows:,} cases from {html.escape(str(path.name))}"
        + (f", eqbatch {html.escape(str(record.get('eqbatch')))}" if record else "")
        + ".</p>"
    )
    parts.append(_caution_block(system))
    parts.append(_system_section(system, record))
    wanted = ("status", "y_", "conversion_")
    table = pq.read_table(path, columns=[n for n in names if _is_input(n) or n.startswith(wanted)])
    parts.append(_ranges_section(table))
    parts.append(_status_section(table))
    parts.append(_plots_section(path, names, table))
    if uncertainty is not None:
        parts.append(_uncertainty_section(uncertainty))
    page = (
        "<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
        f"<title>{html.escape(title or path.name)}</title><style>{_STYLE}</style></head><body>\n"
        + "\n".join(parts)
        + "\n</body></html>\n"
    )
    out = Path(out)
    out.write_text(page, encoding="utf-8")
    return out


def _record(pf: Any) -> dict:
    """The sweep's record in the file's metadata (empty if none)."""
    meta = pf.schema_arrow.metadata or {}
    try:
        return dict(json.loads(meta.get(b"eqbatch.sweep", b"{}")))
    except ValueError:
        return {}


_is_input = is_swept_input


def _table(head: list[str], rows: list[list[Any]]) -> str:
    cells = "".join(f"<th>{html.escape(h)}</th>" for h in head)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in row) + "</tr>" for row in rows)
    return f"<table><tr>{cells}</tr>{body}</table>"


def _caution_block(system: ReactionSystem | None) -> str:
    text = caution(system, width=10_000)
    return f"<div class='caution'><strong>Caution.</strong> {html.escape(text)}</div>"


def _system_section(system: ReactionSystem | None, record: dict) -> str:
    if system is None:
        return "<h2>System</h2><p>Not given: pass the system file to report its species, reactions, data.</p>"
    parts = ["<h2>System</h2>"]
    recorded = record.get("system_sha256")
    if recorded:
        own = system_digest(system)
        parts.append(
            "<p class='note'>"
            + (
                "The sweep's record shows it was made with this system."
                if own == recorded
                else "<strong>The sweep's record shows it was made with another system</strong> "
                "(or another version of this one): the description below may not be the one solved."
            )
            + "</p>"
        )
    parts.append(
        _table(["species", "phase"], [[name, phase] for name, phase in zip(system.species, system.phases)])
    )
    parts.append(
        _table(
            ["reaction", "equation"], [[label, str(eq)] for label, eq in zip(system.labels, system.equations)]
        )
    )
    if system.species_data:
        rows = [
            [name, data.source, f"{data.range[0]:g}-{data.range[1]:g} K", f"{data.P_ref:g} bar"]
            for name, data in system.species_data.items()
        ]
        parts.append("<p>Species data (ln K from them where a reaction has no K data of its own):</p>")
        parts.append(_table(["species", "source", "valid", "P_ref"], rows))
    parts.append(f"<p class='note'>Standard pressure of the K data: {system.P0:g} bar.</p>")
    return "\n".join(parts)


def _ranges_section(table: Any) -> str:
    rows = []
    for name in table.column_names:
        if not _is_input(name):
            continue
        values = table.column(name).to_numpy(zero_copy_only=False).astype(float)
        values = values[np.isfinite(values)]
        if values.size:
            rows.append([name, f"{values.min():.6g}", f"{values.max():.6g}", f"{np.unique(values).size:,}"])
    if not rows:
        return "<h2>Cases</h2><p>No input columns.</p>"
    return "<h2>Cases</h2>" + _table(["input", "lowest", "highest", "distinct values"], rows)


def _status_section(table: Any) -> str:
    if "status" not in table.column_names:
        return "<h2>Status</h2><p>The file has no status column.</p>"
    codes, counts = np.unique(table.column("status").to_numpy(), return_counts=True)
    total = int(counts.sum())
    rows = [
        [status_words(int(c)), int(c), f"{n:,}", f"{100 * n / total:.2f} %"] for c, n in zip(codes, counts)
    ]
    note = (
        "<p class='note'>Cases not converged hold no equilibrium answer: their messages "
        "(<code>result.message(i)</code>) say why.</p>"
        if any(int(c) not in (0, 6) for c in codes)
        else ""
    )
    return "<h2>Status</h2>" + _table(["status", "code", "cases", "share"], rows) + note


def _plots_section(path: Path, names: list[str], table: Any) -> str:
    inputs = [n for n in table.column_names if _is_input(n)]
    if not inputs:
        return "<h2>Plots</h2><p>No input column varies.</p>"
    spread = {n: np.unique(table.column(n).to_numpy(zero_copy_only=False)).size for n in inputs}
    varied = sorted((n for n in inputs if spread[n] > 1), key=lambda n: -spread[n])
    if not varied:
        return "<h2>Plots</h2><p>No input column varies.</p>"
    x = varied[0]
    # one line per value of the next most varied input, where it has few values
    by = next((n for n in varied[1:] if spread[n] <= 10), None)
    # (a conversion column of a species never fed holds no number: nothing to draw)
    conversions = [n for n in names if n.startswith("conversion_") and _has_numbers(table, n)]
    fractions = [n for n in names if n.startswith("y_")]
    means = {n: float(np.nanmean(table.column(n).to_numpy(zero_copy_only=False))) for n in fractions}
    key = sorted(fractions, key=lambda n: -means[n])[:_KEY_FRACTIONS]
    against = html.escape(x) + ("" if by is None else f", one line per {html.escape(by)}")
    # (only converged cases: a case that is not holds the solver's last iterate, no answer)
    status = table.column("status").to_numpy() if "status" in table.column_names else None
    if status is not None and not np.any(status == 0):
        return "<h2>Plots</h2><p>No case converged: nothing to plot.</p>"
    where = None if status is None else ["status_name=converged" if "status_name" in names else "status=0"]
    parts = [f"<h2>Plots</h2><p class='note'>Converged cases against {against} (the most varied inputs).</p>"]
    with tempfile.TemporaryDirectory() as folder:
        for y in conversions + key:
            notes: list[str] = []
            png = result_plot(path, Path(folder) / f"{y}.png", x=x, y=y, by=by, where=where, notes=notes)
            data = base64.b64encode(png.read_bytes()).decode("ascii")
            caption = html.escape(f"{y} against {x}" + (f" ({'; '.join(notes)})" if notes else ""))
            parts.append(f"<figure><img alt='{caption}' src='data:image/png;base64,{data}'>")
            parts.append(f"<figcaption class='note'>{caption}</figcaption></figure>")
    return "\n".join(parts)


def _has_numbers(table: Any, column: str) -> bool:
    """Whether a column holds any finite number."""
    values = table.column(column).to_numpy(zero_copy_only=False)
    return bool(np.any(np.isfinite(values.astype(float))))


def _uncertainty_section(mc: MonteCarloResult) -> str:
    parts = [
        "<h2>Uncertainty</h2>",
        f"<p>{mc.samples:,} Monte Carlo samples of the equilibrium constants; "
        f"{int(np.sum(mc.converged)):,} converged.</p>",
    ]
    for of, title in (("mole_fractions", "Mole fractions"), ("conversion", "Conversion of fed species")):
        summary = mc.summary(of)
        if not summary.names:
            continue
        frame = summary.to_pandas()
        rows = [[name, *[f"{v:.5g}" for v in frame.loc[name]]] for name in frame.index]
        parts.append(f"<p>{title}</p>" + _table(["output", *frame.columns], rows))
    return "\n".join(parts)
