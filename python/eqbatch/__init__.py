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

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from eqbatch._core import __version__ as _core_version
from eqbatch.activity import NRTL, UNIQUAC, Wilson
from eqbatch.equations import parse_equation, parse_formula
from eqbatch.errors import (
    AtomBalanceError,
    CaseInputError,
    DependentReactionsError,
    EqbatchError,
    EquationSyntaxError,
    ExtrapolationWarning,
    InvalidCaseError,
    NonIdealGasWarning,
    SystemDefinitionError,
    SystemFileError,
    UnboundedReactionsError,
    UnknownSpeciesError,
)
from eqbatch.kdata import LnKFunction
from eqbatch.outputs import release_memory, reuse_output_memory
from eqbatch.prepared import PreparedSolve
from eqbatch.result import EquilibriumResult
from eqbatch.status import Status
from eqbatch.system import ReactionSystem

if TYPE_CHECKING:
    from eqbatch import thermo as thermo
    from eqbatch.boundary import PhaseBoundary, phase_boundary
    from eqbatch.sweeps import SweepError, SweepSummary, sweep
    from eqbatch.uncertainty import MonteCarloResult, lnK_covariance, monte_carlo, monte_carlo_table

__version__ = _core_version

#: Names whose modules load when first used (the Parquet layer, the analyses
#: and the thermochemistry functions): ``import eqbatch`` then loads only what
#: a solve needs.
_ON_FIRST_USE = {
    "PhaseBoundary": "eqbatch.boundary",
    "phase_boundary": "eqbatch.boundary",
    "SweepError": "eqbatch.sweeps",
    "SweepSummary": "eqbatch.sweeps",
    "sweep": "eqbatch.sweeps",
    "MonteCarloResult": "eqbatch.uncertainty",
    "lnK_covariance": "eqbatch.uncertainty",
    "monte_carlo": "eqbatch.uncertainty",
    "monte_carlo_table": "eqbatch.uncertainty",
}


def __getattr__(name: str) -> Any:
    if name == "thermo":
        return importlib.import_module("eqbatch.thermo")
    module = _ON_FIRST_USE.get(name)
    if module is None:
        raise AttributeError(f"module 'eqbatch' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_ON_FIRST_USE) | {"thermo"})


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
    "NRTL",
    "NonIdealGasWarning",
    "PhaseBoundary",
    "PreparedSolve",
    "ReactionSystem",
    "Status",
    "SweepError",
    "SweepSummary",
    "SystemDefinitionError",
    "SystemFileError",
    "UNIQUAC",
    "UnboundedReactionsError",
    "UnknownSpeciesError",
    "Wilson",
    "lnK_covariance",
    "monte_carlo",
    "monte_carlo_table",
    "parse_equation",
    "parse_formula",
    "phase_boundary",
    "release_memory",
    "reuse_output_memory",
    "sweep",
]
