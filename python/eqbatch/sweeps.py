"""Parquet sweeps that never lose work.

A sweep reads a case table (a Parquet file, or a folder of them) in record
batches, solves every batch at engine speed and writes the results with an
incremental writer, so memory does not grow with the file. Input columns:
``feed_<species>`` (a missing species column means zero feed), ``P_bar``
(default: the system's P0), ``T_K``, ``lnK_<label>`` (all reactions, or none
and K from the system's K(T) data and ``T_K``). Outputs: every input column
unchanged and in order, then ``n_<species>``, ``y_<species>``,
``extent_<label>``, ``conversion_<species>`` (reactants with a feed column),
``status`` and ``iterations``.

Optional inputs (K from the system's data): ``adiabatic`` (true: an adiabatic
row, ``T_K`` or ``T_in_K`` its inlet), ``duty_kJ`` (a finite value: a row with
that heat added, kJ per case), ``T_in_K`` (the feed's temperature: the inlet of
energy-balance rows, and for the others the temperature the heat duty is
counted from), ``H_in_kJ`` (where given, an energy-balance row's inlet as the
feed's enthalpy, kJ) and ``approach_<label>`` (K, per row). A negative or missing
approach, a non-zero one on an energy-balance row, or ``adiabatic`` true with
a non-zero ``duty_kJ`` makes the row invalid input. With energy-balance
columns the outputs end with ``T_out_K``; with ``energy=True`` (the default
when any of ``adiabatic``, ``duty_kJ``, ``T_in_K`` is present) also
``H_out_kJ``, ``heat_kJ`` and ``dH_<label>``.

A ``feed_<name>``, ``lnK_<name>`` or ``approach_<name>`` column that names no
species or reaction of the system is refused (a typo would be a silently wrong
feed) unless ``allow_extra_columns=True``; such columns then pass through like
any other.

Never losing work: each finished batch is also written as its own part file
(Arrow IPC, its CRC-32 in its name) in a hidden ``.<name>.partial`` folder
beside the output, so an interruption (Ctrl-C, ``kill -9``) loses at most the
batch in flight, and ``resume=True`` continues after the last finished one,
re-reading the finished parts (a damaged part is solved again), whatever the
batch size. The output is written inside the partial folder as the sweep goes
and renamed to its name only when complete; the parts are then removed.

Never corrupting: a sweep holds an exclusive ``flock`` on ``lock`` in the
partial folder, so a second sweep on the same output is refused while the
first runs (the kernel drops the lock when a process dies, so a killed sweep
never blocks ``--resume``). ``sweep.json`` in the partial folder, and the
output's Parquet metadata (key ``eqbatch.sweep``), record what the result is
made of: the SHA-256 of the input file's bytes, the system's content, ``tol``,
``max_iter`` and the eqbatch version; a resume, or a folder resume that keeps a
finished output, must match it and says what differs. Every file is fsynced
before the rename that publishes it, and its folder after; outputs carry
Parquet page checksums, and inputs' checksums are verified when read.

Bounded memory: the input is read without Arrow's pre-buffering, whose cache
keeps every row group read until the reader is closed (apache/arrow#39808),
and through a 1 MiB buffered stream, so memory depends on the batch size, not
on the number of rows or the row-group size.
"""

from __future__ import annotations

import difflib
import errno
import hashlib
import json
import os
import queue
import re
import shutil
import socket
import sys
import threading
import time
import zlib
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from eqbatch import _core
from eqbatch.columns import (
    ADIABATIC,
    AMOUNT,
    APPROACH,
    DH,
    DUTY,
    FEED,
    H_IN,
    H_OUT,
    HEAT,
    ITERATIONS,
    LNK,
    PRESENT,
    PRESSURE,
    STATUS,
    STATUS_NAME,
    STEAM_TO_CARBON,
    T_IN,
    T_OUT,
    TEMPERATURE,
    YIELD,
    dry_columns,
    dry_names,
    output_columns,
    output_names,
    phase_columns,
    phase_names,
    status_names,
    syngas_columns,
    syngas_names,
    with_units,
)
from eqbatch.errors import CaseInputError, EqbatchError
from eqbatch.status import CONVERGED_CODES, Status, status_words
from eqbatch.system import ReactionSystem
from eqbatch.units import (
    PRESSURE_COLUMNS,
    TEMPERATURE_COLUMNS,
    amounts_in_mol,
    pressure_to_bar,
    temperature_to_kelvin,
)
from eqbatch.where import Condition, columns_of, parse_where, where_mask

#: Rows per record batch by default.
DEFAULT_BATCH_SIZE = 65_536

#: Bytes of the buffered stream the input is read through.
_READ_BUFFER = 1 << 20

#: The statuses of rows at equilibrium, as a summary counts them.
_AT_EQUILIBRIUM = tuple(status_words(code) for code in CONVERGED_CODES)

#: Version of what ``sweep.json`` and the output's ``eqbatch.sweep`` metadata hold.
_IDENTITY_FORMAT = 2


class SweepError(EqbatchError):
    """A sweep cannot start or continue; the message names the file and column.

    Examples
    --------
    >>> import eqbatch
    >>> system = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    >>> eqbatch.sweep(system, "no-such-cases.parquet", "out.parquet")
    Traceback (most recent call last):
    ...
    eqbatch.sweeps.SweepError: no-such-cases.parquet: no such file or folder
    """


@dataclass
class SweepSummary:
    """What a sweep did.

    Attributes
    ----------
    rows : int
        Rows in the outputs (solved in this run or kept from an earlier one).
    by_status : dict of str to int
        Rows per status, by name (``"converged"``, ``"invalid input"``, ...).
    seconds : float
        Wall time of the sweep.
    files : list of str
        The outputs written or kept.
    resumed_batches : int
        Finished batches taken from an interrupted run.
    kept : int
        Rows taken from an earlier run (finished parts, finished output
        files), not solved in this one.
    finished_files : list of str
        Outputs of a folder sweep that were already complete and kept as
        they were.

    Examples
    --------
    >>> summary = SweepSummary(rows=1000, by_status={"converged": 998, "invalid input": 2}, seconds=0.5)
    >>> summary.converged, summary.solved
    (998, 1000)
    >>> summary.line()
    '1,000 rows, 998 converged, not converged: 2 invalid input; 0.5 s (2,000 rows/s)'
    """

    rows: int = 0
    by_status: dict[str, int] = field(default_factory=dict)
    seconds: float = 0.0
    files: list[str] = field(default_factory=list)
    resumed_batches: int = 0
    #: Rows taken from an earlier run (finished parts, finished output files), not solved in this one.
    kept: int = 0
    #: Outputs of a folder sweep that were already complete and kept as they were.
    finished_files: list[str] = field(default_factory=list)

    @property
    def converged(self) -> int:
        """Rows at equilibrium (``Status.UNDERFLOW`` rows included; see the class example)."""
        return sum(self.by_status.get(name, 0) for name in _AT_EQUILIBRIUM)

    @property
    def solved(self) -> int:
        """Rows solved in this run (see the class example)."""
        return self.rows - self.kept

    def line(self) -> str:
        """One line on the sweep, as the command line prints it.

        Returns
        -------
        str
            Rows, how many converged (and how many with species below
            float64's range), the others by status, time and rows per second
            (of the rows solved in this run), and the rows kept.

        Examples
        --------
        >>> SweepSummary(rows=10, by_status={"converged": 10}, seconds=2.0, kept=4).line()
        '10 rows, 10 converged; 2.0 s (3 rows/s); 4 rows kept from an earlier run, not counted in the rate'
        """
        rate = self.solved / self.seconds if self.seconds > 0 else float("inf")
        not_at_equilibrium = sorted((k, v) for k, v in self.by_status.items() if k not in _AT_EQUILIBRIUM)
        others = ", ".join(f"{v:,} {k}" for k, v in not_at_equilibrium)
        held = self.by_status.get(status_words(Status.UNDERFLOW), 0)
        return (
            f"{self.rows:,} rows, {self.converged:,} converged"
            + (f" ({held:,} with species below float64's range)" if held else "")
            + (f", not converged: {others}" if others else "")
            + f"; {self.seconds:.1f} s ({rate:,.0f} rows/s)"
            + (f"; {self.kept:,} rows kept from an earlier run, not counted in the rate" if self.kept else "")
        )

    def merge(self, other: SweepSummary) -> None:
        """Add another file's summary to this one (the time is not added).

        Parameters
        ----------
        other : SweepSummary

        Examples
        --------
        >>> total = SweepSummary(rows=5, by_status={"converged": 5}, files=["a.parquet"])
        >>> total.merge(SweepSummary(rows=3, by_status={"stalled": 3}, files=["b.parquet"]))
        >>> total.rows, total.by_status, total.files
        (8, {'converged': 5, 'stalled': 3}, ['a.parquet', 'b.parquet'])
        """
        self.rows += other.rows
        for k, v in other.by_status.items():
            self.by_status[k] = self.by_status.get(k, 0) + v
        self.files += other.files
        self.resumed_batches += other.resumed_batches
        self.kept += other.kept
        self.finished_files += other.finished_files


