"""Construction and input checks that name the culprit (issue 12, items 4
and 14): stoichiometric coefficients, system-file types, temperature ranges,
complex feeds, uncertainties, and the extrapolation warning class."""

from __future__ import annotations

import textwrap
import warnings
from pathlib import Path

import eqbatch
import numpy as np
import pytest
from eqbatch.uncertainty import monte_carlo

REFORMER = Path(eqbatch.__file__).parent / "data" / "reformer.toml"


# ------------------------------------------------------------- coefficients


@pytest.mark.parametrize(
    "equation, message",
    [
        ("1e300 A = B", r"coefficient 1e300 of 'A' .*1e-06 to 1e\+06"),
        ("1e400 A = B", r"coefficient 1e400 of 'A' .*1e-06 to 1e\+06"),
        ("1e-7 A = B", r"coefficient 1e-7 of 'A' .*1e-06 to 1e\+06"),
        ("A = 2e6 B", r"coefficient 2e6 of 'B'"),
        ("A + B = 1.0000000001 A + C", r"net coefficient 1e-10 of 'A'"),
    ],
)
def test_coefficients_outside_the_accepted_range_are_named(equation, message) -> None:
    with pytest.raises(eqbatch.EquationSyntaxError, match=message):
        eqbatch.ReactionSystem(["A", "B", "C"], [equation])


def test_coefficients_are_read_exactly() -> None:
    system = eqbatch.ReactionSystem(["A", "B"], ["2.0000004 A = B"])
    assert system.stoich[0, 0] == -2.0000004
    small = eqbatch.ReactionSystem(["A", "B"], ["1e-6 A = 3.0000001 B"])
    assert small.stoich[0].tolist() == [-1e-6, 3.0000001]


@pytest.mark.parametrize("reactions", [None, 5, 1.5])
def test_reactions_of_the_wrong_type_are_named(reactions) -> None:
    with pytest.raises(eqbatch.SystemDefinitionError, match=f"reactions .*got {reactions!r}"):
        eqbatch.ReactionSystem(["A", "B"], reactions)


def test_boolean_P0_and_check_balance_are_refused_from_python() -> None:
    with pytest.raises(eqbatch.SystemDefinitionError, match="P0 .*True"):
        eqbatch.ReactionSystem(["A", "B"], ["A = B"], P0=True)
    with pytest.raises(eqbatch.SystemDefinitionError, match="check_balance .*'false'"):
        eqbatch.ReactionSystem(["A", "B"], ["A = B"], check_balance="false")


# ------------------------------------------------------------- system files


def _file(tmp_path, text: str) -> Path:
    path = tmp_path / "system.toml"
    path.write_text(textwrap.dedent(text))
    return path


BASE = 'species = ["CO", "H2O", "CO2", "H2"]\n'
SHIFT = '[[reactions]]\nlabel = "shift"\nequation = "CO + H2O = CO2 + H2"\n'


@pytest.mark.parametrize(
    "text, message",
    [
        (BASE + "P0 = true\n" + SHIFT + "K = 1.4\n", "P0 .*True"),
        (BASE + SHIFT + "lnK = true\n", "'shift'.*lnK .*True"),
        (BASE + SHIFT + "K = false\n", "'shift'.*K .*False"),
        (BASE + SHIFT + "lnK = { a = true, b = 4400.0 }\n", "'shift'.*lnK coefficients"),
        (BASE + 'check_balance = "false"\n' + SHIFT + "K = 1.4\n", "check_balance .*true or false"),
        (
            BASE + SHIFT + "lnK = { a = -4.0, b = 4400.0, T_min = 1300.0, T_max = 600.0 }\n",
            "'shift'.*T_min = 1300 .*T_max = 600",
        ),
        (
            BASE + SHIFT + "lnK = { a = -4.0, b = 4400.0, T_min = nan }\n",
            "'shift'.*T_min",
        ),
        (
            BASE
            + SHIFT
            + "[species_data.CO]\ncp_poly = { a = [3.5], dHf = -110.5, S298 = 197.7, T_min = 1500.0, "
            "T_max = 300.0 }\n",
            "species_data.CO.*1500-300 K",
        ),
    ],
)
def test_bad_values_in_system_files_are_named(tmp_path, text, message) -> None:
    path = _file(tmp_path, text)
    with pytest.raises(eqbatch.EqbatchError, match=message) as info:
        eqbatch.ReactionSystem.from_toml(path)
    assert str(path) in str(info.value)


