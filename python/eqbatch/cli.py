"""The ``eqbatch`` command line.

``eqbatch solve SYSTEM.toml --feed CH4=1,H2O=3 --T 900 --P 10`` prints the
equilibrium of one case; ``eqbatch demo`` runs the built-in demonstration.
Errors print one line on standard error and exit with status 2; a case that
did not converge exits 1; a reader that closes the pipe early (``| head``)
ends the command quietly with status 141 (128 + SIGPIPE, what a shell reports
for tools stopped by a closed pipe). Warnings print one line each on
standard error (``eqbatch: warning: ...``), extrapolation once per data set
with the count over the whole command, and not at all under ``--quiet``.
"""

from __future__ import annotations

import argparse
import contextlib
import math
import os
import sys
import warnings
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from eqbatch import _core, demo, plots
from eqbatch.boundary import boundary_file
from eqbatch.columns import parse_output
from eqbatch.errors import EqbatchError
from eqbatch.grid import make_grid, write_grid
from eqbatch.hazards import caution
from eqbatch.inputs import MAX_ITER
from eqbatch.kdata import collect_extrapolation
from eqbatch.report import study_report
from eqbatch.spec import SystemSpec
from eqbatch.speciesdata import R, ThermoLnK
from eqbatch.status import Status
from eqbatch.sweeps import sweep
from eqbatch.system import ReactionSystem
from eqbatch.uncertainty import monte_carlo
from eqbatch.units import parse_pressure, parse_temperature


class _UsageError(EqbatchError):
    pass


#: Most temperatures `eqbatch thermo` tabulates.
MAX_THERMO_ROWS = 10_000


def _one_line(text: object) -> str:
    return " ".join(str(text).split())


def _show_warning(
    message: Warning | str,
    category: type[Warning],
    filename: str,
    lineno: int,
    file: Any = None,
    line: str | None = None,
) -> None:
    print(f"eqbatch: warning: {_one_line(message)}", file=sys.stderr)


@contextlib.contextmanager
def warnings_to_stderr(quiet: bool = False) -> Iterator[None]:
    """Warnings of a command as one line each on standard error
    (``eqbatch: warning: ...``), without Python's file and code lines.
    Extrapolated data (:class:`~eqbatch.ExtrapolationWarning`) are added up
    over everything the command solves and printed at its end, one line per
    data set: ``ln K of 'reforming' extrapolated for 12 of 1,000 cases (T
    1310-1400 K; correlation valid 600-1300 K)``. ``quiet`` prints none.
    :func:`main` wraps every command in it, with ``quiet`` from the
    command's ``--quiet`` option where it has one."""
    with warnings.catch_warnings():
        if quiet:
            warnings.simplefilter("ignore")
        warnings.showwarning = _show_warning
        with collect_extrapolation() as log:
            try:
                yield
            finally:
                if not quiet:
                    for warning in log.as_warnings():
                        _show_warning(warning, type(warning), "", 0)


def _pairs(values: Sequence[str] | None, what: str, units: bool = False) -> dict[str, Any]:
    """``NAME=VALUE,...`` entries; with ``units`` a value may carry a unit
    (``CH4=100kmol/h``), kept as text for the solve to convert."""
    out: dict[str, Any] = {}
    for chunk in values or []:
        for item in chunk.split(","):
            item = item.strip()
            if not item:
                continue
            name, sep, number = item.partition("=")
            if not sep or not name.strip():
                raise _UsageError(f"{what} entries are NAME=VALUE, got {item!r}")
            try:
                out[name.strip()] = float(number)
            except ValueError:
                if units and number.strip()[:1].isdigit():
                    out[name.strip()] = number.strip()
                    continue
                raise _UsageError(f"{what} {name.strip()!r}: {number!r} is not a number") from None
    return out


def _fmt(value: float) -> str:
    if value == 0:
        return "0"
    if not np.isfinite(value):
        return str(value)
    if 1e-3 <= abs(value) < 1e5:
        return f"{value:.6g}"
    return f"{value:.4e}"