class _Progress:
    """Rows done, rows per second and time left, on a terminal only."""

    def __init__(self, total: int, quiet: bool | None) -> None:
        self.total = total
        self.enabled = (not quiet) if quiet is not None else sys.stderr.isatty()
        self.start = time.perf_counter()
        self.last = 0.0
        self.kept = 0  # rows taken from an interrupted run: not in the rate

    def update(self, done: int, final: bool = False) -> None:
        if not self.enabled:
            return
        now = time.perf_counter()
        if not final and now - self.last < 0.2:
            return
        self.last = now
        elapsed = max(now - self.start, 1e-9)
        rate = (done - self.kept) / elapsed
        left = (self.total - done) / rate if rate > 0 else float("inf")
        width = 30
        filled = int(width * done / max(self.total, 1))
        bar = "#" * filled + "-" * (width - filled)
        sys.stderr.write(f"\r[{bar}] {done:,}/{self.total:,} rows  {rate:,.0f} rows/s  {left:,.0f} s left ")
        if final:
            sys.stderr.write("\n")
        sys.stderr.flush()


def _pa() -> tuple[Any, Any]:
    """pyarrow and pyarrow.parquet, imported when a sweep first needs them."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    return pa, pq


def _open(path: Path) -> Any:
    """The Parquet file, read row group by row group: no pre-buffering (its
    cache holds every row group read until the reader closes, so memory grew
    with the file, apache/arrow#39808), a buffered stream (memory bounded by
    the buffer, not the row-group size) and page checksums verified where the
    writer stored them."""
    pa, pq = _pa()
    try:
        return pq.ParquetFile(
            path, pre_buffer=False, buffer_size=_READ_BUFFER, page_checksum_verification=True
        )
    except FileNotFoundError:
        raise SweepError(f"{path}: no such file") from None
    except (pa.ArrowInvalid, OSError) as err:
        raise SweepError(f"{path}: not a readable Parquet file ({err})") from None


class _Plan:
    """How one input file's columns map onto the system."""

    def __init__(
        self,
        system: ReactionSystem,
        path: Path,
        schema: Any,
        say: Any,
        allow_extra_columns: bool = False,
        energy: bool | None = None,
        yields_per: Sequence[str] | None = None,
    ) -> None:
        pa, _ = _pa()
        self.system = system
        unknown = [sp for sp in yields_per or () if sp not in system.species]
        if unknown:
            raise SweepError(f"yields per {', '.join(unknown)}: no species of the system")
        self.yields_per = list(yields_per or ())
        names = list(schema.names)
        self.names = names
        twice = sorted({n for n in names if names.count(n) > 1})
        if twice:
            raise SweepError(
                f"{path}: column(s) {', '.join(twice)} appear more than once; give every column its own name"
            )
        if not allow_extra_columns:
            _refuse_unknown_columns(system, path, names)
        numeric = {
            n
            for n in names
            if pa.types.is_floating(schema.field(n).type) or pa.types.is_integer(schema.field(n).type)
        }

        def need_numeric(col: str) -> None:
            if col not in numeric:
                raise SweepError(f"{path}: column {col!r} must be numeric, found {schema.field(col).type}")

        self.feed_cols: list[str | None] = []
        # (a feed column may carry its unit: feed_CH4[kmol/h], feed_H2O[t/h]; the
        # factor to mol, or mol/h for flows, per column)
        self.feed_factor: list[float] = []
        units, self.per_hour = feed_column_units(system, path, names)
        missing = []
        for sp in system.species:
            col = FEED + sp
            given = [c for c in (col, *units.get(sp, {})) if c in names]
            if len(given) > 1:
                raise SweepError(f"{path}: more than one feed column for {sp} ({', '.join(given)}); give one")
            if given:
                need_numeric(given[0])
                self.feed_cols.append(given[0])
                self.feed_factor.append(units.get(sp, {}).get(given[0], 1.0))
            else:
                self.feed_cols.append(None)
                self.feed_factor.append(1.0)
                missing.append(sp)
        # S_C: the steam-to-carbon ratio, moles of water per mole of carbon
        # in the other fed species (from their formulas), instead of feed_H2O
        self.s_c = STEAM_TO_CARBON in names
        if self.s_c:
            need_numeric(STEAM_TO_CARBON)
            if "H2O" not in system.species or self.feed_cols[system.index("H2O")] is not None:
                raise SweepError(
                    f"{path}: {STEAM_TO_CARBON} sets the water feed: the system needs H2O and the file "
                    f"no {FEED}H2O column"
                )
            carbon = [(system.formulas.get(sp) or {}).get("C", 0) for sp in system.species]
            if not any(c and col for c, col in zip(carbon, self.feed_cols)):
                raise SweepError(f"{path}: {STEAM_TO_CARBON} needs a fed species with carbon in its formula")
            self.carbon = np.array(carbon, dtype=float)
            missing.remove("H2O")
        if len(missing) == len(system.species):
            raise SweepError(
                f"{path}: no feed column; expected feed_<species> for {', '.join(system.species)}"
            )
        if missing:
            say(f"{path}: no column for {', '.join(FEED + m for m in missing)}: taken as zero feed")
        # (one pressure and one temperature column at most, in any unit of
        # eqbatch.units; read as bar absolute and kelvin)
        given_p = [c for c in PRESSURE_COLUMNS if c in names]
        given_t = [c for c in TEMPERATURE_COLUMNS if c in names]
        for kind, given in (("pressure", given_p), ("temperature", given_t)):
            if len(given) > 1:
                raise SweepError(f"{path}: more than one {kind} column ({', '.join(given)}); give one")
        self.p_col = given_p[0] if given_p else None
        self.p_si = pressure_to_bar(self.p_col) if self.p_col else (1.0, 0.0)
        if self.p_col:
            need_numeric(self.p_col)
        else:
            say(f"{path}: no {PRESSURE} column: every case at P0 = {system.P0:g} bar")
        self.t_col = given_t[0] if given_t else None
        self.t_si = temperature_to_kelvin(self.t_col) if self.t_col else (1.0, 0.0)
        if self.t_col:
            need_numeric(self.t_col)
        lnk = [LNK + label for label in system.labels]
        present = [c for c in lnk if c in names]
        if present and len(present) != len(lnk):
            absent = sorted(set(lnk) - set(present))
            raise SweepError(
                f"{path}: missing column(s) {', '.join(absent)} (give every lnK_<label> or none)"
            )
        for c in present:
            need_numeric(c)
        self.lnk_cols = present or None
        if self.lnk_cols is None:
            if not system.lnK_data or len(system.lnK_data) != system.n_reactions:
                raise SweepError(
                    f"{path}: missing column(s) {', '.join(lnk)}; the system has no K data for them"
                )
            if system.needs_T and self.t_col is None:
                raise SweepError(f"{path}: missing column {TEMPERATURE!r}, needed for the system's K(T) data")
        self.t_in_col = T_IN if T_IN in names else None
        self.h_in_col = H_IN if H_IN in names else None
        self.duty_col = DUTY if DUTY in names else None
        self.adiabatic_col = ADIABATIC if ADIABATIC in names else None
        for maybe in (self.t_in_col, self.h_in_col, self.duty_col):
            if maybe:
                need_numeric(maybe)
        if self.adiabatic_col and not pa.types.is_boolean(schema.field(ADIABATIC).type):
            need_numeric(ADIABATIC)
        self.approach_cols = {label: APPROACH + label for label in system.labels if APPROACH + label in names}
        for col in self.approach_cols.values():
            need_numeric(col)
        self.balance = bool(self.adiabatic_col or self.duty_col)
        if (self.balance or self.approach_cols) and self.lnk_cols:
            raise SweepError(
                f"{path}: {ADIABATIC}, {DUTY} and {APPROACH}<label> columns take K from the system's data; "
                "drop the lnK_<label> columns"
            )
        if self.balance and self.t_col is None and self.t_in_col is None and self.h_in_col is None:
            raise SweepError(
                f"{path}: {ADIABATIC} or {DUTY} rows need the inlet: {T_IN}, {H_IN} or {TEMPERATURE}"
            )
        if self.h_in_col and not self.balance:
            raise SweepError(f"{path}: {H_IN} is the inlet of energy-balance rows: add {ADIABATIC} or {DUTY}")
        if self.balance:
            try:
                system._enthalpy_data(f"{path}: the {ADIABATIC} and {DUTY} columns")
            except CaseInputError as err:
                raise SweepError(str(err)) from None
        if self.approach_cols and self.t_col is None:
            raise SweepError(f"{path}: {APPROACH}<label> columns need {TEMPERATURE}")
        # energy outputs: asked for, or by default with energy-balance or feed-temperature columns
        has_data = all(sp in system.species_data for sp in system.species)
        if energy and not (has_data and (self.t_col or self.balance)):
            raise SweepError(
                f"{path}: energy outputs need species data for every species and a {TEMPERATURE} column"
            )
        wanted = energy if energy is not None else bool(self.balance or self.t_in_col or self.h_in_col)
        self.energy = bool(wanted and has_data and (self.t_col or self.balance))
        if self.energy and self.lnk_cols:
            say(
                f"{path}: energy outputs combine the species data's enthalpies with compositions from the "
                "lnK_<label> columns; they are consistent only if those constants come from the same data"
            )
        self.with_dH = self.energy and all(callable(system.lnK_data.get(label)) for label in system.labels)
        fed = [sp for sp, col in zip(system.species, self.feed_cols) if col is not None]
        # every fed species that takes part in a reaction, on either side
        self.conversion = [sp for sp in system.reacting_species() if sp in fed]
        clash = [c for c in self.output_names() if c in names]
        if clash:
            raise SweepError(f"{path}: input already has output column(s) {', '.join(clash)}")

    @staticmethod
    def _si(column: Any, name: str, scale: tuple[float, float]) -> np.ndarray:
        """Column ``name`` in the engine's units (``value * factor + offset``;
        the column itself when it is in them already)."""
        values = column(name)
        factor, offset = scale
        return values if (factor, offset) == (1.0, 0.0) else values * factor + offset

    def output_names(self) -> list[str]:
        """The columns a batch's solve adds to its input columns."""
        return (
            output_names(self.system, self.conversion)
            + phase_names(self.system)
            + dry_names(self.system)
            + syngas_names(self.system)
            + self.energy_names()
            + self.yield_names()
        )

    def yield_names(self) -> list[str]:
        """``yield_<species>_per_<fed>``: mol of each other reacting species made
        per mol of ``fed`` fed, for each species of ``yields_per``."""
        reacting = self.system.reacting_species()
        return [f"{YIELD}{sp}_per_{per}" for per in self.yields_per for sp in reacting if sp != per]

    def energy_names(self) -> list[str]:
        """``T_out_K`` (with energy-balance inputs), ``H_out_kJ``, ``heat_kJ``
        and ``dH_<label>`` where the system's data give them."""
        names = [T_OUT] if self.balance else []
        if not self.energy:
            return names
        names += [H_OUT, HEAT]
        return names + ([DH + label for label in self.system.labels] if self.with_dH else [])

    def solve(self, batch: Any, options: dict[str, Any]) -> tuple[Any, np.ndarray]:
        """One record batch solved: its columns followed by the outputs, and the statuses."""
        pa, _ = _pa()
        n = batch.num_rows

        def column(name: str) -> np.ndarray:
            # Nulls become NaN, which makes the row invalid input (not the run).
            return batch.column(name).to_numpy(zero_copy_only=False).astype(np.float64, copy=False)

        feed = np.zeros((n, self.system.n_species))
        for k, col in enumerate(self.feed_cols):
            if col is not None:
                feed[:, k] = column(col) if self.feed_factor[k] == 1.0 else column(col) * self.feed_factor[k]
        if self.s_c:
            feed[:, self.system.index("H2O")] = column(STEAM_TO_CARBON) * (feed @ self.carbon)
        P = (
            np.ascontiguousarray(self._si(column, self.p_col, self.p_si))
            if self.p_col
            else np.full(n, self.system.P0)
        )
        if self.lnk_cols:
            T_given = self._si(column, self.t_col, self.t_si) if self.t_col else None  # for energy outputs
            lnk = np.column_stack([column(c) for c in self.lnk_cols])
            res = self.system.solve(feed, lnK=lnk, T=T_given, P=P, **options)
            outs = self._outputs([(np.arange(n), res, T_given)], n)
        elif not (self.balance or self.approach_cols or self.t_in_col):
            T = self._si(column, self.t_col, self.t_si) if self.t_col else None
            res = self.system.solve(feed, P=P, T=T, **options)
            outs = self._outputs([(np.arange(n), res, T)], n)
        else:
            outs = self._outputs(self._solve_rows(column, feed, P, n, options), n)
        for per in self.yields_per:  # (n - n0) / n0_per, NaN where per is not fed
            with np.errstate(divide="ignore", invalid="ignore"):
                fed = np.where(feed[:, self.system.index(per)] > 0, feed[:, self.system.index(per)], np.nan)
                for sp in self.system.reacting_species():
                    if sp != per:
                        k = self.system.index(sp)
                        outs[f"{YIELD}{sp}_per_{per}"] = (outs[AMOUNT + sp] - feed[:, k]) / fed
        arrays = list(batch.columns) + [
            status_names(v, "arrow") if k == STATUS_NAME else pa.array(v) for k, v in outs.items()
        ]
        table = pa.Table.from_arrays(arrays, names=self.names + list(outs))
        return table, outs[STATUS]

    def _solve_rows(
        self, column: Any, feed: np.ndarray, P: np.ndarray, n: int, options: dict[str, Any]
    ) -> list:
        """Rows with energy-balance, inlet-temperature or approach columns:
        the isothermal rows and the energy-balance rows solved apart. A row
        whose approach is not a finite, non-negative number, or an
        energy-balance row with an approach, gets a NaN temperature (invalid
        input)."""
        T = self._si(column, self.t_col, self.t_si) if self.t_col else np.full(n, np.nan)
        T_feed = T  # the feed's temperature: T_in_K where given, else T_K
        if self.t_in_col:
            T_in = column(self.t_in_col)
            T_feed = np.where(np.isnan(T_in), T, T_in)
        balance = np.zeros(n, dtype=bool)
        heat = np.zeros(n)
        bad = np.zeros(n, dtype=bool)
        adiabatic = np.zeros(n, dtype=bool)
        if self.adiabatic_col:
            adiabatic = np.nan_to_num(column(self.adiabatic_col)) != 0
            balance |= adiabatic
        if self.duty_col:
            duty = column(self.duty_col)
            given = np.isfinite(duty)
            balance |= given
            heat = np.where(given, duty, 0.0)
            bad |= adiabatic & (heat != 0.0)  # adiabatic with heat added: a contradiction, invalid
        approach = {label: column(col) for label, col in self.approach_cols.items()}
        for dT in approach.values():
            bad |= ~((dT >= 0.0) & (dT < np.inf)) | (balance & (dT != 0.0))
        parts = []
        iso = np.flatnonzero(~balance)
        if iso.size:
            kw: dict[str, Any] = {"T": np.where(bad[iso], np.nan, T[iso]), "P": P[iso]}
            if approach:
                kw["approach"] = {label: np.where(bad[iso], 0.0, dT[iso]) for label, dT in approach.items()}
            res = self.system.solve(feed[iso], **kw, **options)
            parts.append((iso, res, T_feed[iso] if self.t_in_col else None))
        H_in = column(self.h_in_col) if self.h_in_col else np.full(n, np.nan)
        by_h = balance & np.isfinite(H_in)  # an inlet enthalpy, where given, rather than a temperature
        for rows, key, inlet in ((balance & ~by_h, "T", T_feed), (by_h, "H_in", H_in)):
            hot = np.flatnonzero(rows)
            if hot.size:
                given = {key: np.where(bad[hot], np.nan, inlet[hot])}
                res = self.system.solve(feed[hot], **given, P=P[hot], duty=heat[hot], **options)
                parts.append((hot, res, None))
        return parts

    def _outputs(self, parts: list, n: int) -> dict[str, np.ndarray]:
        """The output columns of ``n`` rows from the solves of their parts:
        ``(rows, result, feed temperature for the heat duty or None)``."""
        s, r = self.system.n_species, self.system.n_reactions
        pure = phase_names(self.system)
        if len(parts) == 1 and parts[0][0].size == n and not self.energy_names():  # one solve: its arrays
            res = parts[0][1]
            conv = {sp: res.conversion(sp) for sp in self.conversion}
            outs = output_columns(
                self.system, res.amounts, res.mole_fractions, res.extents, res.status, res.iterations, conv
            )
            outs |= phase_columns(self.system, res.present, res.activities) if pure else {}
            return outs | dry_columns(self.system, res.amounts) | syngas_columns(self.system, res.amounts)
        amounts, fractions, extents = np.empty((n, s)), np.empty((n, s)), np.empty((n, r))
        status, iterations = np.empty(n, dtype=np.uint8), np.empty(n, dtype=np.uint32)
        conversions = {sp: np.empty(n) for sp in self.conversion}
        energy = {name: np.full(n, np.nan) for name in self.energy_names()}
        phases = {
            name: np.zeros(n, dtype=bool) if name.startswith(PRESENT) else np.full(n, np.nan) for name in pure
        }
        for rows, res, T_feed in parts:
            if pure:
                for name, values in phase_columns(self.system, res.present, res.activities).items():
                    phases[name][rows] = values
            amounts[rows], fractions[rows], extents[rows] = res.amounts, res.mole_fractions, res.extents
            status[rows], iterations[rows] = res.status, res.iterations
            for sp in self.conversion:
                conversions[sp][rows] = res.conversion(sp)
            if T_OUT in energy and res.T is not None:
                energy[T_OUT][rows] = res.T
            if self.energy and res.T is not None:
                energy[H_OUT][rows] = res.enthalpy
                energy[HEAT][rows] = res.duty(T_feed)
                if self.with_dH:
                    dH = res.reaction_enthalpy
                    for j, label in enumerate(self.system.labels):
                        energy[DH + label][rows] = dH[:, j]
        outs = output_columns(self.system, amounts, fractions, extents, status, iterations, conversions)
        derived = dry_columns(self.system, amounts) | syngas_columns(self.system, amounts)
        return outs | phases | derived | energy


