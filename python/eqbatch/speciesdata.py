"""Standard-state data of a species, and the ln K of a reaction they imply.

Three open, published forms of standard-state data are read, each giving the
molar heat capacity, the enthalpy on the formation scale (``H(298.15 K) =
dfH``, so elements in their reference state have zero) and the absolute
entropy, all at the standard pressure of the data, ``P_ref`` (1 bar, the
standard of current tables, unless the data say otherwise):

* :class:`NASA7`: the 7-coefficient two-range polynomials of the NASA Glenn
  database (B. J. McBride, M. J. Zehe and S. Gordon, NASA TP-2002-211556);
* :class:`Shomate`: the Shomate equation as tabulated in the NIST Chemistry
  WebBook, one coefficient set per temperature range;
* :class:`CpPolynomial`: ``Cp/R = a0 + a1 T + ... + a4 T^4`` with the formation
  enthalpy and entropy at 298.15 K, as tabulated in B. E. Poling, J. M.
  Prausnitz and J. P. O'Connell, *The Properties of Gases and Liquids*.

A reaction's ``ln K(T) = -dG(T) / (R T)`` with ``dG = sum nu_i (h_i - T s_i)``
(:class:`ThermoLnK`); its temperature derivative is ``dH / (R T^2)`` (van 't
Hoff). The constant is put on the system's standard pressure ``P0``: a gas
species' standard Gibbs energy at ``P0`` is the data's plus ``R T ln(P0 /
P_ref)``, so ``ln K(P0) = ln K(data) - sum over gas species of nu_i ln(P0 /
P_ref_i)`` (liquid species' activities are mole fractions, with no pressure
term).
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np

from eqbatch.errors import SystemDefinitionError
from eqbatch.kdata import report_extrapolation

#: Molar gas constant, J/(mol K) (CODATA 2018).
R = 8.314462618
#: Reference temperature of formation data, K.
T_REF = 298.15

#: One temperature range of species data as the core takes it (``_core.ThermoTable``):
#: ``(upto, closed, scale, a0, a1, a2, a3, a4, e, h, s)`` with ``tau = T / scale``,
#: ``Cp/R = a0 + a1 tau + ... + a4 tau^4 + e / tau^2`` below ``upto`` (or at it when
#: ``closed``), ``H/R`` and ``S/R`` its integrals plus ``h`` and ``s``.
Segment = tuple[float, bool, float, float, float, float, float, float, float, float, float]


def _range_warning(T: np.ndarray, lo: float, hi: float, what: str) -> None:
    """Species data used on their own (not through a system, which names the
    species and counts cases once per call): an ExtrapolationWarning naming
    the data's source and how many of the temperatures were outside."""
    report_extrapolation(what, T, float(lo), float(hi), unit="temperature")


def _check_p_ref(data: Any) -> None:
    try:
        ok = float(data.P_ref) > 0 and math.isfinite(float(data.P_ref))
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise SystemDefinitionError(
            f"{type(data).__name__} P_ref (the data's standard pressure) must be a positive pressure in bar, "
            f"got {data.P_ref!r}"
        )


