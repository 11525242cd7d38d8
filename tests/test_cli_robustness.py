"""The command line under misuse: bad options, closed pipes, extrapolation
warnings and the safety caution (issue 12, items 3, 4, 6 and 13)."""

from __future__ import annotations

import re
import subprocess
import sys
import textwrap
from pathlib import Path

import eqbatch
import numpy as np
import pytest
from eqbatch.cli import main

REFORMER = Path(eqbatch.__file__).parent / "data" / "reformer.toml"


@pytest.fixture
def ranged_file(tmp_path):
    """Reforming and shift with K(T) correlations, reforming's fitted 600-1300 K."""
    path = tmp_path / "ranged.toml"
    path.write_text(
        textwrap.dedent("""
        species = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
        P0 = 1.01325
        [[reactions]]
        label = "reforming"
        equation = "CH4 + H2O = CO + 3 H2"
        lnK = { a = 30.114, b = -26830.0, T_min = 600.0, T_max = 1300.0 }
        [[reactions]]
        label = "shift"
        equation = "CO + H2O = CO2 + H2"
        lnK = { a = -4.036, b = 4400.0 }
    """)
    )
    return path


def _run(*args: str, **kw) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "eqbatch", *args], capture_output=True, text=True, timeout=300, **kw
    )


# ------------------------------------------------------------- item 13: bad options


@pytest.fixture
def bad_files(tmp_path):
    latin1 = tmp_path / "latin1.toml"
    latin1.write_bytes('species = ["A", "B"]  # Fl\xfcssigkeit\n'.encode("latin-1"))
    deep = tmp_path / "deep.toml"
    deep.write_text("x = " + "[" * 5000 + "]" * 5000 + "\n")
    return {"{latin1}": str(latin1), "{deep}": str(deep), "{sys}": str(REFORMER)}


FEED = ["--feed", "CH4=1,H2O=3", "--T", "1000", "--P", "20"]
UNC = ["uncertainty", "{sys}", *FEED, "--dG-sigma", "reforming=3", "--plots", "{tmp}"]
SIGMA = ["uncertainty", "{sys}", *FEED, "--samples", "50", "--plots", "{tmp}"]


@pytest.mark.parametrize(
    "args, message",
    [
        (["solve", "{latin1}", "--feed", "A=1"], "not UTF-8"),
        (["solve", "{deep}", "--feed", "A=1"], "nested too deeply"),
        (["solve", "{sys}", *FEED, "--tol", "0"], "tol must be"),
        (["solve", "{sys}", *FEED, "--tol", "-1"], "tol must be"),
        (["solve", "{sys}", *FEED, "--max-iter", "99999999999"], "--max-iter"),
        (["solve", "{sys}", *FEED, "--max-iter", "-1"], "--max-iter"),
        (["thermo", "{sys}", "--T", "600:1200:0"], "COUNT"),
        (["thermo", "{sys}", "--T", "600:1200:-3"], "COUNT"),
        (["thermo", "{sys}", "--T", "600:1200:1e9"], "COUNT"),
        (["thermo", "{sys}", "--T", "600:1200:2.5"], "COUNT"),
        (["thermo", "{sys}", "--T=-5:1200:3"], "positive"),
        (["thermo", "{sys}", "--T", "600:1200"], "LOW:HIGH:COUNT"),
        (["demo", "--cases", "0", "--out", "{tmp}"], "--cases"),
        (["demo", "--cases", "-5", "--out", "{tmp}"], "--cases"),
        ([*UNC, "--samples", "0"], "samples"),
        ([*UNC, "--samples", "-1"], "samples"),
        ([*UNC, "--samples", "50", "--output", "y_Xe"], "'Xe'"),
        ([*UNC, "--samples", "50", "--output", "extent_nothing"], "'nothing'"),
        ([*SIGMA, "--dG-sigma", "reforming=nan"], "reforming"),
        ([*SIGMA, "--dG-sigma", "reforming=-3"], "reforming"),
        ([*SIGMA, "--lnK-sigma", "shift=inf"], "shift"),
        ([*SIGMA, "--species-dG-sigma", "CO=-1"], "'CO'"),
        (["solve", "{sys}", *FEED, "--approach", "reforming=-10"], "not negative"),
    ],
)
def test_bad_options_are_one_error_line_with_status_2(bad_files, tmp_path, capsys, args, message) -> None:
    names = dict(bad_files, **{"{tmp}": str(tmp_path)})
    args = [names.get(a, a) for a in args]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert err.startswith("eqbatch: error:") and err.count("\n") == 1, err
    assert message in err and "Traceback" not in err