def feed_column_units(
    system: ReactionSystem, path: Path, names: list[str]
) -> tuple[dict[str, dict[str, float]], bool]:
    """The feed columns that carry a unit (``feed_<species>[<unit>]``: ``kmol``,
    ``kmol/h``, ``kg/h``, ``t/h``, ...), per species, with the factor to mol
    (amounts, masses) or mol/h (flows, mass flows; through the molar mass of
    the species' formula). All of a file's unit-bearing feed columns must be
    amounts or all flows; the flag says flows (the outputs are then per hour)."""
    out: dict[str, dict[str, float]] = {}
    flows = set()
    for name in names:
        if not (name.startswith(FEED) and name.endswith("]") and "[" in name):
            continue
        species, _, unit = name[len(FEED) : -1].partition("[")
        if species not in system.species:
            raise SweepError(f"{path}: {name} names no species of the system")
        try:
            factors, flow = amounts_in_mol({species: f"1 {unit}"}, system.molar_mass)
            factor = factors[species]
            flows.add(flow)
        except CaseInputError as err:
            raise SweepError(f"{path}: column {name}: {err}") from None
        out.setdefault(species, {})[name] = float(factor)
    if len(flows) > 1:
        raise SweepError(f"{path}: feed columns with units must be all amounts or all flows")
    return out, flows == {True}


