"""Equilibrium-constant data of a reaction, and how data used outside their
temperature range are reported.

A reaction's K is either a constant or a function of temperature of the
integrated van 't Hoff form with a heat-capacity polynomial,

    ln K(T) = a + b/T + c ln T + d T + e T**2,

which is what one gets by integrating d ln K / dT = dH(T) / (R T**2) with a
reaction heat capacity dCp = R (c + 2 d T + 6 e T**2) (up to the naming of
constants). Many published correlations take this form with only ``a`` and
``b`` (a constant reaction enthalpy).
"""

from __future__ import annotations

import contextlib
import math
import os
import sys
import threading
import warnings
from collections.abc import Iterator
from dataclasses import dataclass
from types import FrameType
from typing import Any

import numpy as np

from eqbatch.errors import ExtrapolationWarning, SystemDefinitionError

LN10 = math.log(10.0)

_PACKAGE = os.path.dirname(os.path.abspath(__file__)) + os.sep


class _Quiet(threading.local):
    depth = 0


_quiet = _Quiet()
_collectors: list[ExtrapolationLog] = []


@contextlib.contextmanager
def quiet_ranges() -> Iterator[None]:
    """Evaluate data without reporting extrapolation (in this thread): the
    system reports it once per call, per reaction or species data set,
    after evaluating every reaction."""
    _quiet.depth += 1
    try:
        yield
    finally:
        _quiet.depth -= 1


class ExtrapolationLog:
    """Extrapolation reported while collecting (see :func:`collect_extrapolation`),
    per data set and call: cases outside the range, cases evaluated, and the
    extremes of the temperatures outside."""

    def __init__(self) -> None:
        self._calls: dict[tuple, list[tuple[int, int, float, float]]] = {}

    def add(self, key: tuple, call: tuple[int, int, float, float], revises: bool = False) -> None:
        """Record one call; ``revises``: it re-evaluates the cases of the data
        set's previous call (an approach solve takes each reaction's K again at
        its approach temperature), which it replaces rather than adds to."""
        calls = self._calls.setdefault(key, [])
        if revises and calls:
            calls[-1] = call
        else:
            calls.append(call)

    def as_warnings(self) -> list[ExtrapolationWarning]:
        """One warning per data set that was extrapolated, in the order first
        seen, with the counts added up over its calls."""
        out = []
        for (subject, valid, what, unit, tail), calls in self._calls.items():
            count = sum(c[0] for c in calls)
            if count:
                cases = sum(c[1] for c in calls)
                low, high = min(c[2] for c in calls), max(c[3] for c in calls)
                out.append(ExtrapolationWarning(subject, count, cases, low, high, valid, what, unit, tail))
        return out


@contextlib.contextmanager
def collect_extrapolation() -> Iterator[ExtrapolationLog]:
    """Collect extrapolation instead of warning each time, so that a run of
    many solves (a sweep) can say once per data set how many of all its cases
    were outside the range. Where the warning filters in force ignore
    :class:`ExtrapolationWarning` (``simplefilter("ignore")``), nothing is
    collected either."""
    log = ExtrapolationLog()
    _collectors.append(log)
    try:
        yield log
    finally:
        _collectors.remove(log)


def _ignored() -> bool:
    """Whether the first warning filter on the category alone ignores ExtrapolationWarning."""
    for action, message, category, module, lineno in warnings.filters:
        if message is None and module is None and not lineno and issubclass(ExtrapolationWarning, category):
            return action == "ignore"
    return False


