"""Row filters for case tables and results: ``COLUMN<op>VALUE`` with ``op``
one of ``=``, ``!=``, ``<``, ``<=``, ``>``, ``>=`` (``--where T_K>=900``,
``--where status_name=converged``). Several filters must all hold.

A value that reads as a number compares as a number, ``true``/``false`` as
a boolean, anything else as text, without regard to case (status names,
labels).
"""

from __future__ import annotations

import operator
from collections.abc import Callable, Sequence
from typing import Any, NamedTuple

import numpy as np

from eqbatch.errors import CaseInputError

#: Operators, longest first (so ``<=`` is not read as ``<``).
_OPERATORS: dict[str, Callable[[Any, Any], Any]] = {
    "<=": operator.le,
    ">=": operator.ge,
    "!=": operator.ne,
    "=": operator.eq,
    "<": operator.lt,
    ">": operator.gt,
}


class Condition(NamedTuple):
    """One filter: ``column``, ``op`` (as written) and ``value``."""

    column: str
    op: str
    value: float | bool | str

    def __str__(self) -> str:
        v = self.value
        shown = str(v).lower() if isinstance(v, bool) else (f"{v:g}" if isinstance(v, float) else v)
        return f"{self.column}{self.op}{shown}"


def parse_where(texts: Sequence[str] | None) -> list[Condition]:
    """The filters ``texts`` (each ``COLUMN<op>VALUE``), checked.

    Examples
    --------
    >>> [str(c) for c in parse_where(["T_K>=900", "status_name=converged", "adiabatic=true"])]
    ['T_K>=900', 'status_name=converged', 'adiabatic=true']
    >>> parse_where(["P_bar<=20"])[0].value
    20.0
    """
    out = []
    for text in texts or ():
        for op in _OPERATORS:
            column, found, value = str(text).partition(op)
            if found:
                break
        else:
            raise CaseInputError(f"--where {text!r}: write COLUMN<op>VALUE with op one of = != < <= > >=")
        column, value = column.strip(), value.strip()
        if not column or not value:
            raise CaseInputError(f"--where {text!r}: a column and a value are both needed")
        parsed: float | bool | str
        if value.lower() in ("true", "false"):
            parsed = value.lower() == "true"
        else:
            try:
                parsed = float(value)
            except ValueError:
                parsed = value
        if isinstance(parsed, (str, bool)) and op not in ("=", "!="):
            raise CaseInputError(f"--where {text!r}: {op} compares numbers; {value!r} is not one")
        out.append(Condition(column, op, parsed))
    return out


def where_mask(conditions: Sequence[Condition], column: Callable[[str], np.ndarray], rows: int) -> np.ndarray:
    """The rows (of ``rows``) where every condition holds; ``column(name)``
    gives a column's values (numbers, booleans or text)."""
    mask = np.ones(rows, dtype=bool)
    for c in conditions:
        values = np.asarray(column(c.column))
        value = c.value
        if isinstance(value, str):  # text compares without case: status_name=converged
            values, value = np.char.lower(values.astype(str)), value.lower()
        mask &= np.asarray(_OPERATORS[c.op](values, value), dtype=bool)
    return mask


def columns_of(conditions: Sequence[Condition]) -> list[str]:
    """The columns the conditions read, each once."""
    return list(dict.fromkeys(c.column for c in conditions))