def _refuse_unknown_columns(system: ReactionSystem, path: Path, names: list[str]) -> None:
    """``feed_<x>`` and ``lnK_<x>`` columns must name a species and a reaction
    of the system: a misspelt feed column would otherwise be ignored, and its
    rows solved with zero feed of that species."""

    def unknown(prefix: str, known: tuple[str, ...]) -> list[str]:
        wanted = [prefix + k for k in known]
        found = []
        for name in names:
            if prefix == FEED and name.endswith("]") and "[" in name:
                continue  # a feed with its unit (checked by feed_column_units)
            if name.startswith(prefix) and name[len(prefix) :] not in known:
                near = difflib.get_close_matches(name, wanted, n=1)
                found.append(name + (f" (did you mean {near[0]}?)" if near else ""))
        return found

    problems = []
    feeds = unknown(FEED, system.species)
    if feeds:
        problems.append(
            f"{', '.join(feeds)} name(s) no species of the system (its species: {', '.join(system.species)})"
        )
    approaches = unknown(APPROACH, system.labels)
    if approaches:
        problems.append(
            f"{', '.join(approaches)} name(s) no reaction of the system "
            f"(its reactions: {', '.join(system.labels)})"
        )
    lnks = unknown(LNK, system.labels)
    if lnks:
        problems.append(
            f"{', '.join(lnks)} name(s) no reaction of the system (its reactions: {', '.join(system.labels)})"
        )
    if problems:
        raise SweepError(
            f"{path}: column(s) {'; '.join(problems)}; correct the name, or pass allow_extra_columns=True "
            "(--allow-extra-columns) to carry such columns through unchanged"
        )


def system_digest(system: ReactionSystem) -> str:
    """A system by content, as a sweep records it (SHA-256 of its arguments)."""
    return hashlib.sha256(repr(system.arguments()).encode()).hexdigest()


