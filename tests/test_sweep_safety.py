"""Sweeps that never lose, corrupt or mislead (issue 12): unknown columns,
resume identity and settings, locking, folder resume, outputs that would
overwrite an input, durability and checksums, bounded memory.

Every expected value comes from an uninterrupted sweep of the same input (a
resumed or repaired output must equal it) or from the input itself."""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import eqbatch
import eqbatch.sweeps as sweeps
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from eqbatch.demo import reformer_system
from eqbatch.sweeps import SweepError, sweep

ROOT = Path(__file__).resolve().parent.parent
SYSTEM_FILE = Path(eqbatch.__file__).parent / "data" / "reformer.toml"
EQBATCH = (sys.executable, "-m", "eqbatch")


def cases(n: int, seed: int = 0) -> pa.Table:
    rng = np.random.default_rng(seed)
    return pa.table(
        {
            "case_id": np.arange(n),
            "feed_CH4": np.full(n, 0.98),
            "feed_H2O": rng.uniform(1.5, 5.0, n),
            "feed_N2": np.full(n, 0.02),
            "T_K": rng.uniform(700.0, 1200.0, n),
            "P_bar": rng.uniform(1.0, 40.0, n),
        }
    )


def interrupt_after(monkeypatch, batches: int) -> None:
    """Make the sweep's solve raise KeyboardInterrupt (a Ctrl-C) once
    ``batches`` batches are solved; undone by ``monkeypatch.undo()``."""
    real = sweeps._Plan.solve
    calls = {"n": 0}

    def solve(self, batch, options):
        calls["n"] += 1
        if calls["n"] > batches:
            raise KeyboardInterrupt
        return real(self, batch, options)

    monkeypatch.setattr(sweeps._Plan, "solve", solve)


def interrupted(monkeypatch, src: Path, dst: Path, batches: int, **kw) -> Path:
    """Leave an interrupted sweep of ``src`` into ``dst`` with ``batches`` parts."""
    interrupt_after(monkeypatch, batches)
    with pytest.raises(KeyboardInterrupt):
        sweep(reformer_system(), src, dst, quiet=True, **kw)
    monkeypatch.undo()
    partial = dst.parent / f".{dst.name}.partial"
    assert len(list(partial.glob("part-*.arrow"))) == batches
    return partial


SLOW_SWEEP = """
import sys, time, eqbatch.sweeps as sw
from eqbatch.demo import reformer_system
real = sw._Plan.solve
def slow(self, batch, options):
    time.sleep(0.05)  # leave time to act while it runs
    return real(self, batch, options)
sw._Plan.solve = slow
sw.sweep(reformer_system(), sys.argv[1], sys.argv[2], batch_size=2000, quiet=True)
"""


def wait_for(condition, what: str, timeout: float = 60.0) -> None:
    deadline = time.time() + timeout
    while not condition():
        assert time.time() < deadline, f"timed out waiting for {what}"
        time.sleep(0.02)


# -------------------------------------------------------------- item 2: unknown columns


def test_a_feed_column_of_no_species_is_refused_with_the_species_named(tmp_path) -> None:
    table = cases(50).append_column("feed_CH5", pa.array(np.ones(50)))  # a typo of feed_CH4
    pq.write_table(table, tmp_path / "in.parquet")
    with pytest.raises(SweepError) as info:
        sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", quiet=True)
    message = str(info.value)
    assert "feed_CH5" in message and str(tmp_path / "in.parquet") in message
    assert "CH4, H2O, CO, H2, CO2, N2" in message and "allow_extra_columns" in message
    assert not (tmp_path / "out.parquet").exists() and not list(tmp_path.glob(".*"))
    # an unknown lnK_<label> column is the same kind of typo
    lnk = cases(50).append_column("lnK_reformng", pa.array(np.zeros(50)))
    pq.write_table(lnk, tmp_path / "lnk.parquet")
    with pytest.raises(SweepError, match=r"lnK_reformng.*reforming, shift"):
        sweep(reformer_system(), tmp_path / "lnk.parquet", tmp_path / "out.parquet", quiet=True)
    # allowed explicitly: the column passes through unchanged, the feed ignores it
    summary = sweep(
        reformer_system(),
        tmp_path / "in.parquet",
        tmp_path / "out.parquet",
        quiet=True,
        allow_extra_columns=True,
    )
    assert summary.rows == 50
    out = pq.read_table(tmp_path / "out.parquet")
    assert out.column("feed_CH5").equals(table.column("feed_CH5"))
    pq.write_table(cases(50), tmp_path / "plain.parquet")
    sweep(reformer_system(), tmp_path / "plain.parquet", tmp_path / "plain_out.parquet", quiet=True)
    plain = pq.read_table(tmp_path / "plain_out.parquet")
    np.testing.assert_array_equal(out.column("n_H2").to_numpy(), plain.column("n_H2").to_numpy())


