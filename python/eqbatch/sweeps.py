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

Never losing work: each finished batch is also written as its own part file
(Arrow IPC) in a hidden ``.<name>.partial`` folder beside the output (each
part appears under its final name only once complete), so an interruption
(Ctrl-C, ``kill -9``) loses at most the batch in flight, and ``resume=True``
continues after the last finished one, re-reading the finished parts. The
output itself is written to a temporary name as the sweep goes and renamed
only when complete; the parts are then removed.
"""

from __future__ import annotations

import json
import os
import shutil
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from eqbatch.errors import EqbatchError
from eqbatch.result import Status
from eqbatch.system import ReactionSystem

#: Rows per record batch by default.
DEFAULT_BATCH_SIZE = 65_536


class SweepError(EqbatchError):
    """A sweep cannot start or continue; the message names the file and column."""


@dataclass
class SweepSummary:
    """What a sweep did."""

    rows: int = 0
    by_status: dict[str, int] = field(default_factory=dict)
    seconds: float = 0.0
    files: list[str] = field(default_factory=list)
    resumed_batches: int = 0

    @property
    def converged(self) -> int:
        """Rows at equilibrium (``Status.UNDERFLOW`` rows included)."""
        return self.by_status.get("converged", 0) + self.by_status.get("underflow", 0)

    def line(self) -> str:
        rate = self.rows / self.seconds if self.seconds > 0 else float("inf")
        at_equilibrium = ("converged", "underflow")
        others = ", ".join(f"{v:,} {k}" for k, v in sorted(self.by_status.items()) if k not in at_equilibrium)
        held = self.by_status.get("underflow", 0)
        return (
            f"{self.rows:,} rows, {self.converged:,} converged"
            + (f" ({held:,} with species below float64's range)" if held else "")
            + (f", not converged: {others}" if others else "")
            + f"; {self.seconds:.1f} s ({rate:,.0f} rows/s)"
        )

    def merge(self, other: SweepSummary) -> None:
        self.rows += other.rows
        for k, v in other.by_status.items():
            self.by_status[k] = self.by_status.get(k, 0) + v
        self.files += other.files
        self.resumed_batches += other.resumed_batches


class _Progress:
    """Rows done, rows per second and time left, on a terminal only."""

    def __init__(self, total: int, quiet: bool | None) -> None:
        self.total = total
        self.enabled = (not quiet) if quiet is not None else sys.stderr.isatty()
        self.start = time.perf_counter()
        self.last = 0.0

    def update(self, done: int, final: bool = False) -> None:
        if not self.enabled:
            return
        now = time.perf_counter()
        if not final and now - self.last < 0.2:
            return
        self.last = now
        elapsed = max(now - self.start, 1e-9)
        rate = done / elapsed
        left = (self.total - done) / rate if rate > 0 else float("inf")
        width = 30
        filled = int(width * done / max(self.total, 1))
        bar = "#" * filled + "-" * (width - filled)
        sys.stderr.write(f"\r[{bar}] {done:,}/{self.total:,} rows  {rate:,.0f} rows/s  {left:,.0f} s left ")
        if final:
            sys.stderr.write("\n")
        sys.stderr.flush()


def _pa():
    import pyarrow as pa
    import pyarrow.parquet as pq

    return pa, pq


def _open(path: Path):
    pa, pq = _pa()
    try:
        return pq.ParquetFile(path)
    except FileNotFoundError:
        raise SweepError(f"{path}: no such file") from None
    except (pa.ArrowInvalid, OSError) as err:
        raise SweepError(f"{path}: not a readable Parquet file ({err})") from None


class _Plan:
    """How one input file's columns map onto the system."""

    def __init__(self, system: ReactionSystem, path: Path, schema: Any, say: Any) -> None:
        pa, _ = _pa()
        self.system = system
        names = list(schema.names)
        self.names = names
        numeric = {
            n
            for n in names
            if pa.types.is_floating(schema.field(n).type) or pa.types.is_integer(schema.field(n).type)
        }

        def need_numeric(col: str) -> None:
            if col not in numeric:
                raise SweepError(f"{path}: column {col!r} must be numeric, found {schema.field(col).type}")

        self.feed_cols: list[str | None] = []
        missing = []
        for sp in system.species:
            col = f"feed_{sp}"
            if col in names:
                need_numeric(col)
                self.feed_cols.append(col)
            else:
                self.feed_cols.append(None)
                missing.append(sp)
        if len(missing) == len(system.species):
            raise SweepError(
                f"{path}: no feed column; expected feed_<species> for {', '.join(system.species)}"
            )
        if missing:
            say(f"{path}: no column for {', '.join('feed_' + m for m in missing)}: taken as zero feed")
        self.p_col = "P_bar" if "P_bar" in names else None
        if self.p_col:
            need_numeric("P_bar")
        else:
            say(f"{path}: no P_bar column: every case at P0 = {system.P0:g} bar")
        self.t_col = "T_K" if "T_K" in names else None
        if self.t_col:
            need_numeric("T_K")
        lnk = [f"lnK_{label}" for label in system.labels]
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
                raise SweepError(f"{path}: missing column 'T_K', needed for the system's K(T) data")
        fed = [sp for sp, col in zip(system.species, self.feed_cols) if col is not None]
        self.conversion = [sp for sp in system.reactants() if sp in fed]
        clash = [c for c in self.output_names() if c in names]
        if clash:
            raise SweepError(f"{path}: input already has output column(s) {', '.join(clash)}")

    def output_names(self) -> list[str]:
        s = self.system
        return (
            [f"n_{x}" for x in s.species]
            + [f"y_{x}" for x in s.species]
            + [f"extent_{x}" for x in s.labels]
            + [f"conversion_{x}" for x in self.conversion]
            + ["status", "iterations"]
        )

    def solve(self, batch: Any, options: dict) -> tuple[Any, np.ndarray]:
        pa, _ = _pa()
        n = batch.num_rows

        def column(name: str) -> np.ndarray:
            # Nulls become NaN, which makes the row invalid input (not the run).
            return batch.column(name).to_numpy(zero_copy_only=False).astype(np.float64, copy=False)

        feed = np.zeros((n, self.system.n_species))
        for k, col in enumerate(self.feed_cols):
            if col is not None:
                feed[:, k] = column(col)
        kw: dict[str, Any] = {}
        if self.p_col:
            kw["P"] = np.ascontiguousarray(column(self.p_col))
        if self.lnk_cols:
            kw["lnK"] = np.column_stack([column(c) for c in self.lnk_cols])
        elif self.t_col:
            kw["T"] = column(self.t_col)
        res = self.system.solve(feed, **kw, **options)
        outs = {}
        for k, sp in enumerate(self.system.species):
            outs[f"n_{sp}"] = res.amounts[:, k]
        for k, sp in enumerate(self.system.species):
            outs[f"y_{sp}"] = res.mole_fractions[:, k]
        for j, label in enumerate(self.system.labels):
            outs[f"extent_{label}"] = res.extents[:, j]
        for sp in self.conversion:
            outs[f"conversion_{sp}"] = res.conversion(sp)
        outs["status"] = res.status
        outs["iterations"] = res.iterations
        arrays = list(batch.columns) + [pa.array(v) for v in outs.values()]
        table = pa.Table.from_arrays(arrays, names=self.names + list(outs))
        return table, res.status