def _table(headers: list[str], rows: list[list[str]]) -> str:
    widths = [max(len(h), *(len(r[k]) for r in rows)) for k, h in enumerate(headers)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(headers, widths))]
    lines.append("  ".join("-" * w for w in widths))
    lines += ["  ".join(c.ljust(w) for c, w in zip(r, widths)) for r in rows]
    return "\n".join(lines)


def _system_and_feed(args: argparse.Namespace) -> tuple[ReactionSystem, dict[str, Any]]:
    """The system file and the one case's ``--feed`` of a command."""
    system = ReactionSystem.from_toml(args.system)
    feed = _pairs(args.feed, "--feed", units=True)
    if not feed:
        raise _UsageError("give the feed, e.g. --feed CH4=1,H2O=3")
    return system, feed


def _cmd_solve(args: argparse.Namespace) -> int:
    if not 0 <= args.max_iter <= MAX_ITER:
        raise _UsageError(
            f"--max-iter must be an integer from 0 to {MAX_ITER} (Newton iterations per case), "
            f"got {args.max_iter}"
        )
    system, feed = _system_and_feed(args)
    k_opts = [
        (n, _pairs(v, "--" + n)) for n, v in (("lnK", args.lnK), ("K", args.K), ("log10K", args.log10K))
    ]
    k_given = [(n, v) for n, v in k_opts if v]
    if len(k_given) > 1:
        raise _UsageError("give only one of --lnK, --K, --log10K")
    kwargs: dict[str, Any] = {k_given[0][0]: k_given[0][1]} if k_given else {}
    if args.approach:
        kwargs["approach"] = _pairs(args.approach, "--approach")
    if args.adiabatic:
        kwargs["adiabatic"] = True
    if args.duty is not None:
        kwargs["duty"] = args.duty
    res = system.solve(
        feed, T=args.T, P=args.P, tol=args.tol, max_iter=args.max_iter, invalid="raise", **kwargs
    )

    converged = bool(res.converged[0])
    outlet_T = math.nan if res.T is None else float(res.T[0])
    conditions = []
    if args.adiabatic or args.duty is not None:
        outlet = f"outlet T = {outlet_T:.2f} K" if converged else "no equilibrium outlet temperature found"
        kind = "adiabatic" if args.adiabatic else f"heat added {args.duty:g} kJ"
        conditions.append(f"{kind}, inlet {args.T:g} K, {outlet}")
    elif args.T is not None:
        conditions.append(f"T = {args.T:g} K")
    conditions.append(f"P = {float(res.P[0]):g} bar")
    print(f"Equilibrium of {args.system}: {', '.join(conditions)} (P0 = {system.P0:g} bar)")
    print(res.message(0))
    if res.status[0] == Status.OUT_OF_RANGE:
        print("NO OUTLET: no temperature within the species data's range balances the enthalpy; no amounts.")
    elif not converged:
        where = f" (at {outlet_T:.2f} K)" if np.isfinite(outlet_T) and res.T_in is not None else ""
        print(
            f"NOT AN EQUILIBRIUM: the amounts below are the solver's last iterate{where}, "
            "shown to help find the cause; do not use them as a result."
        )
    print()
    feed_row = res.feed[0]
    rows = [
        [name, system.phases[k], _fmt(feed_row[k]), _fmt(res.amounts[0, k]), _fmt(res.mole_fractions[0, k])]
        for k, name in enumerate(system.species)
    ]
    # (a feed given as flows, kmol/h or kg/h, is solved per hour: amounts in mol/h)
    per = "mol/h" if any(isinstance(v, str) and "/" in v for v in feed.values()) else "mol"
    print(_table(["species", "phase", f"feed/{per}", f"amount/{per}", "mole fraction"], rows))
    print()
    rows = [
        [label, eq, f"{res.lnK[0, j]:.6g}", _fmt(res.extents[0, j])]
        for j, (label, eq) in enumerate(zip(system.labels, system.equations))
    ]
    print(_table(["reaction", "equation", "ln K", f"extent/{per}"], rows))
    print()
    # every fed species that reacts, on whichever side its reactions write it
    conversions = [
        (name, 100 * float(res.conversion(name)[0]))
        for name in system.reacting_species()
        if feed_row[system.index(name)] > 0
    ]
    if conversions:
        print(_table(["fed species", "conversion"], [[name, f"{c:.4g} %"] for name, c in conversions]))
        if any(c < 0 for _, c in conversions):
            print("(a negative conversion is net production: the equilibrium holds more than was fed)")
        print()
        # yields: mol of each species made per mol of each fed species consumed
        consumed = [name for name, c in conversions if c > 0]
        made = [k for k in range(len(system.species)) if res.amounts[0, k] > feed_row[k]]
        if consumed and made and converged:
            yields = {name: res.yields(name)[0] for name in consumed}
            rows = [[system.species[k], *[_fmt(yields[name][k]) for name in consumed]] for k in made]
            print(_table(["made", *[f"mol per mol {name} fed" for name in consumed]], rows))
            print()
    if converged and "CH4" in system.species and np.isfinite(res.methane_slip[0]):
        print(f"methane slip: {100 * float(res.methane_slip[0]):.4g} mol % CH4, dry basis")
        print()
    if converged and res.T is not None and all(name in system.species_data for name in system.species):
        heat = float(res.duty()[0])
        fed_at = f"the feed at {float(res.T_in[0]):g} K" if res.T_in is not None else "the feed at T"
        print(
            f"Energy: outlet enthalpy {float(res.enthalpy[0]):.6g} kJ (formation scale); heat taken by the "
            f"reactor {heat:.6g} kJ ({fed_at}; positive: heat in)"
        )
        print()
    if system.species_data:
        print("\n".join(_species_data_lines(system, short=True)))
        print()
    print(caution(system))
    return 0 if bool(res.converged[0]) else 1


