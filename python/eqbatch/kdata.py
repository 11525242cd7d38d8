"""Equilibrium-constant data attached to reactions.

A reaction's K is either a constant or a function of temperature of the
integrated van 't Hoff form with a heat-capacity polynomial,

    ln K(T) = a + b/T + c ln T + d T + e T**2,

which is what one gets by integrating d ln K / dT = dH(T) / (R T**2) with a
reaction heat capacity dCp = R (c + 2 d T + 6 e T**2) (up to the naming of
constants). Many published correlations take this form with only ``a`` and
``b`` (a constant reaction enthalpy).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

LN10 = math.log(10.0)


@dataclass(frozen=True)
class LnKFunction:
    """``ln K(T) = a + b/T + c ln T + d T + e T**2`` (T in kelvin).

    ``T_min`` and ``T_max`` (optional) are the range the correlation was
    fitted over; evaluating outside it warns once per function.

    Examples
    --------
    >>> shift = LnKFunction(a=-4.33, b=4577.8)   # Moe (1962), water-gas shift
    >>> round(float(shift(1000.0)), 4)
    0.2478
    """

    a: float = 0.0
    b: float = 0.0
    c: float = 0.0
    d: float = 0.0
    e: float = 0.0
    T_min: float | None = None
    T_max: float | None = None

    def __call__(self, T: np.ndarray | float) -> np.ndarray:
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
        """``d ln K / dT = -b/T**2 + c/T + d + 2 e T``."""
        T = np.asarray(T, dtype=np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            return -self.b / (T * T) + self.c / T + self.d + 2.0 * self.e * T

    def _check_range(self, T: np.ndarray) -> None:
        if self.T_min is None and self.T_max is None:
            return
        lo = -np.inf if self.T_min is None else self.T_min
        hi = np.inf if self.T_max is None else self.T_max
        finite = T[np.isfinite(T)]
        if finite.size and (finite.min() < lo or finite.max() > hi) and not _warned.get(id(self)):
            _warned[id(self)] = True
            warnings.warn(
                f"temperature outside the fitted range {lo:g}-{hi:g} K of ln K(T) = "
                f"{self.describe()}; the values are extrapolated",
                stacklevel=3,
            )

    def scaled(self, factor: float) -> LnKFunction:
        """The same function times ``factor`` (for log10 K data: ``LN10``)."""
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
        parts = [f"{self.a:g}"]
        for coef, term in ((self.b, "/T"), (self.c, " ln T"), (self.d, " T"), (self.e, " T^2")):
            if coef:
                parts.append(f"{coef:+g}{term}")
        return " ".join(parts)


_warned: dict[int, bool] = {}


def as_lnk_data(value: object, label: str, kind: str = "lnK") -> float | LnKFunction:
    """Normalise one reaction's K data: a number (``kind`` says whether it is
    ``lnK``, ``K`` or ``log10K``), a mapping of the coefficients ``a``..``e``
    (a function of T), or an :class:`LnKFunction`."""
    from eqbatch.errors import SystemDefinitionError

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
            fn = LnKFunction(**{k: float(v) for k, v in value.items()})
        except (TypeError, ValueError):
            raise SystemDefinitionError(
                f"reaction {label!r}: {kind} coefficients must be numbers, got {value!r}"
            ) from None
        return fn.scaled(factor)
    try:
        number = float(value)  # type: ignore[arg-type]
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
    return number * factor
