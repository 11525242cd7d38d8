"""Checking a system's arguments into a :class:`~eqbatch.spec.SystemSpec`.

:func:`define` reads what :class:`~eqbatch.ReactionSystem` takes (and what a
system file holds): species names, reactions (equations, labelled or not, or
``"auto"``), phases, the standard pressure, formulas, K data, species data
and a data source. A malformed definition is refused with an error that names
the species, reaction, element or value at fault and says what would be
valid; the checks run in the order the arguments are read, so the first fault
is the one named.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np

from eqbatch import _core
from eqbatch.activity import read_liquid_models
from eqbatch.compounds import chemicals_data
from eqbatch.equations import (
    check_atom_balance,
    generated_labels,
    independent_reactions,
    oriented_reactions,
    parse_equation,
    parse_formula,
)
from eqbatch.errors import (
    CaseInputError,
    DependentReactionsError,
    SystemDefinitionError,
    UnboundedReactionsError,
    UnknownSpeciesError,
)
from eqbatch.kdata import as_lnk_data
from eqbatch.realgas import read_gas_model
from eqbatch.spec import MAX_SOLUTIONS, PHASES, KData, ReactionK, SystemSpec, compile_system, phase_key
from eqbatch.speciesdata import (
    NASA7,
    CpPolynomial,
    MaierKelley,
    Shomate,
    SpeciesData,
    Tabulated,
    ThermoLnK,
    species_data_from_table,
)
from eqbatch.units import is_quantity, pressure_input

_LABEL = re.compile(r"^[A-Za-z_][A-Za-z0-9_.\-]*$")

#: What ``reactions=`` may be: equations, label -> equation, (label, equation) pairs
#: (or tables with ``equation`` and ``label``), or ``"auto"``.
Reactions = Sequence[str] | Mapping[str, str] | Sequence[tuple[str, str]]


def define(
    species: Sequence[str],
    reactions: Reactions,
    *,
    phases: Mapping[str, str] | None = None,
    P0: float = 1.0,
    formulas: Mapping[str, str | None] | None = None,
    check_balance: bool = True,
    lnK: Mapping[str, Any] | Sequence[Any] | None = None,
    species_data: Mapping[str, Any] | None = None,
    thermo: str | None = None,
    gas_model: str | None = None,
    critical: Mapping[str, Mapping[str, float]] | str | None = None,
    kij: Mapping[tuple[str, str], float] | None = None,
    liquid_model: Mapping[str, Any] | None = None,
    condensable: Sequence[str] | None = None,
    feed_species: Sequence[str] | None = None,
) -> SystemSpec:
    """The checked description of a system from the arguments of
    :class:`~eqbatch.ReactionSystem` (see there for each).

    Parameters
    ----------
    species, reactions, phases, P0, formulas, check_balance, lnK, species_data, thermo
        As for :class:`~eqbatch.ReactionSystem`.
    gas_model, critical, kij, liquid_model, condensable, feed_species
        As for :class:`~eqbatch.ReactionSystem`.

    Returns
    -------
    SystemSpec

    Raises
    ------
    SystemDefinitionError
        (or a subclass) naming the reaction, species or element at fault:
        unknown species, an unreadable equation, unbalanced atoms, dependent
        or unbounded reactions, a bad phase, P0, K data or species data.

    Examples
    --------
    >>> spec = define(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"], lnK=[0.3])
    >>> spec.labels, spec.lnK_data
    (('r1',), {'r1': 0.3})
    >>> define(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + 2 H2"])
    Traceback (most recent call last):
    ...
    eqbatch.errors.AtomBalanceError: reaction 'r1' (CO + H2O = CO2 + 2 H2) does not balance in H: ...
    """
    names = _read_species(species)
    index = {name: k for k, name in enumerate(names)}
    parsed_formulas = _read_formulas(names, index, formulas)
    if isinstance(reactions, str) and reactions.strip().lower() == "auto":
        generated = independent_reactions(names, parsed_formulas)
        if not generated:
            raise SystemDefinitionError(
                "reactions='auto': the species admit no reaction (S = rank of elements)"
            )
        if feed_species is not None:
            generated = oriented_reactions(generated, names, [str(s) for s in feed_species])
        reactions = list(zip(generated_labels(generated), generated))
    elif feed_species is not None:
        raise SystemDefinitionError(
            "feed_species orients generated reactions: it applies to reactions='auto' only "
            "(write given equations in the direction you want them)"
        )
    labels, equations = _read_reactions(reactions)
    phase_of = _read_phases(names, index, phases)
    if not isinstance(check_balance, (bool, np.bool_)):
        raise SystemDefinitionError(f"check_balance must be True or False, got {check_balance!r}")
    pressure = _read_p0(P0)

    stoich = np.zeros((len(labels), len(names)))
    coefficients = []
    for j, (label, equation) in enumerate(zip(labels, equations)):
        coefs = parse_equation(equation, names, label)
        coefficients.append(coefs)
        if check_balance:
            check_atom_balance(coefs, parsed_formulas, label, equation)
        for name, c in coefs.items():
            stoich[j, index[name]] = c
    stoich.setflags(write=False)
    _check_stoichiometry(stoich, phase_of, pressure, labels, equations)

    given_lnk = _read_lnk(labels, lnK)
    data = _read_species_data(index, species_data)
    if thermo is not None:
        if str(thermo).lower() != "chemicals":
            raise SystemDefinitionError(
                f"thermo must be 'chemicals' (the supported data source), got {thermo!r}"
            )
        for name, phase in zip(names, phase_of):
            if name not in data:
                text = (formulas or {}).get(name)
                data[name] = chemicals_data(name, text if isinstance(text, str) else None, phase)
    lnk_data: dict[str, ReactionK] = dict(given_lnk)
    for label, coefs in zip(labels, coefficients):
        if label not in lnk_data and all(name in data for name in coefs):
            # on the system's P0 (each data set keeps its own standard pressure)
            lnk_data[label] = ThermoLnK(coefs, data, P0=pressure, phases=dict(zip(names, phase_of)))
    return SystemSpec(
        species=names,
        labels=labels,
        equations=equations,
        stoich=stoich,
        phases=phase_of,
        P0=pressure,
        formulas=parsed_formulas,
        lnK_data=lnk_data,
        species_data=data,
        given_formulas=dict(formulas or {}),
        check_balance=check_balance,
        given_lnK=given_lnk,
        gas=read_gas_model(names, phase_of, gas_model, critical, kij, formulas),
        liquid_models=read_liquid_models(names, phase_of, liquid_model) or None,
        given_condensable=_read_condensable(names, condensable),
    )


def _read_condensable(names: tuple[str, ...], condensable: Any) -> tuple[str, ...] | None:
    """``condensable=``: species of the system (none: no dry basis)."""
    if condensable is None:
        return None
    if isinstance(condensable, str) or not isinstance(condensable, Iterable):
        raise SystemDefinitionError(
            f"condensable must be a list of species, e.g. ['H2O']; got {condensable!r}"
        )
    given = tuple(str(c) for c in condensable)
    unknown = [c for c in given if c not in names]
    if unknown:
        raise UnknownSpeciesError(f"condensable names no species of the system: {', '.join(unknown)}")
    return given


def _read_species(species: Any) -> tuple[str, ...]:
    if isinstance(species, str) or not isinstance(species, Iterable):
        raise SystemDefinitionError("species must be a list of names, e.g. ['CH4', 'H2O']")
    names = tuple(str(s).strip() for s in species)
    if not names:
        raise SystemDefinitionError("a system needs at least one species")
    seen: set[str] = set()
    for name in names:
        if not name or any(c.isspace() for c in name):
            raise SystemDefinitionError(f"species name {name!r} must be non-empty without spaces")
        if name in seen:
            raise SystemDefinitionError(f"species {name!r} is listed twice")
        seen.add(name)
    return names


def _read_reactions(reactions: Any) -> tuple[tuple[str, ...], tuple[str, ...]]:
    if isinstance(reactions, str):
        reactions = [reactions]
    if not isinstance(reactions, Iterable):
        raise SystemDefinitionError(
            "reactions must be a list of equations, a mapping label -> equation, a list of "
            f"(label, equation) or 'auto'; got {reactions!r}"
        )
    if isinstance(reactions, Mapping):
        pairs = [(str(k), v) for k, v in reactions.items()]
    else:
        pairs = []
        for j, item in enumerate(reactions):
            if isinstance(item, str):
                pairs.append((f"r{j + 1}", item))
            elif isinstance(item, Mapping):
                if "equation" not in item:
                    raise SystemDefinitionError(f"reaction {j + 1} has no 'equation'")
                pairs.append((str(item.get("label", f"r{j + 1}")), item["equation"]))
            elif isinstance(item, Sequence) and len(item) == 2:
                pairs.append((str(item[0]), item[1]))
            else:
                raise SystemDefinitionError(
                    f"reaction {j + 1}: expected an equation string or (label, equation), got {item!r}"
                )
    if not pairs:
        raise SystemDefinitionError("a system needs at least one reaction")
    labels = tuple(p[0] for p in pairs)
    for label in labels:
        if not _LABEL.match(label):
            raise SystemDefinitionError(
                f"reaction label {label!r} must start with a letter or '_' and contain only "
                "letters, digits, '_', '.', '-'"
            )
    dup = {x for x in labels if labels.count(x) > 1}
    if dup:
        raise SystemDefinitionError(f"reaction label(s) {sorted(dup)} used more than once")
    return labels, tuple(p[1] for p in pairs)


def _read_phases(
    species: tuple[str, ...], index: Mapping[str, int], phases: Mapping[str, str] | None
) -> tuple[str, ...]:
    out = ["gas"] * len(species)
    for name, phase in (phases or {}).items():
        if name not in index:
            raise UnknownSpeciesError(
                f"phases: {name!r} is not a species of this system (species are {', '.join(species)})"
            )
        key = phase_key(phase)
        if key is None:
            raise SystemDefinitionError(
                f"phase of {name!r} is {phase!r}; valid phases are {', '.join(PHASES)} "
                "and liquid:<name> (a further liquid solution, name of letters, digits and _)"
            )
        out[index[name]] = key
    solutions = {p for p in out if p.startswith("liquid")}
    if len(solutions) > MAX_SOLUTIONS:
        raise SystemDefinitionError(
            f"{len(solutions)} liquid solution phases ({', '.join(sorted(solutions))}); "
            f"at most {MAX_SOLUTIONS} are supported"
        )
    return tuple(out)


def _read_formulas(
    species: tuple[str, ...], index: Mapping[str, int], formulas: Mapping[str, str | None] | None
) -> dict[str, dict[str, int] | None]:
    parsed = {name: parse_formula(name) for name in species}
    for name, formula in (formulas or {}).items():
        if name not in index:
            raise UnknownSpeciesError(f"formulas: {name!r} is not a species of this system")
        if formula is None:
            parsed[name] = None
            continue
        counts = parse_formula(str(formula))
        if counts is None:
            raise SystemDefinitionError(
                f"formula {formula!r} of {name!r} is not a plain chemical formula such as C2H5OH"
            )
        parsed[name] = counts
    return parsed


def _read_p0(P0: Any) -> float:
    if isinstance(P0, str) or is_quantity(P0):  # with its unit: "1 atm", "101.325 kPa"
        if isinstance(P0, str) and P0.strip().lower().endswith("g"):
            raise SystemDefinitionError(f"P0 is an absolute pressure, not a gauge one: {P0!r}")
        try:
            P0 = pressure_input(P0)
        except CaseInputError as err:
            raise SystemDefinitionError(f"P0: {err}") from None
    try:
        if isinstance(P0, (bool, np.bool_)):
            raise TypeError  # True is not a pressure, though float(True) is 1.0
        pressure = float(P0)
    except (TypeError, ValueError):
        raise SystemDefinitionError(f"P0 must be a pressure in bar, got {P0!r}") from None
    if not (pressure > 0 and math.isfinite(pressure)):
        raise SystemDefinitionError(f"P0 must be a positive pressure in bar, got {P0!r}")
    return pressure


def _format_combination(indices: Sequence[int], coefs: Sequence[float], labels: Sequence[str]) -> str:
    parts = []
    for idx, coef in zip(indices, coefs):
        c = f"{coef:g}"
        parts.append(f"{'' if c == '1' else c + ' '}{labels[idx]}")
    return " + ".join(parts).replace("+ -", "- ")


def _check_stoichiometry(
    stoich: np.ndarray,
    phases: tuple[str, ...],
    P0: float,
    labels: tuple[str, ...],
    equations: tuple[str, ...],
) -> None:
    """The core's check of the reactions: independent, and each consuming something."""
    try:
        compile_system(stoich, phases, P0)
    except _core.StoichiometryError as err:
        kind, reaction, indices, coefs = err.args
        if kind == "dependent":
            combo = _format_combination(indices, coefs, labels)
            raise DependentReactionsError(
                f"reaction {labels[reaction]!r} ({equations[reaction]}) is a linear "
                f"combination of the others: {labels[reaction]} = {combo}. Remove one of "
                "them: dependent reactions add nothing to an equilibrium calculation"
            ) from None
        if kind == "unbounded":
            names = ", ".join(f"{labels[i]!r} ({equations[i]})" for i in indices)
            combo = _format_combination(indices, coefs, labels)
            raise UnboundedReactionsError(
                f"the combination {combo} of reactions {names} consumes nothing, so its extent "
                "is unbounded and no equilibrium exists; every reaction must use up something"
            ) from None
        raise SystemDefinitionError(str(err)) from None


def _read_lnk(labels: tuple[str, ...], lnK: Any) -> dict[str, KData]:
    if lnK is None:
        return {}
    if isinstance(lnK, Mapping):
        items = list(lnK.items())
    else:
        values = list(lnK)
        if len(values) != len(labels):
            raise SystemDefinitionError(f"lnK has {len(values)} entries for {len(labels)} reactions")
        items = list(zip(labels, values))
    out: dict[str, KData] = {}
    for label, value in items:
        if label not in labels:
            raise SystemDefinitionError(
                f"lnK: {label!r} is not a reaction label (labels are {', '.join(labels)})"
            )
        out[label] = as_lnk_data(value, label)
    return out


def _read_species_data(index: Mapping[str, int], data: Mapping[str, Any] | None) -> dict[str, SpeciesData]:
    out: dict[str, SpeciesData] = {}
    for name, value in (data or {}).items():
        if name not in index:
            raise UnknownSpeciesError(f"species_data: {name!r} is not a species of this system")
        if isinstance(value, (NASA7, Shomate, CpPolynomial, MaierKelley, Tabulated)):
            out[name] = value
        elif isinstance(value, Mapping):
            out[name] = species_data_from_table(name, value)
        else:
            raise SystemDefinitionError(
                f"species_data[{name!r}] must be NASA7, Shomate, CpPolynomial, MaierKelley or Tabulated data"
            )
        for lo, hi in out[name].spans:
            if not (0.0 <= lo < hi < math.inf):
                raise SystemDefinitionError(
                    f"species_data.{name}: temperature range {lo:g}-{hi:g} K is empty or inverted "
                    "(each T_min must be below its T_max, and a NASA7 T_mid between them)"
                )
        segments = out[name]._segments()
        if not all(math.isfinite(v) for g in segments for v in (g[2], *g[3:])):
            raise SystemDefinitionError(
                f"species_data.{name}: coefficients and formation data must be finite numbers "
                f"({out[name].source})"
            )
    return out
