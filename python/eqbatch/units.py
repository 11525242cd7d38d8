"""Units of the quantities users give: pressure and temperature columns of
sweeps, converted to the engine's bar (absolute) and kelvin.

The conversion factors come from pint (the ecosystem's units library), one
factor and offset per column, computed once: a sweep pays nothing per row.
Gauge pressures are against a standard atmosphere, 1.01325 bar (exactly, by
definition), not the local barometer: give absolute pressures where that
matters.
"""

from __future__ import annotations

import functools
from typing import Any

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
    q = _registry().Quantity
    unit = TEMPERATURE_COLUMNS[column]
    offset = float(q(0.0, unit).to("kelvin").magnitude)
    factor = float(q(1.0, unit).to("kelvin").magnitude) - offset
    return factor, offset