def _identity(system: ReactionSystem, path: Path, pf: Any, options: dict, plan: _Plan) -> dict:
    """What a sweep's result is made of, as JSON values: the input by content
    (SHA-256 of the file's bytes: a file rewritten with other rows of the same
    size and time differs), the system by content, the settings that change
    results (``threads`` and the batch size do not) and the optional outputs."""
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        while block := f.read(8 << 20):
            digest.update(block)
    return {
        "format": _IDENTITY_FORMAT,
        "input_sha256": digest.hexdigest(),
        "input_rows": pf.metadata.num_rows,
        "system_sha256": system_digest(system),
        "tol": float(options["tol"]),
        "max_iter": int(options["max_iter"]),
        "eqbatch": _core.__version__,
        "outputs": plan.energy_names() + plan.yield_names(),
    }


def _differences(old: Any, new: dict, src: Path) -> list[str]:
    """What differs between a recorded identity and this sweep's, in words."""
    if not isinstance(old, dict) or old.get("format") != new["format"]:
        return ["it was made by another version of eqbatch, whose record cannot be checked"]
    found = []
    if old.get("input_sha256") != new["input_sha256"]:
        found.append(
            f"the content of {src} differs from the input it was made from "
            f"(SHA-256 {str(old.get('input_sha256'))[:12]}... then, {new['input_sha256'][:12]}... now)"
        )
    if old.get("system_sha256") != new["system_sha256"]:
        found.append("the system differs (species, reactions, phases, P0, K data or species data)")
    for key in ("tol", "max_iter"):
        if old.get(key) != new[key]:
            found.append(f"{key} was {old.get(key)!r}, now {new[key]!r}")
    if old.get("eqbatch") != new["eqbatch"]:
        found.append(f"it was made by eqbatch {old.get('eqbatch')}, this is eqbatch {new['eqbatch']}")
    return found


def _refuse_input_as_output(src: Path, dst: Path) -> None:
    """An output must never replace an input: not the same file (by path,
    symbolic or hard link), not inside an input folder, not a folder holding it."""
    s, d = src.resolve(), dst.resolve()
    if s == d or (src.exists() and dst.exists() and os.path.samefile(src, dst)):
        raise SweepError(
            f"{dst}: is the input {src}; write the output elsewhere (an input is never replaced)"
        )
    if src.is_dir() and s in d.parents:
        raise SweepError(f"{dst}: is inside the input folder {src}; write the output outside it")
    if d in s.parents:
        raise SweepError(f"{dst}: contains the input {src}; write the output beside the input, not around it")


def _fsync(path: Path, *, folder: bool = False) -> None:
    fd = os.open(path, os.O_RDONLY | (os.O_DIRECTORY if folder else 0))
    try:
        os.fsync(fd)
    except OSError as err:
        # a few file systems cannot sync a folder; nothing more can be done there
        if not (folder and err.errno in (errno.EINVAL, errno.ENOTSUP, errno.EBADF)):
            raise
    finally:
        os.close(fd)


def _publish(tmp: Path, final: Path) -> None:
    """Rename a finished ``tmp`` to ``final`` durably: the data reach the disk
    before the rename, and the rename before this returns, so after a power
    loss ``final`` is absent or complete, never an empty or partial file."""
    _fsync(tmp)
    os.replace(tmp, final)
    _fsync(final.parent, folder=True)


def _write_json(path: Path, value: Any) -> None:
    tmp = path.with_suffix(".tmp")
    with open(tmp, "w") as f:
        f.write(json.dumps(value))
    _publish(tmp, path)


class _Lock:
    """An exclusive ``flock`` on ``lock`` in the partial folder, held while a
    sweep writes an output. The kernel releases it when the process ends, however
    it ends, so a killed sweep leaves no stale lock. (Locks may not work on
    network file systems: see the README.)"""

    def __init__(self, partial: Path, dst: Path, say: Any) -> None:
        self.fd: int | None = None
        try:
            import fcntl
        except ImportError:  # not a POSIX system
            say(f"{dst}: no file locks on this system: two sweeps on one output are not detected")
            partial.mkdir(parents=True, exist_ok=True)
            return
        path = partial / "lock"
        for _ in range(100):
            if not partial.exists():
                partial.mkdir(parents=True, exist_ok=True)
                _fsync(partial.parent, folder=True)
            try:
                fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
            except FileNotFoundError:  # a finishing sweep removed the folder under us
                continue
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                holder = os.read(fd, 256).decode(errors="replace").strip() or "another process"
                os.close(fd)
                raise SweepError(
                    f"{dst}: another sweep is writing it ({holder}, lock {path}); "
                    "wait for it to end (or stop it and resume)"
                ) from None
            except OSError as err:
                os.close(fd)
                say(f"{dst}: cannot lock {path} ({err}): two sweeps on one output are not detected")
                return
            try:
                same = os.fstat(fd).st_ino == os.stat(path).st_ino
            except FileNotFoundError:
                same = False
            if same:  # not a lock file that a finishing sweep has just unlinked
                os.ftruncate(fd, 0)
                os.write(fd, f"process {os.getpid()} on {socket.gethostname()}\n".encode())
                self.fd = fd
                return
            os.close(fd)
        raise SweepError(f"{dst}: could not take the lock {path}")

    def release(self) -> None:
        if self.fd is not None:
            os.close(self.fd)
            self.fd = None


def sweep_file(
    system: ReactionSystem,
    input: str | os.PathLike[str],
    output: str | os.PathLike[str],
    *,
    batch_size: int = DEFAULT_BATCH_SIZE,
    resume: bool = False,
    overwrite: bool = False,
    quiet: bool | None = None,
    say: Any = None,
    allow_extra_columns: bool = False,
    tol: float = 1e-10,
    max_iter: int = 200,
    threads: int | None = None,
    energy: bool | None = None,
    yields_per: Sequence[str] | None = None,
) -> SweepSummary:
    """Sweep one Parquet file into one output file (see the module docs)."""
    src, dst = Path(input), Path(output)
    say = say or (lambda msg: print(msg, file=sys.stderr))
    if isinstance(batch_size, bool) or not isinstance(batch_size, (int, np.integer)) or batch_size < 1:
        raise SweepError(f"batch_size must be a whole number of rows, at least 1; got {batch_size!r}")
    _refuse_input_as_output(src, dst)
    if dst.is_dir():
        raise SweepError(f"{dst}: is a folder; the output of a single input file is a file")
    if dst.exists() and not (overwrite or resume):
        raise SweepError(_exists_message(dst))
    pf = _open(src)
    plan = _Plan(system, src, pf.schema_arrow, say, allow_extra_columns, energy, yields_per)
    options = {"tol": tol, "max_iter": max_iter, "threads": threads}
    partial = dst.parent / f".{dst.name}.partial"
    lock = _Lock(partial, dst, say)
    try:
        return _sweep_locked(
            system, src, dst, partial, pf, plan, options, batch_size, resume, overwrite, quiet, say
        )
    except BaseException:
        if partial.exists() and not list(partial.glob("part-*.arrow")):
            shutil.rmtree(partial, ignore_errors=True)  # nothing worth keeping: leave no trace
        raise
    finally:
        lock.release()


def _exists_message(dst: Path) -> str:
    return (
        f"{dst}: exists; pass overwrite=True (--overwrite) to replace it, or resume=True (--resume) "
        "to keep it if it is this sweep's finished output"
    )


