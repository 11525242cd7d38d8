"""Peak memory of a Parquet sweep against the number of rows.

    python -m bench.sweep_memory            # 1 M, 3 M and 10 M rows, three rounds: bench/SWEEP_MEMORY.md
    python -m bench.sweep_memory --smoke    # seconds: bench/out/sweep_memory.md

Each input file holds workload (a) rows (reforming + shift, see
``bench/workloads.py``) in 9 columns (``case_id``, six ``feed_*``, ``T_K``,
``P_bar``) and row groups of 100,000 rows. Every sweep is the command a user
runs, ``eqbatch sweep reformer.toml IN OUT --overwrite --quiet`` (default batch
size, ``eqbatch.cli.main`` as ``python -m eqbatch`` calls it), in a fresh
child process.

Measuring method: the peak resident set size of each child, ``VmHWM`` from
the child's own ``/proc/self/status``, read after the command returns (the
kernel's high-water mark of the RSS of the child's address space since its
``exec``). Not ``ru_maxrss`` of the child (``os.wait4``, ``RUSAGE_CHILDREN``):
on Linux it also takes in the parent's high-water mark at the fork before the
``exec``, so every child of a large parent reports at least the parent's size.
Sizes take turns within each round so that all of them see the same drift of
the machine. The target: the peaks from the smallest to the largest file lie
within 32 MiB.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
SYSTEM_FILE = ROOT / "python" / "eqbatch" / "data" / "reformer.toml"
ROW_GROUP = 100_000
TARGET_MIB = 32.0


def write_input(path: Path, n: int) -> None:
    """``n`` workload (a) rows, one 100,000-row group at a time (so writing a
    10 M-row file does not need 10 M rows in memory)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    from bench.workloads import reforming

    writer = None
    try:
        for k, start in enumerate(range(0, n, ROW_GROUP)):
            rows = min(ROW_GROUP, n - start)
            problem = reforming(rows, seed=1000 + k)
            columns = {"case_id": np.arange(start, start + rows, dtype=np.int64)}
            for i, species in enumerate(problem.species):
                columns[f"feed_{species}"] = problem.feed[:, i]
            # the workload's temperatures: its first draw from the same seed (it keeps ln K, not T)
            columns["T_K"] = np.random.default_rng(1000 + k).uniform(700.0, 1200.0, rows)
            columns["P_bar"] = problem.P
            table = pa.table(columns)
            if writer is None:
                writer = pq.ParquetWriter(path, table.schema)
            writer.write_table(table, row_group_size=ROW_GROUP)
    finally:
        if writer is not None:
            writer.close()


# The command line as `python -m eqbatch` runs it, then the process's own peak RSS.
CHILD = """
import sys
from eqbatch.cli import main

code = main(sys.argv[1:])
with open("/proc/self/status") as status:
    peak = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
print("VmHWM_KiB", peak)
sys.exit(code)
"""


def peak_rss_of_sweep(src: Path, dst: Path) -> dict:
    """One sweep in a fresh process: its peak RSS (``VmHWM``) and wall time."""
    command = ["sweep", str(SYSTEM_FILE), str(src), str(dst), "--overwrite", "--quiet"]
    t0 = time.perf_counter()
    run = subprocess.run([sys.executable, "-c", CHILD, *command], capture_output=True, text=True, cwd=ROOT)
    seconds = time.perf_counter() - t0
    if run.returncode != 0:
        raise RuntimeError(f"sweep of {src} failed ({run.returncode}): {run.stderr.strip()}")
    lines = run.stdout.strip().splitlines()
    peak = int(lines[-1].split()[1])
    return {"peak_rss_mib": peak / 1024, "seconds": seconds, "summary": lines[0]}


