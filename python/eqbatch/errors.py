"""Exception types. Every message names the offending reaction, species,
element, file or column, and says what would be valid."""

from __future__ import annotations

from typing import Any


class EqbatchError(Exception):
    """Base class of every error eqbatch raises on purpose.

    Examples
    --------
    >>> import eqbatch
    >>> try:
    ...     eqbatch.ReactionSystem(["CO", "H2O"], ["CO = H2O"])
    ... except eqbatch.EqbatchError as err:
    ...     print(type(err).__name__)
    AtomBalanceError
    """


class SystemDefinitionError(EqbatchError, ValueError):
    """The reaction system is malformed (raised at construction).

    The message names the reaction, species, element or value at fault and
    what would be valid; subclasses say which rule was broken.

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"], P0=0.0)
    Traceback (most recent call last):
    ...
    eqbatch.errors.SystemDefinitionError: P0 must be a positive pressure in bar, got 0.0
    """


class EquationSyntaxError(SystemDefinitionError):
    """A reaction equation cannot be read.

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.ReactionSystem(["Xa", "Xb"], ["Xa -> Xb"])
    Traceback (most recent call last):
    ...
    eqbatch.errors.EquationSyntaxError: reaction 'r1': 'Xa -> Xb' must have exactly one '=' or '<=>' ...
    """


class UnknownSpeciesError(SystemDefinitionError):
    """An equation or a mapping names a species the system does not have.

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H3"])
    Traceback (most recent call last):
    ...
    eqbatch.errors.UnknownSpeciesError: reaction 'r1': 'H3' is not a species of this system ...
    """


class AtomBalanceError(SystemDefinitionError):
    """A reaction between chemical formulas does not conserve an element.

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.ReactionSystem(["N2", "H2", "NH3"], ["N2 + H2 = NH3"])
    Traceback (most recent call last):
    ...
    eqbatch.errors.AtomBalanceError: reaction 'r1' (N2 + H2 = NH3) does not balance in N: ...
    """


class DependentReactionsError(SystemDefinitionError):
    """A reaction is a linear combination of other reactions.

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.ReactionSystem(
    ...     ["CH4", "H2O", "CO", "H2", "CO2"],
    ...     {"smr": "CH4 + H2O = CO + 3 H2", "wgs": "CO + H2O = CO2 + H2",
    ...      "overall": "CH4 + 2 H2O = CO2 + 4 H2"},
    ... )
    Traceback (most recent call last):
    ...
    eqbatch.errors.DependentReactionsError: reaction 'overall' (...) is a linear combination ...
    """


class UnboundedReactionsError(SystemDefinitionError):
    """Some combination of reactions consumes nothing, so no equilibrium exists.

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.ReactionSystem(["Xa", "Xb"], ["Xa = Xa + Xb"])
    Traceback (most recent call last):
    ...
    eqbatch.errors.UnboundedReactionsError: the combination r1 of reactions 'r1' (Xa = Xa + Xb) consumes ...
    """


class CaseInputError(EqbatchError, ValueError):
    """The arrays given to a solve do not fit the system (shape, missing K data).

    Examples
    --------
    >>> import eqbatch
    >>> system = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    >>> system.solve([1.0, 1.0, 0.0], lnK=0.3)
    Traceback (most recent call last):
    ...
    eqbatch.errors.CaseInputError: feed must have shape (N, 4) or (4,) in the species order ...
    """


class InvalidCaseError(CaseInputError):
    """A case has unusable values and ``invalid="raise"`` was requested.

    Examples
    --------
    >>> import eqbatch
    >>> system = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    >>> system.solve([[1.0, 1.0, 0.0, 0.0], [1.0, -1.0, 0.0, 0.0]], lnK=0.3, invalid="raise")
    Traceback (most recent call last):
    ...
    eqbatch.errors.InvalidCaseError: case 1: the feed has a negative or non-finite amount: [1.0, -1.0, ...]
    """