def _fingerprint(system: ReactionSystem, path: Path, batch_size: int, options: dict) -> dict:
    stat = path.stat()
    return {
        "input": str(path.resolve()),
        "size": stat.st_size,
        "mtime_ns": stat.st_mtime_ns,
        "batch_size": batch_size,
        "system": repr(system._spec),
        "options": repr(sorted(options.items())),
    }


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
    **options: Any,
) -> SweepSummary:
    """Sweep one Parquet file into one output file (see the module docs)."""
    _, pq = _pa()
    src, dst = Path(input), Path(output)
    say = say or (lambda msg: print(msg, file=sys.stderr))
    partial = dst.parent / f".{dst.name}.partial"
    if dst.exists() and not overwrite:
        raise SweepError(f"{dst}: exists; pass overwrite=True (--overwrite) to replace it")
    if partial.exists() and not (resume or overwrite):
        raise SweepError(
            f"{dst}: an interrupted sweep left {partial}; resume it (--resume) or start over (--overwrite)"
        )
    if partial.exists() and overwrite and not resume:
        shutil.rmtree(partial)
    pf = _open(src)
    plan = _Plan(system, src, pf.schema_arrow, say)
    meta = _fingerprint(system, src, batch_size, options)
    partial.mkdir(parents=True, exist_ok=True)
    meta_path = partial / "sweep.json"
    if meta_path.exists():
        old = json.loads(meta_path.read_text())
        if old != meta:
            raise SweepError(
                f"{dst}: the interrupted sweep in {partial} was made from other input or settings; "
                "start over with --overwrite"
            )
    else:
        tmp = meta_path.with_suffix(".tmp")
        tmp.write_text(json.dumps(meta))
        os.replace(tmp, meta_path)
    summary = SweepSummary(files=[str(dst)])
    total = pf.metadata.num_rows
    progress = _Progress(total, quiet)
    t0 = time.perf_counter()
    done = 0
    tmp_out = dst.parent / f".{dst.name}.tmp"
    writer = _BackgroundWriter(tmp_out)
    try:
        for k, batch in enumerate(pf.iter_batches(batch_size=batch_size)):
            part = partial / f"part-{k:06d}.arrow"
            if part.exists():
                table = _read_part(part)
                summary.resumed_batches += 1
                writer.put(table)
            else:
                table, _ = plan.solve(batch, options)
                writer.put(table, part)
            _count(summary, table.column("status").to_numpy())
            done += batch.num_rows
            progress.update(done)
        progress.update(done, final=True)
        if done == 0:  # an empty input: an empty table with the output columns
            writer.put(_empty_output(plan, pf.schema_arrow))
    finally:
        writer.close()
    os.replace(tmp_out, dst)
    shutil.rmtree(partial, ignore_errors=True)
    summary.seconds = time.perf_counter() - t0
    return summary


