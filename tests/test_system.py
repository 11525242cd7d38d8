"""Building systems: equations, formulas, phases, labels, K data, files, and
the errors a malformed system gets at construction."""

from __future__ import annotations

import textwrap

import eqbatch
import numpy as np
import pytest
from eqbatch import parse_equation, parse_formula


def test_equation_forms() -> None:
    sp = ["N2", "H2", "NH3", "CH4", "H2O", "CO"]
    expected = {"N2": -0.5, "H2": -1.5, "NH3": 1.0}
    assert parse_equation("0.5 N2 + 1.5 H2 = NH3", sp, "r") == expected
    assert parse_equation("1/2 N2 + 3/2 H2 <=> NH3", sp, "r") == expected
    assert parse_equation("N2+3H2=2NH3", sp, "r") == {"N2": -1.0, "H2": -3.0, "NH3": 2.0}
    # a species on both sides keeps its net coefficient
    assert parse_equation("CH4 + 2 H2O = CO + 3 H2 + H2O", sp, "r") == {
        "CH4": -1.0,
        "H2O": -1.0,
        "CO": 1.0,
        "H2": 3.0,
    }


@pytest.mark.parametrize(
    "equation, error, text",
    [
        ("CH4 + H2O -> CO + 3 H2", eqbatch.EquationSyntaxError, "exactly one '=' or '<=>'"),
        ("CH4 = CO = H2", eqbatch.EquationSyntaxError, "exactly one"),
        ("CH4 + O2 = CO + 3 H2", eqbatch.UnknownSpeciesError, "'O2' is not a species"),
        ("CH4 + H2O = CO + 3 H3", eqbatch.UnknownSpeciesError, "'H3'"),
        ("CH4 + H2O = CH4 + H2O", eqbatch.EquationSyntaxError, "changes nothing"),
        ("0 CH4 + H2O = CO", eqbatch.EquationSyntaxError, "must be positive"),
    ],
)
def test_bad_equations_name_the_culprit(equation: str, error: type, text: str) -> None:
    with pytest.raises(error, match=text):
        eqbatch.ReactionSystem(["CH4", "H2O", "CO", "H2"], {"smr": equation})


def test_formulas() -> None:
    # Element counts worked by hand.
    assert parse_formula("CH3OH") == {"C": 1, "H": 4, "O": 1}
    assert parse_formula("C2H5OH") == {"C": 2, "H": 6, "O": 1}
    assert parse_formula("NH3") == {"N": 1, "H": 3}
    assert parse_formula("Co") == {"Co": 1} and parse_formula("CO") == {"C": 1, "O": 1}
    for label in ("EtOH", "n-C4H10", "lump1", "Xy", "S0", "H2O(l)"):
        assert parse_formula(label) is None


def test_unbalanced_reaction_names_the_element() -> None:
    with pytest.raises(eqbatch.AtomBalanceError, match=r"'smr'.*does not balance in H: 6 on the left, 4"):
        eqbatch.ReactionSystem(["CH4", "H2O", "CO", "H2"], {"smr": "CH4 + H2O = CO + 2 H2"})
    with pytest.raises(eqbatch.AtomBalanceError, match="in C"):
        eqbatch.ReactionSystem(["CH3OH", "CO", "H2"], ["CH3OH = 2 CO + 2 H2"])


def test_labels_skip_the_balance_check_and_explicit_formulas_restore_it() -> None:
    eqbatch.ReactionSystem(["EtOH", "C2H4", "H2O"], ["EtOH = C2H4 + H2O"])  # label: not checked
    eqbatch.ReactionSystem(["EtOH", "C2H4", "H2O"], ["EtOH = C2H4 + H2O"], formulas={"EtOH": "C2H5OH"})
    with pytest.raises(eqbatch.AtomBalanceError, match="in O"):
        eqbatch.ReactionSystem(["EtOH", "C2H4", "H2O"], ["EtOH = C2H4 + H2O"], formulas={"EtOH": "C2H6"})
    # single-letter labels that happen to be element symbols: opt out
    eqbatch.ReactionSystem(["B", "C"], ["B = C"], check_balance=False)


def test_dependent_reactions_are_named_with_their_combination() -> None:
    with pytest.raises(eqbatch.DependentReactionsError, match=r"'overall'.*overall = smr \+ wgs"):
        eqbatch.ReactionSystem(
            ["CH4", "H2O", "CO", "H2", "CO2"],
            {
                "smr": "CH4 + H2O = CO + 3 H2",
                "wgs": "CO + H2O = CO2 + H2",
                "overall": "CH4 + 2 H2O = CO2 + 4 H2",
            },
        )
    with pytest.raises(eqbatch.DependentReactionsError, match="r2 = 2 r1"):
        eqbatch.ReactionSystem(["A", "B"], ["A = B", "2 A = 2 B"])


def test_reaction_that_consumes_nothing_is_rejected() -> None:
    with pytest.raises(eqbatch.UnboundedReactionsError, match="consumes nothing"):
        eqbatch.ReactionSystem(["A", "Q", "Z"], ["A = Q", "A = A + Z"])