def test_cli_refuses_an_unknown_feed_column_unless_allowed(tmp_path) -> None:
    pq.write_table(cases(30).append_column("feed_h2o", pa.array(np.ones(30))), tmp_path / "in.parquet")
    args = [*EQBATCH, "sweep", str(SYSTEM_FILE), str(tmp_path / "in.parquet"), str(tmp_path / "out.parquet")]
    refused = subprocess.run([*args, "--quiet"], capture_output=True, text=True)
    assert refused.returncode == 2 and refused.stderr.startswith("eqbatch: error:")
    assert "feed_h2o" in refused.stderr and "--allow-extra-columns" in refused.stderr
    assert refused.stderr.count("\n") == 1
    allowed = subprocess.run([*args, "--quiet", "--allow-extra-columns"], capture_output=True, text=True)
    assert allowed.returncode == 0, allowed.stderr
    assert "30 rows, 30 converged" in allowed.stdout


# -------------------------------------------- item 5: resume whatever the batch size


def test_resume_with_another_batch_size_equals_an_uninterrupted_run(tmp_path, monkeypatch) -> None:
    pq.write_table(cases(30_000, seed=5), tmp_path / "in.parquet", row_group_size=7_000)
    interrupted(monkeypatch, tmp_path / "in.parquet", tmp_path / "out.parquet", 5, batch_size=2000)
    summary = sweep(
        reformer_system(),
        tmp_path / "in.parquet",
        tmp_path / "out.parquet",
        batch_size=3000,
        quiet=True,
        resume=True,
    )
    sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "fresh.parquet", quiet=True)
    assert pq.read_table(tmp_path / "out.parquet").equals(pq.read_table(tmp_path / "fresh.parquet"))
    assert summary.rows == 30_000 and summary.kept == 10_000 and summary.converged == 30_000
    # the rate counts the rows solved in this run, not the kept ones
    rate = int(re.search(r"\(([\d,]+) rows/s", summary.line()).group(1).replace(",", ""))
    assert rate == round(20_000 / summary.seconds)
    assert "10,000 rows kept" in summary.line()


def test_a_resume_with_another_tolerance_names_the_setting(tmp_path, monkeypatch) -> None:
    pq.write_table(cases(12_000), tmp_path / "in.parquet")
    interrupted(monkeypatch, tmp_path / "in.parquet", tmp_path / "out.parquet", 2, batch_size=2000)
    with pytest.raises(SweepError) as info:
        sweep(
            reformer_system(),
            tmp_path / "in.parquet",
            tmp_path / "out.parquet",
            batch_size=2000,
            quiet=True,
            resume=True,
            tol=1e-8,
        )
    assert re.search(r"tol.*1e-08.*1e-10|tol.*1e-10.*1e-08", str(info.value)), info.value
    assert "--overwrite" in str(info.value)


# ----------------------------------------------------- item 9: identity by content


def test_resume_refuses_an_input_of_the_same_size_and_time_but_other_rows(tmp_path, monkeypatch) -> None:
    table = cases(12_000, seed=2)
    src = tmp_path / "in.parquet"
    plain = {"compression": "none", "use_dictionary": False, "row_group_size": 4000}
    pq.write_table(table, src, **plain)
    interrupted(monkeypatch, src, tmp_path / "out.parquet", 2, batch_size=2000)
    before = src.stat()
    # the same rows in another order within each row group: same size, same statistics
    order = np.concatenate([np.arange(k + 3999, k - 1, -1) for k in range(0, 12_000, 4000)])
    pq.write_table(table.take(order), src, **plain)
    os.utime(src, ns=(before.st_atime_ns, before.st_mtime_ns))
    assert src.stat().st_size == before.st_size and src.stat().st_mtime_ns == before.st_mtime_ns
    with pytest.raises(SweepError, match="content") as info:
        sweep(reformer_system(), src, tmp_path / "out.parquet", batch_size=2000, quiet=True, resume=True)
    assert str(src) in str(info.value)
    assert not (tmp_path / "out.parquet").exists()


