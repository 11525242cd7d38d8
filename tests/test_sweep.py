"""Parquet sweeps: round trips, datasets, resume after kill -9, refusal to
overwrite, bad files, Dask, grids and plots."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import eqbatch
import numpy as np
import pyarrow as pa
import pyarrow.csv
import pyarrow.parquet as pq
import pytest
from conftest import png_size
from eqbatch.demo import reformer_system, system_file_text
from eqbatch.grid import make_grid, write_grid
from eqbatch.sweeps import SweepError, sweep

SYSTEM_FILE = Path(eqbatch.__file__).parent / "data" / "reformer.toml"
# the command line of this interpreter's installation (no reliance on PATH)
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
            "site": np.array(["north", "south"])[rng.integers(0, 2, n)],
        }
    )


def test_round_trip_equals_an_in_memory_solve(tmp_path) -> None:
    table = cases(5000)
    pq.write_table(table, tmp_path / "in.parquet")
    system = reformer_system()
    summary = sweep(system, tmp_path / "in.parquet", tmp_path / "out.parquet", batch_size=1024, quiet=True)
    out = pq.read_table(tmp_path / "out.parquet")
    assert summary.rows == 5000 and summary.converged == 5000
    # every input column unchanged and in order, then the outputs
    assert out.column_names[: table.num_columns] == table.column_names
    assert out.select(table.column_names).equals(table)
    feed = np.column_stack(
        [table.column("feed_CH4"), table.column("feed_H2O"), np.zeros((5000, 3)), table.column("feed_N2")]
    )
    res = system.solve(feed, T=table.column("T_K").to_numpy(), P=table.column("P_bar").to_numpy())
    np.testing.assert_array_equal(
        np.column_stack([out.column(f"n_{s}") for s in system.species]), res.amounts
    )
    np.testing.assert_array_equal(out.column("y_H2").to_numpy(), res.mole_fractions[:, 3])
    np.testing.assert_array_equal(out.column("extent_shift").to_numpy(), res.extents[:, 1])
    np.testing.assert_array_equal(out.column("conversion_CH4").to_numpy(), res.conversion("CH4"))
    np.testing.assert_array_equal(out.column("status").to_numpy(), res.status)
    assert not list(tmp_path.glob(".*"))  # no temporary or partial files left


def test_dataset_folder_gives_one_output_per_file(tmp_path) -> None:
    src = tmp_path / "cases"
    src.mkdir()
    for k in range(3):
        pq.write_table(cases(700, seed=k), src / f"part{k}.parquet")
    summary = sweep(reformer_system(), src, tmp_path / "results", quiet=True)
    assert summary.rows == 2100
    names = sorted(p.name for p in (tmp_path / "results").glob("*.parquet"))
    assert names == ["part0.parquet", "part1.parquet", "part2.parquet"]
    sweep(reformer_system(), src / "part1.parquet", tmp_path / "one.parquet", quiet=True)
    assert pq.read_table(tmp_path / "results" / "part1.parquet").equals(
        pq.read_table(tmp_path / "one.parquet")
    )


def test_refuses_to_overwrite_unless_asked(tmp_path) -> None:
    pq.write_table(cases(100), tmp_path / "in.parquet")
    system = reformer_system()
    sweep(system, tmp_path / "in.parquet", tmp_path / "out.parquet", quiet=True)
    before = (tmp_path / "out.parquet").read_bytes()
    with pytest.raises(SweepError, match="exists; pass overwrite=True"):
        sweep(system, tmp_path / "in.parquet", tmp_path / "out.parquet", quiet=True)
    assert (tmp_path / "out.parquet").read_bytes() == before
    sweep(system, tmp_path / "in.parquet", tmp_path / "out.parquet", quiet=True, overwrite=True)


def test_resume_after_kill_9_equals_an_uninterrupted_run(tmp_path) -> None:
    pq.write_table(cases(120_000, seed=3), tmp_path / "in.parquet")
    script = textwrap.dedent(f"""
        import time, eqbatch.sweeps as sw
        from eqbatch.demo import reformer_system
        real = sw._Plan.solve
        def slow(self, batch, options):
            time.sleep(0.05)  # leave time to be killed mid-run
            return real(self, batch, options)
        sw._Plan.solve = slow
        sw.sweep(reformer_system(), {str(tmp_path / "in.parquet")!r}, {str(tmp_path / "out.parquet")!r},
                 batch_size=2000, quiet=True)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script])
    partial = tmp_path / ".out.parquet.partial"
    deadline = time.time() + 60
    while time.time() < deadline and len(list(partial.glob("part-*.arrow"))) < 5:
        time.sleep(0.02)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    done_parts = len(list(partial.glob("part-*.arrow")))
    assert 5 <= done_parts < 60 and not (tmp_path / "out.parquet").exists()
    with pytest.raises(SweepError, match="resume it"):
        sweep(
            reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", batch_size=2000, quiet=True
        )
    summary = sweep(
        reformer_system(),
        tmp_path / "in.parquet",
        tmp_path / "out.parquet",
        batch_size=2000,
        quiet=True,
        resume=True,
    )
    assert summary.resumed_batches >= 5 and summary.rows == 120_000
    sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "fresh.parquet", batch_size=2000, quiet=True)
    assert pq.read_table(tmp_path / "out.parquet").equals(pq.read_table(tmp_path / "fresh.parquet"))
    assert not partial.exists()