def test_an_unforeseen_value_error_is_still_one_line(monkeypatch, capsys) -> None:
    def broken(**kw):
        raise ValueError("first line\nsecond line")

    monkeypatch.setattr("eqbatch.demo.run", broken)
    assert main(["demo"]) == 2
    err = capsys.readouterr().err
    assert err == "eqbatch: error: first line second line\n"


# ------------------------------------------------------------- item 3: closed pipe


def test_a_reader_that_stops_early_ends_the_command_quietly(tmp_path) -> None:
    # 10,000 temperatures x 2 reactions: far more than a pipe holds, so the
    # command is still writing when the reader goes away.
    proc = subprocess.Popen(
        [sys.executable, "-m", "eqbatch", "thermo", str(REFORMER), "--T", "600:1200:10000"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    first = proc.stdout.readline()
    proc.stdout.close()
    err = proc.stderr.read()
    assert proc.wait(timeout=120) == 141
    assert first.startswith(b"reforming: ") and err == b""


def test_solve_into_a_closed_pipe_prints_nothing_on_stderr(tmp_path) -> None:
    proc = subprocess.Popen(
        [sys.executable, "-m", "eqbatch", "solve", str(REFORMER), *FEED],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    proc.stdout.close()  # before the interpreter has even started: every write fails
    err = proc.stderr.read()
    assert proc.wait(timeout=120) == 141 and err == b""


# ------------------------------------------------------------- item 4: warnings


def test_extrapolation_is_one_readable_warning_line(ranged_file) -> None:
    out = _run("solve", str(ranged_file), "--feed", "CH4=1,H2O=3", "--T", "1400", "--P", "20")
    assert out.returncode == 0
    assert out.stderr == (
        "eqbatch: warning: ln K of 'reforming' extrapolated for 1 of 1 case "
        "(T 1400 K; correlation valid 600-1300 K)\n"
    )


def test_species_data_warning_names_the_species_and_source() -> None:
    out = _run("thermo", str(REFORMER), "--T", "400:800:5")
    assert out.returncode == 0
    # 400, 500, 600, 700, 800 K: only 400 K lies below the H2O data's 500 K
    assert out.stderr == (
        "eqbatch: warning: species data of 'H2O' (NIST Chemistry WebBook, Shomate coefficients (H2O)) "
        "extrapolated for 1 of 5 cases (T 400 K; data valid 500-6000 K), in ln K of 'reforming', 'shift'\n"
    )


def test_an_approach_counts_each_case_once_at_its_approach_temperature() -> None:
    # 510 K is inside the H2O data (500-6000 K); reforming 20 K short of
    # equilibrium takes its K at 490 K, outside them; the case is one case.
    args = ["solve", str(REFORMER), "--feed", "CH4=1,H2O=3", "--T", "510", "--P", "20"]
    out = _run(*args, "--approach", "reforming=20")
    assert out.returncode == 0
    assert out.stderr == (
        "eqbatch: warning: species data of 'H2O' (NIST Chemistry WebBook, Shomate coefficients (H2O)) "
        "extrapolated for 1 of 1 case (T 490 K; data valid 500-6000 K), in ln K of 'reforming', 'shift'\n"
    )
    assert _run(*args).stderr == ""


def _cases(path: Path, T: np.ndarray) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    n = T.size
    pq.write_table(
        pa.table({"feed_CH4": np.ones(n), "feed_H2O": np.full(n, 3.0), "P_bar": np.full(n, 20.0), "T_K": T}),
        path,
    )


def test_sweep_warnings_add_up_over_batches_and_quiet_silences_them(ranged_file, tmp_path) -> None:
    T = np.linspace(1000.0, 1400.0, 100)
    outside = T[T > 1300.0]  # counted here, independently of the engine
    _cases(tmp_path / "cases.parquet", T)
    args = ["sweep", str(ranged_file), str(tmp_path / "cases.parquet"), "--batch-size", "16"]
    loud = _run(*args, str(tmp_path / "a.parquet"))
    assert loud.returncode == 0
    lines = [line for line in loud.stderr.splitlines() if line.startswith("eqbatch: warning")]
    assert lines == [
        f"eqbatch: warning: ln K of 'reforming' extrapolated for {outside.size} of 100 cases "
        f"(T {outside.min():.6g}-{outside.max():.6g} K; correlation valid 600-1300 K)"
    ]
    quiet = _run(*args, str(tmp_path / "b.parquet"), "--quiet")
    assert (
        quiet.returncode == 0
        and "eqbatch: warning" not in quiet.stderr
        and "extrapolated" not in quiet.stderr
    )


def test_warning_helper_prints_other_warnings_as_one_line(capsys) -> None:
    import warnings

    from eqbatch.cli import warnings_to_stderr

    with warnings_to_stderr():
        warnings.warn("something\nodd", UserWarning, stacklevel=1)
    assert capsys.readouterr().err == "eqbatch: warning: something odd\n"
    with warnings_to_stderr(quiet=True):
        warnings.warn("hidden", UserWarning, stacklevel=1)
    assert capsys.readouterr().err == ""


# ------------------------------------------------------------- item 6: caution


def _hazard_groups(text: str) -> dict[str, set[str]]:
    flat = " ".join(text.split())
    found = re.search(r"Hazards[^:]*: (.*?)\.", flat)
    assert found, flat
    return {
        kind.strip(): {n.strip() for n in names.split(",")}
        for kind, names in (part.split(":") for part in found.group(1).split(";"))
    }


def test_caution_names_the_hazards_of_an_ammonia_converter(tmp_path, capsys) -> None:
    path = tmp_path / "nh3.toml"
    path.write_text(
        'species = ["N2", "H2", "NH3", "Ar"]\n[[reactions]]\nequation = "N2 + 3 H2 = 2 NH3"\nK = 4e-5\n'
    )
    assert main(["solve", str(path), "--feed", "N2=1,H2=3,Ar=0.1", "--P", "200"]) == 0
    out = capsys.readouterr().out
    caution = out[out.index("Equilibrium is a thermodynamic limit") :]
    # GHS: ammonia is a flammable gas, acutely toxic by inhalation and corrosive to skin
    groups = _hazard_groups(caution)
    assert groups["flammable"] == {"H2", "NH3"}
    assert groups["toxic"] == {"NH3"} and groups["corrosive"] == {"NH3"}
    assert groups["asphyxiant"] == {"N2", "Ar", "H2"}
    assert "methane" not in caution.lower() and "carbon monoxide" not in caution.lower()
    assert "licensed engineers" in caution and "local codes" in caution


def test_caution_for_the_reformer_and_for_unknown_species(capsys) -> None:
    from eqbatch.hazards import caution

    groups = _hazard_groups(caution(eqbatch.ReactionSystem.from_toml(REFORMER)))
    assert groups["flammable"] == {"CH4", "CO", "H2"} and groups["toxic"] == {"CO"}
    assert groups["asphyxiant"] == {"CH4", "H2", "CO2", "N2"}
    unknown = caution(eqbatch.ReactionSystem(["A", "B"], ["A = B"]))
    assert "Hazards" not in unknown and "no hazard data for A, B" in " ".join(unknown.split())
    for text in (unknown, caution(None)):
        assert "thermodynamic limit, not a reactor design" in " ".join(text.split())
        assert "licensed engineers" in text