def test_resume_refuses_another_system_and_names_it(tmp_path, monkeypatch) -> None:
    pq.write_table(cases(8000), tmp_path / "in.parquet")
    interrupted(monkeypatch, tmp_path / "in.parquet", tmp_path / "out.parquet", 2, batch_size=2000)
    other = reformer_system()
    spec = dict(other._spec, P0=1.01325)  # the same system file with another standard pressure
    other = eqbatch.ReactionSystem(spec.pop("species"), spec.pop("reactions"), **spec)
    with pytest.raises(SweepError, match="system") as info:
        sweep(
            other, tmp_path / "in.parquet", tmp_path / "out.parquet", batch_size=2000, quiet=True, resume=True
        )
    assert "--overwrite" in str(info.value)


# ---------------------------------------------------------------- item 8: locking


def test_a_second_sweep_on_a_running_output_is_refused_and_a_killed_ones_lock_is_not(tmp_path) -> None:
    src, dst = tmp_path / "in.parquet", tmp_path / "out.parquet"
    pq.write_table(cases(100_000, seed=4), src)
    first = subprocess.Popen([sys.executable, "-c", SLOW_SWEEP, str(src), str(dst)])
    partial = tmp_path / ".out.parquet.partial"
    try:
        wait_for(lambda: len(list(partial.glob("part-*.arrow"))) >= 2, "the first sweep's parts")
        for resume in (True, False):
            with pytest.raises(SweepError, match="another sweep") as info:
                sweep(reformer_system(), src, dst, batch_size=2000, quiet=True, resume=resume)
            assert str(first.pid) in str(info.value)
        cli = subprocess.run(
            [*EQBATCH, "sweep", str(SYSTEM_FILE), str(src), str(dst), "--resume", "--quiet"],
            capture_output=True,
            text=True,
        )
        assert first.poll() is None, "the first sweep must still be running"
        assert cli.returncode == 2 and "another sweep" in cli.stderr and cli.stderr.count("\n") == 1
    finally:
        os.kill(first.pid, signal.SIGKILL)
        first.wait()
    assert (partial / "lock").exists() and not dst.exists()  # the killed sweep's lock file stays
    summary = sweep(reformer_system(), src, dst, batch_size=2000, quiet=True, resume=True)
    assert summary.kept >= 4000 and summary.rows == 100_000
    sweep(reformer_system(), src, tmp_path / "fresh.parquet", quiet=True)
    assert pq.read_table(dst).equals(pq.read_table(tmp_path / "fresh.parquet"))
    assert not partial.exists()


# --------------------------------------------------- item 10: folder sweeps resume


def test_a_folder_sweep_killed_in_its_second_file_resumes_and_keeps_the_first(tmp_path) -> None:
    src, dst = tmp_path / "cases", tmp_path / "results"
    src.mkdir()
    for k in range(3):
        pq.write_table(cases(16_000, seed=20 + k), src / f"part{k}.parquet")
    first = subprocess.Popen([sys.executable, "-c", SLOW_SWEEP, str(src), str(dst)])
    second_partial = dst / ".part1.parquet.partial"
    try:
        wait_for(lambda: len(list(second_partial.glob("part-*.arrow"))) >= 2, "parts of the second file")
    finally:
        os.kill(first.pid, signal.SIGKILL)
        first.wait()
    finished = (dst / "part0.parquet").stat()
    assert not (dst / "part2.parquet").exists()
    # --threads differs from the killed run: results do not depend on it
    summary = sweep(reformer_system(), src, dst, batch_size=2000, quiet=True, resume=True, threads=1)
    assert summary.rows == 48_000 and summary.kept >= 16_000 + 4000
    assert summary.finished_files == [str(dst / "part0.parquet")]
    after = (dst / "part0.parquet").stat()
    assert (after.st_ino, after.st_mtime_ns) == (finished.st_ino, finished.st_mtime_ns)  # not rewritten
    sweep(reformer_system(), src, tmp_path / "fresh", quiet=True)
    for k in range(3):
        name = f"part{k}.parquet"
        assert pq.read_table(dst / name).equals(pq.read_table(tmp_path / "fresh" / name))
    assert not list(dst.glob(".*"))


def test_a_folder_resume_refuses_a_finished_output_of_other_input(tmp_path) -> None:
    src, dst = tmp_path / "cases", tmp_path / "results"
    src.mkdir()
    for k in range(2):
        pq.write_table(cases(500, seed=30 + k), src / f"f{k}.parquet")
    sweep(reformer_system(), src, dst, quiet=True)
    again = sweep(reformer_system(), src, dst, quiet=True, resume=True)  # nothing left to do
    assert again.rows == 1000 and again.kept == 1000 and len(again.finished_files) == 2
    pq.write_table(cases(500, seed=99), src / "f1.parquet")  # new data under the same name
    with pytest.raises(SweepError, match="content") as info:
        sweep(reformer_system(), src, dst, quiet=True, resume=True)
    assert str(dst / "f1.parquet") in str(info.value) and "--overwrite" in str(info.value)