def report_extrapolation(
    subject: str,
    T: np.ndarray,
    lo: float,
    hi: float,
    *,
    what: str = "data",
    unit: str = "case",
    tail: str = "",
    revises: bool = False,
) -> None:
    """Warn (:class:`ExtrapolationWarning`) if some of the temperatures ``T``
    (K; shape (N,), or (N, k) where a case is outside if any of its k is) lie
    outside ``lo``-``hi``; NaN is not a temperature and is not counted. The
    warning points at the first caller outside eqbatch. While collecting,
    every call is logged instead (``revises``: see :meth:`ExtrapolationLog.add`)."""
    if _quiet.depth:
        return
    T = np.asarray(T, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        outside_values = (T < lo) | (T > hi)
    outside = outside_values if T.ndim < 2 else outside_values.any(axis=1)
    count = int(np.count_nonzero(outside))
    cases = int(T.shape[0]) if T.ndim else 1
    if not count and not _collectors:
        return
    low, high = (
        (float(T[outside_values].min()), float(T[outside_values].max())) if count else (math.inf, -math.inf)
    )
    if _collectors:
        if not _ignored():
            for log in _collectors:
                log.add((subject, (lo, hi), what, unit, tail), (count, cases, low, high), revises)
        return
    level = 2
    frame: FrameType | None = sys._getframe(1)
    while frame is not None and frame.f_code.co_filename.startswith(_PACKAGE):
        frame, level = frame.f_back, level + 1
    warnings.warn(
        ExtrapolationWarning(subject, count, cases, low, high, (lo, hi), what, unit, tail), stacklevel=level
    )


@dataclass(frozen=True)
class LnKFunction:
    """``ln K(T) = a + b/T + c ln T + d T + e T**2`` (T in kelvin).

    ``T_min`` and ``T_max`` (optional) are the range the correlation was
    fitted over; evaluating outside it warns (:class:`~eqbatch.ExtrapolationWarning`,
    through a system naming the reaction and counting the cases).

    Parameters
    ----------
    a, b, c, d, e : float, default 0
        Coefficients (``b`` in K; with only ``a`` and ``b``, ``-R b`` is the
        reaction enthalpy).
    T_min, T_max : float, optional
        The range the correlation is valid over, K.

    Raises
    ------
    SystemDefinitionError
        ``T_min`` or ``T_max`` not a finite temperature, or ``T_min`` not below
        ``T_max``.

    Examples
    --------
    >>> shift = LnKFunction(a=-4.33, b=4577.8)   # Moe (1962), water-gas shift
    >>> round(float(shift(1000.0)), 4)
    0.2478
    >>> shift(np.array([500.0, 1000.0])).round(3).tolist()
    [4.826, 0.248]
    """

    a: float = 0.0
    b: float = 0.0
    c: float = 0.0
    d: float = 0.0
    e: float = 0.0
    T_min: float | None = None
    T_max: float | None = None

    def __call__(self, T: np.ndarray | float) -> np.ndarray:
        """ln K at ``T``.

        Parameters
        ----------
        T : float or ndarray
            Temperature, K.

        Returns
        -------
        ndarray
            ln K, the shape of ``T``; outside ``T_min``-``T_max`` an
            :class:`~eqbatch.ExtrapolationWarning` says so.

        Examples
        --------
        >>> LnKFunction(a=1.0, b=-1000.0)(np.array([500.0, 1000.0])).tolist()
        [-1.0, 0.0]
        """
        T = np.asarray(T, dtype=np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            value = self.a + self.b / T
            if self.c:
                value = value + self.c * np.log(T)
            if self.d:
                value = value + self.d * T
            if self.e:
                value = value + self.e * T * T
        self._check_range(T)
        return value

    def derivative(self, T: np.ndarray | float) -> np.ndarray:
        """``d ln K / dT = -b/T**2 + c/T + d + 2 e T``, 1/K.

        Parameters
        ----------
        T : float or ndarray
            Temperature, K.

        Returns
        -------
        ndarray
            The derivative at each temperature (never a range warning).

        Examples
        --------
        >>> float(LnKFunction(b=-1000.0).derivative(500.0))
        0.004
        """
        T = np.asarray(T, dtype=np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            return -self.b / (T * T) + self.c / T + self.d + 2.0 * self.e * T

    def __post_init__(self) -> None:
        for name in ("T_min", "T_max"):
            value = getattr(self, name)
            if value is None:
                continue
            try:
                ok = not isinstance(value, bool) and 0.0 <= float(value) < math.inf
            except (TypeError, ValueError):
                ok = False
            if not ok:
                raise SystemDefinitionError(
                    f"ln K(T) correlation: {name} = {value!r} must be a temperature in K "
                    "(finite, not negative)"
                )
        if self.T_min is not None and self.T_max is not None and not self.T_min < self.T_max:
            raise SystemDefinitionError(
                f"ln K(T) correlation: T_min = {self.T_min:g} K must be below T_max = {self.T_max:g} K "
                "(the range the correlation was fitted over)"
            )

    @property
    def valid_range(self) -> tuple[float, float] | None:
        """``(T_min, T_max)`` in K with an open end as infinity, or None without a range.

        Examples
        --------
        >>> LnKFunction(a=1.0, T_min=600.0).valid_range
        (600.0, inf)
        """
        if self.T_min is None and self.T_max is None:
            return None
        return (
            -math.inf if self.T_min is None else self.T_min,
            math.inf if self.T_max is None else self.T_max,
        )

    def _check_range(self, T: np.ndarray) -> None:
        bounds = self.valid_range
        if bounds is not None:
            report_extrapolation(
                f"ln K(T) = {self.describe()}", T, *bounds, what="correlation", unit="temperature"
            )

    def scaled(self, factor: float) -> LnKFunction:
        """The same function times ``factor`` (for log10 K data: ``LN10``).

        Parameters
        ----------
        factor : float

        Returns
        -------
        LnKFunction
            Every coefficient times ``factor``; the same range.

        Examples
        --------
        >>> LnKFunction(a=1.0, b=-100.0).scaled(2.0)
        LnKFunction(a=2.0, b=-200.0, c=0.0, d=0.0, e=0.0, T_min=None, T_max=None)
        """
        return LnKFunction(
            self.a * factor,
            self.b * factor,
            self.c * factor,
            self.d * factor,
            self.e * factor,
            self.T_min,
            self.T_max,
        )

    def describe(self) -> str:
        """The formula with its nonzero coefficients, as warnings name it.

        Returns
        -------
        str

        Examples
        --------
        >>> LnKFunction(a=-4.33, b=4577.8).describe()
        '-4.33 +4577.8/T'
        """
        parts = [f"{self.a:g}"]
        for coef, term in ((self.b, "/T"), (self.c, " ln T"), (self.d, " T"), (self.e, " T^2")):
            if coef:
                parts.append(f"{coef:+g}{term}")
        return " ".join(parts)


def as_lnk_data(value: Any, label: str, kind: str = "lnK") -> float | LnKFunction:
    """Normalise one reaction's K data to ln K: a constant, or a function of T.

    Parameters
    ----------
    value : float, mapping or LnKFunction
        A number (``kind`` says whether it is ``lnK``, ``K`` or ``log10K``), a
        mapping of the coefficients ``a``..``e`` with optional ``T_min`` and
        ``T_max`` (a function of T; not for ``K``), or an :class:`LnKFunction`.
    label : str
        The reaction (for messages).
    kind : {"lnK", "K", "log10K"}
        What ``value`` is.

    Returns
    -------
    float or LnKFunction
        ln K.

    Raises
    ------
    SystemDefinitionError
        A value that is not a number (``true`` is not 1), a K not positive, an
        unknown coefficient, or an empty or inverted range.

    Examples
    --------
    >>> as_lnk_data(2.0, "r1", "log10K") == 2 * LN10, as_lnk_data(1.0, "r1", "K")
    (True, 0.0)
    >>> as_lnk_data({"a": 1.0, "b": -500.0}, "r1")
    LnKFunction(a=1.0, b=-500.0, c=0.0, d=0.0, e=0.0, T_min=None, T_max=None)
    """
    factor = {"lnK": 1.0, "log10K": LN10, "K": None}[kind]
    if isinstance(value, LnKFunction):
        return value if factor in (None, 1.0) else value.scaled(factor)
    if isinstance(value, dict):
        if factor is None:
            raise SystemDefinitionError(
                f"reaction {label!r}: K as a function of T must be given as lnK or log10K"
            )
        unknown = set(value) - {"a", "b", "c", "d", "e", "T_min", "T_max"}
        if unknown:
            raise SystemDefinitionError(
                f"reaction {label!r}: unknown {kind} coefficient(s) {sorted(unknown)}; "
                "valid are a, b, c, d, e (ln K = a + b/T + c ln T + d T + e T^2), T_min, T_max"
            )
        try:
            if any(isinstance(v, bool) for v in value.values()):
                raise TypeError
            fn = LnKFunction(**{k: float(v) for k, v in value.items()})
        except SystemDefinitionError as err:
            raise SystemDefinitionError(f"reaction {label!r}: {kind}: {err}") from None
        except (TypeError, ValueError):
            raise SystemDefinitionError(
                f"reaction {label!r}: {kind} coefficients must be numbers, got {value!r}"
            ) from None
        return fn.scaled(factor)
    try:
        if isinstance(value, bool):
            raise TypeError  # TOML's true is not 1.0
        number = float(value)
    except (TypeError, ValueError):
        raise SystemDefinitionError(
            f"reaction {label!r}: {kind} must be a number or a table of coefficients, got {value!r}"
        ) from None
    if kind == "K":
        if not number > 0:
            raise SystemDefinitionError(f"reaction {label!r}: K must be positive, got {number}")
        return math.log(number)
    if not math.isfinite(number):
        raise SystemDefinitionError(f"reaction {label!r}: {kind} must be finite, got {number}")
    assert factor is not None  # only K has none, handled above
    return number * factor