def test_nulls_make_a_row_invalid_not_the_run(tmp_path) -> None:
    table = cases(10)
    h2o = table.column("feed_H2O").to_pylist()
    h2o[4] = None
    table = table.set_column(2, "feed_H2O", pa.array(h2o, pa.float64()))
    pq.write_table(table, tmp_path / "in.parquet")
    summary = sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", quiet=True)
    status = pq.read_table(tmp_path / "out.parquet").column("status").to_numpy()
    assert status[4] == eqbatch.Status.INVALID_INPUT and np.all(np.delete(status, 4) == 0)
    assert summary.by_status == {"converged": 9, "invalid input": 1}


@pytest.mark.parametrize(
    "make, message",
    [
        (lambda t: t.drop(["T_K"]), r"missing column 'T_K'"),
        (
            lambda t: t.set_column(1, "feed_CH4", pa.array(["a"] * t.num_rows)),
            r"column 'feed_CH4' must be numeric",
        ),
        (lambda t: t.drop(["feed_CH4", "feed_H2O", "feed_N2"]), r"no feed column"),
        (
            lambda t: t.append_column("lnK_reforming", pa.array(np.zeros(t.num_rows))),
            r"missing column\(s\) lnK_shift",
        ),
    ],
)
def test_bad_columns_name_the_file_and_column(tmp_path, make, message) -> None:
    path = tmp_path / "bad.parquet"
    pq.write_table(make(cases(20)), path)
    with pytest.raises(SweepError, match=message) as info:
        sweep(reformer_system(), path, tmp_path / "out.parquet", quiet=True)
    assert str(path) in str(info.value)
    assert not (tmp_path / "out.parquet").exists()