# --------------------------------------------------------- item 11: input as output


def test_an_output_that_is_or_holds_an_input_is_refused(tmp_path) -> None:
    good = tmp_path / "good.parquet"
    pq.write_table(cases(40), good)
    before = good.read_bytes()
    cli = subprocess.run(
        [*EQBATCH, "sweep", str(SYSTEM_FILE), str(good), str(good), "--overwrite", "--quiet"],
        capture_output=True,
        text=True,
    )
    assert cli.returncode == 2 and "input" in cli.stderr and cli.stderr.count("\n") == 1
    assert good.read_bytes() == before
    (tmp_path / "link.parquet").symlink_to(good)
    os.link(good, tmp_path / "hard.parquet")
    for output in (tmp_path / "link.parquet", tmp_path / "hard.parquet", tmp_path / "." / "good.parquet"):
        with pytest.raises(SweepError, match="input"):
            sweep(reformer_system(), good, output, overwrite=True, quiet=True)
    assert good.read_bytes() == before
    folder = tmp_path / "cases"
    folder.mkdir()
    pq.write_table(cases(40), folder / "a.parquet")
    for output in (folder, folder / "results", tmp_path):  # is, is inside, contains the input
        with pytest.raises(SweepError, match="input"):
            sweep(reformer_system(), folder, output, overwrite=True, quiet=True)
    assert sorted(p.name for p in folder.iterdir()) == ["a.parquet"]


# ---------------------------------------------- item 12: durability and integrity


