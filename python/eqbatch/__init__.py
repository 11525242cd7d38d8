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
from eqbatch._core import release_buffers as _release_buffers
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
from eqbatch.result import EquilibriumResult, Status
from eqbatch.sweeps import SweepError, SweepSummary, sweep
from eqbatch.system import ReactionSystem
from eqbatch.uncertainty import MonteCarloResult, lnK_covariance, monte_carlo, monte_carlo_table

__version__ = _core_version


def release_memory() -> int:
    """Return the output memory eqbatch keeps for reuse to the operating system.

    Large result arrays (4 MiB and up) that Python has freed are kept, up to
    1 GiB, so that the next large solve writes into memory the process already
    holds instead of asking the system for fresh pages (which can cost more
    than the solve). Blocks unused for 30 s are freed at the next solve; a
    program that stops solving keeps them until it calls this or exits.
    Returns the bytes the cache held.
    """
    return _release_buffers()


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
    "sweep",
]