def test_corrupt_and_non_parquet_files(tmp_path) -> None:
    good = tmp_path / "good.parquet"
    pq.write_table(cases(50), good)
    corrupt = tmp_path / "corrupt.parquet"
    corrupt.write_bytes(good.read_bytes()[: len(good.read_bytes()) // 2])
    text = tmp_path / "text.parquet"
    text.write_text("case,T\n1,900\n")
    for path in (corrupt, text):
        with pytest.raises(SweepError, match="not a readable Parquet file") as info:
            sweep(reformer_system(), path, tmp_path / "out.parquet", quiet=True)
        assert str(path) in str(info.value)
    with pytest.raises(SweepError, match="no such file"):
        sweep(reformer_system(), tmp_path / "missing.parquet", tmp_path / "out.parquet", quiet=True)


def test_cli_sweep_summary_line(tmp_path) -> None:
    pq.write_table(cases(300), tmp_path / "in.parquet")
    out = subprocess.run(
        [
            *EQBATCH,
            "sweep",
            str(SYSTEM_FILE),
            str(tmp_path / "in.parquet"),
            str(tmp_path / "out.parquet"),
            "--quiet",
        ],
        capture_output=True,
        text=True,
    )
    assert out.returncode == 0, out.stderr
    assert "300 rows, 300 converged" in out.stdout
    again = subprocess.run(
        [*EQBATCH, "sweep", str(SYSTEM_FILE), str(tmp_path / "in.parquet"), str(tmp_path / "out.parquet")],
        capture_output=True,
        text=True,
    )
    assert (
        again.returncode == 2 and again.stderr.startswith("eqbatch: error:") and "--overwrite" in again.stderr
    )


def test_dask_local_cluster_equals_the_local_run(tmp_path) -> None:
    import distributed  # part of the test extra: a missing install fails, it does not skip

    src = tmp_path / "cases"
    src.mkdir()
    for k in range(4):
        pq.write_table(cases(400, seed=10 + k), src / f"f{k}.parquet")
    system = reformer_system()
    sweep(system, src, tmp_path / "local", quiet=True)
    with (
        distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        summary = sweep(system, src, tmp_path / "dask", client=client, quiet=True)
    assert summary.rows == 1600
    for k in range(4):
        name = f"f{k}.parquet"
        assert pq.read_table(tmp_path / "dask" / name).equals(pq.read_table(tmp_path / "local" / name))


def test_factorial_grid_and_seeded_samples(tmp_path) -> None:
    grid = make_grid(
        {"T_K": (800, 1000, 3), "P_bar": (1, 100, 3)}, constants={"feed_CH4": 1.0}, log=("P_bar",)
    )
    assert grid.num_rows == 9
    np.testing.assert_allclose(sorted(set(grid.column("P_bar").to_pylist())), [1.0, 10.0, 100.0])
    np.testing.assert_array_equal(grid.column("feed_CH4").to_numpy(), np.ones(9))
    for kind in ("lhs", "sobol"):
        a = make_grid({"T_K": (700, 1200, 0), "S": (1.5, 5, 0)}, sample=kind, n=64, seed=7)
        b = make_grid({"T_K": (700, 1200, 0), "S": (1.5, 5, 0)}, sample=kind, n=64, seed=7)
        c = make_grid({"T_K": (700, 1200, 0), "S": (1.5, 5, 0)}, sample=kind, n=64, seed=8)
        assert a.equals(b) and not a.equals(c)
        t = a.column("T_K").to_numpy()
        assert t.min() >= 700 and t.max() <= 1200
    # Latin hypercube: exactly one sample in each of the n strata of every column
    lhs = make_grid({"T_K": (0, 1, 0)}, sample="lhs", n=50, seed=1).column("T_K").to_numpy()
    assert sorted(np.floor(lhs * 50).astype(int)) == list(range(50))
    out = subprocess.run(
        [
            *EQBATCH,
            "grid",
            str(tmp_path / "g.parquet"),
            "--range",
            "T_K=700:1200:6",
            "--range",
            "P_bar=1:40:2",
            "--set",
            "feed_CH4=0.98,feed_H2O=2.94",
        ],
        capture_output=True,
        text=True,
    )
    assert out.returncode == 0 and "wrote 12 cases" in out.stdout
    assert pq.read_table(tmp_path / "g.parquet").num_rows == 12


def test_plot_writes_a_png_of_the_right_size(tmp_path) -> None:
    table = make_grid(
        {"T_K": (800, 1100, 7), "P_bar": (1, 30, 3)},
        constants={"feed_CH4": 0.98, "feed_H2O": 2.94, "feed_N2": 0.02},
    )
    write_grid(tmp_path / "g.parquet", table)
    sweep(reformer_system(), tmp_path / "g.parquet", tmp_path / "r.parquet", quiet=True)
    out = subprocess.run(
        [
            *EQBATCH,
            "plot",
            str(tmp_path / "r.parquet"),
            "--x",
            "T_K",
            "--y",
            "y_H2",
            "--by",
            "P_bar",
            "--out",
            str(tmp_path / "lines.png"),
        ],
        capture_output=True,
        text=True,
    )
    assert out.returncode == 0, out.stderr
    assert png_size(tmp_path / "lines.png") == (640, 440)
    out = subprocess.run(
        [
            *EQBATCH,
            "plot",
            str(tmp_path / "r.parquet"),
            "--x",
            "T_K",
            "--y",
            "P_bar",
            "--z",
            "y_H2",
            "--out",
            str(tmp_path / "heat.png"),
        ],
        capture_output=True,
        text=True,
    )
    assert out.returncode == 0 and png_size(tmp_path / "heat.png") == (640, 440)


def test_quiet_sweep_and_plot_errors(tmp_path, capsys) -> None:
    pq.write_table(cases(50), tmp_path / "in.parquet")
    sweep(reformer_system(), tmp_path / "in.parquet", tmp_path / "out.parquet", quiet=True)
    assert capsys.readouterr().err == ""  # quiet: no progress bar and no notes
    from eqbatch.cli import main

    code = main(
        ["plot", str(tmp_path / "out.parquet"), "--x", "T_K", "--y", "y_H3", "--out", str(tmp_path / "p.png")]
    )
    err = capsys.readouterr().err
    assert code == 2 and "no column 'y_H3'" in err and err.count("\n") == 1


def test_pressure_and_temperature_columns_in_plant_units(tmp_path) -> None:
    # the same cases given as T_C / P_psig, T_K / P_kPa and T_K / P_bar give
    # the same equilibrium; conversions checked by hand: 0 C = 273.15 K,
    # 1 psi = 0.0689475729 bar (exact from the pound-force and inch
    # definitions), gauge against 1.01325 bar (the standard atmosphere)
    n = 50
    rng = np.random.default_rng(4)
    T_K, P_bar = rng.uniform(800.0, 1100.0, n), rng.uniform(2.0, 30.0, n)
    feed = {"feed_CH4": np.ones(n), "feed_H2O": np.full(n, 3.0)}
    forms = {
        "si": {"T_K": T_K, "P_bar": P_bar},
        "plant": {"T_C": T_K - 273.15, "P_psig": (P_bar - 1.01325) / 0.0689475729},
        "kpa": {"T_K": T_K, "P_kPa": P_bar * 100.0},
    }
    system = reformer_system()
    out = {}
    for name, cols in forms.items():
        pq.write_table(pa.table(feed | cols), tmp_path / f"{name}.parquet")
        sweep(system, tmp_path / f"{name}.parquet", tmp_path / f"{name}_out.parquet", quiet=True)
        out[name] = pq.read_table(tmp_path / f"{name}_out.parquet")
    for name in ("plant", "kpa"):
        np.testing.assert_allclose(
            out[name].column("y_H2").to_numpy(), out["si"].column("y_H2").to_numpy(), rtol=1e-9
        )
        assert out[name].column_names[:4] == list(feed | forms[name])  # the input columns as given
    # each column says its unit in its Parquet field metadata: the plant-unit inputs
    # keep theirs, the outputs are SI-based (mol, K, bar absolute), fractions are 1
    schema = pq.read_schema(tmp_path / "plant_out.parquet")
    units = {name: (schema.field(name).metadata or {}).get(b"unit") for name in schema.names}
    assert units["T_C"] == b"Cel" and units["P_psig"] == b"psi (gauge)" and units["feed_CH4"] == b"mol"
    assert units["n_H2"] == b"mol" and units["y_H2"] == b"1" and units["extent_reforming"] == b"mol"
    assert units["status"] is None and units["iterations"] is None
    in_memory = system.solve([1.0, 3.0, 0, 0, 0, 0], T=900.0, P=10.0).to_arrow().schema
    assert in_memory.field("T_K").metadata == {b"unit": b"K"}
    assert in_memory.field("P_bar").metadata == {b"unit": b"bar"}
    pq.write_table(pa.table(feed | {"T_K": T_K, "T_C": T_K - 273.15}), tmp_path / "both.parquet")
    with pytest.raises(SweepError, match="more than one temperature column"):
        sweep(system, tmp_path / "both.parquet", tmp_path / "both_out.parquet", quiet=True)


def test_dry_basis_columns(tmp_path) -> None:
    # ydry_<species> = n_i / (gas total - water), as an analyser after a
    # condenser reads it (common practice); none for water itself; a system
    # that says condensable=[] has no dry columns, and one naming CO2 too
    # leaves both out
    n = 40
    rng = np.random.default_rng(8)
    table = pa.table(
        {"feed_CH4": np.ones(n), "feed_H2O": rng.uniform(1.0, 4.0, n), "T_K": rng.uniform(800.0, 1100.0, n)}
    )
    pq.write_table(table, tmp_path / "in.parquet")
    system = reformer_system()
    sweep(system, tmp_path / "in.parquet", tmp_path / "out.parquet", quiet=True)
    out = pq.read_table(tmp_path / "out.parquet")
    amounts = np.column_stack([out.column(f"n_{s}").to_numpy() for s in system.species])
    dry = [s for s in system.species if s != "H2O"]
    total = sum(out.column(f"n_{s}").to_numpy() for s in dry)
    for s in dry:
        np.testing.assert_allclose(
            out.column(f"ydry_{s}").to_numpy(), out.column(f"n_{s}").to_numpy() / total, rtol=1e-14
        )
    assert "ydry_H2O" not in out.column_names
    res = system.solve(amounts[:1] * 0 + [1.0, 2.0, 0, 0, 0, 0.02], T=950.0)
    np.testing.assert_allclose(np.nansum(res.dry_mole_fractions, axis=1), 1.0, rtol=1e-14)
    none = eqbatch.ReactionSystem(**(system.arguments() | {"condensable": []}))
    assert not [c for c in none.solve([1.0, 2.0, 0, 0, 0, 0.02], T=950.0).columns() if c.startswith("ydry_")]
    two = eqbatch.ReactionSystem(**(system.arguments() | {"condensable": ["H2O", "CO2"]}))
    cols = [c for c in two.solve([1.0, 2.0, 0, 0, 0, 0.02], T=950.0).columns() if c.startswith("ydry_")]
    assert cols == ["ydry_CH4", "ydry_CO", "ydry_H2", "ydry_N2"]


def test_steam_to_carbon_column(tmp_path) -> None:
    # S_C = 3 with 1 CH4 and 0.1 C2H6 fed: water = 3 x (1 + 2 x 0.1) = 3.6 mol
    # (carbon atoms from the formulas); the same answers as feed_H2O = 3.6
    system = eqbatch.ReactionSystem(
        ["CH4", "C2H6", "H2O", "CO", "H2", "CO2"],
        ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2", "C2H6 + 2 H2O = 2 CO + 5 H2"],
        lnK=[3.0, 0.5, 12.0],
    )
    base = {"feed_CH4": [1.0, 1.0], "feed_C2H6": [0.1, 0.1], "P_bar": [20.0, 20.0]}
    pq.write_table(pa.table(base | {"S_C": [3.0, 2.5]}), tmp_path / "sc.parquet")
    pq.write_table(pa.table(base | {"feed_H2O": [3.6, 3.0]}), tmp_path / "water.parquet")
    for name in ("sc", "water"):
        sweep(system, tmp_path / f"{name}.parquet", tmp_path / f"{name}_out.parquet", quiet=True)
    a, b = (pq.read_table(tmp_path / f"{name}_out.parquet") for name in ("sc", "water"))
    for s in system.species:
        np.testing.assert_allclose(a.column(f"n_{s}").to_numpy(), b.column(f"n_{s}").to_numpy(), rtol=1e-12)
    pq.write_table(pa.table(base | {"S_C": [3.0, 2.5], "feed_H2O": [1.0, 1.0]}), tmp_path / "both.parquet")
    with pytest.raises(SweepError, match="S_C sets the water feed"):
        sweep(system, tmp_path / "both.parquet", tmp_path / "both_out.parquet", quiet=True)


def test_syngas_ratio_columns() -> None:
    # H2/CO and the stoichiometric number (H2 - CO2) / (CO + CO2) (methanol
    # practice, common practice) recomputed from the amounts
    system = reformer_system()
    res = system.solve([1.0, 3.0, 0.0, 0.0, 0.0, 0.02], T=[900.0, 1100.0], P=20.0)
    cols = res.columns()
    n = {s: res.amounts[:, system.species.index(s)] for s in ("H2", "CO", "CO2")}
    np.testing.assert_allclose(cols["ratio_H2_CO"], n["H2"] / n["CO"], rtol=1e-15)
    np.testing.assert_allclose(cols["SN"], (n["H2"] - n["CO2"]) / (n["CO"] + n["CO2"]), rtol=1e-15)
    assert (cols["ratio_H2_CO"] > 3.0).all()  # steam reforming gives more than 3 H2 per CO with the shift


def test_si_columns_do_not_load_the_units_library() -> None:
    # a sweep in bar and kelvin pays nothing for the units library: pint (about
    # a second to build its registry) is not loaded for P_bar / T_K
    import subprocess
    import sys

    code = (
        "import sys; from eqbatch.units import pressure_to_bar, temperature_to_kelvin; "
        "assert pressure_to_bar('P_bar') == (1.0, 0.0) and temperature_to_kelvin('T_K') == (1.0, 0.0); "
        "print('pint' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_plot_filters_rows_names_what_it_averages_and_samples_large_files(tmp_path, capsys) -> None:
    from eqbatch import plots
    from eqbatch.cli import main

    table = make_grid(
        {"T_K": (800, 1100, 7), "P_bar": (1, 30, 3), "feed_H2O": (2.0, 4.0, 15)},
        constants={"feed_CH4": 1.0},
    )
    write_grid(tmp_path / "g.parquet", table)
    sweep(reformer_system(), tmp_path / "g.parquet", tmp_path / "r.parquet", quiet=True)
    result = str(tmp_path / "r.parquet")
    args = ["plot", result, "--x", "T_K", "--y", "y_H2", "--out", str(tmp_path / "p.png")]
    # y against T only: each point averages over the pressures and steam feeds, and says so
    assert main(args) == 0
    assert "each point: mean over P_bar, feed_H2O" in capsys.readouterr().out
    # filtered to one pressure and one steam feed: nothing is averaged
    assert main([*args, "--where", "P_bar=1", "--where", "feed_H2O<=2"]) == 0
    out = capsys.readouterr().out
    assert "P_bar=1 and feed_H2O<=2" in out and "mean over" not in out
    # fifteen --by values: a colour scale, not a legend
    assert main([*args, "--by", "feed_H2O", "--where", "P_bar=1"]) == 0
    assert png_size(tmp_path / "p.png") == (640, 440)
    # a file larger than the plot reads is drawn from a sample, and the count is said
    notes: list[str] = []
    plots.result_plot(result, tmp_path / "s.png", x="T_K", y="y_H2", max_rows=100, notes=notes)
    assert f"a random sample of 100 of {7 * 3 * 15:,} rows" in notes
    # text filters ignore case (status names are stored in capitals)
    notes = []
    plots.result_plot(
        result, tmp_path / "s.png", x="T_K", y="y_H2", where=["status_name=converged"], notes=notes
    )
    assert "status_name=converged" in notes[0]
    with pytest.raises(eqbatch.CaseInputError, match="no row has P_bar>100"):
        plots.result_plot(result, tmp_path / "s.png", x="T_K", y="y_H2", where=["P_bar>100"])


def test_csv_input_where_filters_and_column_subsets(tmp_path, capsys) -> None:
    from eqbatch.cli import main

    # the same cases as Parquet and as CSV (whole numbers in the CSV read as numbers)
    table = make_grid({"T_K": (800, 1100, 4), "P_bar": (1, 31, 4)}, constants={"feed_CH4": 1, "feed_H2O": 3})
    write_grid(tmp_path / "g.parquet", table)
    pa.csv.write_csv(pq.read_table(tmp_path / "g.parquet"), tmp_path / "g.csv")
    system = reformer_system()
    sweep(system, tmp_path / "g.parquet", tmp_path / "p.parquet", quiet=True)
    sweep(system, tmp_path / "g.csv", tmp_path / "c.parquet", quiet=True)
    by_parquet, by_csv = pq.read_table(tmp_path / "p.parquet"), pq.read_table(tmp_path / "c.parquet")
    assert by_csv.num_rows == 16
    np.testing.assert_array_equal(by_csv.column("y_H2").to_numpy(), by_parquet.column("y_H2").to_numpy())
    # a grid written as CSV by the grid command is the same table
    assert main(["grid", str(tmp_path / "g2.csv"), "--range", "T_K=800:1100:4", "--range", "P_bar=1:31:4",
                 "--set", "feed_CH4=1,feed_H2O=3"]) == 0  # fmt: skip
    sweep(system, tmp_path / "g2.csv", tmp_path / "c2.parquet", quiet=True)
    np.testing.assert_array_equal(pq.read_table(tmp_path / "c2.parquet").column("y_H2").to_numpy(),
                                  by_parquet.column("y_H2").to_numpy())  # fmt: skip
    # --where picks rows before solving; --columns keeps a subset, in the order given
    (tmp_path / "reformer.toml").write_text(system_file_text())
    code = main(
        [
            "sweep",
            "--quiet",
            str(tmp_path / "reformer.toml"),
            str(tmp_path / "g.csv"),
            str(tmp_path / "w.parquet"),
            "--where",
            "T_K>=1000",
            "--where",
            "P_bar<30",
            "--columns",
            "T_K,P_bar,y_H2,status_name",
        ]
    )
    assert code == 0, capsys.readouterr().err
    picked = pq.read_table(tmp_path / "w.parquet")
    assert picked.column_names == ["T_K", "P_bar", "y_H2", "status_name"]
    full = by_parquet.to_pandas()
    want = full[(full.T_K >= 1000) & (full.P_bar < 30)]
    assert picked.num_rows == len(want) == 6
    np.testing.assert_array_equal(picked.column("y_H2").to_numpy(), want.y_H2.to_numpy())
    assert not list(tmp_path.glob(".*staged"))  # the staging folder is gone
    # a finished output: kept by a resume, refused without one
    again = {"where": ["T_K>=1000", "P_bar<30"], "columns": ["T_K", "P_bar", "y_H2", "status_name"]}
    again |= {"quiet": True}
    kept = sweep(system, tmp_path / "g.csv", tmp_path / "w.parquet", resume=True, **again)
    assert kept.kept == 6 and pq.read_table(tmp_path / "w.parquet").equals(picked)
    with pytest.raises(SweepError, match="exists"):
        sweep(system, tmp_path / "g.csv", tmp_path / "w.parquet", **again)
    # a resume keeps it only if this sweep made it: other rows, a filter or a tol is refused
    changed = again | {"where": ["T_K>=900"]}
    with pytest.raises(SweepError, match="not this sweep's finished output"):
        sweep(system, tmp_path / "g.csv", tmp_path / "w.parquet", resume=True, **changed)
    with pytest.raises(SweepError, match="not this sweep's finished output"):
        sweep(system, tmp_path / "g.csv", tmp_path / "w.parquet", resume=True, tol=1e-9, **again)
    # bad filters and columns are named
    with pytest.raises(SweepError, match="names no column 'T'"):
        sweep(system, tmp_path / "g.csv", tmp_path / "x.parquet", where=["T>5"], quiet=True)
    with pytest.raises(SweepError, match="names no output column 'y_H3'"):
        sweep(system, tmp_path / "g.csv", tmp_path / "y.parquet", columns=["y_H3"], quiet=True)
