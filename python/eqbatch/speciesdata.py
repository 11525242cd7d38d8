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
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from eqbatch.errors import SystemDefinitionError
from eqbatch.kdata import report_extrapolation

#: Molar gas constant, J/(mol K) (CODATA 2018).
R = 8.314462618
#: Reference temperature of formation data, K.
T_REF = 298.15


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


#: The forms of species data a system takes.
SpeciesData = NASA7 | Shomate | CpPolynomial


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
    data : mapping species -> NASA7, Shomate or CpPolynomial
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


_TABLE_KEYS = ("nasa7", "shomate", "cp_poly", "source", "P_ref")


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
    keys = [k for k in ("nasa7", "shomate", "cp_poly") if k in table]
    if len(keys) != 1:
        raise SystemDefinitionError(f"species_data.{name}: give exactly one of nasa7, shomate, cp_poly")
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
                tuple(value["low"]),
                tuple(value["high"]),
                float(value.get("T_mid", 1000.0)),
                float(value.get("T_min", 200.0)),
                float(value.get("T_max", 3500.0)),
                source,
                p_ref,
            )
        if keys[0] == "shomate":
            ranges = tuple(
                tuple(float(r[k]) for k in ("T_min", "T_max", "A", "B", "C", "D", "E", "F", "G", "H"))
                for r in value
            )
            return Shomate(ranges, source, p_ref)
        return CpPolynomial(
            tuple(float(x) for x in value["a"]),
            float(value["dHf"]),
            float(value["S298"]),
            float(value.get("T_min", 200.0)),
            float(value.get("T_max", 1500.0)),
            source,
            p_ref,
        )
    except (KeyError, TypeError, ValueError) as err:
        raise SystemDefinitionError(f"species_data.{name}.{keys[0]}: malformed ({err})") from None