class SystemFileError(EqbatchError, ValueError):
    """A system file cannot be read; the message names the file and the key.

    Examples
    --------
    >>> import eqbatch
    >>> eqbatch.ReactionSystem.from_toml("no-such-system.toml")
    Traceback (most recent call last):
    ...
    eqbatch.errors.SystemFileError: no-such-system.toml: no such file
    """


def _temperatures(low: float, high: float) -> str:
    """``400 K``, ``400-450 K``, ``up to 1300 K`` or ``from 600 K``."""
    if low == -float("inf"):
        return f"up to {high:.6g} K"
    if high == float("inf"):
        return f"from {low:.6g} K"
    return f"{low:.6g} K" if low == high else f"{low:.6g}-{high:.6g} K"


class ExtrapolationWarning(UserWarning):
    """Data (a ln K(T) correlation or species thermochemistry) evaluated at
    temperatures outside the range they are valid for.

    The message names the data and how many of the cases (or temperatures)
    were outside, e.g. ``ln K of 'reforming' extrapolated for 12 of 1,000
    cases (T 1310-1400 K; correlation valid 600-1300 K)``; the same facts are
    attributes: ``subject``, ``count``, ``cases``, ``T_low``, ``T_high`` (the
    extrapolated temperatures' extremes, K) and ``valid`` (the data's range,
    K). Filter it like any warning::

        warnings.filterwarnings("ignore", category=eqbatch.ExtrapolationWarning)

    Parameters
    ----------
    subject : str
        The data, e.g. ``"ln K of 'reforming'"``.
    count, cases : int
        Cases (or temperatures) outside the range, and all of them.
    T_low, T_high : float
        Extremes of the temperatures outside, K.
    valid : (float, float)
        The data's range, K (an open end is infinite).
    what, unit, tail : str
        How the message names the data (``"data"``, ``"correlation"``), what
        is counted (``"case"``, ``"temperature"``), and what it adds at the end.

    Examples
    --------
    >>> import warnings, eqbatch
    >>> system = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], {"shift": "CO + H2O = CO2 + H2"},
    ...                                 lnK={"shift": eqbatch.LnKFunction(a=-4.33, b=4577.8, T_max=1000.0)})
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     _ = system.lnK([900.0, 1100.0])
    >>> print(caught[0].message)
    ln K of 'shift' extrapolated for 1 of 2 cases (T 1100 K; correlation valid up to 1000 K)
    >>> caught[0].message.count, caught[0].message.valid
    (1, (-inf, 1000.0))
    """

    def __init__(
        self,
        subject: str,
        count: int,
        cases: int,
        T_low: float,
        T_high: float,
        valid: tuple[float, float],
        what: str = "data",
        unit: str = "case",
        tail: str = "",
    ) -> None:
        self.subject, self.count, self.cases = subject, int(count), int(cases)
        self.T_low, self.T_high, self.valid = float(T_low), float(T_high), tuple(valid)
        self.what, self.unit, self.tail = what, unit, tail
        units = unit if cases == 1 else unit + "s"
        super().__init__(
            f"{subject} extrapolated for {count:,} of {cases:,} {units} "
            f"(T {_temperatures(T_low, T_high)}; {what} valid {_temperatures(*valid)}){tail}"
        )

    def __reduce__(self) -> tuple[Any, ...]:
        return (
            type(self),
            (self.subject, self.count, self.cases, self.T_low, self.T_high, self.valid)
            + (self.what, self.unit, self.tail),
        )


class NonIdealGasWarning(UserWarning):
    """An ideal-gas solve at conditions where the ideal-gas law is off by
    more than a few percent: the equilibrium mixture's compressibility
    factor, from the Peng-Robinson equation with the critical constants the
    system was given, differs from 1 by more than 5 % in some cases. Give
    ``gas_model="peng-robinson"`` (or ``"srk"``) to include the fugacity
    coefficients. Said once per call, with how many cases.
    """