def run(sizes: list[int], rounds: int, work: Path) -> list[dict]:
    files = {}
    for n in sizes:
        files[n] = work / f"sweep_{n}.parquet"
        write_input(files[n], n)
    runs = []
    for r in range(rounds):
        order = sizes[r % len(sizes) :] + sizes[: r % len(sizes)]  # sizes take turns
        for n in order:
            entry = {"rows": n, "round": r, **peak_rss_of_sweep(files[n], work / f"out_{n}.parquet")}
            peak, seconds = entry["peak_rss_mib"], entry["seconds"]
            print(f"  round {r}: {n:>11,} rows  peak RSS {peak:7.1f} MiB  {seconds:6.1f} s")
            runs.append(entry)
            (work / f"out_{n}.parquet").unlink()
    for n in sizes:
        entry = next(e for e in runs if e["rows"] == n)
        entry["file_mib"] = files[n].stat().st_size / 2**20
    return runs


def report(runs: list[dict], sizes: list[int], smoke: bool) -> tuple[str, dict]:
    peaks = {n: [e["peak_rss_mib"] for e in runs if e["rows"] == n] for n in sizes}
    spread = max(max(p) for p in peaks.values()) - min(min(p) for p in peaks.values())
    met = spread <= TARGET_MIB
    lines = [
        "# Parquet sweep: peak memory against the number of rows",
        "",
        f"Machine: {platform.processor() or platform.machine()}, {os.cpu_count()} cores, "
        f"Python {platform.python_version()}; {time.strftime('%Y-%m-%d')}"
        + (" (smoke run: sizes too small to judge the target)" if smoke else ""),
        "",
        "Input: workload (a) rows, 9 columns, row groups of 100,000 rows. Each sweep is "
        "`eqbatch sweep reformer.toml IN OUT --overwrite --quiet` (default batch size) "
        "in a fresh process. Method: peak resident set size of the child, `VmHWM` from its own "
        "`/proc/self/status` after the command returns (not `ru_maxrss`, which on Linux includes "
        "the parent's high-water mark at the fork); sizes take turns in each round.",
        "",
        "| rows | input file | peak RSS per round (MiB) | seconds per round |",
        "|---:|---:|---|---|",
    ]
    for n in sizes:
        mine = [e for e in runs if e["rows"] == n]
        size = next(e["file_mib"] for e in mine if "file_mib" in e)
        lines.append(
            f"| {n:,} | {size:,.1f} MiB | "
            + ", ".join(f"{e['peak_rss_mib']:.1f}" for e in mine)
            + " | "
            + ", ".join(f"{e['seconds']:.1f}" for e in mine)
            + " |"
        )
    lines += [
        "",
        f"Largest peak minus smallest peak over all sizes and rounds: {spread:.1f} MiB "
        f"(target: within {TARGET_MIB:.0f} MiB from {sizes[0]:,} to {sizes[-1]:,} rows): "
        + ("met." if met else "NOT met."),
        "",
    ]
    return "\n".join(lines), {"runs": runs, "spread_mib": spread, "target_mib": TARGET_MIB, "met": met}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--smoke", action="store_true", help="tiny files, one round (seconds)")
    parser.add_argument("--sizes", help="comma-separated row counts (default 1e6,3e6,1e7)")
    parser.add_argument("--rounds", type=int, default=None)
    parser.add_argument("--out", help="folder for the report (default bench/, bench/out/ with --smoke)")
    args = parser.parse_args(argv)
    if args.sizes:
        sizes = [int(float(s)) for s in args.sizes.split(",")]
    else:
        sizes = [10_000, 40_000] if args.smoke else [1_000_000, 3_000_000, 10_000_000]
    rounds = args.rounds or (1 if args.smoke else 3)
    folder = Path(args.out) if args.out else (HERE / "out" if args.smoke else HERE)
    folder.mkdir(parents=True, exist_ok=True)
    work = Path(tempfile.mkdtemp(prefix="eqbatch-sweep-memory-"))
    try:
        runs = run(sizes, rounds, work)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    text, data = report(runs, sizes, args.smoke)
    name = "sweep_memory" if args.smoke else "SWEEP_MEMORY"
    (folder / f"{name}.md").write_text(text)
    (folder / "sweep_memory.json").write_text(json.dumps(data, indent=1))
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
