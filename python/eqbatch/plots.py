"""PNG pictures (matplotlib, imported only when a plot is asked for)."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from eqbatch.uncertainty import MonteCarloResult

_KINDS = {"n": "amounts", "y": "mole_fractions", "extent": "extents", "conversion": "conversion"}


def parse_output(name: str) -> tuple[str, str]:
    """``"y_H2"`` -> ``("mole_fractions", "H2")``; also ``n_``, ``extent_``, ``conversion_``."""
    prefix, sep, rest = name.partition("_")
    if not sep or prefix not in _KINDS or not rest:
        from eqbatch.errors import CaseInputError

        raise CaseInputError(
            f"output {name!r} must be n_<species>, y_<species>, extent_<label> or conversion_<species>"
        )
    return _KINDS[prefix], rest


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


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
    fig.tight_layout()
    path = Path(path)
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return path


def tornado(mc: MonteCarloResult, output: str, path: str | Path) -> Path:
    """Tornado chart: the output with each reaction's ln K moved by -1 and +1
    standard deviation, largest swing on top."""
    plt = _pyplot()
    of, what = parse_output(output)
    rows = mc.tornado(of, what)
    base = mc.nominal_value(of, what)
    fig, ax = plt.subplots(figsize=(6.4, 0.6 * len(rows) + 1.4))
    for k, (_label, low, high) in enumerate(reversed(rows)):
        ax.barh(k, low - base, left=base, color="#cc6677")
        ax.barh(k, high - base, left=base, color="#117733")
    ax.set_yticks(range(len(rows)), [r[0] for r in reversed(rows)])
    ax.axvline(base, color="k", lw=1)
    ax.set_xlabel(f"{output} (red: ln K - 1 sigma, green: + 1 sigma)")
    fig.tight_layout()
    path = Path(path)
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return path
