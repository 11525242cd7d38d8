"""Exception types. Every message names the offending reaction, species,
element, file or column, and says what would be valid."""

from __future__ import annotations


class EqbatchError(Exception):
    """Base class of every error eqbatch raises on purpose."""


class SystemDefinitionError(EqbatchError, ValueError):
    """The reaction system is malformed (raised at construction)."""


class EquationSyntaxError(SystemDefinitionError):
    """A reaction equation cannot be read."""


class UnknownSpeciesError(SystemDefinitionError):
    """An equation or a mapping names a species the system does not have."""


class AtomBalanceError(SystemDefinitionError):
    """A reaction between chemical formulas does not conserve an element."""


class DependentReactionsError(SystemDefinitionError):
    """A reaction is a linear combination of other reactions."""


class UnboundedReactionsError(SystemDefinitionError):
    """Some combination of reactions consumes nothing, so no equilibrium exists."""


class CaseInputError(EqbatchError, ValueError):
    """The arrays given to a solve do not fit the system (shape, missing K data)."""


class InvalidCaseError(CaseInputError):
    """A case has unusable values and ``invalid="raise"`` was requested."""


class SystemFileError(EqbatchError, ValueError):
    """A system file cannot be read; the message names the file and the key."""


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

    def __reduce__(self):
        return (
            type(self),
            (self.subject, self.count, self.cases, self.T_low, self.T_high, self.valid)
            + (self.what, self.unit, self.tail),
        )