def _cmd_uncertainty(args: argparse.Namespace) -> int:
    system, feed = _system_and_feed(args)
    limits = []
    for text in args.limit or []:
        op = next((op for op in (">=", "<=") if op in text), None)
        name, _, number = text.partition(op or "=")
        try:
            value = float(number)
        except ValueError:
            op = None
        if op is None:
            raise _UsageError(f"--limit must look like conversion_CH4>=0.9, got {text!r}")
        limits.append((name.strip(), op, value))
    sig = [
        (n, _pairs(v, "--" + n.replace("_", "-")))
        for n, v in (
            ("lnK_sigma", args.lnK_sigma),
            ("dG_sigma", args.dG_sigma),
            ("species_dG_sigma", args.species_dG_sigma),
        )
    ]
    sig = [(n, v) for n, v in sig if v]
    if len(sig) != 1:
        raise _UsageError("give one of --lnK-sigma, --dG-sigma, --species-dG-sigma")
    lnk = _pairs(args.lnK, "--lnK") or None
    sigmas: dict[str, Any] = {sig[0][0]: sig[0][1]}
    mc = monte_carlo(
        system,
        feed=feed,
        P=args.P,
        T=args.T,
        lnK=lnk,
        samples=args.samples,
        seed=args.seed,
        **sigmas,
    )
    print(
        f"Monte Carlo on ln K for {args.system}: {mc.samples:,} samples (seed {args.seed}), "
        f"{100 * mc.converged.mean():.2f} % converged"
    )
    outputs = args.output or [f"y_{system.species[int(np.argmax(mc.nominal.mole_fractions[0]))]}"]
    for name in outputs + [name for name, _, _ in limits]:
        mc._position(*parse_output(name))  # an unknown output is refused before anything is printed
    print(
        "ln K standard deviations: "
        + ", ".join(f"{label} {s:.3g}" for label, s in zip(system.labels, np.sqrt(np.diag(mc.covariance))))
    )
    for of, title in (("mole_fractions", "Mole fractions"), ("conversion", "Conversion of fed species")):
        summ = mc.summary(of)
        if summ.names:
            print(f"\n{title}")
            print(summ.table())
    for name in outputs:
        of, what = parse_output(name)
        ranked = mc.ranking(of, what)
        print(f"\nWhich reaction matters for {name} (share of variance: first order / sampled)")
        for label, first, sampled in ranked.itertuples():
            print(f"  {label:<16} {100 * first:6.1f} %  {100 * sampled:6.1f} %")
    for name, op, value in limits:
        of, what = parse_output(name)
        p, se = mc.probability(of, what, **{"at_least" if op == ">=" else "at_most": value})
        print(f"\nP({name} {op} {value:g}) = {p:.4f} +- {se:.4f}")
    folder = Path(args.plots)
    folder.mkdir(parents=True, exist_ok=True)
    hist = plots.histogram(mc, outputs, folder / "histogram.png")
    torn = plots.tornado(mc, outputs[0], folder / "tornado.png")
    print(f"\nwrote {hist} and {torn}\n")
    print(caution(system))
    return 0


