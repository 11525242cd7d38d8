"""The built-in demonstration: a hydrogen-plant reformer and shift study.

The scenario is our own: a natural-gas feed (methane with 2 % nitrogen)
reformed with steam. It sweeps a small grid of temperature, pressure and
steam-to-carbon ratio and prints what a process engineer looks at first
(methane conversion, hydrogen yield, dry-gas composition), then times a
large random batch to show the engine's throughput.
"""

from __future__ import annotations

import time
from importlib import resources
from pathlib import Path

import numpy as np

from eqbatch.errors import CaseInputError
from eqbatch.grid import make_grid, write_grid
from eqbatch.hazards import caution
from eqbatch.plots import result_plot
from eqbatch.report import study_report
from eqbatch.sweeps import sweep
from eqbatch.system import ReactionSystem

#: The general caution (no species named); commands print ``caution(system)``.
CAUTION = caution()


def system_file_text() -> str:
    """The demo's system file (TOML)."""
    return resources.files("eqbatch").joinpath("data/reformer.toml").read_text()


def reformer_system() -> ReactionSystem:
    with resources.as_file(resources.files("eqbatch").joinpath("data/reformer.toml")) as path:
        return ReactionSystem.from_toml(path)


def reformer_feed(steam_to_carbon: np.ndarray) -> np.ndarray:
    """Feed rows (CH4, H2O, CO, H2, CO2, N2) per mol of natural gas."""
    s2c = np.atleast_1d(np.asarray(steam_to_carbon, dtype=float))
    feed = np.zeros((s2c.size, 6))
    feed[:, 0] = 0.98
    feed[:, 1] = 0.98 * s2c
    feed[:, 5] = 0.02
    return feed


def run(
    cases: int = 1_000_000,
    threads: int | None = None,
    save_system: str | None = None,
    out: str | None = "eqbatch-demo",
) -> int:
    if isinstance(cases, bool) or not (isinstance(cases, (int, np.integer)) and cases >= 1):
        raise CaseInputError(f"cases (the size of the timed batch) must be a positive integer, got {cases!r}")
    system = reformer_system()
    if save_system:
        Path(save_system).write_text(system_file_text())
        print(f"wrote the demo system file to {save_system}")

    temps = np.array([800.0, 900.0, 1000.0, 1100.0, 1200.0])
    pressures = np.array([1.0, 10.0, 30.0])
    ratios = np.array([2.0, 3.0, 4.0])
    T, P, S = (a.reshape(-1) for a in np.meshgrid(temps, pressures, ratios, indexing="ij"))
    res = system.solve(reformer_feed(S), T=T, P=P, threads=threads)
    conv = res.conversion("CH4")
    n = res.amounts
    dry = n.sum(axis=1) - n[:, 1]
    y_h2_dry = n[:, 3] / dry
    h2_yield = n[:, 3] / 0.98

    print("eqbatch demo: steam reforming + water-gas shift of natural gas (98 % CH4, 2 % N2)")
    print("K(T) from species thermochemistry: NIST WebBook Shomate coefficients, 1 bar basis\n")
    print(f"{len(res)} grid cases: {res.summary()}\n")
    header = "  ".join(f"{t:>6.0f} K" for t in temps)
    for title, values, fmt in (
        ("Methane conversion, %", 100 * conv, "{:8.1f}"),
        ("H2 per CH4 fed, mol/mol", h2_yield, "{:8.3f}"),
        ("H2 in dry gas, mol %", 100 * y_h2_dry, "{:8.1f}"),
    ):
        print(title)
        print(f"{'P/bar':>6} {'S/C':>4}   {header}")
        for p in pressures:
            for r in ratios:
                mask = (P == p) & (S == r)
                row = "  ".join(fmt.format(v) for v in values[mask][np.argsort(T[mask])])
                print(f"{p:6.0f} {r:4.1f}   {row}")
        print()

    rng = np.random.default_rng(2026)
    big_T = rng.uniform(700.0, 1200.0, cases)
    big_P = rng.uniform(1.0, 40.0, cases)
    big_S = rng.uniform(1.5, 5.0, cases)
    t0 = time.perf_counter()
    big = system.solve(reformer_feed(big_S), T=big_T, P=big_P, threads=threads)
    elapsed = time.perf_counter() - t0
    print(
        f"Random batch: {cases:,} cases (700-1200 K, 1-40 bar, S/C 1.5-5) solved in "
        f"{elapsed:.2f} s ({cases / elapsed:,.0f} cases/s): {big.summary()};"
    )
    print(f"median {np.median(big.iterations):.0f}, max {big.iterations.max()} Newton iterations\n")
    swept_ok = True
    if out:
        swept_ok = _sweep_and_plot(system, Path(out), threads)
    print(caution(system))
    return 0 if bool(res.converged.all() and big.converged.all()) and swept_ok else 1


def _sweep_and_plot(system: ReactionSystem, folder: Path, threads: int | None) -> bool:
    """A small Parquet sweep (a grid written, solved, plotted) of the same study."""
    folder.mkdir(parents=True, exist_ok=True)
    table = make_grid(
        {"T_K": (750.0, 1200.0, 46), "P_bar": (1.0, 40.0, 4)},
        constants={
            "feed_CH4": 0.98,
            "feed_H2O": 2.94,
            "feed_CO": 0.0,
            "feed_H2": 0.0,
            "feed_CO2": 0.0,
            "feed_N2": 0.02,
        },
    )
    cases = folder / "cases.parquet"
    results = folder / "results.parquet"
    write_grid(cases, table)
    summary = sweep(system, cases, results, overwrite=True, quiet=True, threads=threads)
    png = result_plot(results, folder / "hydrogen.png", x="T_K", y="y_H2", by="P_bar")
    report = study_report(results, folder / "report.html", system=system, title="Demo: steam reformer sweep")
    print(f"Parquet sweep: {cases} -> {results}: {summary.line()}")
    print(f"plot of y_H2 against T_K by P_bar (S/C 3): {png}")
    print(f"study report (one HTML page): {report}\n")
    return summary.converged == summary.rows