def _write_part(table: Any, path: Path) -> None:
    """A finished batch, as Arrow IPC: written at memory speed, read back by
    memory map when a sweep resumes."""
    import pyarrow.feather as feather

    feather.write_feather(table, path, compression="uncompressed")


def _read_part(path: Path) -> Any:
    import pyarrow.feather as feather

    return feather.read_table(path, memory_map=False)


class _BackgroundWriter:
    """The part files and the output Parquet file, written batch by batch on
    their own thread so that encoding overlaps the next batch's solve (both
    release the GIL).
    Dictionary encoding is off: solver outputs are distinct doubles, for
    which it costs time and saves nothing."""

    def __init__(self, path: Path) -> None:
        import queue
        import threading

        self.path = path
        self.queue: queue.Queue = queue.Queue(maxsize=2)  # bounds the tables in flight
        self.error: BaseException | None = None
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self) -> None:
        _, pq = _pa()
        writer = None
        try:
            while (item := self.queue.get()) is not None:
                table, part = item
                if part is not None:
                    tmp = part.with_suffix(".tmp")
                    _write_part(table, tmp)
                    os.replace(tmp, part)  # a part is there whole or not at all
                if writer is None:
                    writer = pq.ParquetWriter(self.path, table.schema, use_dictionary=False)
                writer.write_table(table)
        except BaseException as err:  # re-raised on the caller's thread by close()
            self.error = err
            while self.queue.get() is not None:
                pass
        finally:
            if writer is not None:
                writer.close()

    def put(self, table: Any, part: Path | None = None) -> None:
        """Append ``table`` to the output; first save it as ``part`` if given."""
        if self.error is not None:
            raise self.error
        self.queue.put((table, part))

    def close(self) -> None:
        self.queue.put(None)
        self.thread.join()
        if self.error is not None:
            raise self.error


def _empty_output(plan: _Plan, schema: Any) -> Any:
    pa, _ = _pa()
    fields = list(schema)
    for name in plan.output_names():
        kind = pa.uint8() if name == "status" else pa.uint32() if name == "iterations" else pa.float64()
        fields.append(pa.field(name, kind))
    return pa.schema(fields).empty_table()


def _count(summary: SweepSummary, status: np.ndarray) -> None:
    codes, counts = np.unique(status, return_counts=True)
    summary.rows += int(status.size)
    for code, count in zip(codes, counts):
        name = Status(int(code)).name.lower().replace("_", " ")
        summary.by_status[name] = summary.by_status.get(name, 0) + int(count)


def _sweep_task(system, src, dst, kwargs):
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
) -> SweepSummary:
    """Solve every row of a Parquet file, or of every file in a folder.

    Parameters
    ----------
    system : ReactionSystem
    input : path
        A Parquet file (then ``output`` is a file) or a folder of ``*.parquet``
        files (then ``output`` is a folder with one output file per input).
    batch_size : int
        Rows per record batch (memory is bounded by it, not by the file).
    resume : bool
        Continue an interrupted sweep after its last finished batch.
    overwrite : bool
        Replace an existing output (otherwise it is an error).
    quiet : bool, optional
        Progress bar off (default: on only when standard error is a terminal).
    client, scheduler
        A ``distributed.Client`` or a scheduler address: the files of a folder
        input are solved as Dask tasks, one per file, on the cluster.

    Returns
    -------
    SweepSummary
    """
    src, dst = Path(input), Path(output)
    options = {"tol": tol, "max_iter": max_iter, "threads": threads}
    kwargs = {"batch_size": batch_size, "resume": resume, "overwrite": overwrite, **options}
    if quiet:
        kwargs["say"] = lambda msg: None  # quiet means no notes either
    t0 = time.perf_counter()
    if not src.exists():
        raise SweepError(f"{src}: no such file or folder")
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