def _cmd_sweep(args: argparse.Namespace) -> int:
    system = ReactionSystem.from_toml(args.system)
    summary = sweep(
        system,
        args.input,
        args.output,
        batch_size=args.batch_size,
        resume=args.resume,
        overwrite=args.overwrite,
        quiet=True if args.quiet else None,
        scheduler=args.scheduler,
        threads=args.threads,
        allow_extra_columns=args.allow_extra_columns,
        energy=True if args.energy else None,
        where=args.where,
        columns=_names(args.columns),
        yields_per=_names(args.yields_per),
    )
    print(f"{args.output}: {summary.line()}")
    if not args.quiet:
        print(caution(system))
    return 0


def _names(text: str | None) -> list[str] | None:
    """``A,B,C`` as a list of names (None where not given)."""
    return None if text is None else [c.strip() for c in text.split(",") if c.strip()]


def _cmd_boundary(args: argparse.Namespace) -> int:
    system = ReactionSystem.from_toml(args.system)
    found = boundary_file(
        system,
        args.input,
        args.output,
        args.species,
        args.vary,
        args.lo,
        args.hi,
        threads=args.threads,
        overwrite=args.overwrite,
    )
    counts = {name: int(np.sum(found.status == code)) for name, code in (("found", 0), ("no boundary", 7))}
    other = found.status.size - sum(counts.values())
    print(
        f"{args.output}: {found.status.size:,} cases; {args.species} boundary found in "
        f"{counts['found']:,}, none in the bracket in {counts['no boundary']:,}"
        + (f", search failed in {other:,}" if other else "")
        + f" ({found.iterations} batched solves)"
    )
    if not args.quiet:
        print(
            "note: a phase boundary at equilibrium is a thermodynamic limit, not a design margin; "
            "carbon can form short of it (kinetics, hot spots), and designers add their own margins"
        )
        print(caution(system))
    return 0


def _parse_range(text: str) -> tuple[str, tuple[float, float, int]]:
    name, sep, spec = text.partition("=")
    parts = spec.split(":")
    if not sep or len(parts) not in (2, 3):
        raise _UsageError(f"--range takes NAME=LOW:HIGH[:COUNT], got {text!r}")
    try:
        lo, hi = float(parts[0]), float(parts[1])
        count = int(parts[2]) if len(parts) == 3 else 1
    except ValueError:
        raise _UsageError(f"--range {text!r}: bounds must be numbers and the count an integer") from None
    return name.strip(), (lo, hi, count)


def _cmd_grid(args: argparse.Namespace) -> int:
    ranges = dict(_parse_range(r) for r in args.range or [])
    table = make_grid(
        ranges,
        constants=_pairs(args.set, "--set"),
        sample=args.sample,
        n=args.n,
        seed=args.seed,
        log=tuple(args.log or ()),
    )
    write_grid(args.output, table)
    print(f"wrote {table.num_rows:,} cases to {args.output} (columns: {', '.join(table.column_names)})")
    return 0


