"""Units of the quantities users give: pressure and temperature columns of
sweeps, converted to the engine's bar (absolute) and kelvin.

The conversion factors come from pint (the ecosystem's units library), one
factor and offset per column, computed once: a sweep pays nothing per row,
and a file in bar and kelvin does not load pint at all (its registry takes
about a second to build).
Gauge pressures are against a standard atmosphere, 1.01325 bar (exactly, by
definition), not the local barometer: give absolute pressures where that
matters.
"""

from __future__ import annotations

import functools
import re
from typing import Any

from eqbatch.errors import CaseInputError

#: A standard atmosphere in bar: the reference of gauge pressures.
ATMOSPHERE_BAR = 1.01325

#: Pressure columns a sweep takes (at most one per file): unit, and whether gauge.
PRESSURE_COLUMNS = {
    "P_bar": ("bar", False),
    "P_barg": ("bar", True),
    "P_kPa": ("kPa", False),
    "P_MPa": ("MPa", False),
    "P_atm": ("atm", False),
    "P_psia": ("psi", False),
    "P_psig": ("psi", True),
}

#: Temperature columns a sweep takes (at most one per file).
TEMPERATURE_COLUMNS = {"T_K": "kelvin", "T_C": "degC"}


@functools.lru_cache(maxsize=1)
def _registry() -> Any:
    import pint

    return pint.UnitRegistry()


def pressure_to_bar(column: str) -> tuple[float, float]:
    """``(factor, offset)`` with ``bar absolute = value * factor + offset``
    for a pressure column of :data:`PRESSURE_COLUMNS`.

    Examples
    --------
    >>> pressure_to_bar("P_psig")
    (0.06894757293168..., 1.01325)
    """
    unit, gauge = PRESSURE_COLUMNS[column]
    if column == "P_bar":
        return 1.0, 0.0  # the engine's own unit: no units library to load
    factor = float(_registry().Quantity(1.0, unit).to("bar").magnitude)
    return factor, ATMOSPHERE_BAR if gauge else 0.0


def temperature_to_kelvin(column: str) -> tuple[float, float]:
    """``(factor, offset)`` with ``K = value * factor + offset`` for a
    temperature column of :data:`TEMPERATURE_COLUMNS`.

    Examples
    --------
    >>> temperature_to_kelvin("T_C")
    (1.0, 273.15)
    """
    if column == "T_K":
        return 1.0, 0.0  # the engine's own unit: no units library to load
    q = _registry().Quantity
    unit = TEMPERATURE_COLUMNS[column]
    offset = float(q(0.0, unit).to("kelvin").magnitude)
    factor = float(q(1.0, unit).to("kelvin").magnitude) - offset
    return factor, offset


#: Units a command-line pressure may carry, and whether gauge.
_PRESSURE_UNITS = {
    "bar": ("bar", False),
    "bara": ("bar", False),
    "barg": ("bar", True),
    "kpa": ("kPa", False),
    "mpa": ("MPa", False),
    "atm": ("atm", False),
    "psi": ("psi", False),
    "psia": ("psi", False),
    "psig": ("psi", True),
}
#: Units a command-line temperature may carry.
_TEMPERATURE_UNITS = {"k": "kelvin", "c": "degC", "degc": "degC"}


def _split(text: str) -> tuple[float, str]:
    match = re.fullmatch(r"\s*([-+]?[0-9.]+(?:[eE][-+]?[0-9]+)?)\s*([A-Za-z]*)\s*", text)
    if not match:
        raise ValueError(f"{text!r} is not a number with an optional unit")
    return float(match.group(1)), match.group(2).lower()


def parse_pressure(text: str) -> float:
    """A pressure as typed (``30``, ``30bar``, ``29barg``, ``3MPa``,
    ``435psig``) in bar absolute; a bare number is bar.

    Examples
    --------
    >>> parse_pressure("29barg"), parse_pressure("3 MPa"), parse_pressure("12")
    (30.01325, 30.0, 12.0)
    """
    value, unit = _split(text)
    if not unit:
        return value
    if unit not in _PRESSURE_UNITS:
        raise ValueError(
            f"unknown pressure unit {unit!r} in {text!r}; use one of {', '.join(_PRESSURE_UNITS)}"
        )
    name, gauge = _PRESSURE_UNITS[unit]
    bar = float(_registry().Quantity(value, name).to("bar").magnitude)
    return bar + (ATMOSPHERE_BAR if gauge else 0.0)