@dataclass(frozen=True)
class NASA7:
    """NASA 7-coefficient polynomials of one species.

    ``low`` holds for ``T_min <= T < T_mid`` and ``high`` for ``T_mid <= T <=
    T_max``, each ``(a1, ..., a7)`` with
    ``Cp/R = a1 + a2 T + a3 T^2 + a4 T^3 + a5 T^4``,
    ``H/(R T) = a1 + a2 T/2 + a3 T^2/3 + a4 T^3/4 + a5 T^4/5 + a6/T``,
    ``S/R = a1 ln T + a2 T + a3 T^2/2 + a4 T^3/3 + a5 T^4/4 + a7``
    (B. J. McBride, M. J. Zehe and S. Gordon, NASA TP-2002-211556).

    Parameters
    ----------
    low, high : tuple of 7 floats
        Coefficients below and above ``T_mid``.
    T_mid, T_min, T_max : float
        The common temperature and the range of the data, K.
    source : str
        Where the data come from (shown by ``eqbatch thermo``).
    P_ref : float, default 1.0
        Standard pressure of the data, bar (1 bar for the NASA Glenn database).

    Raises
    ------
    SystemDefinitionError
        Not 7 coefficients per range, or ``P_ref`` not a positive pressure.

    Examples
    --------
    Argon (McBride, Zehe and Gordon): ``Cp = 5/2 R`` and, as an element in
    its reference state, zero enthalpy at 298.15 K.

    >>> ar = NASA7(low=(2.5, 0, 0, 0, 0, -745.375, 4.37967), high=(2.5, 0, 0, 0, 0, -745.375, 4.37967))
    >>> round(float(ar.cp(300.0)), 4), abs(float(ar.h(298.15))) < 1e-9
    (20.7862, True)
    """

    low: tuple[float, ...]
    high: tuple[float, ...]
    T_mid: float = 1000.0
    T_min: float = 200.0
    T_max: float = 3500.0
    source: str = "NASA 7-coefficient polynomials (given)"
    #: Standard pressure of the data, bar (1 bar for the NASA Glenn database).
    P_ref: float = 1.0

    def __post_init__(self) -> None:
        if len(self.low) != 7 or len(self.high) != 7:
            raise SystemDefinitionError("NASA7 needs 7 coefficients for each of the low and high ranges")
        _check_p_ref(self)

    def _coef(self, T: np.ndarray) -> np.ndarray:
        _range_warning(T, self.T_min, self.T_max, self.source)
        low, high = np.asarray(self.low), np.asarray(self.high)
        return np.where((T < self.T_mid)[..., None], low, high)

    def cp(self, T: Any) -> np.ndarray:
        """Molar heat capacity at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/(mol K), the shape of ``T``.

        Examples
        --------
        >>> ar = NASA7(low=(2.5, 0, 0, 0, 0, -745.375, 4.37967), high=(2.5, 0, 0, 0, 0, -745.375, 4.37967))
        >>> round(float(ar.cp(1500.0)), 4)
        20.7862
        """
        T = np.asarray(T, dtype=float)
        a = self._coef(T)
        return R * (a[..., 0] + T * (a[..., 1] + T * (a[..., 2] + T * (a[..., 3] + T * a[..., 4]))))

    def h(self, T: Any) -> np.ndarray:
        """Molar enthalpy on the formation scale at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/mol, the shape of ``T``.

        Examples
        --------
        >>> ar = NASA7(low=(2.5, 0, 0, 0, 0, -745.375, 4.37967), high=(2.5, 0, 0, 0, 0, -745.375, 4.37967))
        >>> round(float(ar.h(1298.15)), 1)   # 5/2 R times 1000 K
        20786.2
        """
        T = np.asarray(T, dtype=float)
        a = self._coef(T)
        return (
            R
            * T
            * (
                a[..., 0]
                + T * (a[..., 1] / 2 + T * (a[..., 2] / 3 + T * (a[..., 3] / 4 + T * a[..., 4] / 5)))
                + a[..., 5] / T
            )
        )

    def s(self, T: Any) -> np.ndarray:
        """Molar entropy at ``T`` and ``P_ref``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/(mol K), the shape of ``T``.

        Examples
        --------
        >>> ar = NASA7(low=(2.5, 0, 0, 0, 0, -745.375, 4.37967), high=(2.5, 0, 0, 0, 0, -745.375, 4.37967))
        >>> round(float(ar.s(298.15)), 2)   # NASA Glenn: 154.85 J/(mol K)
        154.85
        """
        T = np.asarray(T, dtype=float)
        a = self._coef(T)
        return R * (
            a[..., 0] * np.log(T)
            + T * (a[..., 1] + T * (a[..., 2] / 2 + T * (a[..., 3] / 3 + T * a[..., 4] / 4)))
            + a[..., 6]
        )

    @property
    def range(self) -> tuple[float, float]:
        """``(T_min, T_max)``: where the data are valid, K.

        Examples
        --------
        >>> ar = NASA7(low=(2.5, 0, 0, 0, 0, -745.375, 4.37967), high=(2.5, 0, 0, 0, 0, -745.375, 4.37967))
        >>> ar.range
        (200.0, 3500.0)
        """
        return (self.T_min, self.T_max)

    @property
    def spans(self) -> list[tuple[float, float]]:
        """Every temperature range the data define, K: each must be non-empty.

        Examples
        --------
        >>> ar = NASA7(low=(2.5, 0, 0, 0, 0, -745.375, 4.37967), high=(2.5, 0, 0, 0, 0, -745.375, 4.37967))
        >>> ar.spans
        [(200.0, 3500.0), (200.0, 1000.0), (1000.0, 3500.0)]
        """
        return [self.range, (self.T_min, self.T_mid), (self.T_mid, self.T_max)]

    def _segments(self) -> list[Segment]:
        """The data as the core's segments (see :data:`Segment`)."""
        low, high = self.low, self.high
        return [
            (self.T_mid, False, 1.0, low[0], low[1], low[2], low[3], low[4], 0.0, low[5], low[6]),
            (math.inf, False, 1.0, high[0], high[1], high[2], high[3], high[4], 0.0, high[5], high[6]),
        ]