def _cmd_report(args: argparse.Namespace) -> int:
    system = None if args.system is None else ReactionSystem.from_toml(args.system)
    out = study_report(args.result, args.out, system=system, title=args.title)
    print(f"wrote {out}")
    return 0


def _cmd_plot(args: argparse.Namespace) -> int:
    notes: list[str] = []
    out = plots.result_plot(
        args.result, args.out, x=args.x, y=args.y, by=args.by, z=args.z, where=args.where, notes=notes
    )
    for note in notes:
        print(note)
    print(f"wrote {out}")
    return 0


def _species_data_lines(system: SystemSpec, *, short: bool = False) -> list[str]:
    """Where each species' data come from (for the chemicals source: the
    compound, its registry number and how it was found), their standard
    pressure P_ref, and whether ln K was converted to P0; ``short`` keeps the
    first clause of each source and leaves out the temperature range."""
    if not system.species_data:
        return []
    gas = {name for name, phase in zip(system.species, system.phases) if phase == "gas"}
    converted = any(d.P_ref != system.P0 for name, d in system.species_data.items() if name in gas)
    lines = ["species data (each on its own standard pressure P_ref):"]
    for name, data in system.species_data.items():
        if short:
            lines.append(f"  {name}: {data.source.split(';')[0]}; P_ref = {data.P_ref:g} bar")
        else:
            lo_t, hi_t = data.range
            lines.append(f"  {name}: {data.source} ({lo_t:g}-{hi_t:g} K, P_ref = {data.P_ref:g} bar)")
    if converted:
        lines.append(
            f"  ln K converted to P0 = {system.P0:g} bar: "
            "ln K = ln K(data) - sum over gas species of nu ln(P0 / P_ref)"
        )
    return lines


def _temperature(text: str) -> float:
    """``--T`` in kelvin (a bare number) or with its unit (``870C``)."""
    try:
        return parse_temperature(text)
    except ValueError as err:
        raise argparse.ArgumentTypeError(str(err)) from None


def _pressure(text: str) -> float:
    """``--P`` in bar absolute (a bare number) or with its unit (``29barg``)."""
    try:
        return parse_pressure(text)
    except ValueError as err:
        raise argparse.ArgumentTypeError(str(err)) from None


def _cmd_thermo(args: argparse.Namespace) -> int:
    lo, hi, count = _temperature_range(args.T)
    system = ReactionSystem.from_toml(args.system)
    T = np.linspace(lo, hi, count)
    lnk, dH = system.lnK(T), system.dH(T)
    dG = -R * T[:, None] * lnk  # as system.dG(T), without evaluating the data twice
    for j, (label, eq) in enumerate(zip(system.labels, system.equations)):
        print(f"{label}: {eq}")
        rows = [
            [f"{t:g}", f"{dH[k, j] / 1000:.3f}", f"{dG[k, j] / 1000:.3f}", f"{lnk[k, j]:.5g}"]
            for k, t in enumerate(T)
        ]
        print(_table(["T/K", "dH/(kJ/mol)", "dG/(kJ/mol)", "ln K"], rows))
        print()
    print(f"standard pressure P0 = {system.P0:g} bar")
    for line in _species_data_lines(system):
        print(line)
    others = [label for label in system.labels if not isinstance(system.lnK_data.get(label), ThermoLnK)]
    for label in others:
        data = system.lnK_data.get(label)
        kind = "ln K(T) correlation" if callable(data) else "constant ln K"
        print(f"  {label}: {kind} from the system file")
    return 0


