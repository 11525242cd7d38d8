"""The command line: `eqbatch solve`, `eqbatch demo`, `python -m eqbatch`."""

from __future__ import annotations

import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from eqbatch.cli import main


@pytest.fixture
def system_file(tmp_path):
    path = tmp_path / "reformer.toml"
    path.write_text(
        textwrap.dedent("""
        species = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
        P0 = 1.01325
        [[reactions]]
        label = "reforming"
        equation = "CH4 + H2O = CO + 3 H2"
        lnK = { a = 30.114, b = -26830.0 }
        [[reactions]]
        label = "shift"
        equation = "CO + H2O = CO2 + H2"
        lnK = { a = -4.036, b = 4400.0 }
    """)
    )
    return path


def test_solve_prints_amounts_fractions_extents_and_conversion(system_file, capsys) -> None:
    code = main(
        ["solve", str(system_file), "--feed", "CH4=1,H2O=3", "--feed", "N2=0.1", "--T", "1000", "--P", "1"]
    )
    out = capsys.readouterr().out
    assert code == 0
    assert "T = 1000 K, P = 1 bar" in out and "converged" in out
    for text in ("species", "amount/mol", "mole fraction", "extent/mol", "reforming", "conversion"):
        assert text in out
    # the methane conversion printed equals the API's
    import eqbatch

    res = eqbatch.ReactionSystem.from_toml(system_file).solve(
        {"CH4": 1, "H2O": 3, "N2": 0.1}, T=1000.0, P=1.0
    )
    assert f"{100 * res.conversion('CH4')[0]:.4g} %" in out
    assert "not a reactor design" in out


def test_solve_with_explicit_constants(system_file, capsys) -> None:
    assert main(["solve", str(system_file), "--feed", "CH4=1,H2O=2", "--K", "reforming=1,shift=1"]) == 0
    assert "ln K" in capsys.readouterr().out


@pytest.mark.parametrize(
    "args, message",
    [
        (["solve", "missing.toml", "--feed", "CH4=1"], "missing.toml: no such file"),
        (["solve", "{sys}", "--feed", "CH4"], "NAME=VALUE"),
        (["solve", "{sys}", "--feed", "O2=1", "--T", "900"], "'O2' is not a species"),
        (["solve", "{sys}", "--feed", "CH4=1"], "give T="),
        (["solve", "{sys}"], "give the feed"),
    ],
)
def test_errors_are_one_line_without_traceback(system_file, capsys, args, message) -> None:
    args = [a.replace("{sys}", str(system_file)) for a in args]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert err.startswith("eqbatch: error:") and message in err
    assert "Traceback" not in err and err.count("\n") == 1


def test_demo_runs_and_summarises(capsys, tmp_path) -> None:
    assert main(["demo", "--cases", "2000", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "45 grid cases: 45 converged" in out
    assert "Methane conversion" in out and "NIST WebBook Shomate" in out
    assert "2,000 cases" in out and "2000 converged" in out
    assert "defer to local codes and licensed engineers" in out
    assert "Parquet sweep" in out and "184 rows, 184 converged" in out
    assert (tmp_path / "hydrogen.png").read_bytes()[:4] == b"\x89PNG"
    report = (tmp_path / "report.html").read_text()  # the sweep's study report
    assert "made with this system" in report and "184" in report and "licensed engineers" in report
    # plots of CH4 and H2O conversion and three mole fractions; none for the species the
    # demo's grid lists with zero feed (their conversion columns hold no number)
    assert report.count("data:image/png") == 5 and "conversion_CO against" not in report


def test_python_dash_m_and_console_script(tmp_path) -> None:
    out = subprocess.run(
        [sys.executable, "-m", "eqbatch", "--version"], capture_output=True, text=True, check=True
    )
    assert out.stdout.startswith("eqbatch ")
    # the console script installed beside this interpreter
    script = shutil.which("eqbatch", path=str(Path(sys.executable).parent)) or shutil.which("eqbatch")
    assert script is not None
    out = subprocess.run([script, "demo", "--cases", "100"], capture_output=True, text=True, cwd=tmp_path)
    assert out.returncode == 0 and "Random batch: 100 cases" in out.stdout


def test_solve_adiabatic_and_approach_from_the_command_line(capsys) -> None:
    import eqbatch

    path = str(Path(eqbatch.__file__).parent / "data" / "reformer.toml")
    assert main(["solve", path, "--feed", "CH4=1,H2O=3", "--T", "1100", "--P", "20", "--adiabatic"]) == 0
    out = capsys.readouterr().out
    assert "adiabatic, inlet 1100 K, outlet T = " in out
    # reforming is endothermic: the adiabatic outlet is colder than the inlet
    outlet = float(out.split("outlet T = ")[1].split(" K")[0])
    assert 800 < outlet < 1100
    assert (
        main(
            ["solve", path, "--feed", "CH4=1,H2O=3", "--T", "1100", "--P", "20", "--approach", "reforming=20"]
        )
        == 0
    )


def test_solve_with_a_heat_duty_from_the_command_line(capsys) -> None:
    import eqbatch

    path = str(Path(eqbatch.__file__).parent / "data" / "reformer.toml")
    system = eqbatch.ReactionSystem.from_toml(path)
    expect = system.solve({"CH4": 1.0, "H2O": 3.0}, T=900.0, P=20.0, duty=100.0)
    assert main(["solve", path, "--feed", "CH4=1,H2O=3", "--T", "900", "--P", "20", "--duty", "100"]) == 0
    out = capsys.readouterr().out
    assert f"heat added 100 kJ, inlet 900 K, outlet T = {float(expect.T[0]):.2f} K" in out
    assert "heat taken by the reactor 100 kJ (the feed at 900 K" in out
    # a heat no temperature in the data's range can take: no outlet, exit status 1
    assert main(["solve", path, "--feed", "CH4=1,H2O=3", "--T", "900", "--P", "20", "--duty=-1e6"]) == 1
    out = capsys.readouterr().out
    assert "NO OUTLET" in out and "balances the enthalpy" in out


def test_bad_pressure_on_the_command_line_is_one_line(system_file, capsys) -> None:
    assert main(["solve", str(system_file), "--feed", "CH4=1,H2O=3", "--T", "1000", "--P", "-5"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("eqbatch: error: case 0: the pressure -5.0 bar") and err.count("\n") == 1


def test_solve_takes_temperature_and_pressure_with_their_units() -> None:
    # --T 870C --P 29barg is T = 1143.15 K and P = 30.01325 bar absolute
    # (0 C = 273.15 K; gauge against the standard atmosphere, 1.01325 bar):
    # the same printout as the SI arguments
    import eqbatch
    from eqbatch.units import parse_pressure, parse_temperature

    assert parse_temperature("870C") == pytest.approx(1143.15, abs=1e-9)
    assert parse_pressure("29barg") == pytest.approx(30.01325, abs=1e-12)
    assert parse_pressure("435psig") == pytest.approx(435 * 0.0689475729317 + 1.01325, rel=1e-10)
    system = str(Path(eqbatch.__file__).parent / "data" / "reformer.toml")

    def run(*extra: str) -> subprocess.CompletedProcess:
        cmd = [sys.executable, "-m", "eqbatch", "solve", system, "--feed", "CH4=1,H2O=3", *extra]
        return subprocess.run(cmd, capture_output=True, text=True)

    plant, si = run("--T", "870C", "--P", "29barg"), run("--T", "1143.15", "--P", "30.01325")
    assert plant.returncode == 0 and plant.stdout == si.stdout
    bad = run("--T", "870F")
    assert bad.returncode != 0 and "unknown temperature unit" in bad.stderr
