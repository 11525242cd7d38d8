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
