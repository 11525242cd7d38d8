"""eqbatch: batch chemical-equilibrium engine.

Describe species (with their phase) and reactions as equations, then solve
one case or millions: every case gets its equilibrium amounts, mole
fractions, extents and an honest status.

>>> import eqbatch
>>> system = eqbatch.ReactionSystem(["N2", "H2", "NH3"], ["0.5 N2 + 1.5 H2 = NH3"])
>>> res = system.solve([1.0, 3.0, 0.0], K=0.0065, P=10.0)
>>> bool(res.converged[0])
True

Equilibrium is a thermodynamic limit, not a reactor design.
"""

from eqbatch._core import __version__ as _core_version
from eqbatch.equations import parse_equation, parse_formula
from eqbatch.errors import (
    AtomBalanceError,
    CaseInputError,
    DependentReactionsError,
    EqbatchError,
    EquationSyntaxError,
    ExtrapolationWarning,
    InvalidCaseError,
    SystemDefinitionError,
    SystemFileError,
    UnboundedReactionsError,
    UnknownSpeciesError,
)
from eqbatch.kdata import LnKFunction
from eqbatch.outputs import release_memory, reuse_output_memory
from eqbatch.result import EquilibriumResult, Status
from eqbatch.sweeps import SweepError, SweepSummary, sweep
from eqbatch.system import ReactionSystem
from eqbatch.uncertainty import MonteCarloResult, lnK_covariance, monte_carlo, monte_carlo_table

__version__ = _core_version


__all__ = [
    "AtomBalanceError",
    "CaseInputError",
    "DependentReactionsError",
    "EqbatchError",
    "EquationSyntaxError",
    "EquilibriumResult",
    "ExtrapolationWarning",
    "InvalidCaseError",
    "LnKFunction",
    "MonteCarloResult",
    "ReactionSystem",
    "Status",
    "SweepError",
    "SweepSummary",
    "SystemDefinitionError",
    "SystemFileError",
    "UnboundedReactionsError",
    "UnknownSpeciesError",
    "lnK_covariance",
    "monte_carlo",
    "monte_carlo_table",
    "parse_equation",
    "parse_formula",
    "release_memory",
    "reuse_output_memory",
    "sweep",
]