def _sweep_locked(
    system: ReactionSystem,
    src: Path,
    dst: Path,
    partial: Path,
    pf: Any,
    plan: _Plan,
    options: dict,
    batch_size: int,
    resume: bool,
    overwrite: bool,
    quiet: bool | None,
    say: Any,
) -> SweepSummary:
    """The body of :func:`sweep_file`, run while holding the output's lock."""
    left = [p for p in partial.iterdir() if p.name != "lock"]
    if not any(p.name.startswith("part-") for p in left):
        left = _clear(partial)  # no finished batch: nothing to resume or to lose
    if left and not (resume or overwrite):
        raise SweepError(
            f"{dst}: an interrupted sweep left {partial}; resume it (--resume) or start over (--overwrite)"
        )
    identity = _identity(system, src, pf, options, plan)
    if dst.exists():
        if resume:
            problems = _finished_problems(dst, identity, src)
            if not problems:
                shutil.rmtree(partial, ignore_errors=True)
                return _kept_output(dst)
            if not overwrite:
                raise SweepError(
                    f"{dst}: exists and is not this sweep's finished output: {'; '.join(problems)}; "
                    "pass --overwrite to replace it"
                )
        elif not overwrite:
            raise SweepError(_exists_message(dst))
    record = partial / "sweep.json"
    if left and resume and record.exists():
        try:
            old = json.loads(record.read_text())
        except (ValueError, OSError):
            old = None
        problems = _differences(old, identity, src)
        if problems and not overwrite:
            raise SweepError(
                f"{dst}: cannot resume the interrupted sweep in {partial}: {'; '.join(problems)}; "
                "resume with the same input and settings, or start over with --overwrite"
            )
        if problems:
            say(f"{dst}: the interrupted sweep differs ({'; '.join(problems)}): starting over")
            left = _clear(partial)
    elif left:
        left = _clear(partial)  # starting over, or nothing recorded to resume from
    if not left:
        _write_json(record, identity)

    summary = SweepSummary(files=[str(dst)])
    total = identity["input_rows"]
    progress = _Progress(total, quiet)
    t0 = time.perf_counter()
    done = 0
    tmp_out = partial / "output.parquet.tmp"
    writer = _BackgroundWriter(tmp_out, partial, {"eqbatch.sweep": json.dumps(identity)}, plan.per_hour)
    finished = _part_chain(partial) if left else []
    try:
        for start, rows, crc, path in finished:
            table = _read_part(path, crc)
            if table is None or table.num_rows != rows or start + rows > total:
                say(f"{path}: damaged (its checksum or size does not match): its rows are solved again")
                break
            writer.put(table)
            _count(summary, table.column(STATUS).to_numpy())
            summary.resumed_batches += 1
            summary.kept += rows
            done += rows
        _remove_parts_from(partial, done)
        progress.kept = done
        for batch in _input_batches(pf, src, done, batch_size):
            table, _ = plan.solve(batch, options)
            writer.put(table, done)
            _count(summary, table.column(STATUS).to_numpy())
            done += batch.num_rows
            progress.update(done)
        progress.update(done, final=True)
        if total == 0:  # an empty input: an empty table with the output columns
            writer.put(_empty_output(plan, pf.schema_arrow))
    finally:
        writer.close()
    _publish(tmp_out, dst)
    shutil.rmtree(partial, ignore_errors=True)
    summary.seconds = time.perf_counter() - t0
    return summary


def _clear(partial: Path) -> list:
    """Empty the partial folder but for the lock (held by this process)."""
    for p in partial.iterdir():
        if p.is_dir():
            shutil.rmtree(p)
        elif p.name != "lock":
            p.unlink()
    return []


def _finished_problems(dst: Path, identity: dict, src: Path) -> list[str]:
    """Why ``dst`` is not this sweep's complete output (nothing: it is)."""
    try:
        meta = _open(dst).metadata
    except SweepError as err:
        return [str(err)]
    record = (meta.metadata or {}).get(b"eqbatch.sweep")
    if record is None:
        return ["it has no record of an eqbatch sweep"]
    try:
        old = json.loads(record)
    except ValueError:
        old = None
    problems = _differences(old, identity, src)
    if not problems and meta.num_rows != identity["input_rows"]:
        problems.append(f"it has {meta.num_rows:,} rows, the input {identity['input_rows']:,}")
    return problems


def _kept_output(dst: Path) -> SweepSummary:
    """The summary of a finished output kept as it is (its statuses counted
    batch by batch: memory does not grow with the file)."""
    summary = SweepSummary(files=[str(dst)], finished_files=[str(dst)])
    pf = _open(dst)
    if STATUS not in pf.schema_arrow.names:  # (a subset of the columns, without the status)
        summary.rows = pf.metadata.num_rows
    else:
        for batch in _input_batches(pf, dst, 0, DEFAULT_BATCH_SIZE, columns=[STATUS]):
            _count(summary, batch.column(0).to_numpy())
    summary.kept = summary.rows
    return summary


_PART = re.compile(r"part-(\d{15})-(\d{9})-([0-9a-f]{8})\.arrow")


def _part_name(start: int, rows: int, crc: int) -> str:
    """A part's name says which rows it holds and the CRC-32 of its bytes."""
    return f"part-{start:015d}-{rows:09d}-{crc:08x}.arrow"


def _part_chain(partial: Path) -> list[tuple[int, int, int, Path]]:
    """The finished parts that continue each other from row 0, in order, as
    ``(first row, rows, crc, path)``; batch sizes may differ between runs."""
    found = {}
    for path in partial.glob("part-*.arrow"):
        match = _PART.fullmatch(path.name)
        if match:
            found[int(match[1])] = (int(match[2]), int(match[3], 16), path)
    chain, row = [], 0
    while row in found and found[row][0] > 0:
        rows, crc, path = found[row]
        chain.append((row, rows, crc, path))
        row += rows
    return chain


def _remove_parts_from(partial: Path, row: int) -> None:
    """Remove every part that does not belong to the chain before ``row`` (a
    damaged part and those after it, parts beyond a gap, unfinished parts)."""
    keep = {path for start, _, _, path in _part_chain(partial) if start < row}
    for path in partial.glob("part-*"):
        if path not in keep:
            path.unlink()


def _input_batches(
    pf: Any, path: Path, start: int, batch_size: int, columns: list[str] | None = None
) -> Iterator[Any]:
    """The rows of ``pf`` from row ``start`` on, in record batches (reading
    begins at the row group holding ``start``). A read error, such as a page
    whose checksum fails, is an error naming the file."""
    pa, _ = _pa()
    meta = pf.metadata
    first, skip = 0, start
    while first < meta.num_row_groups and skip >= meta.row_group(first).num_rows:
        skip -= meta.row_group(first).num_rows
        first += 1
    if first == meta.num_row_groups:
        return
    batches = pf.iter_batches(
        batch_size=batch_size, row_groups=list(range(first, meta.num_row_groups)), columns=columns
    )
    row = start - skip
    while True:
        try:
            batch = next(batches)
        except StopIteration:
            return
        except (OSError, pa.ArrowException) as err:
            raise SweepError(f"{path}: cannot read the rows after row {row:,}: {err}") from None
        row += batch.num_rows
        if skip >= batch.num_rows:
            skip -= batch.num_rows
            continue
        if skip:
            batch, skip = batch.slice(skip), 0
        yield batch


def _write_part(table: Any, partial: Path, start: int) -> None:
    """A finished batch, as Arrow IPC (written at memory speed), published
    durably under a name that holds its rows and its CRC-32 (computed from the
    file, not from a copy of it in memory)."""
    pa, _ = _pa()
    tmp = partial / f"part-{start:015d}.tmp"
    with pa.OSFile(str(tmp), "wb") as sink, pa.ipc.new_file(sink, table.schema) as ipc:
        ipc.write_table(table)
    crc = 0
    with open(tmp, "rb") as f:
        while block := f.read(1 << 20):
            crc = zlib.crc32(block, crc)
    _publish(tmp, partial / _part_name(start, table.num_rows, crc))