@dataclass(frozen=True)
class Shomate:
    """Shomate coefficients of one species, one set per temperature range.

    Each range is ``(T_min, T_max, A, B, C, D, E, F, G, H)``; with ``t = T / 1000``,
    ``Cp = A + B t + C t^2 + D t^3 + E / t^2`` (J/mol/K),
    ``H - H(298.15) = A t + B t^2/2 + C t^3/3 + D t^4/4 - E/t + F - H`` (kJ/mol),
    ``S = A ln t + B t + C t^2/2 + D t^3/3 - E/(2 t^2) + G`` (J/mol/K); the
    coefficient ``H`` is the formation enthalpy at 298.15 K (the form of the
    NIST Chemistry WebBook).

    Parameters
    ----------
    ranges : tuple of 10-tuples
        One coefficient set per temperature range.
    source : str
        Where the data come from.
    P_ref : float, default 1.0
        Standard pressure of the data, bar (1 bar in the NIST Chemistry WebBook).

    Raises
    ------
    SystemDefinitionError
        No range, a range without 10 values, or a bad ``P_ref``.

    Examples
    --------
    Water vapour, NIST Chemistry WebBook coefficients (500-1700 K):

    >>> water = Shomate(((500, 1700, 30.092, 6.832514, 6.793435, -2.53448, 0.082139,
    ...                   -250.881, 223.3967, -241.8264),))
    >>> round(float(water.cp(1000.0)), 2), round(float(water.h(1000.0)) / 1000, 2)
    (41.27, -215.82)
    """

    ranges: tuple[tuple[float, ...], ...]
    source: str = "Shomate coefficients (given)"
    #: Standard pressure of the data, bar (1 bar in the NIST Chemistry WebBook).
    P_ref: float = 1.0

    def __post_init__(self) -> None:
        if not self.ranges or any(len(r) != 10 for r in self.ranges):
            raise SystemDefinitionError("Shomate needs (T_min, T_max, A, B, C, D, E, F, G, H) per range")
        _check_p_ref(self)

    def _coef(self, T: np.ndarray) -> np.ndarray:
        table = np.array(sorted(self.ranges))
        _range_warning(T, table[0, 0], table[-1, 1], self.source)
        k = np.clip(np.searchsorted(table[:, 1], T, side="left"), 0, len(table) - 1)
        return table[k, 2:]

    def cp(self, T: Any) -> np.ndarray:
        """Molar heat capacity at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/(mol K), the shape of ``T``.

        Examples
        --------
        >>> water = Shomate(((500, 1700, 30.092, 6.832514, 6.793435, -2.53448, 0.082139,
        ...                   -250.881, 223.3967, -241.8264),))
        >>> round(float(water.cp(500.0)), 2)
        35.22
        """
        T = np.asarray(T, dtype=float)
        c = self._coef(T)
        t = T / 1000.0
        return c[..., 0] + t * (c[..., 1] + t * (c[..., 2] + t * c[..., 3])) + c[..., 4] / (t * t)

    def h(self, T: Any) -> np.ndarray:
        """Molar enthalpy on the formation scale at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/mol, the shape of ``T``.

        Examples
        --------
        >>> water = Shomate(((500, 1700, 30.092, 6.832514, 6.793435, -2.53448, 0.082139,
        ...                   -250.881, 223.3967, -241.8264),))
        >>> round(float(water.h(1500.0) - water.h(1000.0)) / 1000, 2)   # NIST WebBook: 48.15 - 26.00
        22.15
        """
        T = np.asarray(T, dtype=float)
        c = self._coef(T)
        t = T / 1000.0
        rel = (
            c[..., 0] * t
            + c[..., 1] * t**2 / 2
            + c[..., 2] * t**3 / 3
            + c[..., 3] * t**4 / 4
            - c[..., 4] / t
            + c[..., 5]
            - c[..., 7]
        )
        return 1000.0 * (c[..., 7] + rel)

    def s(self, T: Any) -> np.ndarray:
        """Molar entropy at ``T`` and ``P_ref``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/(mol K), the shape of ``T``.

        Examples
        --------
        >>> water = Shomate(((500, 1700, 30.092, 6.832514, 6.793435, -2.53448, 0.082139,
        ...                   -250.881, 223.3967, -241.8264),))
        >>> round(float(water.s(1000.0)), 2)   # NIST WebBook: 232.74 J/(mol K)
        232.74
        """
        T = np.asarray(T, dtype=float)
        c = self._coef(T)
        t = T / 1000.0
        return (
            c[..., 0] * np.log(t)
            + c[..., 1] * t
            + c[..., 2] * t**2 / 2
            + c[..., 3] * t**3 / 3
            - c[..., 4] / (2 * t * t)
            + c[..., 6]
        )

    @property
    def range(self) -> tuple[float, float]:
        """``(T_min, T_max)`` over all ranges: where the data are valid, K.

        Examples
        --------
        >>> water = Shomate(((500, 1700, 30.092, 6.832514, 6.793435, -2.53448, 0.082139,
        ...                   -250.881, 223.3967, -241.8264),))
        >>> water.range
        (500.0, 1700.0)
        """
        table = np.array(sorted(self.ranges))
        return (float(table[0, 0]), float(table[-1, 1]))

    @property
    def spans(self) -> list[tuple[float, float]]:
        """Every temperature range the data define, K: each must be non-empty.

        Examples
        --------
        >>> water = Shomate(((500, 1700, 30.092, 6.832514, 6.793435, -2.53448, 0.082139,
        ...                   -250.881, 223.3967, -241.8264),))
        >>> water.spans
        [(500.0, 1700.0), (500, 1700)]
        """
        return [self.range] + [(r[0], r[1]) for r in self.ranges]

    def _segments(self) -> list[Segment]:
        """The data as the core's segments (see :data:`Segment`): a range
        applies up to and at its ``T_max``, as :meth:`cp` chooses it."""
        out: list[Segment] = []
        for _, t_max, a, b, c, d, e, f, g, _h in sorted(self.ranges):
            out.append(
                (float(t_max), True, 1000.0, a / R, b / R, c / R, d / R, 0.0, e / R, 1000.0 * f / R, g / R)
            )
        return out