def test_check_balance_false_in_a_file_switches_the_check_off(tmp_path) -> None:
    text = 'species = ["A", "AB"]\ncheck_balance = false\n[[reactions]]\nequation = "A = AB"\nK = 2.0\n'
    system = eqbatch.ReactionSystem.from_toml(_file(tmp_path, text))
    assert system.equations == ("A = AB",)


def test_inverted_range_of_a_correlation_is_refused_from_python() -> None:
    with pytest.raises(eqbatch.SystemDefinitionError, match="T_min = 900 .*T_max = 500"):
        eqbatch.LnKFunction(a=1.0, T_min=900.0, T_max=500.0)


# ------------------------------------------------------------- complex feeds


@pytest.mark.parametrize(
    "feed",
    [
        np.array([1.0 + 0.5j, 1.0, 0.0, 0.0]),
        [1.0, 1j, 0.0, 0.0],
        {"CO": 1.0, "H2O": np.array([1.0 + 0j])},
    ],
)
def test_complex_feed_is_refused(feed) -> None:
    system = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # refused, not truncated with a ComplexWarning
        with pytest.raises(eqbatch.CaseInputError, match="feed.*complex"):
            system.solve(feed, lnK=[1.0])


# ------------------------------------------------------------- uncertainties


WGS = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], {"shift": "CO + H2O = CO2 + H2"})


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"lnK_sigma": {"shift": -0.1}}, "lnK_sigma.*'shift'.*-0.1"),
        ({"lnK_sigma": [-0.1]}, "lnK_sigma.*'shift'.*-0.1"),
        ({"dG_sigma": {"shift": float("nan")}, "T": 900.0}, "dG_sigma.*'shift'.*nan"),
        ({"species_dG_sigma": {"CO": -2.0}, "T": 900.0}, "species_dG_sigma.*'CO'.*-2"),
        ({"lnK_sigma": [0.1], "samples": 0}, "samples must be a positive integer, got 0"),
        ({"lnK_sigma": [0.1], "samples": 2.5}, "samples must be a positive integer, got 2.5"),
    ],
)
def test_bad_uncertainties_are_named(kwargs, message) -> None:
    kwargs = {"samples": 10, **kwargs}
    with pytest.raises(eqbatch.CaseInputError, match=message):
        monte_carlo(WGS, feed=[1, 1, 0, 0], lnK=[1.0], **kwargs)


# ------------------------------------------------------------- warnings


def test_extrapolated_correlation_warns_with_the_reaction_and_the_count() -> None:
    assert issubclass(eqbatch.ExtrapolationWarning, UserWarning)
    fitted = eqbatch.LnKFunction(a=30.114, b=-26830.0, T_min=600.0, T_max=1300.0)
    system = eqbatch.ReactionSystem(
        ["CH4", "H2O", "CO", "H2", "CO2"],
        {"reforming": "CH4 + H2O = CO + 3 H2", "shift": "CO + H2O = CO2 + H2"},
        lnK={"reforming": fitted, "shift": eqbatch.LnKFunction(a=-4.036, b=4400.0)},
    )
    T = np.linspace(1000.0, 1400.0, 1000)
    outside = T[T > 1300.0]
    with pytest.warns(eqbatch.ExtrapolationWarning) as record:
        system.solve([1.0, 3.0, 0, 0, 0], T=T, P=20.0)
    assert len(record) == 1
    assert str(record[0].message) == (
        f"ln K of 'reforming' extrapolated for {outside.size} of 1,000 cases "
        f"(T {outside.min():.6g}-{outside.max():.6g} K; correlation valid 600-1300 K)"
    )
    assert record[0].filename == __file__  # points at the caller, not into eqbatch
    warning = record[0].message
    assert (warning.count, warning.cases) == (outside.size, 1000)


def test_species_data_warn_once_per_data_set_naming_the_species() -> None:
    system = eqbatch.ReactionSystem.from_toml(REFORMER)
    with pytest.warns(eqbatch.ExtrapolationWarning) as record:
        system.lnK([400.0, 450.0, 800.0])
    # H2O (500-6000 K) is in both reactions, and reported once
    assert [str(w.message) for w in record] == [
        "species data of 'H2O' (NIST Chemistry WebBook, Shomate coefficients (H2O)) extrapolated for "
        "2 of 3 cases (T 400-450 K; data valid 500-6000 K), in ln K of 'reforming', 'shift'"
    ]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        system.lnK([600.0, 1200.0])  # within every range: silent
        system.dlnK_dT([600.0, 1200.0])