def flip_in_column(path: Path, column: str) -> None:
    """Flip one bit in the middle of ``column``'s first column chunk."""
    meta = pq.ParquetFile(path).metadata
    index = meta.schema.to_arrow_schema().names.index(column)
    chunk = meta.row_group(0).column(index)
    data = bytearray(path.read_bytes())
    data[chunk.data_page_offset + chunk.total_compressed_size // 2] ^= 0x10
    path.write_bytes(bytes(data))


def test_outputs_carry_page_checksums(tmp_path) -> None:
    pq.write_table(cases(3000), tmp_path / "in.parquet")
    sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", quiet=True)
    flip_in_column(tmp_path / "out.parquet", "n_H2")
    with pytest.raises(OSError, match="CRC"):
        pq.read_table(tmp_path / "out.parquet", page_checksum_verification=True)


def test_a_bit_flipped_input_is_an_error_naming_the_file(tmp_path) -> None:
    src = tmp_path / "in.parquet"
    pq.write_table(cases(3000), src, write_page_checksum=True)
    flip_in_column(src, "T_K")
    with pytest.raises(SweepError, match="checksum") as info:
        sweep(reformer_system(), src, tmp_path / "out.parquet", quiet=True)
    assert str(src) in str(info.value)
    assert not (tmp_path / "out.parquet").exists() and not list(tmp_path.glob(".*"))


def test_a_damaged_part_is_solved_again_on_resume(tmp_path, monkeypatch, capsys) -> None:
    src, dst = tmp_path / "in.parquet", tmp_path / "out.parquet"
    pq.write_table(cases(12_000, seed=8), src)
    partial = interrupted(monkeypatch, src, dst, 4, batch_size=2000)
    part = sorted(partial.glob("part-*.arrow"))[2]
    data = bytearray(part.read_bytes())
    data[len(data) // 2] ^= 0x10
    part.write_bytes(bytes(data))
    summary = sweep(reformer_system(), src, dst, batch_size=2000, quiet=None, resume=True)
    sweep(reformer_system(), src, tmp_path / "fresh.parquet", quiet=True)
    assert pq.read_table(dst).equals(pq.read_table(tmp_path / "fresh.parquet"))
    assert summary.kept == 4000  # the two parts before the damaged one
    assert part.name in capsys.readouterr().err


def test_files_and_folders_are_synced_before_and_after_each_rename(tmp_path, monkeypatch) -> None:
    events: list[tuple] = []
    real_fsync, real_replace = os.fsync, os.replace

    def fsync(fd):
        events.append(("fsync", os.readlink(f"/proc/self/fd/{fd}")))
        return real_fsync(fd)

    def replace(a, b):
        events.append(("replace", os.fspath(a), os.fspath(b)))
        return real_replace(a, b)

    monkeypatch.setattr(os, "fsync", fsync)
    monkeypatch.setattr(os, "replace", replace)
    pq.write_table(cases(5000), tmp_path / "in.parquet")
    sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", batch_size=2000, quiet=True)
    monkeypatch.undo()
    renames = [(k, e) for k, e in enumerate(events) if e[0] == "replace"]
    published = [Path(e[2]) for _, e in renames]
    assert tmp_path / "out.parquet" in published
    assert sum(p.name.startswith("part-") for p in published) == 3
    for k, (_, source, target) in renames:
        assert ("fsync", source) in events[:k], f"{source} not synced before its rename"
        assert ("fsync", str(Path(target).parent)) in events[k + 1 :], f"{target}'s folder not synced"


# ------------------------------------------------------------- item 7: memory


def test_arrow_memory_while_sweeping_stays_far_below_the_input_size(tmp_path, monkeypatch) -> None:
    """Arrow's allocator count (exact bytes, not a measurement of the process)
    while a sweep runs must not hold the input: its bytes are freed row group
    by row group. 80 row groups of random doubles, about 13 MiB of input;
    a batch in flight is well under 1 MiB."""
    rng = np.random.default_rng(0)
    n = 160_000
    names = ["feed_CH4", "feed_H2O", "feed_N2", "T_K", "P_bar", "x1", "x2", "x3", "x4"]
    table = pa.table({name: rng.uniform(1.0, 2.0, n) for name in names})
    table = table.set_column(3, "T_K", pa.array(rng.uniform(700.0, 1200.0, n)))
    pq.write_table(table, tmp_path / "in.parquet", row_group_size=2000)
    size = (tmp_path / "in.parquet").stat().st_size
    assert size > 12 * 2**20
    allocated: list[int] = []
    real = sweeps._Plan.solve

    def solve(self, batch, options):
        allocated.append(pa.total_allocated_bytes())
        return real(self, batch, options)

    monkeypatch.setattr(sweeps._Plan, "solve", solve)
    base = pa.total_allocated_bytes()
    sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", batch_size=2000, quiet=True)
    assert len(allocated) == 80
    held = max(allocated) - base
    assert held < 4 * 2**20, f"Arrow held {held / 2**20:.1f} MiB while sweeping a {size / 2**20:.1f} MiB file"


def test_the_memory_benchmark_smoke_mode_runs_and_names_its_method(tmp_path) -> None:
    run = subprocess.run(
        [sys.executable, "-m", "bench.sweep_memory", "--smoke", "--out", str(tmp_path)],
        capture_output=True,
        text=True,
        cwd=ROOT,
    )
    assert run.returncode == 0, run.stderr
    report = (tmp_path / "sweep_memory.md").read_text()
    assert "VmHWM" in report and "/proc/self/status" in report
    rows = re.findall(r"^\| ([\d,]+) \| [\d.]+ MiB \| ([\d.]+) \|", report, flags=re.M)
    assert len(rows) == 2 and all(float(peak) > 20 for _, peak in rows)  # a Python process, in MiB


# ------------------------------------- issue 12 item 13, sweep part: bad options


def test_a_batch_size_below_one_and_duplicate_columns_are_refused(tmp_path) -> None:
    pq.write_table(cases(20), tmp_path / "in.parquet")
    with pytest.raises(SweepError, match="batch_size"):
        sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", batch_size=0, quiet=True)
    duplicated = pa.Table.from_arrays(
        [
            pa.array(np.ones(20)),
            pa.array(np.full(20, 3.0)),
            pa.array(np.full(20, 900.0)),
            pa.array(np.ones(20)),
        ],
        names=["feed_CH4", "feed_H2O", "T_K", "feed_CH4"],
    )
    pq.write_table(duplicated, tmp_path / "dup.parquet")
    with pytest.raises(SweepError, match="feed_CH4.*more than once") as info:
        sweep(reformer_system(), tmp_path / "dup.parquet", tmp_path / "out.parquet", quiet=True)
    assert str(tmp_path / "dup.parquet") in str(info.value)
    assert not list(tmp_path.glob(".*"))
    cli = subprocess.run(
        [*EQBATCH, "sweep", str(SYSTEM_FILE), str(tmp_path / "in.parquet"), str(tmp_path / "o.parquet")]
        + ["--batch-size", "0"],
        capture_output=True,
        text=True,
    )
    assert cli.returncode == 2 and cli.stderr.startswith("eqbatch: error:") and cli.stderr.count("\n") == 1