def test_phases_labels_and_P0() -> None:
    system = eqbatch.ReactionSystem(
        ["EtOH", "AcOH", "EtOAc", "H2O"],
        {"ester": "EtOH + AcOH = EtOAc + H2O"},
        phases={"EtOH": "liquid", "AcOH": "Liquid", "EtOAc": "liquid", "H2O": "liquid"},
        P0=1.01325,
    )
    assert system.phases == ("liquid",) * 4 and system.labels == ("ester",) and system.P0 == 1.01325
    with pytest.raises(eqbatch.SystemDefinitionError, match="valid phases are gas, liquid"):
        eqbatch.ReactionSystem(["A", "B"], ["A = B"], phases={"A": "plasma"})
    with pytest.raises(eqbatch.UnknownSpeciesError, match="'Q' is not a species"):
        eqbatch.ReactionSystem(["A", "B"], ["A = B"], phases={"Q": "gas"})
    with pytest.raises(eqbatch.SystemDefinitionError, match="listed twice"):
        eqbatch.ReactionSystem(["A", "A"], ["A = A"])
    with pytest.raises(eqbatch.SystemDefinitionError, match="P0"):
        eqbatch.ReactionSystem(["A", "B"], ["A = B"], P0=0.0)
    with pytest.raises(eqbatch.SystemDefinitionError, match="used more than once"):
        eqbatch.ReactionSystem(["A", "B", "C"], [("x", "A = B"), ("x", "B = C")])


def test_standard_pressure_changes_the_answer_as_it_should() -> None:
    # A = 2 B at P = 1 bar with K on a 1 atm basis: P/P0 = 1/1.01325.
    K = 0.5
    for P0 in (1.0, 1.01325):
        system = eqbatch.ReactionSystem(["A", "B"], ["A = 2 B"], P0=P0)
        x = system.solve([1.0, 0.0], K=[K], P=1.0).extents[0, 0]
        assert x == pytest.approx(np.sqrt(K / (K + 4.0 / P0)), rel=1e-10)


def write(tmp_path, text: str):
    path = tmp_path / "system.toml"
    path.write_text(textwrap.dedent(text))
    return path


def test_system_file_with_constant_and_temperature_dependent_K(tmp_path) -> None:
    path = write(
        tmp_path,
        """
        species = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
        P0 = 1.01325
        [[reactions]]
        label = "reforming"
        equation = "CH4 + H2O = CO + 3 H2"
        lnK = { a = 30.114, b = -26830.0 }
        [[reactions]]
        label = "shift"
        equation = "CO + H2O <=> CO2 + H2"
        log10K = { a = -1.7528, b = 1910.9 }
    """,
    )
    system = eqbatch.ReactionSystem.from_toml(path)
    assert system.labels == ("reforming", "shift") and system.P0 == 1.01325
    lnk = system.lnK([900.0, 1000.0])
    np.testing.assert_allclose(lnk[:, 0], 30.114 - 26830.0 / np.array([900.0, 1000.0]))
    np.testing.assert_allclose(lnk[1, 1], np.log(10) * (-1.7528 + 1.9109), rtol=1e-12)
    res = system.solve([1, 3, 0, 0, 0, 0], T=[900.0, 1000.0], P=10.0)
    assert res.converged.all()
    np.testing.assert_array_equal(res.T, [900.0, 1000.0])
    with pytest.raises(eqbatch.CaseInputError, match="give T="):
        system.solve([1, 3, 0, 0, 0, 0])


def test_K_lnK_and_log10K_in_files_are_equivalent(tmp_path) -> None:
    results = []
    for key, value in (("lnK", "1.0986122886681098"), ("K", "3.0"), ("log10K", "0.47712125471966244")):
        path = write(
            tmp_path,
            f"""
            species = ["A", "B"]
            [[reactions]]
            equation = "A = B"
            {key} = {value}
        """,
        )
        results.append(eqbatch.ReactionSystem.from_toml(path).solve([1.0, 0.0]).amounts)
    for r in results:
        np.testing.assert_allclose(r, [[0.25, 0.75]], rtol=1e-9)


@pytest.mark.parametrize(
    "text, message",
    [
        ('species = ["A", "B"]\n', "at least one \\[\\[reactions\\]\\]"),
        ('species = ["A", "B"]\n[[reactions]]\nlabel = "x"\n', "reactions\\[0\\]: missing 'equation'"),
        (
            'species = ["A", "B"]\n[[reactions]]\nequation = "A = B"\nKp = 3\n',
            "unknown key\\(s\\) \\['Kp'\\]",
        ),
        ('species = ["A", "B"]\nspecie = 1\n', "unknown key\\(s\\) \\['specie'\\]"),
        ('species = ["A", "B"\n', "not valid TOML"),
        ('species = ["A", "B"]\n[[reactions]]\nequation = "A = C"\n', "'C' is not a species"),
        ('species = ["A", "B"]\n[[reactions]]\nequation = "A = B"\nK = -1\n', "K must be positive"),
        (
            'species = ["A", "B"]\n[[reactions]]\nequation = "A = B"\nlnK = {a = 1, f = 2}\n',
            "unknown lnK coefficient",
        ),
    ],
)
def test_bad_system_files_name_the_file_and_key(tmp_path, text: str, message: str) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(eqbatch.EqbatchError, match=message) as info:
        eqbatch.ReactionSystem.from_toml(path)
    assert str(path) in str(info.value)


def test_missing_system_file(tmp_path) -> None:
    with pytest.raises(eqbatch.SystemFileError, match="no such file"):
        eqbatch.ReactionSystem.from_toml(tmp_path / "nope.toml")


def test_range_warning_for_extrapolated_correlation() -> None:
    fn = eqbatch.LnKFunction(a=1.0, b=-100.0, T_min=500.0, T_max=900.0)
    system = eqbatch.ReactionSystem(["A", "B"], ["A = B"], lnK={"r1": fn})
    with pytest.warns(
        eqbatch.ExtrapolationWarning, match="ln K of 'r1' extrapolated .*correlation valid 500-900 K"
    ):
        system.solve([1.0, 0.0], T=1200.0)