def _read_part(path: Path, crc: int) -> Any:
    """A part's table, or None when its bytes do not match its checksum."""
    pa, _ = _pa()
    data = path.read_bytes()
    if zlib.crc32(data) != crc:
        return None
    try:
        return pa.ipc.open_file(pa.py_buffer(data)).read_all()
    except (OSError, pa.ArrowException):
        return None


class _BackgroundWriter:
    """The part files and the output Parquet file, written batch by batch on
    their own thread so that encoding overlaps the next batch's solve (both
    release the GIL).
    Dictionary encoding is off: solver outputs are distinct doubles, for
    which it costs time and saves nothing. Pages carry CRC-32 checksums, and
    the file's metadata says what it was made of."""

    def __init__(self, path: Path, partial: Path, metadata: dict, per_hour: bool = False) -> None:
        self.path = path
        self.partial = partial
        self.metadata = metadata
        self.per_hour = per_hour  # (a feed of flows: amounts in mol/h in the units metadata)
        # One table waits while another is written and a third is solved: enough
        # to overlap solving and writing, and fewer tables in flight keep the
        # peak memory steadier (two waiting gave ~10 MB higher, more variable peaks).
        self.queue: queue.Queue = queue.Queue(maxsize=1)
        self.error: BaseException | None = None
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self) -> None:
        _, pq = _pa()
        writer = None
        try:
            while (item := self.queue.get()) is not None:
                table, start = item
                if start is not None:
                    _write_part(table, self.partial, start)
                if writer is None:
                    writer = pq.ParquetWriter(
                        self.path,
                        with_units(table.schema, self.per_hour).with_metadata(self.metadata),  # (units)
                        use_dictionary=False,
                        write_page_checksum=True,
                    )
                writer.write_table(table)
        except BaseException as err:  # re-raised on the caller's thread by close()
            self.error = err
            while self.queue.get() is not None:
                pass
        finally:
            if writer is not None:
                writer.close()

    def put(self, table: Any, start: int | None = None) -> None:
        """Append ``table`` to the output; first save it as the part of rows
        from ``start`` on if given."""
        if self.error is not None:
            raise self.error
        self.queue.put((table, start))

    def close(self) -> None:
        self.queue.put(None)
        self.thread.join()
        if self.error is not None:
            raise self.error


def _empty_output(plan: _Plan, schema: Any) -> Any:
    pa, _ = _pa()
    fields = list(schema)
    for name in plan.output_names():
        kind = (
            pa.uint8()
            if name == STATUS
            else pa.dictionary(pa.uint8(), pa.string())
            if name == STATUS_NAME
            else pa.uint32()
            if name == ITERATIONS
            else pa.bool_()
            if name.startswith(PRESENT)
            else pa.float64()
        )
        fields.append(pa.field(name, kind))
    return pa.schema(fields).empty_table()


def _count(summary: SweepSummary, status: np.ndarray) -> None:
    codes, counts = np.unique(status, return_counts=True)
    summary.rows += int(status.size)
    for code, count in zip(codes, counts):
        name = status_words(code)
        summary.by_status[name] = summary.by_status.get(name, 0) + int(count)


def _staged_sweep(
    system: ReactionSystem,
    src: Path,
    dst: Path,
    where: Sequence[str] | None,
    columns: Sequence[str] | None,
    quiet: bool | None,
    kwargs: dict[str, Any],
) -> SweepSummary:
    """:func:`sweep` of a CSV file, of a file's rows that pass ``where``, or
    into a subset of the output's ``columns``: see there."""
    stage = dst.parent / f".{dst.name}.staged"
    if dst.exists() and not (kwargs["overwrite"] or kwargs["resume"]):
        raise SweepError(_exists_message(dst))
    conditions = parse_where(where)
    stage.mkdir(parents=True, exist_ok=True)
    staged = src
    if conditions or src.suffix.lower() == ".csv":
        staged = stage / "input.parquet"
        _stage_rows(src, conditions, staged)
    if not columns:  # (the sweep itself checks a resume: the staged rows are in its record)
        summary = sweep_file(system, staged, dst, quiet=quiet, **kwargs)
    else:
        pf = _open(staged)
        extra, energy = kwargs["allow_extra_columns"], kwargs["energy"]
        plan = _Plan(system, staged, pf.schema_arrow, lambda msg: None, extra, energy, kwargs["yields_per"])
        known = plan.names + plan.output_names()
        unknown = [c for c in columns if c not in known]
        if unknown:  # (before any solving)
            raise SweepError(
                f"{dst}: columns= names no output column {', '.join(map(repr, unknown))} "
                f"(the output has {', '.join(known)})"
            )
        full = stage / "output.parquet"
        started = full.exists() or (stage / f".{full.name}.partial").exists()
        if dst.exists() and kwargs["resume"] and not kwargs["overwrite"] and not started:
            # a finished subset is kept only if this sweep made it: the same rows,
            # system, settings, outputs and columns
            options = {k: kwargs[k] for k in ("tol", "max_iter")}
            identity = _identity(system, staged, pf, options, plan)
            problems = _finished_problems(dst, identity, src)
            if _open(dst).schema_arrow.names != list(columns):
                problems.append("its columns differ from the ones asked for")
            if problems:
                raise SweepError(
                    f"{dst}: exists and is not this sweep's finished output: {'; '.join(problems)}; "
                    "pass --overwrite to replace it"
                )
            shutil.rmtree(stage, ignore_errors=True)
            return _kept_output(dst)
        summary = sweep_file(system, staged, full, quiet=quiet, **kwargs)
        _project(full, dst, list(columns))
    shutil.rmtree(stage, ignore_errors=True)
    summary.files = [str(dst)]
    return summary


def _stage_rows(src: Path, conditions: Sequence[Condition], out: Path) -> None:
    """Write the rows of ``src`` (Parquet, or CSV with a header row) that
    pass ``conditions`` to the Parquet file ``out``, batch by batch."""
    pa, pq = _pa()
    if src.suffix.lower() == ".csv":
        from pyarrow import csv

        try:
            # whole numbers in a column of numbers are read as float64, as a
            # later row with a fraction would need (CSV types are guessed per block)
            probe = csv.open_csv(src)
            types = {
                f.name: pa.float64() for f in probe.schema if pa.types.is_integer(f.type) and f.name != STATUS
            }
            probe.close()
            reader: Any = csv.open_csv(src, convert_options=csv.ConvertOptions(column_types=types))
            schema = reader.schema
        except (pa.ArrowInvalid, OSError) as err:
            raise SweepError(f"{src}: not a readable CSV file with a header row ({err})") from None
    else:
        pf = _open(src)
        schema = pf.schema_arrow
        reader = pf.iter_batches(batch_size=DEFAULT_BATCH_SIZE)
    missing = [c for c in columns_of(conditions) if c not in schema.names]
    if missing:
        raise SweepError(f"{src}: where= names no column {', '.join(map(repr, missing))}")
    # (written under a private name, then renamed: a sweep already reading an
    # earlier staged file keeps reading that one)
    tmp = out.parent / f".{out.name}.{os.getpid()}.writing"
    try:
        with pq.ParquetWriter(tmp, schema, write_page_checksum=True) as writer:
            for batch in reader:
                if conditions:
                    batch = batch.filter(pa.array(_passing(conditions, batch)))
                writer.write_batch(batch)
    except pa.ArrowInvalid as err:
        tmp.unlink(missing_ok=True)
        raise SweepError(f"{src}: {err}") from None
    os.replace(tmp, out)


def _passing(conditions: Sequence[Condition], batch: Any) -> np.ndarray:
    """The rows of a record batch where every condition holds."""
    return where_mask(conditions, lambda c: batch.column(c).to_numpy(zero_copy_only=False), batch.num_rows)