@dataclass(frozen=True)
class CpPolynomial:
    """A heat-capacity polynomial with formation enthalpy and entropy.

    ``Cp/R = a0 + a1 T + a2 T^2 + a3 T^3 + a4 T^4`` with the formation
    enthalpy ``dHf`` (kJ/mol) and entropy ``S298`` (J/mol/K) at 298.15 K (the
    form of Poling, Prausnitz and O'Connell, *The Properties of Gases and
    Liquids*).

    Parameters
    ----------
    a : tuple of up to 5 floats
        ``a0`` to ``a4`` (missing ones are zero).
    dHf : float
        Formation enthalpy at 298.15 K, kJ/mol.
    S298 : float
        Entropy at 298.15 K and ``P_ref``, J/(mol K).
    T_min, T_max : float
        Where the polynomial is valid, K.
    source : str
        Where the data come from.
    P_ref : float, default 1.0
        Standard pressure of ``S298``, bar.

    Raises
    ------
    SystemDefinitionError
        ``P_ref`` is not a positive pressure.

    Examples
    --------
    A diatomic gas with ``Cp = 7/2 R``: ``S(T) = S298 + Cp ln(T / 298.15)``.

    >>> co = CpPolynomial(a=(3.5,), dHf=-110.53, S298=197.66)
    >>> round(float(co.h(298.15)) / 1000, 2), round(float(co.s(398.15)), 2)
    (-110.53, 206.08)
    """

    a: tuple[float, ...]
    dHf: float
    S298: float
    T_min: float = 200.0
    T_max: float = 1500.0
    source: str = "Cp polynomial (given)"
    #: Standard pressure of ``S298``, bar.
    P_ref: float = 1.0

    def __post_init__(self) -> None:
        _check_p_ref(self)

    def _a(self, T: np.ndarray) -> np.ndarray:
        _range_warning(T, self.T_min, self.T_max, self.source)
        a = np.zeros(5)
        a[: len(self.a)] = self.a
        return a

    def cp(self, T: Any) -> np.ndarray:
        """Molar heat capacity at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/(mol K), the shape of ``T``.

        Examples
        --------
        >>> co = CpPolynomial(a=(3.5,), dHf=-110.53, S298=197.66)
        >>> round(float(co.cp(500.0)), 4)   # 7/2 R
        29.1006
        """
        T = np.asarray(T, dtype=float)
        a = self._a(T)
        return R * (a[0] + T * (a[1] + T * (a[2] + T * (a[3] + T * a[4]))))

    def h(self, T: Any) -> np.ndarray:
        """Molar enthalpy on the formation scale at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/mol, the shape of ``T``.

        Examples
        --------
        >>> co = CpPolynomial(a=(3.5,), dHf=-110.53, S298=197.66)
        >>> round(float(co.h(398.15) - co.h(298.15)), 1)   # 7/2 R times 100 K
        2910.1
        """
        T = np.asarray(T, dtype=float)
        a = self._a(T)

        def integral(x: Any) -> Any:
            return x * (a[0] + x * (a[1] / 2 + x * (a[2] / 3 + x * (a[3] / 4 + x * a[4] / 5))))

        return 1000.0 * self.dHf + R * (integral(T) - integral(T_REF))

    def s(self, T: Any) -> np.ndarray:
        """Molar entropy at ``T`` and ``P_ref``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K (outside the data's range: an ExtrapolationWarning).

        Returns
        -------
        ndarray
            J/(mol K), the shape of ``T``.

        Examples
        --------
        >>> co = CpPolynomial(a=(3.5,), dHf=-110.53, S298=197.66)
        >>> round(float(co.s(298.15)), 2)
        197.66
        """
        T = np.asarray(T, dtype=float)
        a = self._a(T)

        def integral(x: Any) -> Any:
            return a[0] * np.log(x) + x * (a[1] + x * (a[2] / 2 + x * (a[3] / 3 + x * a[4] / 4)))

        return self.S298 + R * (integral(T) - integral(T_REF))

    @property
    def range(self) -> tuple[float, float]:
        """``(T_min, T_max)``: where the data are valid, K.

        Examples
        --------
        >>> co = CpPolynomial(a=(3.5,), dHf=-110.53, S298=197.66)
        >>> co.range
        (200.0, 1500.0)
        """
        return (self.T_min, self.T_max)

    @property
    def spans(self) -> list[tuple[float, float]]:
        """Every temperature range the data define, K: each must be non-empty.

        Examples
        --------
        >>> co = CpPolynomial(a=(3.5,), dHf=-110.53, S298=197.66)
        >>> co.spans
        [(200.0, 1500.0)]
        """
        return [self.range]

    def _segments(self) -> list[Segment]:
        """The data as the core's segments (see :data:`Segment`)."""
        a = [float(x) for x in self.a] + [0.0] * (5 - len(self.a))
        x = T_REF
        h_int = x * (a[0] + x * (a[1] / 2 + x * (a[2] / 3 + x * (a[3] / 4 + x * a[4] / 5))))
        s_int = a[0] * math.log(x) + x * (a[1] + x * (a[2] / 2 + x * (a[3] / 3 + x * a[4] / 4)))
        h0, s0 = 1000.0 * self.dHf / R - h_int, self.S298 / R - s_int
        return [(math.inf, False, 1.0, a[0], a[1], a[2], a[3], a[4], 0.0, h0, s0)]


@dataclass(frozen=True)
class MaierKelley:
    """A heat capacity with an inverse-square term, as handbook tables give it.

    ``Cp = a + b T + c T^2 + d / T^2`` (J/(mol K), the form of C. G. Maier and
    K. K. Kelley, J. Am. Chem. Soc. 54 (1932) 3243, common for solids and in
    handbook tables), with the formation enthalpy ``dHf`` (kJ/mol) and
    entropy ``S298`` (J/(mol K)) at 298.15 K; ``H`` and ``S`` are the
    integrals of that ``Cp`` from 298.15 K.

    Mind the letters: here ``c`` multiplies ``T^2`` and ``d`` multiplies
    ``T^-2``. Many handbooks print Kelley's three-term form as
    ``a + b T + c / T^2``: their ``c`` goes in ``d`` (the ``T^2`` term is an
    extension of that form).

    Parameters
    ----------
    a, b, c, d : float
        Coefficients of ``Cp``: J/(mol K), J/(mol K^2), J/(mol K^3), J K/mol.
    dHf : float
        Formation enthalpy at 298.15 K, kJ/mol (required).
    S298 : float
        Entropy at 298.15 K and ``P_ref``, J/(mol K) (required).
    T_min, T_max : float
        Where the data are valid, K.
    source : str
        Where the data come from.
    P_ref : float, default 1.0
        Standard pressure of ``S298``, bar.

    Raises
    ------
    SystemDefinitionError
        ``P_ref`` is not a positive pressure; a value that is not a finite
        number, ``dHf`` or ``S298`` missing, ``|dHf|`` above 20,000 kJ/mol
        (J/mol given by mistake), a negative ``S298`` or an empty range.

    Examples
    --------
    With ``d`` alone, ``H(T) - H298 = d (1/298.15 - 1/T)`` and
    ``S(T) - S298 = d (1/298.15^2 - 1/T^2) / 2``:

    >>> x = MaierKelley(a=0.0, b=0.0, c=0.0, d=-1.0e6, dHf=0.0, S298=10.0)
    >>> round(float(x.h(500.0)), 4), round(float(x.s(500.0)), 4), round(float(x.cp(500.0)), 1)
    (-1354.0164, 6.3753, -4.0)
    """

    a: float
    b: float = 0.0
    c: float = 0.0
    d: float = 0.0
    dHf: float = math.nan
    S298: float = math.nan
    T_min: float = 298.15
    T_max: float = 1500.0
    source: str = "Maier-Kelley Cp (given)"
    #: Standard pressure of ``S298``, bar.
    P_ref: float = 1.0

    def __post_init__(self) -> None:
        _check_p_ref(self)
        values = (self.a, self.b, self.c, self.d, self.dHf, self.S298, self.T_min, self.T_max)
        if not all(isinstance(v, numbers.Real) and math.isfinite(v) for v in values):
            raise SystemDefinitionError(
                f"MaierKelley ({self.source}): a, b, c, d, dHf and S298 must be finite numbers "
                "(dHf and S298 have no default)"
            )
        if abs(self.dHf) > 2e4 or not (0.0 <= self.S298 < 2e4) or not (0.0 < self.T_min < self.T_max):
            raise SystemDefinitionError(
                f"MaierKelley ({self.source}): dHf = {self.dHf!r} kJ/mol, S298 = {self.S298!r} J/(mol K), "
                f"T {self.T_min!r}-{self.T_max!r} K: dHf is in kJ/mol (not J/mol), S298 is not negative, "
                "and T_min is below T_max"
            )

    def _h_int(self, T: Any) -> Any:
        return T * (self.a + T * (self.b / 2 + T * self.c / 3)) - self.d / T

    def _s_int(self, T: Any) -> Any:
        return self.a * np.log(T) + T * (self.b + T * self.c / 2) - self.d / (2 * T * T)

    def cp(self, T: Any) -> np.ndarray:
        """Molar heat capacity at ``T``, J/(mol K) (the shape of ``T``; outside
        the data's range an ExtrapolationWarning)."""
        T = np.asarray(T, dtype=float)
        _range_warning(T, self.T_min, self.T_max, self.source)
        return self.a + T * (self.b + T * self.c) + self.d / (T * T)

    def h(self, T: Any) -> np.ndarray:
        """Molar enthalpy on the formation scale at ``T``, J/mol."""
        T = np.asarray(T, dtype=float)
        _range_warning(T, self.T_min, self.T_max, self.source)
        return 1000.0 * self.dHf + (self._h_int(T) - self._h_int(T_REF))

    def s(self, T: Any) -> np.ndarray:
        """Molar entropy at ``T`` and ``P_ref``, J/(mol K)."""
        T = np.asarray(T, dtype=float)
        _range_warning(T, self.T_min, self.T_max, self.source)
        return self.S298 + (self._s_int(T) - self._s_int(T_REF))

    @property
    def range(self) -> tuple[float, float]:
        """``(T_min, T_max)``: where the data are valid, K."""
        return (self.T_min, self.T_max)

    @property
    def spans(self) -> list[tuple[float, float]]:
        """Every temperature range the data define, K: each must be non-empty."""
        return [self.range]

    def _segments(self) -> list[Segment]:
        """The data as the core's segments (see :data:`Segment`)."""
        h0 = 1000.0 * self.dHf / R - float(self._h_int(T_REF)) / R
        s0 = self.S298 / R - float(self._s_int(T_REF)) / R
        return [(math.inf, False, 1.0, self.a / R, self.b / R, self.c / R, 0.0, 0.0, self.d / R, h0, s0)]