def _temperature_range(text: str) -> tuple[float, float, int]:
    """``--T LOW:HIGH:COUNT`` of `eqbatch thermo`, checked."""
    usage = f"--T takes LOW:HIGH:COUNT (kelvin, kelvin, how many), got {text!r}"
    parts = text.split(":")
    if len(parts) != 3:
        raise _UsageError(usage)
    try:
        lo, hi, count = (float(x) for x in parts)
    except ValueError:
        raise _UsageError(usage) from None
    if not (0 < lo < np.inf and 0 < hi < np.inf):
        raise _UsageError(f"--T {text!r}: LOW and HIGH must be positive, finite temperatures in kelvin")
    if not (count.is_integer() and 1 <= count <= MAX_THERMO_ROWS):
        raise _UsageError(f"--T {text!r}: COUNT must be an integer from 1 to {MAX_THERMO_ROWS:,}")
    return lo, hi, int(count)


def _cmd_demo(args: argparse.Namespace) -> int:
    if args.cases < 1:
        raise _UsageError(
            f"--cases must be a positive integer (the size of the timed batch), got {args.cases}"
        )
    return demo.run(cases=args.cases, threads=args.threads, save_system=args.save_system, out=args.out)


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="eqbatch",
        description="Batch chemical-equilibrium engine: equilibrium compositions of simultaneous reactions.",
    )
    parser.add_argument("--version", action="version", version=f"eqbatch {_core.__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    solve = sub.add_parser("solve", help="equilibrium of one case of a system file")
    solve.add_argument("system", help="system file (TOML)")
    solve.add_argument(
        "--feed",
        action="append",
        metavar="SPECIES=MOL[,...]",
        help="feed amounts, mol (repeatable; missing species are zero)",
    )
    solve.add_argument(
        "--T", type=_temperature, metavar="T", help="temperature, for K(T) data: 1143 or 1143K, 870C"
    )
    solve.add_argument(
        "--P",
        type=_pressure,
        metavar="P",
        help="pressure (default: the system's P0): 30 or 30bar, 29barg, 3MPa, 435psig (gauge: 1.01325 bar)",
    )
    solve.add_argument("--lnK", action="append", metavar="LABEL=VALUE[,...]", help="ln K per reaction")
    solve.add_argument("--K", action="append", metavar="LABEL=VALUE[,...]", help="K per reaction")
    solve.add_argument("--log10K", action="append", metavar="LABEL=VALUE[,...]", help="log10 K per reaction")
    solve.add_argument(
        "--approach",
        action="append",
        metavar="LABEL=KELVIN[,...]",
        help="temperature approach to equilibrium per reaction (needs K(T) data)",
    )
    solve.add_argument(
        "--adiabatic",
        action="store_true",
        help="--T is the inlet: find the adiabatic outlet temperature (needs species data)",
    )
    solve.add_argument(
        "--duty",
        type=float,
        metavar="KJ",
        help="--T is the inlet: find the outlet with this heat added, kJ (negative: removed, as --duty=-50; "
        "needs species data)",
    )
    solve.add_argument("--tol", type=float, default=1e-10, help="convergence tolerance on |ln Q - ln K|")
    solve.add_argument("--max-iter", type=int, default=200, help="Newton iteration limit")
    solve.set_defaults(run=_cmd_solve)

    unc = sub.add_parser("uncertainty", help="Monte Carlo on uncertain equilibrium constants for one case")
    unc.add_argument("system", help="system file (TOML)")
    unc.add_argument("--feed", action="append", metavar="SPECIES=MOL[,...]", help="feed amounts, mol")
    unc.add_argument(
        "--T", type=_temperature, metavar="T", help="temperature, for K(T) data and dG sigmas: 1143, 870C"
    )
    unc.add_argument("--P", type=_pressure, metavar="P", help="pressure (default: P0): 30, 29barg, 3MPa")
    unc.add_argument("--lnK", action="append", metavar="LABEL=VALUE[,...]", help="nominal ln K")
    unc.add_argument("--lnK-sigma", action="append", metavar="LABEL=SIGMA[,...]", help="std. dev. of ln K")
    unc.add_argument(
        "--dG-sigma",
        action="append",
        metavar="LABEL=KJ[,...]",
        help="std. dev. of the standard reaction Gibbs energy, kJ/mol (needs --T)",
    )
    unc.add_argument(
        "--species-dG-sigma",
        action="append",
        metavar="SPECIES=KJ[,...]",
        help="independent std. dev. of species' Gibbs energies of formation, kJ/mol (needs --T)",
    )
    unc.add_argument("--samples", type=int, default=10_000)
    unc.add_argument("--seed", type=int, default=0)
    unc.add_argument(
        "--output",
        action="append",
        metavar="NAME",
        help="outputs to rank and plot: y_H2, n_CO, extent_shift, conversion_CH4",
    )
    unc.add_argument(
        "--limit",
        action="append",
        metavar="NAME>=VALUE",
        help="report the probability of meeting a limit, e.g. conversion_CH4>=0.9",
    )
    unc.add_argument("--plots", default=".", metavar="DIR", help="folder for histogram.png and tornado.png")
    unc.set_defaults(run=_cmd_uncertainty)

    sw = sub.add_parser("sweep", help="solve every row of a Parquet or CSV case table (file or folder)")
    sw.add_argument("system", help="system file (TOML)")
    sw.add_argument("input", help="Parquet or CSV file, or folder of Parquet files")
    sw.add_argument("output", help="output Parquet file (folder for a folder input)")
    sw.add_argument("--batch-size", type=int, default=65_536, help="rows per batch (bounds memory)")
    sw.add_argument(
        "--resume",
        action="store_true",
        help="continue an interrupted sweep (any batch size; keeps a folder's finished files)",
    )
    sw.add_argument("--overwrite", action="store_true", help="replace an existing output")
    sw.add_argument("--quiet", action="store_true", help="no progress bar, no caution line")
    sw.add_argument("--threads", type=int, default=None, help="worker threads (default: all cores)")
    sw.add_argument(
        "--scheduler", metavar="ADDRESS", help="run a folder on a Dask cluster, one task per file"
    )
    sw.add_argument(
        "--allow-extra-columns",
        action="store_true",
        help="pass feed_<x>/lnK_<x> columns that name no species or reaction through (default: refuse them)",
    )
    sw.add_argument(
        "--energy",
        action="store_true",
        help="add H_out_kJ, heat_kJ and dH_<label> (on by default with adiabatic, duty_kJ or T_in_K columns)",
    )
    sw.add_argument(
        "--where",
        action="append",
        metavar="COLUMN=VALUE",
        help="solve only the rows where this holds (also !=, <, <=, >, >=; repeat to combine)",
    )
    sw.add_argument("--columns", metavar="NAME,...", help="write only these output columns, in this order")
    sw.add_argument(
        "--yields-per",
        metavar="SPECIES,...",
        help="add yield_<species>_per_<fed>: mol of each species made per mol of these fed",
    )
    sw.set_defaults(run=_cmd_sweep)

    bd = sub.add_parser(
        "boundary",
        help="where a pure condensed species just appears, for every row of a Parquet case table",
    )
    bd.add_argument("system", help="system file (TOML)")
    bd.add_argument("input", help="Parquet case table (a sweep's input columns, less the varied one)")
    bd.add_argument(
        "output", help="output Parquet file: the input plus boundary_<column>, present_below, status"
    )
    bd.add_argument(
        "--species", required=True, help="the pure condensed species (phase solid or pure_liquid)"
    )
    bd.add_argument("--vary", required=True, help="T (K), P (bar) or a species whose feed (mol) is varied")
    bd.add_argument("--lo", type=float, required=True, help="low end of the bracket")
    bd.add_argument("--hi", type=float, required=True, help="high end of the bracket")
    bd.add_argument("--threads", type=int, default=None, help="worker threads (default: all cores)")
    bd.add_argument("--overwrite", action="store_true", help="replace an existing output")
    bd.add_argument("--quiet", action="store_true", help="no caution line")
    bd.set_defaults(run=_cmd_boundary)

    gr = sub.add_parser("grid", help="write a Parquet case table: factorial grid or space-filling sample")
    gr.add_argument("output", help="Parquet file to write (CSV where the name ends in .csv)")
    gr.add_argument("--range", action="append", metavar="NAME=LOW:HIGH[:COUNT]", help="a swept column")
    gr.add_argument("--set", action="append", metavar="NAME=VALUE[,...]", help="constant columns")
    gr.add_argument("--log", action="append", metavar="NAME", help="space this column evenly in log")
    gr.add_argument("--sample", choices=["lhs", "sobol"], help="space-filling sample instead of a grid")
    gr.add_argument("--n", type=int, help="rows of the sample")
    gr.add_argument("--seed", type=int, default=0)
    gr.set_defaults(run=_cmd_grid)

    pl = sub.add_parser("plot", help="PNG of a sweep result column against a swept one")
    pl.add_argument("result", help="sweep output (Parquet)")
    pl.add_argument("--x", required=True, help="swept column on the x axis")
    pl.add_argument("--y", required=True, help="result column (or, with --z, a second swept column)")
    pl.add_argument("--by", help="one line per value of this column")
    pl.add_argument("--z", help="heat map of this column over --x and --y")
    pl.add_argument(
        "--where",
        action="append",
        metavar="COLUMN=VALUE",
        help="draw only the rows where this holds (also !=, <, <=, >, >=; repeat to combine)",
    )
    pl.add_argument("--out", default="plot.png", help="PNG to write")
    pl.set_defaults(run=_cmd_plot)

    rp = sub.add_parser("report", help="a self-contained HTML study report of a sweep's results")
    rp.add_argument("result", help="sweep output (Parquet)")
    rp.add_argument("--system", help="the system file the sweep solved (its species, reactions and data)")
    rp.add_argument("--out", default="report.html", help="HTML file to write")
    rp.add_argument("--title", help="the report's title")
    rp.set_defaults(run=_cmd_report)

    th = sub.add_parser("thermo", help="dH, dG and ln K of every reaction over a temperature range")
    th.add_argument("system", help="system file (TOML)")
    th.add_argument("--T", default="600:1200:7", metavar="LOW:HIGH:COUNT", help="temperatures, K")
    th.set_defaults(run=_cmd_thermo)

    demo = sub.add_parser("demo", help="reformer and shift study on built-in data")
    demo.add_argument("--cases", type=int, default=1_000_000, help="size of the timed random batch")
    demo.add_argument("--threads", type=int, default=None, help="worker threads (default: all cores)")
    demo.add_argument("--save-system", metavar="PATH", help="also write the demo's system file here")
    demo.add_argument(
        "--out",
        default="eqbatch-demo",
        metavar="DIR",
        help="folder for the demo's sweep table, results and plot",
    )
    demo.set_defaults(run=_cmd_demo)
    return parser


def _stdout_to_devnull() -> None:
    """After a closed pipe: send what is still buffered for standard output
    (flushed at exit) nowhere, so Python prints no second error."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):  # no file descriptor (captured output)
        pass


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; the exit status: 0 done, 1 a case did not converge,
    2 an error (one line on standard error), 130 interrupted, 141 the reader
    closed the pipe."""
    parser = _parser()
    args = parser.parse_args(argv)
    try:
        with warnings_to_stderr(quiet=bool(getattr(args, "quiet", False))):
            code = int(args.run(args))
            sys.stdout.flush()  # a closed pipe shows here, not at exit
        return code
    except BrokenPipeError:
        _stdout_to_devnull()
        return 141
    except (EqbatchError, OSError, ValueError) as err:
        # ValueError: a bad value that a check above the engine did not catch
        print(f"eqbatch: error: {_one_line(err)}", file=sys.stderr)
        return 2
    except MemoryError as err:
        print(f"eqbatch: error: not enough memory: {_one_line(err) or 'allocation failed'}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("eqbatch: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