def _project(full: Path, dst: Path, columns: list[str]) -> None:
    """The output ``dst`` as the ``columns`` of the finished sweep ``full``
    (its metadata kept), batch by batch; the columns were checked before
    the sweep (:func:`_staged_sweep`)."""
    pa, pq = _pa()
    pf = _open(full)
    schema = pa.schema([pf.schema_arrow.field(c) for c in columns], metadata=pf.schema_arrow.metadata)
    tmp = dst.parent / f".{dst.name}.writing"
    with pq.ParquetWriter(tmp, schema, use_dictionary=False, write_page_checksum=True) as writer:
        for batch in pf.iter_batches(batch_size=DEFAULT_BATCH_SIZE, columns=columns):
            writer.write_batch(batch)
    os.replace(tmp, dst)


def _sweep_task(system: ReactionSystem, src: Path, dst: Path, kwargs: dict[str, Any]) -> SweepSummary:
    """One Dask task: a whole input file (runs on a worker)."""
    kwargs = dict(kwargs, quiet=True, say=lambda msg: None)
    return sweep_file(system, src, dst, **kwargs)


def sweep(
    system: ReactionSystem,
    input: str | os.PathLike[str],
    output: str | os.PathLike[str],
    *,
    batch_size: int = DEFAULT_BATCH_SIZE,
    resume: bool = False,
    overwrite: bool = False,
    quiet: bool | None = None,
    client: Any = None,
    scheduler: str | None = None,
    threads: int | None = None,
    tol: float = 1e-10,
    max_iter: int = 200,
    allow_extra_columns: bool = False,
    energy: bool | None = None,
    where: Sequence[str] | None = None,
    columns: Sequence[str] | None = None,
    yields_per: Sequence[str] | None = None,
) -> SweepSummary:
    """Solve every row of a Parquet (or CSV) file, or of every Parquet file
    in a folder.

    Parameters
    ----------
    system : ReactionSystem
    input : path
        A Parquet file (then ``output`` is a file), a CSV file (``*.csv``, with
        a header row: read by pyarrow and checked as a Parquet file is) or a
        folder of ``*.parquet`` files (then ``output`` is a folder with one
        output file per input).
    where : sequence of str, optional
        Solve only the rows where these hold (``["T_K>=900", "P_bar=20"]``,
        see :mod:`eqbatch.where`).
    columns : sequence of str, optional
        Write only these columns of the output (input or output names, in
        this order).
    yields_per : sequence of str, optional
        Add ``yield_<species>_per_<fed>`` for each species ``fed`` of these:
        ``(n - n0) / n0_fed`` of every other reacting species, mol made per
        mol of ``fed`` fed (NaN where it is not fed).

    CSV input, ``where`` and ``columns`` take one input file: its rows (as
    filtered) are staged as Parquet in a hidden folder beside the output,
    ``.<output>.staged``, swept from there (a resume resumes that), and the
    folder is removed when the output is written.
    batch_size : int
        Rows per record batch (memory is bounded by it, not by the file); a
        resume may use another one.
    resume : bool
        Continue an interrupted sweep after its last finished batch, and keep
        outputs already complete (a folder's finished files), provided they
        were made from the same input content, system, ``tol``, ``max_iter``
        and eqbatch version (otherwise an error says what differs).
    overwrite : bool
        Replace an existing output (otherwise it is an error).
    allow_extra_columns : bool
        Let ``feed_<x>``, ``lnK_<x>`` and ``approach_<x>`` columns that name
        no species or reaction of the system pass through unchanged
        (otherwise an error).
    energy : bool, optional
        Add the energy outputs ``H_out_kJ`` (the outlet's enthalpy),
        ``heat_kJ`` (the heat the reactor takes, from a feed at ``T_in_K``,
        else at ``T_K``) and ``dH_<label>`` (J/mol) (needs species data for
        every species). Default: on when the file has ``adiabatic``,
        ``duty_kJ`` or ``T_in_K`` columns.
    quiet : bool, optional
        Progress bar off (default: on only when standard error is a terminal).
    client, scheduler
        A ``distributed.Client`` or a scheduler address: the files of a folder
        input are solved as Dask tasks, one per file, on the cluster.
    threads : int, optional
        Worker threads per solve (default: all cores).
    tol, max_iter
        As for :meth:`ReactionSystem.solve`.

    Returns
    -------
    SweepSummary

    Raises
    ------
    SweepError
        A missing, unreadable or ill-formed input (naming the file and the
        column), an output that exists or is an input, another sweep writing
        the same output, or a resume whose input, system or settings differ.

    Examples
    --------
    >>> import tempfile, pyarrow as pa, pyarrow.parquet as pq
    >>> from eqbatch.demo import reformer_system
    >>> cases = pa.table({"feed_CH4": [1.0, 1.0], "feed_H2O": [3.0, 3.0], "T_K": [900.0, 1100.0]})
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     pq.write_table(cases, f"{folder}/cases.parquet")
    ...     summary = sweep(reformer_system(), f"{folder}/cases.parquet", f"{folder}/out.parquet", quiet=True)
    ...     columns = pq.read_table(f"{folder}/out.parquet").column_names
    >>> summary.rows, summary.converged
    (2, 2)
    >>> columns[:3]
    ['feed_CH4', 'feed_H2O', 'T_K']
    >>> [c for c in columns if c.startswith(("conversion", "status", "iter"))]
    ['conversion_CH4', 'conversion_H2O', 'status', 'status_name', 'iterations']
    >>> [c for c in columns if c.startswith("ydry_")]  # water removed (the system's condensable)
    ['ydry_CH4', 'ydry_CO', 'ydry_H2', 'ydry_CO2', 'ydry_N2']
    """
    src, dst = Path(input), Path(output)
    options = {"tol": tol, "max_iter": max_iter, "threads": threads}
    kwargs: dict[str, Any] = {
        "batch_size": batch_size,
        "resume": resume,
        "overwrite": overwrite,
        "allow_extra_columns": allow_extra_columns,
        "energy": energy,
        "yields_per": yields_per,
        **options,
    }
    if quiet:
        kwargs["say"] = lambda msg: None  # quiet means no notes either
    t0 = time.perf_counter()
    if not src.exists():
        raise SweepError(f"{src}: no such file or folder")
    _refuse_input_as_output(src, dst)
    if where or columns or src.suffix.lower() == ".csv":
        if src.is_dir() or client is not None or scheduler is not None:
            raise SweepError(f"{src}: CSV input, where= and columns= take one input file, solved here")
        out = _staged_sweep(system, src, dst, where, columns, quiet, kwargs)
        out.seconds = time.perf_counter() - t0
        return out
    if src.is_file():
        if client is not None or scheduler is not None:
            raise SweepError(f"{src}: a cluster run takes a folder of Parquet files (one task per file)")
        out = sweep_file(system, src, dst, quiet=quiet, **kwargs)
        out.seconds = time.perf_counter() - t0
        return out
    files = sorted(p for p in src.iterdir() if p.suffix == ".parquet" and p.is_file())
    if not files:
        raise SweepError(f"{src}: no *.parquet files in the folder")
    if dst.exists() and not dst.is_dir():
        raise SweepError(f"{dst}: must be a folder for a folder input")
    dst.mkdir(parents=True, exist_ok=True)
    total = SweepSummary()
    if client is None and scheduler is not None:
        from distributed import Client

        client = Client(scheduler)
    if client is None:
        for f in files:
            total.merge(sweep_file(system, f, dst / f.name, quiet=quiet, **kwargs))
    else:
        futures = client.map(
            _sweep_task,
            [system] * len(files),
            files,
            [dst / f.name for f in files],
            [kwargs] * len(files),
            pure=False,
        )
        for part in client.gather(futures):
            total.merge(part)
    total.seconds = time.perf_counter() - t0
    return total