def _segment_values(segments: list[Segment], T: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(Cp/R, H/R, S/R)`` of kelvin-scale segments (``scale`` 1, open upper
    ends) at ``T`` (numpy; the core evaluates the same functions)."""
    table = np.array([g[3:] for g in segments])  # a0..a4, e, h, s
    uptos = np.array([g[0] for g in segments])
    k = np.clip(np.searchsorted(uptos, T, side="right"), 0, len(segments) - 1)
    a, e, h, s = table[k, :5], table[k, 5], table[k, 6], table[k, 7]
    cp = a[..., 0] + T * (a[..., 1] + T * (a[..., 2] + T * (a[..., 3] + T * a[..., 4]))) + e / (T * T)
    hh = T * (a[..., 0] + T * (a[..., 1] / 2 + T * (a[..., 2] / 3 + T * (a[..., 3] / 4 + T * a[..., 4] / 5))))
    ss = a[..., 0] * np.log(T) + T * (
        a[..., 1] + T * (a[..., 2] / 2 + T * (a[..., 3] / 3 + T * a[..., 4] / 4))
    )
    return cp, hh - e / T + h, ss - e / (2 * T * T) + s


def _spline_segments(T: np.ndarray, Cp: np.ndarray, h0: float, s0: float) -> tuple[Segment, ...]:
    """Kelvin-scale segments of the cubic spline (scipy ``CubicSpline``,
    not-a-knot) through ``Cp`` (J/(mol K)) at the rows ``T``, one a row
    interval, the last one extended above; ``H/R`` and ``S/R`` continuous,
    ``h0`` and ``s0`` at ``T[0]``."""
    from scipy.interpolate import CubicSpline

    spline = CubicSpline(T, Cp / R)
    out: list[Segment] = []
    h_at, s_at = h0, s0
    for k in range(len(T) - 1):
        # c3 u^3 + c2 u^2 + c1 u + c0 with u = T - T_k, in powers of T
        a = np.polynomial.Polynomial(spline.c[::-1, k])(np.polynomial.Polynomial([-T[k], 1.0])).coef
        a = np.concatenate([a, np.zeros(5 - len(a))])
        upto = math.inf if k == len(T) - 2 else float(T[k + 1])
        seg: Segment = (upto, False, 1.0, *map(float, a), 0.0, 0.0, 0.0)  # type: ignore[assignment]
        _, h_k, s_k = _segment_values([seg], np.array([T[k]]))
        out.append((*seg[:9], float(h_at - h_k[0]), float(s_at - s_k[0])))
        _, h1, s1 = _segment_values([out[-1]], np.array([T[k + 1]]))
        h_at, s_at = float(h1[0]), float(s1[0])
    return tuple(out)


@dataclass(frozen=True)
class Tabulated:
    """Species data as thermochemical tables print them: rows of ``T``,
    ``Cp``, ``H - H(298.15 K)`` and ``S``.

    Between the rows ``Cp`` is a cubic spline through the tabulated values
    (scipy's ``CubicSpline``, not-a-knot ends); ``H`` and ``S`` are its
    integrals from the first row, so all three come from the same ``Cp``
    and are continuous. The tabulated ``H`` and ``S`` of the other rows
    check the table: a row whose ``H`` or ``S`` differs from the integral by
    more than 0.2 kJ/mol or 0.2 J/(mol K) (a column in the wrong unit, a
    typing slip) is refused.

    Parameters
    ----------
    T : sequence of float
        Temperatures, K, increasing (at least three rows).
    Cp : sequence of float
        Heat capacity, J/(mol K).
    H_rel : sequence of float
        ``H(T) - H(298.15 K)``, kJ/mol.
    S : sequence of float
        Entropy at ``P_ref``, J/(mol K).
    dHf : float
        Formation enthalpy at 298.15 K, kJ/mol.
    source : str
        Where the table comes from.
    P_ref : float, default 1.0
        Standard pressure of ``S``, bar.

    Raises
    ------
    SystemDefinitionError
        Rows of unequal length, fewer than three, temperatures not
        increasing and positive, values not finite, or a table whose ``H``
        and ``S`` are not the integrals of its ``Cp``.

    Examples
    --------
    A constant heat capacity of 30 J/(mol K) tabulated every 100 K:

    >>> import numpy as np
    >>> T = np.arange(300.0, 1001.0, 100.0)
    >>> x = Tabulated(T, [30.0] * 8, 0.03 * (T - 298.15), 200.0 + 30.0 * np.log(T / 298.15), dHf=-10.0)
    >>> round(float(x.h(650.0)), 6), round(float(x.s(650.0) - 30.0 * np.log(650.0 / 298.15)), 9)
    (555.5, 200.0)
    """

    T: tuple[float, ...]
    Cp: tuple[float, ...]
    H_rel: tuple[float, ...]
    S: tuple[float, ...]
    dHf: float
    source: str = "tabulated data (given)"
    #: Standard pressure of ``S``, bar.
    P_ref: float = 1.0

    def __post_init__(self) -> None:
        _check_p_ref(self)
        try:
            cols = [tuple(float(v) for v in col) for col in (self.T, self.Cp, self.H_rel, self.S)]
            dhf = float(self.dHf)
        except (TypeError, ValueError) as err:
            raise SystemDefinitionError(
                f"tabulated data ({self.source}): values must be numbers: {err}"
            ) from None
        for name, col in zip(("T", "Cp", "H_rel", "S"), cols):
            object.__setattr__(self, name, col)
        object.__setattr__(self, "dHf", dhf)
        T = np.array(cols[0])
        if len({len(c) for c in cols}) != 1 or len(T) < 3:
            raise SystemDefinitionError(
                f"tabulated data ({self.source}): T, Cp, H_rel and S need the same number of rows, at least 3"
            )
        if not (np.all(np.isfinite(np.array(cols))) and math.isfinite(dhf)):
            raise SystemDefinitionError(f"tabulated data ({self.source}): values must be finite")
        if not (T[0] > 0 and np.all(np.diff(T) > 0)):
            raise SystemDefinitionError(
                f"tabulated data ({self.source}): temperatures must be positive and increasing"
            )
        segments = self._segments()
        if T[0] <= T_REF <= T[-1]:  # H - H298 is zero at 298.15 K, by its definition
            _, h298, _ = _segment_values(segments, np.array([T_REF]))
            if abs(R * h298[0] / 1000.0 - dhf) > 0.2:
                raise SystemDefinitionError(
                    f"tabulated data ({self.source}): H - H298 at 298.15 K is "
                    f"{R * h298[0] / 1000.0 - dhf:.3g} kJ/mol, not zero (H_rel is H(T) - H(298.15 K))"
                )
        _, h, s = _segment_values(segments, T)
        dh = np.abs(R * h / 1000.0 - (dhf + np.array(cols[2])))
        ds = np.abs(R * s - np.array(cols[3]))
        worst = int(np.argmax(np.maximum(dh / 0.2, ds / 0.2)))
        if dh[worst] > 0.2 or ds[worst] > 0.2:
            raise SystemDefinitionError(
                f"tabulated data ({self.source}): at {T[worst]:g} K H - H298 and S are not the "
                f"integrals of Cp from {T[0]:g} K (off by {dh[worst]:.3g} kJ/mol and "
                f"{ds[worst]:.3g} J/(mol K); "
                "check the columns' units: Cp and S in J/(mol K), H_rel in kJ/mol)"
            )

    def _segments(self) -> list[Segment]:
        """The data as the core's segments (see :data:`Segment`): one cubic
        ``Cp`` a row interval, the last one extended above the table."""
        return list(self._fit)

    @cached_property
    def _fit(self) -> tuple[Segment, ...]:
        h0, s0 = 1000.0 * (self.dHf + self.H_rel[0]) / R, self.S[0] / R
        return _spline_segments(np.array(self.T, dtype=float), np.array(self.Cp, dtype=float), h0, s0)

    @classmethod
    def from_cp(
        cls,
        T: Any,
        Cp: Any,
        dHf: float,
        S298: float,
        source: str = "tabulated Cp (given)",
        P_ref: float = 1.0,
    ) -> Tabulated:
        """A table from its ``Cp`` rows and the formation data at 298.15 K:
        ``H - H298`` and ``S`` are the integrals of the spline through the
        rows from 298.15 K, which must lie within them.

        Examples
        --------
        >>> T = [200.0, 298.15, 500.0, 1000.0]   # H_rel at 1000 K: 29 J/K x 701.85 K
        >>> x = Tabulated.from_cp(T, [29.0] * 4, dHf=0.0, S298=130.0)
        >>> round(x.H_rel[-1], 6), round(float(x.s(500.0) - 29.0 * np.log(500.0 / 298.15)), 6)
        (20.35365, 130.0)
        """
        T_rows, cp_rows = np.asarray(T, dtype=float), np.asarray(Cp, dtype=float)
        if T_rows.ndim != 1 or T_rows.shape != cp_rows.shape or T_rows.size < 3:
            raise SystemDefinitionError(
                f"tabulated Cp ({source}): T and Cp need the same number of rows, at least 3 "
                f"(got {T_rows.size} and {cp_rows.size})"
            )
        if not (np.all(np.diff(T_rows) > 0) and np.all(np.isfinite(cp_rows))):
            raise SystemDefinitionError(
                f"tabulated Cp ({source}): temperatures must be increasing and Cp finite"
            )
        if not (T_rows[0] <= T_REF <= T_rows[-1]):
            raise SystemDefinitionError(f"tabulated Cp ({source}): the rows must span 298.15 K")
        segments = _spline_segments(T_rows, cp_rows, 0.0, 0.0)
        _, h, s_ = _segment_values(list(segments), np.concatenate([[T_REF], T_rows]))
        h_rel = R * (h[1:] - h[0]) / 1000.0
        entropy = S298 + R * (s_[1:] - s_[0])
        return cls(tuple(T_rows), tuple(cp_rows), tuple(h_rel), tuple(entropy), dHf, source, P_ref)

    def _values(self, T: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        T = np.asarray(T, dtype=float)
        _range_warning(T, self.T[0], self.T[-1], self.source)
        cp, h, s = _segment_values(list(self._fit), T)
        return R * cp, R * h, R * s

    def cp(self, T: Any) -> np.ndarray:
        """Molar heat capacity at ``T``, J/(mol K) (outside the table an ExtrapolationWarning)."""
        return self._values(T)[0]

    def h(self, T: Any) -> np.ndarray:
        """Molar enthalpy on the formation scale at ``T``, J/mol."""
        return self._values(T)[1]

    def s(self, T: Any) -> np.ndarray:
        """Molar entropy at ``T`` and ``P_ref``, J/(mol K)."""
        return self._values(T)[2]

    @property
    def range(self) -> tuple[float, float]:
        """``(T_min, T_max)``: the table's first and last temperatures, K."""
        return (self.T[0], self.T[-1])

    @property
    def spans(self) -> list[tuple[float, float]]:
        """Every temperature range the data define, K: each must be non-empty."""
        return [self.range]


#: The forms of species data a system takes.
SpeciesData = NASA7 | Shomate | CpPolynomial | MaierKelley | Tabulated


class ThermoLnK:
    """``ln K(T)`` of one reaction from its species' data.

    Callable on arrays of temperatures (K), on the standard pressure ``P0``
    (bar) of the system, with ``derivative(T) = dH / (R T^2)``. Each data set
    is on its own standard pressure ``P_ref``; gas species (all species
    unless ``phases`` says otherwise) add ``-nu_i ln(P0 / P_ref_i)`` to
    ``ln K``, a constant in ``T`` (so ``dH`` and the derivative do not
    change); species in any other phase add nothing.

    Parameters
    ----------
    coefficients : mapping species -> float
        The reaction's net coefficients (products positive).
    data : mapping species -> species data (NASA7, Shomate, CpPolynomial, MaierKelley, Tabulated)
        Data of every species in ``coefficients``.
    P0 : float, default 1.0
        Standard pressure of the result, bar.
    phases : mapping species -> str, optional
        Phase of each species (default gas).

    Examples
    --------
    The dimerisation ``2 A = A2`` with ``dH = -50 kJ/mol``, ``dS = -100 J/(mol K)``:

    >>> a = CpPolynomial(a=(), dHf=0.0, S298=200.0)
    >>> a2 = CpPolynomial(a=(), dHf=-50.0, S298=300.0)
    >>> lnk = ThermoLnK({"A": -2.0, "A2": 1.0}, {"A": a, "A2": a2})
    >>> round(float(lnk(400.0)), 4), round(float(lnk.dH(400.0)), 1)
    (3.0068, -50000.0)
    """

    def __init__(
        self,
        coefficients: Mapping[str, float],
        data: Mapping[str, SpeciesData],
        P0: float = 1.0,
        phases: Mapping[str, str] | None = None,
    ) -> None:
        self.terms = [(float(c), data[name]) for name, c in coefficients.items()]
        self.P0 = float(P0)
        #: ``ln K(P0) - ln K(data)``: the change of standard pressure of the gas species.
        self.ln_k_shift = -sum(
            float(c) * math.log(self.P0 / float(data[name].P_ref))
            for name, c in coefficients.items()
            if (phases or {}).get(name, "gas") == "gas"
        )

    def dG(self, T: Any) -> np.ndarray:
        """Standard reaction Gibbs energy on ``P0`` at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K.

        Returns
        -------
        ndarray
            J/mol, the shape of ``T``.

        Examples
        --------
        >>> a, a2 = CpPolynomial(a=(), dHf=0.0, S298=200.0), CpPolynomial(a=(), dHf=-50.0, S298=300.0)
        >>> lnk = ThermoLnK({"A": -2.0, "A2": 1.0}, {"A": a, "A2": a2})
        >>> round(float(lnk.dG(400.0)))   # dH - T dS
        -10000
        """
        T = np.asarray(T, dtype=float)
        total = sum((c * (d.h(T) - T * d.s(T)) for c, d in self.terms), np.zeros(()))
        return total - R * T * self.ln_k_shift

    def dH(self, T: Any) -> np.ndarray:
        """Standard reaction enthalpy at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K.

        Returns
        -------
        ndarray
            J/mol, the shape of ``T``.

        Examples
        --------
        >>> a, a2 = CpPolynomial(a=(), dHf=0.0, S298=200.0), CpPolynomial(a=(), dHf=-50.0, S298=300.0)
        >>> lnk = ThermoLnK({"A": -2.0, "A2": 1.0}, {"A": a, "A2": a2})
        >>> round(float(lnk.dH(1000.0)))
        -50000
        """
        T = np.asarray(T, dtype=float)
        return sum((c * d.h(T) for c, d in self.terms), np.zeros(()))

    def __call__(self, T: Any) -> np.ndarray:
        """``ln K`` on ``P0`` at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K.

        Returns
        -------
        ndarray
            ln K, the shape of ``T``.

        Examples
        --------
        >>> a, a2 = CpPolynomial(a=(), dHf=0.0, S298=200.0), CpPolynomial(a=(), dHf=-50.0, S298=300.0)
        >>> lnk = ThermoLnK({"A": -2.0, "A2": 1.0}, {"A": a, "A2": a2})
        >>> abs(float(lnk(500.0))) < 1e-12   # dG = dH - T dS = 0 at 500 K
        True
        """
        T = np.asarray(T, dtype=float)
        return -self.dG(T) / (R * T)

    def derivative(self, T: Any) -> np.ndarray:
        """``d ln K / dT = dH / (R T^2)`` at ``T``.

        Parameters
        ----------
        T : float or array_like
            Temperature, K.

        Returns
        -------
        ndarray
            1/K, the shape of ``T``.

        Examples
        --------
        >>> a, a2 = CpPolynomial(a=(), dHf=0.0, S298=200.0), CpPolynomial(a=(), dHf=-50.0, S298=300.0)
        >>> lnk = ThermoLnK({"A": -2.0, "A2": 1.0}, {"A": a, "A2": a2})
        >>> round(float(lnk.derivative(400.0)), 6)   # van 't Hoff
        -0.037585
        """
        T = np.asarray(T, dtype=float)
        return self.dH(T) / (R * T * T)


def _number(value: Any) -> float:
    """A system file's number: an int or a float, not a boolean or a string."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        raise TypeError(f"{value!r} is not a number")
    return float(value)


_TABLE_KEYS = ("nasa7", "shomate", "cp_poly", "maier_kelley", "tabulated", "source", "P_ref")


def species_data_from_table(name: str, table: Mapping[str, Any]) -> SpeciesData:
    """One species' data from a system-file table.

    Parameters
    ----------
    name : str
        The species (for messages).
    table : mapping
        Exactly one of ``nasa7``, ``shomate`` or ``cp_poly``, optionally with
        ``source`` and ``P_ref`` (the data's standard pressure, bar; default 1).

    Returns
    -------
    NASA7, Shomate or CpPolynomial

    Raises
    ------
    SystemDefinitionError
        An unknown key, not exactly one form of data, or malformed values
        (the message names the species and the key).

    Examples
    --------
    >>> d = species_data_from_table("CO", {"cp_poly": {"a": [3.5], "dHf": -110.53, "S298": 197.66}})
    >>> type(d).__name__, d.P_ref
    ('CpPolynomial', 1.0)
    """
    unknown = sorted(set(table) - set(_TABLE_KEYS))
    if unknown:
        raise SystemDefinitionError(
            f"species_data.{name}: unknown key(s) {unknown}; valid are {', '.join(_TABLE_KEYS)}"
        )
    keys = [k for k in ("nasa7", "shomate", "cp_poly", "maier_kelley", "tabulated") if k in table]
    if len(keys) != 1:
        raise SystemDefinitionError(
            f"species_data.{name}: give exactly one of nasa7, shomate, cp_poly, maier_kelley, tabulated"
        )
    value = table[keys[0]]
    source = str(table.get("source", f"{keys[0]} data for {name} (system file)"))
    try:
        p_ref = float(table.get("P_ref", 1.0))
    except (TypeError, ValueError):
        raise SystemDefinitionError(
            f"species_data.{name}.P_ref: the data's standard pressure in bar, got {table['P_ref']!r}"
        ) from None
    try:
        if keys[0] == "nasa7":
            return NASA7(
                tuple(_number(x) for x in value["low"]),
                tuple(_number(x) for x in value["high"]),
                _number(value.get("T_mid", 1000.0)),
                _number(value.get("T_min", 200.0)),
                _number(value.get("T_max", 3500.0)),
                source,
                p_ref,
            )
        if keys[0] == "shomate":
            ranges = tuple(
                tuple(_number(r[k]) for k in ("T_min", "T_max", "A", "B", "C", "D", "E", "F", "G", "H"))
                for r in value
            )
            return Shomate(ranges, source, p_ref)
        if keys[0] == "tabulated":
            extra = sorted(set(value) - {"T", "Cp", "H_rel", "S", "dHf"})
            if extra:
                raise SystemDefinitionError(
                    f"species_data.{name}.tabulated: unknown key(s) {extra}; valid are T, Cp, H_rel, S, dHf"
                )
            return Tabulated(
                tuple(_number(x) for x in value["T"]),
                tuple(_number(x) for x in value["Cp"]),
                tuple(_number(x) for x in value["H_rel"]),
                tuple(_number(x) for x in value["S"]),
                _number(value["dHf"]),
                source,
                p_ref,
            )
        if keys[0] == "maier_kelley":
            extra = sorted(set(value) - {"a", "b", "c", "d", "dHf", "S298", "T_min", "T_max"})
            if extra:
                raise SystemDefinitionError(
                    f"species_data.{name}.maier_kelley: unknown key(s) {extra}; "
                    "valid are a, b, c, d, dHf, S298, T_min, T_max"
                )
            return MaierKelley(
                a=_number(value["a"]),
                b=_number(value.get("b", 0.0)),
                c=_number(value.get("c", 0.0)),
                d=_number(value.get("d", 0.0)),
                dHf=_number(value["dHf"]),
                S298=_number(value["S298"]),
                T_min=_number(value.get("T_min", T_REF)),
                T_max=_number(value.get("T_max", 1500.0)),
                source=source,
                P_ref=p_ref,
            )
        return CpPolynomial(
            tuple(_number(x) for x in value["a"]),
            _number(value["dHf"]),
            _number(value["S298"]),
            _number(value.get("T_min", 200.0)),
            _number(value.get("T_max", 1500.0)),
            source,
            p_ref,
        )
    except (KeyError, TypeError, ValueError) as err:
        what = f"missing key {err}" if isinstance(err, KeyError) else str(err)
        raise SystemDefinitionError(f"species_data.{name}.{keys[0]}: malformed ({what})") from None
