"""Species thermochemistry and the equilibrium constants it implies.

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

A reaction's ``ln K(T) = -dG(T) / (R T)`` with ``dG = sum nu_i (h_i - T s_i)``;
its temperature derivative is ``dH / (R T^2)`` (van 't Hoff). The constant is
put on the system's standard pressure ``P0``: a gas species' standard Gibbs
energy at ``P0`` is the data's plus ``R T ln(P0 / P_ref)``, so
``ln K(P0) = ln K(data) - sum over gas species of nu_i ln(P0 / P_ref_i)``
(liquid species' activities are mole fractions, with no pressure term).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from eqbatch.errors import SystemDefinitionError
from eqbatch.kdata import report_extrapolation

#: Molar gas constant, J/(mol K) (CODATA 2018).
R = 8.314462618
T_REF = 298.15


def _range_warning(obj: Any, T: np.ndarray, lo: float, hi: float, what: str) -> None:
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
    """NASA 7-coefficient polynomials: ``low`` for ``T_min <= T < T_mid`` and
    ``high`` for ``T_mid <= T <= T_max``, each ``(a1, ..., a7)`` with
    ``Cp/R = a1 + a2 T + a3 T^2 + a4 T^3 + a5 T^4``,
    ``H/(R T) = a1 + a2 T/2 + a3 T^2/3 + a4 T^3/4 + a5 T^4/5 + a6/T``,
    ``S/R = a1 ln T + a2 T + a3 T^2/2 + a4 T^3/3 + a5 T^4/4 + a7``."""

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
        _range_warning(self, T, self.T_min, self.T_max, self.source)
        low, high = np.asarray(self.low), np.asarray(self.high)
        return np.where((T < self.T_mid)[..., None], low, high)

    def cp(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        a = self._coef(T)
        return R * (a[..., 0] + T * (a[..., 1] + T * (a[..., 2] + T * (a[..., 3] + T * a[..., 4]))))

    def h(self, T) -> np.ndarray:
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

    def s(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        a = self._coef(T)
        return R * (
            a[..., 0] * np.log(T)
            + T * (a[..., 1] + T * (a[..., 2] / 2 + T * (a[..., 3] / 3 + T * a[..., 4] / 4)))
            + a[..., 6]
        )

    @property
    def range(self) -> tuple[float, float]:
        return (self.T_min, self.T_max)


@dataclass(frozen=True)
class Shomate:
    """Shomate coefficients, one ``(T_min, T_max, A, B, C, D, E, F, G, H)`` per
    temperature range, with ``t = T / 1000``:
    ``Cp = A + B t + C t^2 + D t^3 + E / t^2`` (J/mol/K),
    ``H - H(298.15) = A t + B t^2/2 + C t^3/3 + D t^4/4 - E/t + F - H`` (kJ/mol),
    ``S = A ln t + B t + C t^2/2 + D t^3/3 - E/(2 t^2) + G`` (J/mol/K); the
    coefficient ``H`` is the formation enthalpy at 298.15 K."""

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
        _range_warning(self, T, table[0, 0], table[-1, 1], self.source)
        k = np.clip(np.searchsorted(table[:, 1], T, side="left"), 0, len(table) - 1)
        return table[k, 2:]

    def cp(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        c = self._coef(T)
        t = T / 1000.0
        return c[..., 0] + t * (c[..., 1] + t * (c[..., 2] + t * c[..., 3])) + c[..., 4] / (t * t)

    def h(self, T) -> np.ndarray:
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

    def s(self, T) -> np.ndarray:
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
        table = np.array(sorted(self.ranges))
        return (float(table[0, 0]), float(table[-1, 1]))


@dataclass(frozen=True)
class CpPolynomial:
    """``Cp/R = a0 + a1 T + a2 T^2 + a3 T^3 + a4 T^4`` with the formation
    enthalpy ``dHf`` (kJ/mol) and entropy ``S298`` (J/mol/K) at 298.15 K."""

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
        _range_warning(self, T, self.T_min, self.T_max, self.source)
        a = np.zeros(5)
        a[: len(self.a)] = self.a
        return a

    def cp(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        a = self._a(T)
        return R * (a[0] + T * (a[1] + T * (a[2] + T * (a[3] + T * a[4]))))

    def h(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        a = self._a(T)

        def integral(x):
            return x * (a[0] + x * (a[1] / 2 + x * (a[2] / 3 + x * (a[3] / 4 + x * a[4] / 5))))

        return 1000.0 * self.dHf + R * (integral(T) - integral(T_REF))

    def s(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        a = self._a(T)

        def integral(x):
            return a[0] * np.log(x) + x * (a[1] + x * (a[2] / 2 + x * (a[3] / 3 + x * a[4] / 4)))

        return self.S298 + R * (integral(T) - integral(T_REF))

    @property
    def range(self) -> tuple[float, float]:
        return (self.T_min, self.T_max)


SpeciesData = NASA7 | Shomate | CpPolynomial


class ThermoLnK:
    """``ln K(T)`` of one reaction from its species' data (callable on arrays),
    on the standard pressure ``P0`` (bar) of the system, with
    ``derivative(T) = dH / (R T^2)``.

    Each data set is on its own standard pressure ``P_ref``; gas species (all
    species unless ``phases`` says otherwise) add ``-nu_i ln(P0 / P_ref_i)``
    to ``ln K``, a constant in ``T`` (so ``dH`` and the derivative do not
    change); species in any other phase add nothing."""

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

    def dG(self, T) -> np.ndarray:
        """Standard reaction Gibbs energy on ``P0``, J/mol."""
        T = np.asarray(T, dtype=float)
        return sum(c * (d.h(T) - T * d.s(T)) for c, d in self.terms) - R * T * self.ln_k_shift

    def dH(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        return sum(c * d.h(T) for c, d in self.terms)

    def __call__(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        return -self.dG(T) / (R * T)

    def derivative(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        return self.dH(T) / (R * T * T)


_TABLE_KEYS = ("nasa7", "shomate", "cp_poly", "source", "P_ref")


def species_data_from_table(name: str, table: Mapping[str, Any]) -> SpeciesData:
    """One species' data from a system-file table: exactly one of ``nasa7``,
    ``shomate`` or ``cp_poly``, optionally with ``source`` and ``P_ref`` (the
    data's standard pressure, bar; default 1)."""
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


def element_matrix(
    species: Sequence[str], formulas: Mapping[str, dict[str, int] | None]
) -> tuple[list[str], np.ndarray]:
    """Elements and the (E, S) element-count matrix of species with formulas."""
    missing = [s for s in species if formulas.get(s) is None]
    if missing:
        raise SystemDefinitionError(
            f"reactions='auto' needs a chemical formula for every species; none for {', '.join(missing)}"
        )
    elements = sorted({e for s in species for e in formulas[s]})
    A = np.array([[formulas[s].get(e, 0) for s in species] for e in elements], dtype=float)
    return elements, A


def independent_reactions(species: Sequence[str], formulas: Mapping[str, dict[str, int] | None]) -> list[str]:
    """A set of ``S - rank(A)`` independent reactions among ``species`` with
    small integer coefficients: the formation of each non-component species
    from the components (the species with the fewest atoms that span the
    elements), in exact rational arithmetic.

    Examples
    --------
    >>> from eqbatch.equations import parse_formula
    >>> sp = ["CH4", "H2O", "CO", "H2", "CO2"]
    >>> independent_reactions(sp, {s: parse_formula(s) for s in sp})
    ['CO + 3 H2 = CH4 + H2O', 'CO + H2O = CO2 + H2']
    """
    from fractions import Fraction
    from math import lcm

    _, A = element_matrix(species, formulas)
    rows = [[Fraction(int(v)) for v in row] for row in A]
    pivots: list[int] = []
    r = 0
    # Components: the simplest species (fewest atoms) that span the elements,
    # so the reactions read as the formation of the larger species from them.
    by_size = sorted(range(len(species)), key=lambda j: (sum(formulas[species[j]].values()), j))
    for col in by_size:
        pivot = next((i for i in range(r, len(rows)) if rows[i][col] != 0), None)
        if pivot is None:
            continue
        rows[r], rows[pivot] = rows[pivot], rows[r]
        inv = 1 / rows[r][col]
        rows[r] = [v * inv for v in rows[r]]
        for i in range(len(rows)):
            if i != r and rows[i][col] != 0:
                f = rows[i][col]
                rows[i] = [a - f * b for a, b in zip(rows[i], rows[r])]
        pivots.append(col)
        r += 1
        if r == len(rows):
            break
    equations = []
    for j, name in enumerate(species):
        if j in pivots:
            continue
        # species j = sum_k rows[k][j] * component_k
        coef = {species[p]: rows[k][j] for k, p in enumerate(pivots)}
        scale = lcm(*[c.denominator for c in coef.values()], 1)
        left = {s: c * scale for s, c in coef.items() if c > 0}
        right = {name: scale} | {s: -c * scale for s, c in coef.items() if c < 0}

        def side(terms):
            return " + ".join(f"{'' if c == 1 else str(c) + ' '}{s}" for s, c in terms.items() if c != 0)

        equations.append(f"{side(left)} = {side(right)}")
    return equations


def check_approach(system, approach: Mapping[str, float]) -> dict[str, float]:
    """``approach`` as ``{label: dT}`` with known labels, K(T) data and
    finite ``dT >= 0`` (K), else CaseInputError."""
    from eqbatch.errors import CaseInputError

    out = {}
    for label, dT in approach.items():
        if label not in system.labels:
            raise CaseInputError(
                f"approach: {label!r} is not a reaction label (labels are {', '.join(system.labels)})"
            )
        if not callable(system.lnK_data.get(label)):
            raise CaseInputError(f"approach: reaction {label!r} has no K(T) data to take an approach on")
        try:
            value = float(dT)
        except (TypeError, ValueError):
            raise CaseInputError(
                f"approach[{label!r}] must be a temperature difference in K, got {dT!r}"
            ) from None
        if not (0.0 <= value < math.inf):
            raise CaseInputError(
                f"approach[{label!r}] = {dT!r}: an approach is a distance from equilibrium, "
                "finite and not negative (K)"
            )
        out[label] = value
    return out


def approach_temperatures(
    system, T: np.ndarray, approach: Mapping[str, float], direction: np.ndarray
) -> np.ndarray:
    """``(N, R)`` temperature at which each reaction's K is taken: ``T`` for
    reactions without an approach; for a reaction given ``dT`` (K), the
    temperature ``dT`` away from ``T`` on the side that holds it short of
    equilibrium in the direction it runs (``direction``, the sign of its
    extent per case, ``(N, R)``). A reaction running forward stops short
    with a smaller K, one running backward with a larger one, so the shift
    is ``-sign(d ln K / dT) * direction * dT``: ``T - dT`` for steam
    reforming run forward (endothermic), ``T + dT`` for the shift run
    forward (exothermic), and ``T - dT`` again for methanation written
    forward but run backward in a reformer. This is the design-practice
    reading of an approach temperature: the outlet is "``dT`` away from
    equilibrium"."""
    direction = np.asarray(direction, dtype=float)
    T = np.asarray(T, dtype=float).reshape(-1)
    n = max(T.shape[0], direction.shape[0])
    T_eff = np.array(np.broadcast_to(T[:, None], (n, system.n_reactions)))
    direction = np.broadcast_to(direction, (n, system.n_reactions))
    T_rows = np.broadcast_to(T, (n,))
    for label, dT in approach.items():
        j = system.labels.index(label)
        slope = system.lnK_data[label].derivative(T_rows)
        T_eff[:, j] = T_rows - np.sign(slope) * np.nan_to_num(direction[:, j]) * dT
    return T_eff


def equilibrium_temperature(
    system,
    amounts: np.ndarray,
    P: Any = None,
    *,
    T_guess: float = 900.0,
    tol: float = 1e-10,
    max_iter: int = 100,
) -> np.ndarray:
    """For measured compositions ``amounts`` (N, S), the temperature at which
    each reaction would be at equilibrium: ``ln K(T) = ln Q`` solved by
    Newton's method with the analytic ``d ln K / dT`` (NaN where a reaction
    involves an absent species or no temperature matches)."""
    amounts = np.atleast_2d(np.asarray(amounts, dtype=float))
    n, S = amounts.shape
    P = np.full(n, system.P0) if P is None else np.broadcast_to(np.asarray(P, dtype=float), (n,))
    phases = np.array(system.phases)
    ln_a = np.zeros((n, S))
    with np.errstate(divide="ignore"):
        for phase in ("gas", "liquid"):
            mask = phases == phase
            if mask.any():
                total = amounts[:, mask].sum(axis=1, keepdims=True)
                ln_a[:, mask] = np.log(amounts[:, mask]) - np.log(total)
                if phase == "gas":
                    ln_a[:, mask] += np.log(P / system.P0)[:, None]
    out = np.full((n, system.n_reactions), np.nan)
    for j, label in enumerate(system.labels):
        data = system.lnK_data.get(label)
        if data is None or not hasattr(data, "derivative"):
            continue
        involved = system.stoich[j] != 0
        ln_q = np.where(
            np.all(amounts[:, involved] > 0, axis=1), ln_a[:, involved] @ system.stoich[j, involved], np.nan
        )
        T = np.full(n, float(T_guess))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for _ in range(max_iter):
                f = data(T) - ln_q
                step = f / data.derivative(T)
                T = np.clip(T - step, 0.2 * T, 5.0 * T)
                if np.all(~np.isfinite(step) | (np.abs(step) <= tol * T)):
                    break
            ok = np.abs(data(T) - ln_q) <= 1e-8 * np.maximum(1.0, np.abs(ln_q))
        out[:, j] = np.where(ok, T, np.nan)
    return out


def chemicals_data(name: str, formula: str | None = None) -> CpPolynomial:
    """Standard-state data of one gas from the ``chemicals`` package: the
    ideal-gas heat-capacity polynomial of Poling, Prausnitz and O'Connell,
    *The Properties of Gases and Liquids* (its table's validity range), with
    the formation enthalpy and entropy at 298.15 K from the package's first
    ranked source for each, on a 1 bar standard state.

    The compound is found by name first, then from the formula: a condensed
    structural formula (``C2H5OH``) is read as the structure it writes, and a
    formula that fits more than one compound with data (``C4H10``) is refused
    with the candidates listed (see :mod:`eqbatch.compounds`). ``source``
    records the compound's name and registry number, how it was found, and
    where each value came from."""
    try:
        from chemicals.heat_capacity import Cp_data_Poling
        from chemicals.reaction import Hfg, Hfg_methods, S0g, S0g_methods
    except ImportError:
        raise SystemDefinitionError(
            "thermo='chemicals' needs the chemicals package: pip install chemicals"
        ) from None
    from eqbatch.compounds import identify

    def has_data(cas: str) -> bool:
        return cas in Cp_data_Poling.index and bool(Hfg_methods(cas)) and bool(S0g_methods(cas))

    compound = identify(name, formula, has_data)
    cas = compound.cas
    what = f"species {name!r} = {compound.label()}"
    if cas not in Cp_data_Poling.index:
        raise SystemDefinitionError(f"thermo='chemicals': no ideal-gas Cp polynomial for {what}")
    h_methods, s_methods = Hfg_methods(cas), S0g_methods(cas)
    if not h_methods or not s_methods:
        raise SystemDefinitionError(f"thermo='chemicals': no formation enthalpy or entropy for {what}")
    hf = Hfg(cas, method=h_methods[0])
    s0 = S0g(cas, method=s_methods[0])
    row = Cp_data_Poling.loc[cas]
    a = tuple(float(row[k]) for k in ("a0", "a1", "a2", "a3", "a4"))
    t_min, t_max = float(row["Tmin"]), float(row["Tmax"])
    source = (
        f"chemicals: {compound.name}, CAS {cas} ({compound.how}); "
        f"Cp/R polynomial of Poling, Prausnitz and O'Connell ({t_min:g}-{t_max:g} K); "
        f"dfH(298.15 K) = {hf / 1000:.3f} kJ/mol ({h_methods[0]}); "
        f"S(298.15 K) = {s0:.2f} J/mol/K ({s_methods[0]}); ideal gas at 1 bar"
    )
    return CpPolynomial(a=a, dHf=hf / 1000.0, S298=s0, T_min=t_min, T_max=t_max, source=source, P_ref=1.0)