def parse_temperature(text: str) -> float:
    """A temperature as typed (``1143``, ``1143K``, ``870C``) in kelvin; a
    bare number is kelvin.

    Examples
    --------
    >>> parse_temperature("870C"), parse_temperature("900")
    (1143.15, 900.0)
    """
    value, unit = _split(text)
    if not unit:
        return value
    if unit not in _TEMPERATURE_UNITS:
        raise ValueError(f"unknown temperature unit {unit!r} in {text!r}; use K or C")
    return float(_registry().Quantity(value, _TEMPERATURE_UNITS[unit]).to("kelvin").magnitude)


def is_quantity(value: Any) -> bool:
    """Whether ``value`` is a pint quantity (checked without importing pint)."""
    return hasattr(value, "magnitude") and hasattr(value, "units") and hasattr(value, "to")


def temperature_input(value: Any) -> Any:
    """A temperature as the engine takes it, kelvin: a string as typed
    (:func:`parse_temperature`: ``"870C"``, ``"1143 K"``) or a pint quantity
    (``Q_(870, "degC")``, arrays too) converted; anything else as given.

    Examples
    --------
    >>> temperature_input("870C"), temperature_input(900.0)
    (1143.15, 900.0)
    """
    if isinstance(value, str):
        try:
            return parse_temperature(value)
        except ValueError as err:
            raise CaseInputError(f"T: {err}") from None
    if is_quantity(value):
        return _converted(value, "kelvin", "T")
    return value


def pressure_input(value: Any) -> Any:
    """A pressure as the engine takes it, bar absolute: a string as typed
    (:func:`parse_pressure`: ``"29 barg"``, ``"3 MPa"``, ``"435 psig"``) or a
    pint quantity (absolute; pint has no gauge pressures) converted;
    anything else as given.

    Examples
    --------
    >>> pressure_input("29barg"), pressure_input(12.0)
    (30.01325, 12.0)
    """
    if isinstance(value, str):
        try:
            return parse_pressure(value)
        except ValueError as err:
            raise CaseInputError(f"P: {err}") from None
    if is_quantity(value):
        return _converted(value, "bar", "P")
    return value


def _converted(value: Any, unit: str, name: str) -> Any:
    import pint

    try:
        return value.to(unit).magnitude
    except pint.errors.DimensionalityError:
        raise CaseInputError(f"{name} = {value}: not convertible to {unit}") from None


def amounts_in_mol(amounts: dict[str, Any], molar_mass: Any) -> tuple[dict[str, Any], bool]:
    """A feed given per species with units, in mol: amounts (``"2 kmol"``,
    ``Q_(2, "kmol")``) to mol, molar flows (``"100 kmol/h"``) to mol/h, and
    masses or mass flows (``"1.6 t/h"``, ``"16 kg"``) through the species'
    molar mass (``molar_mass(species)``, kg/mol); and whether it is a flow
    basis (results per hour, amounts in mol/h). Amounts and flows cannot be
    mixed. Values without a unit are mol (or mol/h beside flows).

    Examples
    --------
    >>> mol, per_hour = amounts_in_mol({"CH4": "100 kmol/h", "H2O": "5.4 t/h"}, {"H2O": 0.018015}.get)
    >>> {name: round(v, 1) for name, v in mol.items()}, per_hour  # mol/h
    ({'CH4': 100000.0, 'H2O': 299750.2}, True)
    """
    ureg = _registry()
    out: dict[str, Any] = {}
    kinds = set()
    for name, value in amounts.items():
        if not (isinstance(value, str) or is_quantity(value)):
            out[name] = value
            continue
        try:
            # (a caller's quantity may come from another registry: rebuilt in this one)
            q = (
                ureg.Quantity(value)
                if isinstance(value, str)
                else ureg.Quantity(value.magnitude, str(value.units))
            )
        except Exception:  # pint raises several types for text it cannot read
            raise CaseInputError(f"feed[{name!r}] = {value!r}: not an amount with a unit") from None
        flow = q.check("[substance]/[time]") or q.check("[mass]/[time]")
        if q.check("[mass]") or q.check("[mass]/[time]"):
            mass = molar_mass(name)
            if mass is None:
                raise CaseInputError(f"feed[{name!r}] = {value!r}: a mass needs a formula (molar mass)")
            q = q / ureg.Quantity(mass, "kg/mol")
        target = "mol/hour" if flow else "mol"
        try:
            out[name] = q.to(target).magnitude
        except Exception:  # pint's DimensionalityError
            raise CaseInputError(
                f"feed[{name!r}] = {value!r}: an amount (mol, kmol), a flow (kmol/h), a mass (kg) "
                "or a mass flow (kg/h) is needed"
            ) from None
        kinds.add(flow)
    if len(kinds) > 1:
        raise CaseInputError("feed: give every species as an amount or every one as a flow, not both")
    return out, kinds == {True}
