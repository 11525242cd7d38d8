"""Activity coefficients of liquid solutions: NRTL and Wilson.

``ReactionSystem(..., liquid_model={"liquid": NRTL(...)})`` makes a solution
phase non-ideal: its species' activities become ``x_i gamma_i`` in the
equilibrium conditions, ``gamma`` per case at the phase's composition and
temperature. The core solves the conditions by successive substitution on
``gamma`` (the same passes as a real gas: ``rust/core/src/realgas.rs``).

* :class:`NRTL` (Renon and Prausnitz, AIChE J. 14, 1968):
  ``tau_ij = a_ij + b_ij / T``, ``G_ij = exp(-alpha_ij tau_ij)``;
* :class:`Wilson` (J. Am. Chem. Soc. 86, 1964): ``Lambda_ij = exp(a_ij + b_ij / T)``
  (for the common form ``Lambda_ij = V_j / V_i exp(-lambda_ij / (R T))``,
  ``a_ij = ln(V_j / V_i)`` and ``b_ij = -lambda_ij / R``);
* :class:`UNIQUAC` (Abrams and Prausnitz, AIChE J. 21, 1975): volume and
  area parameters ``r``, ``q`` per species, ``z = 10``,
  ``tau_ij = exp(a_ij + b_ij / T)`` (for ``tau_ij = exp(-du_ij / (R T))``,
  ``b_ij = -du_ij / R``).

Parameters are given per ordered pair of species (``("EtOH", "H2O")`` is
``tau`` of ethanol in water's row, i.e. ``tau_12`` for ethanol 1, water 2);
pairs not given are zero (NRTL ``tau``, Wilson ``ln Lambda``). NRTL's
``alpha`` is symmetric (either order), default 0.3 for every pair.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from eqbatch.errors import SystemDefinitionError

#: Pairs of species mapped to a number.
Pairs = Mapping[tuple[str, str], float]


@dataclass(frozen=True)
class NRTL:
    """The NRTL model of one solution phase: ``tau_ij = a_ij + b_ij / T``
    (``b`` in K), ``alpha_ij`` symmetric (default 0.3)."""

    a: Pairs = field(default_factory=dict)
    b: Pairs = field(default_factory=dict)
    alpha: Pairs = field(default_factory=dict)

    code = 0


@dataclass(frozen=True)
class Wilson:
    """The Wilson model of one solution phase: ``ln Lambda_ij = a_ij + b_ij / T``
    (``b`` in K)."""

    a: Pairs = field(default_factory=dict)
    b: Pairs = field(default_factory=dict)

    code = 1


@dataclass(frozen=True)
class UNIQUAC:
    """The UNIQUAC model of one solution phase: ``r`` and ``q`` of every
    species of the phase, ``ln tau_ij = a_ij + b_ij / T`` (``b`` in K)."""

    r: Mapping[str, float] = field(default_factory=dict)
    q: Mapping[str, float] = field(default_factory=dict)
    a: Pairs = field(default_factory=dict)
    b: Pairs = field(default_factory=dict)

    code = 2


LiquidModel = NRTL | Wilson | UNIQUAC


def read_liquid_models(
    species: Sequence[str], phases: Sequence[str], models: Mapping[str, Any] | None
) -> dict[str, LiquidModel]:
    """The checked ``liquid_model=`` argument: phase name -> model.

    Raises
    ------
    SystemDefinitionError
        A phase that is not a solution phase of the system, a model that is
        not :class:`NRTL` or :class:`Wilson`, a pair naming a species outside
        that phase (or a species with itself), or a value that is not finite.
    """
    out: dict[str, LiquidModel] = {}
    for phase, model in (models or {}).items():
        members = [s for s, p in zip(species, phases) if p == phase]
        if not phase.startswith("liquid") or not members:
            raise SystemDefinitionError(
                f"liquid_model: {phase!r} is no solution phase of the system (its species' phases: "
                f"{', '.join(sorted(set(phases)))})"
            )
        if not isinstance(model, (NRTL, Wilson, UNIQUAC)):
            raise SystemDefinitionError(
                f"liquid_model[{phase!r}] must be NRTL(...), Wilson(...) or UNIQUAC(...), got {model!r}"
            )
        if isinstance(model, UNIQUAC):
            for name in ("r", "q"):
                table = getattr(model, name)
                missing = [m for m in members if m not in table]
                if missing or set(table) - set(members):
                    raise SystemDefinitionError(
                        f"liquid_model[{phase!r}].{name} needs one value per species of the phase "
                        f"({', '.join(members)})"
                    )
                if not all(math.isfinite(float(v)) and float(v) > 0 for v in table.values()):
                    raise SystemDefinitionError(f"liquid_model[{phase!r}].{name}: values must be positive")
        tables = {"a": model.a, "b": model.b} | ({"alpha": model.alpha} if isinstance(model, NRTL) else {})
        for name, table in tables.items():
            for pair, value in table.items():
                ok = isinstance(pair, tuple) and len(pair) == 2 and pair[0] != pair[1]
                if not ok or not all(p in members for p in pair):
                    raise SystemDefinitionError(
                        f"liquid_model[{phase!r}].{name}: {pair!r} must be two different species of "
                        f"the phase ({', '.join(members)})"
                    )
                if not math.isfinite(float(value)):
                    raise SystemDefinitionError(
                        f"liquid_model[{phase!r}].{name}[{pair!r}] = {value!r} is not finite"
                    )
        out[phase] = model
    return out


def core_arguments(
    species: Sequence[str], phases: Sequence[str], models: Mapping[str, LiquidModel]
) -> list[tuple]:
    """The binding's ``solutions``: (model code, species indices, a, b, alpha) per phase, k x k row-major."""
    out = []
    for phase, model in models.items():
        members = [k for k, p in enumerate(phases) if p == phase]
        names = [species[k] for k in members]
        k = len(members)

        def matrix(
            table: Pairs, default: float, symmetric: bool = False, names: list[str] = names
        ) -> list[float]:
            values = []
            for i in names:
                for j in names:
                    if i == j:
                        values.append(0.0)
                    elif (i, j) in table:
                        values.append(float(table[(i, j)]))
                    elif symmetric and (j, i) in table:
                        values.append(float(table[(j, i)]))
                    else:
                        values.append(default)
            return values

        alpha = matrix(model.alpha, 0.3, symmetric=True) if isinstance(model, NRTL) else [0.0] * (k * k)
        r = [float(model.r[n]) for n in names] if isinstance(model, UNIQUAC) else []
        q = [float(model.q[n]) for n in names] if isinstance(model, UNIQUAC) else []
        out.append((model.code, members, matrix(model.a, 0.0), matrix(model.b, 0.0), alpha, r, q))
    return out
