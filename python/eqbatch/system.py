"""The reaction system: species, phases, reactions and their K data."""

from __future__ import annotations

import math
import os
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np

from eqbatch import _core, outputs
from eqbatch.equations import check_atom_balance, parse_equation, parse_formula
from eqbatch.errors import (
    CaseInputError,
    DependentReactionsError,
    InvalidCaseError,
    SystemDefinitionError,
    UnboundedReactionsError,
    UnknownSpeciesError,
)
from eqbatch.kdata import LN10, LnKFunction, as_lnk_data, quiet_ranges, report_extrapolation
from eqbatch.result import EquilibriumResult, Status

#: Phase names accepted in ``phases=`` and system files, with their core codes.
PHASES = {"gas": 0, "liquid": 1}

KData = float | LnKFunction
ArrayLike = Any

_LABEL = re.compile(r"^[A-Za-z_][A-Za-z0-9_.\-]*$")


def _format_combination(indices: Sequence[int], coefs: Sequence[float], labels: Sequence[str]) -> str:
    parts = []
    for idx, coef in zip(indices, coefs):
        c = f"{coef:g}"
        parts.append(f"{'' if c == '1' else c + ' '}{labels[idx]}")
    return " + ".join(parts).replace("+ -", "- ")


def _rebuild_system(spec: dict) -> ReactionSystem:
    spec = dict(spec)
    return ReactionSystem(spec.pop("species"), spec.pop("reactions"), **spec)


#: Range of ``tol`` accepted by ``solve()``: above 1e-3 a case "converges" with
#: its K off by more than 0.1 %; below 1e-15 the residual is under the rounding
#: of ln K itself (about |ln K| x 2.2e-16), which no float64 iterate can meet.
TOL_RANGE = (1e-15, 1e-3)

#: Largest ``max_iter`` (the core counts iterations in 32 bits).
MAX_ITER = 2**32 - 1


def _float_column(column: Any) -> np.ndarray:
    """A pandas or Arrow column as float64 with missing values as NaN (an
    invalid case, not an error); anything else is left to ``np.asarray``."""
    module = type(column).__module__
    if module.startswith("pandas"):
        try:
            return column.to_numpy(dtype=np.float64, na_value=np.nan)
        except (TypeError, ValueError):
            return column.to_numpy()
    if module.startswith("pyarrow"):
        return column.to_numpy(zero_copy_only=False)
    return column


def _labelled(value: Any) -> tuple[list[Any], list[Any]] | None:
    """Labels and columns of an input that carries labels, else None.

    Labelled are: a mapping (label -> value(s)), a pandas Series (one case,
    labels in the index), a pandas DataFrame, a numpy structured array and a
    pyarrow Table or RecordBatch (one column per label, one row per case).
    pandas objects whose labels are the default positions ``0..k-1`` carry no
    labels and are read by position, as arrays are.
    """
    if isinstance(value, Mapping):
        return list(value.keys()), list(value.values())
    module = type(value).__module__
    if isinstance(value, np.ndarray):
        names = value.dtype.names
        return None if names is None else (list(names), [value[name] for name in names])
    if module.startswith("pandas"):
        import pandas as pd

        if isinstance(value, pd.Series):
            axis, columns = value.index, None
        elif isinstance(value, pd.DataFrame):
            axis = value.columns
            columns = [_float_column(value.iloc[:, k]) for k in range(value.shape[1])]
        else:
            return None
        if isinstance(axis, pd.RangeIndex) and axis.start == 0 and axis.step == 1:
            return None
        if columns is None:
            columns = list(_float_column(value))
        return list(axis), columns
    if module.startswith("pyarrow") and hasattr(value, "column_names"):
        return list(value.column_names), [_float_column(c) for c in value.columns]
    return None


def _case_column(value: Any, name: str) -> np.ndarray:
    """A per-case input (``P``, ``T``) as a contiguous float64 ``(N,)`` array.

    Only a scalar, ``(1,)`` or ``(N,)`` is one value per case: a ``(N, 1)``
    column or a ``(N, M)`` grid would broadcast to a grid under numpy's rules,
    so it is refused rather than flattened.
    """
    if type(value) is float or type(value) is int:
        return np.array([value], dtype=np.float64)
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim == 1:
        return arr if arr.flags.c_contiguous else np.ascontiguousarray(arr)
    if arr.ndim == 0:
        return arr.reshape(1)
    raise CaseInputError(
        f"{name} must be a scalar or a 1-D array with one value per case; got shape {arr.shape} "
        "(flatten a column with .ravel(); for a grid, flatten every input alike, e.g. from np.meshgrid)"
    )


def _bad_temperatures(T: np.ndarray) -> np.ndarray | None:
    """Mask of the temperatures that are not positive and finite, or None if
    all are (the common case, checked without allocating for one case)."""
    if T.shape[0] == 1:
        return None if 0.0 < T[0] < math.inf else np.ones(1, dtype=bool)
    bad = ~((T > 0.0) & (T < math.inf))
    return bad if bad.any() else None


def _checked_tol(tol: Any) -> float:
    """``tol`` as a float within :data:`TOL_RANGE`, else CaseInputError."""
    lo, hi = TOL_RANGE
    if type(tol) is float and lo <= tol <= hi:
        return tol
    valid = isinstance(tol, (int, float, np.integer, np.floating)) and not isinstance(tol, bool)
    if not (valid and lo <= float(tol) <= hi):
        raise CaseInputError(
            f"tol must be a number from {lo:g} to {hi:g} (the largest |ln Q - ln K| accepted per "
            f"reaction; {hi:g} already lets K be off by 0.1 %, and below {lo:g} float64 cannot "
            f"resolve ln K); got {tol!r}"
        )
    return float(tol)


class ReactionSystem:
    """Species in phases and the reactions between them.

    Parameters
    ----------
    species : sequence of str
        Species names, unique. Names that are chemical formulas (``CH4``,
        ``CH3OH``) are atom-balance checked; other names are labels.
    reactions : sequence of str, or mapping label -> equation, or sequence of (label, equation)
        Equations such as ``"CH4 + H2O = CO + 3 H2"`` (``<=>`` also accepted,
        coefficients may be fractions: ``"0.5 N2 + 1.5 H2 = NH3"``). Labels
        default to ``r1``, ``r2``, ...
    phases : mapping species -> {"gas", "liquid"}, optional
        Phase of each species; unlisted species are ideal-gas.
    P0 : float, default 1.0
        Standard-state pressure of the K data, bar (1.01325 for data on an
        atmosphere basis).
    formulas : mapping species -> str or None, optional
        Explicit chemical formula of a species (``{"EtOH": "C2H5OH"}``), or
        ``None`` to exclude it from the atom-balance check.
    check_balance : bool, default True
        Check the element balance of every reaction between formulas.
    lnK : mapping label -> float or LnKFunction, or sequence of them, optional
        Default equilibrium constants: a constant ln K, or ln K as a function
        of temperature so that a case needs only ``T``.
    species_data : mapping species -> NASA7, Shomate or CpPolynomial, optional
        Standard-state thermochemistry, each on its own standard pressure
        ``P_ref`` (1 bar by default); every reaction without explicit K data
        whose species all have data gets ``ln K(T) = -dG(T) / (R T)`` from
        it, converted to the system's ``P0`` (``- sum over gas species of
        nu_i ln(P0 / P_ref_i)``). With ``reactions="auto"`` an
        independent reaction set is generated from the species' formulas.
    thermo : {"chemicals"}, optional
        Take the data of every species not in ``species_data`` from the
        ``chemicals`` package: by compound name first, else by formula (a
        condensed structural formula such as ``C2H5OH`` is read as the
        structure it writes; a formula that fits more than one compound
        with data, such as ``C4H10``, is refused with the candidates
        listed). Each species' ``source`` records the compound's name and
        registry number and where its values came from.

    Raises
    ------
    SystemDefinitionError
        (or a subclass) naming the reaction, species or element at fault:
        unknown species, unbalanced atoms, dependent reactions, a bad phase.

    Examples
    --------
    >>> system = ReactionSystem(
    ...     species=["CH4", "H2O", "CO", "H2", "CO2", "N2"],
    ...     reactions=["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"],
    ... )
    >>> system.labels
    ('r1', 'r2')
    >>> res = system.solve({"CH4": 1.0, "H2O": 3.0, "N2": 0.1}, lnK=[3.27, 0.36], P=1.0)
    >>> bool(res.converged[0])
    True
    """

    def __init__(
        self,
        species: Sequence[str],
        reactions: Sequence[str] | Mapping[str, str] | Sequence[tuple[str, str]],
        *,
        phases: Mapping[str, str] | None = None,
        P0: float = 1.0,
        formulas: Mapping[str, str | None] | None = None,
        check_balance: bool = True,
        lnK: Mapping[str, Any] | Sequence[Any] | None = None,
        species_data: Mapping[str, Any] | None = None,
        thermo: str | None = None,
    ) -> None:
        if isinstance(species, str) or not isinstance(species, Iterable):
            raise SystemDefinitionError("species must be a list of names, e.g. ['CH4', 'H2O']")
        self.species: tuple[str, ...] = tuple(str(s).strip() for s in species)
        if not self.species:
            raise SystemDefinitionError("a system needs at least one species")
        seen: set[str] = set()
        for name in self.species:
            if not name or any(c.isspace() for c in name):
                raise SystemDefinitionError(f"species name {name!r} must be non-empty without spaces")
            if name in seen:
                raise SystemDefinitionError(f"species {name!r} is listed twice")
            seen.add(name)
        self._index = {name: k for k, name in enumerate(self.species)}

        self.formulas = self._read_formulas(formulas)
        if isinstance(reactions, str) and reactions.strip().lower() == "auto":
            from eqbatch.thermo import independent_reactions

            reactions = independent_reactions(self.species, self.formulas)
            if not reactions:
                raise SystemDefinitionError(
                    "reactions='auto': the species admit no reaction (S = rank of elements)"
                )
        self.labels, self.equations = self._read_reactions(reactions)
        self.phases: tuple[str, ...] = self._read_phases(phases)
        if not isinstance(check_balance, (bool, np.bool_)):
            raise SystemDefinitionError(f"check_balance must be True or False, got {check_balance!r}")
        try:
            if isinstance(P0, (bool, np.bool_)):
                raise TypeError  # True is not a pressure, though float(True) is 1.0
            self.P0 = float(P0)
        except (TypeError, ValueError):
            raise SystemDefinitionError(f"P0 must be a pressure in bar, got {P0!r}") from None
        if not (self.P0 > 0 and math.isfinite(self.P0)):
            raise SystemDefinitionError(f"P0 must be a positive pressure in bar, got {P0!r}")

        nu = np.zeros((len(self.labels), len(self.species)))
        parsed = []
        for j, (label, eq) in enumerate(zip(self.labels, self.equations)):
            coefs = parse_equation(eq, self.species, label)
            parsed.append(coefs)
            if check_balance:
                check_atom_balance(coefs, self.formulas, label, eq)
            for name, c in coefs.items():
                nu[j, self._index[name]] = c
        nu.setflags(write=False)
        self.stoich: np.ndarray = nu
        self._reactive = np.any(nu != 0, axis=0)
        self._core = self._build_core()
        self.lnK_data: dict[str, KData] = self._read_lnk(lnK)
        given_lnk = dict(self.lnK_data)
        self.species_data = self._read_species_data(species_data)
        if thermo is not None:
            if str(thermo).lower() != "chemicals":
                raise SystemDefinitionError(
                    f"thermo must be 'chemicals' (the supported data source), got {thermo!r}"
                )
            from eqbatch.thermo import chemicals_data

            for name in self.species:
                if name not in self.species_data:
                    text = (formulas or {}).get(name)
                    self.species_data[name] = chemicals_data(name, text if isinstance(text, str) else None)
        for label, coefs in zip(self.labels, parsed):
            if label not in self.lnK_data and all(name in self.species_data for name in coefs):
                from eqbatch.thermo import ThermoLnK

                # on the system's P0 (each data set keeps its own standard pressure)
                self.lnK_data[label] = ThermoLnK(
                    coefs, self.species_data, P0=self.P0, phases=dict(zip(self.species, self.phases))
                )
        # What it takes to build the same system again (pickling, Dask workers).
        self._spec = {
            "species": list(self.species),
            "reactions": list(zip(self.labels, self.equations)),
            "phases": dict(zip(self.species, self.phases)),
            "P0": self.P0,
            "formulas": {k: v for k, v in (formulas or {}).items()},
            "check_balance": check_balance,
            "species_data": dict(self.species_data),  # includes any fetched from a data source
            "lnK": given_lnk,
        }
        self._constant_lnk = self._constant_row()
        self._p0_row = np.array([self.P0])
        self._two_phase = len(set(self.phases)) > 1
        self._range_checks = self._ranges()

    # ----------------------------------------------------------------- set-up

    def _read_reactions(self, reactions: Any) -> tuple[tuple[str, ...], tuple[str, ...]]:
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

    def _read_phases(self, phases: Mapping[str, str] | None) -> tuple[str, ...]:
        out = ["gas"] * len(self.species)
        for name, phase in (phases or {}).items():
            if name not in self._index:
                raise UnknownSpeciesError(
                    f"phases: {name!r} is not a species of this system "
                    f"(species are {', '.join(self.species)})"
                )
            key = str(phase).strip().lower()
            if key not in PHASES:
                raise SystemDefinitionError(
                    f"phase of {name!r} is {phase!r}; valid phases are {', '.join(PHASES)}"
                )
            out[self._index[name]] = key
        return tuple(out)

    def _read_formulas(self, formulas: Mapping[str, str | None] | None) -> dict[str, dict[str, int] | None]:
        parsed = {name: parse_formula(name) for name in self.species}
        for name, formula in (formulas or {}).items():
            if name not in self._index:
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

    def _build_core(self) -> _core.System:
        codes = [PHASES[p] for p in self.phases]
        try:
            return _core.System(np.ascontiguousarray(self.stoich), codes, self.P0)
        except _core.StoichiometryError as err:
            kind, reaction, indices, coefs = err.args
            if kind == "dependent":
                combo = _format_combination(indices, coefs, self.labels)
                raise DependentReactionsError(
                    f"reaction {self.labels[reaction]!r} ({self.equations[reaction]}) is a linear "
                    f"combination of the others: {self.labels[reaction]} = {combo}. Remove one of "
                    "them: dependent reactions add nothing to an equilibrium calculation"
                ) from None
            if kind == "unbounded":
                names = ", ".join(f"{self.labels[i]!r} ({self.equations[i]})" for i in indices)
                combo = _format_combination(indices, coefs, self.labels)
                raise UnboundedReactionsError(
                    f"the combination {combo} of reactions {names} consumes nothing, so its extent "
                    "is unbounded and no equilibrium exists; every reaction must use up something"
                ) from None
            raise SystemDefinitionError(str(err)) from None

    def _read_lnk(self, lnK: Any) -> dict[str, KData]:
        if lnK is None:
            return {}
        if isinstance(lnK, Mapping):
            items = list(lnK.items())
        else:
            values = list(lnK)
            if len(values) != len(self.labels):
                raise SystemDefinitionError(f"lnK has {len(values)} entries for {len(self.labels)} reactions")
            items = list(zip(self.labels, values))
        out: dict[str, KData] = {}
        for label, value in items:
            if label not in self.labels:
                raise SystemDefinitionError(
                    f"lnK: {label!r} is not a reaction label (labels are {', '.join(self.labels)})"
                )
            out[label] = as_lnk_data(value, label)
        return out

    def _read_species_data(self, data: Mapping[str, Any] | None) -> dict[str, Any]:
        from eqbatch.thermo import NASA7, CpPolynomial, Shomate, species_data_from_table

        out = {}
        for name, value in (data or {}).items():
            if name not in self._index:
                raise UnknownSpeciesError(f"species_data: {name!r} is not a species of this system")
            if isinstance(value, (NASA7, Shomate, CpPolynomial)):
                out[name] = value
            elif isinstance(value, Mapping):
                out[name] = species_data_from_table(name, value)
            else:
                raise SystemDefinitionError(
                    f"species_data[{name!r}] must be NASA7, Shomate or CpPolynomial data"
                )
            spans = [out[name].range]
            if isinstance(out[name], Shomate):
                spans += [(r[0], r[1]) for r in out[name].ranges]
            elif isinstance(out[name], NASA7):
                spans += [(out[name].T_min, out[name].T_mid), (out[name].T_mid, out[name].T_max)]
            for lo, hi in spans:
                if not (0.0 <= lo < hi < math.inf):
                    raise SystemDefinitionError(
                        f"species_data.{name}: temperature range {lo:g}-{hi:g} K is empty or inverted "
                        "(each T_min must be below its T_max, and a NASA7 T_mid between them)"
                    )
        return out

    def _ranges(self) -> list[tuple[str, float, float, str, str, list[int]]]:
        """What :meth:`lnK` checks for extrapolation: per ln K(T) correlation
        with a fitted range and per species data set used by some reaction,
        ``(subject, T_min, T_max, what, tail, reaction indices)``."""
        from eqbatch.thermo import ThermoLnK

        checks = []
        from_data: dict[str, list[int]] = {}
        for j, label in enumerate(self.labels):
            data = self.lnK_data.get(label)
            if isinstance(data, LnKFunction) and data.valid_range is not None:
                checks.append((f"ln K of {label!r}", *data.valid_range, "correlation", "", [j]))
            elif isinstance(data, ThermoLnK):
                for k in np.flatnonzero(self.stoich[j]):
                    from_data.setdefault(self.species[k], []).append(j)
        for name in self.species:
            if name in from_data:
                data, used = self.species_data[name], from_data[name]
                subject = f"species data of {name!r} ({data.source.split(';')[0]})"
                tail = ", in ln K of " + ", ".join(repr(self.labels[j]) for j in used)
                checks.append((subject, *map(float, data.range), "data", tail, used))
        return checks

    def _report_ranges(self, T: np.ndarray, by_reaction: bool = False) -> None:
        """Warn once per data set evaluated outside its range at ``T`` (K):
        ``(N,)`` for every reaction, or with ``by_reaction`` ``(N, R)`` (column
        ``j`` is reaction ``j``'s temperature: an approach solve's second
        evaluation of the same cases, which a collecting CLI counts once)."""
        for subject, lo, hi, what, tail, used in self._range_checks:
            T_used = T[:, used] if by_reaction else T
            report_extrapolation(subject, T_used, lo, hi, what=what, tail=tail, revises=by_reaction)

    def dG(self, T: ArrayLike) -> np.ndarray:
        """``(N, R)`` standard reaction Gibbs energy, J/mol, at ``T`` (K)."""
        from eqbatch.thermo import R

        T = np.atleast_1d(np.asarray(T, dtype=np.float64))
        return -R * T[:, None] * self.lnK(T)

    def dH(self, T: ArrayLike) -> np.ndarray:
        """``(N, R)`` standard reaction enthalpy, J/mol, at ``T`` (K): ``R T^2 d ln K / dT``."""
        from eqbatch.thermo import R

        T = np.atleast_1d(np.asarray(T, dtype=np.float64))
        return R * (T * T)[:, None] * self.dlnK_dT(T)

    def _constant_row(self) -> np.ndarray | None:
        if len(self.lnK_data) != len(self.labels):
            return None
        if not all(isinstance(v, float) for v in self.lnK_data.values()):
            return None
        row = np.array([[self.lnK_data[label] for label in self.labels]], dtype=np.float64)
        row.setflags(write=False)
        return row

    @classmethod
    def from_toml(cls, path: str | os.PathLike[str]) -> ReactionSystem:
        """Read a system file (TOML); see the README for the format.

        Raises
        ------
        SystemFileError
            The file is missing, not TOML, or has a bad key (the message names
            the file and the key).
        """
        from eqbatch.system_file import load_system

        return load_system(path)

    # ------------------------------------------------------------- accessors

    @property
    def n_species(self) -> int:
        return len(self.species)

    @property
    def n_reactions(self) -> int:
        return len(self.labels)

    def index(self, species: str) -> int:
        """Column of ``species`` in the amount arrays."""
        try:
            return self._index[species]
        except KeyError:
            raise UnknownSpeciesError(
                f"{species!r} is not a species of this system (species are {', '.join(self.species)})"
            ) from None

    def reactants(self) -> list[str]:
        """Species consumed by at least one reaction as written."""
        return [s for k, s in enumerate(self.species) if np.any(self.stoich[:, k] < 0)]

    def reacting_species(self) -> list[str]:
        """Species in at least one reaction, on either side: those whose
        conversion means something (an inert keeps its feed). A generated
        reaction may write a fed species as a product (methane in
        ``CO + 3 H2 = CH4 + H2O``); its conversion is still defined, and
        negative where the equilibrium makes more of it than was fed."""
        return [s for k, s in enumerate(self.species) if self._reactive[k]]

    @property
    def needs_T(self) -> bool:
        """Whether some reaction's K is a function of temperature."""
        return any(callable(v) for v in self.lnK_data.values())

    def lnK(self, T: ArrayLike) -> np.ndarray:
        """``(N, R)`` ln K of every reaction at temperatures ``T`` (K) from the
        system's K data; NaN rows where ``T`` is not positive and finite.

        Raises
        ------
        CaseInputError
            A reaction has no K data.
        """
        T = np.atleast_1d(np.asarray(T, dtype=np.float64))
        if T.ndim != 1:
            raise CaseInputError(f"T must be a scalar or a 1-D array, got shape {T.shape}")
        missing = [label for label in self.labels if label not in self.lnK_data]
        if missing:
            raise CaseInputError(
                f"reaction(s) {', '.join(map(repr, missing))} have no K data in the system; "
                "give lnK=, K= or log10K= to solve()"
            )
        bad = _bad_temperatures(T) if T.shape[0] else None
        if bad is not None:
            T = np.where(bad, np.nan, T)  # no extrapolation warning for a temperature that is not one
        out = np.empty((T.shape[0], self.n_reactions))
        with quiet_ranges():  # reported below, once per data set with the count of cases
            for j in range(self.n_reactions):
                out[:, j] = self._lnk_column(j, T)
        self._report_ranges(T)
        if bad is not None:
            out[bad] = np.nan
        return out

    def lnK_at(self, T: ArrayLike) -> np.ndarray:
        """``(N, R)`` ln K of each reaction at its own temperature: column
        ``j`` of ``T`` (shape (N, R)) is the temperature of reaction ``j``
        (an approach temperature, say)."""
        T = np.asarray(T, dtype=np.float64)
        out = np.empty(T.shape)
        with quiet_ranges(), np.errstate(invalid="ignore"):
            for j in range(self.n_reactions):
                column = T[:, j]
                out[:, j] = self._lnk_column(
                    j, np.where((column > 0.0) & (column < math.inf), column, np.nan)
                )
        with np.errstate(invalid="ignore"):
            self._report_ranges(np.where((T > 0.0) & (T < math.inf), T, np.nan), by_reaction=True)
        return out

    def dlnK_dT_at(self, T: ArrayLike) -> np.ndarray:
        """``(N, R)`` d ln K / dT of each reaction at its own temperature
        (column ``j`` of ``T``, as in :meth:`lnK_at`)."""
        T = np.asarray(T, dtype=np.float64)
        out = np.zeros(T.shape)
        with quiet_ranges():
            for j, label in enumerate(self.labels):
                data = self.lnK_data.get(label)
                if data is None:
                    raise CaseInputError(f"reaction {label!r} has no K data: d ln K / dT is unknown")
                if callable(data):
                    out[:, j] = data.derivative(T[:, j])
        return out

    def _lnk_column(self, j: int, T: np.ndarray) -> np.ndarray:
        """ln K of reaction ``j`` at temperatures ``T`` (1-D), from its K data."""
        data = self.lnK_data[self.labels[j]]
        return data(T) if callable(data) else np.full(T.shape, float(data))

    def __reduce__(self):
        return (_rebuild_system, (self._spec,))

    def __repr__(self) -> str:
        eqs = "; ".join(f"{lab}: {eq}" for lab, eq in zip(self.labels, self.equations))
        return f"<ReactionSystem {self.n_species} species, {self.n_reactions} reactions: {eqs}>"

    # ----------------------------------------------------------------- solve

    def _feed_array(self, feed: Any) -> np.ndarray:
        # Fast path for what optimisers pass: a float64 vector or matrix.
        if type(feed) is np.ndarray and feed.dtype == np.float64 and feed.shape[-1] == self.n_species:
            if feed.ndim == 1:
                return feed.reshape(1, -1) if feed.flags.c_contiguous else np.ascontiguousarray(feed)[None]
            if feed.ndim == 2 and feed.flags.c_contiguous:
                return feed
        labelled = _labelled(feed)
        if labelled is not None:
            return self._align(*labelled, "feed", self.species)
        if np.iscomplexobj(feed):
            raise CaseInputError("feed has complex values; amounts must be real numbers (mol)")
        arr = np.asarray(feed, dtype=np.float64)
        if arr.ndim == 1:
            arr = arr.reshape(1, -1)
        if arr.ndim != 2 or arr.shape[1] != self.n_species:
            raise CaseInputError(
                f"feed must have shape (N, {self.n_species}) or ({self.n_species},) in the species order "
                f"{', '.join(self.species)}; got shape {np.shape(feed)}"
            )
        return arr if arr.flags.c_contiguous else np.ascontiguousarray(arr)

    def _align(self, labels: list[Any], columns: list[Any], name: str, names: Sequence[str]) -> np.ndarray:
        """``(N, len(names))`` float64 from labelled columns, each put in the
        column of its label (see :func:`_labelled`).

        For the feed (``names`` is ``species``) a species without a label is
        zero feed; ln K, K, log10K and x0 need every reaction label. Unknown
        or repeated labels are refused, naming them and the valid ones.
        """
        is_feed = names is self.species
        position = {label: k for k, label in enumerate(names)}
        unknown = [label for label in labels if label not in position]
        if unknown:
            listed = ", ".join(map(repr, unknown))
            hint = ""
            if any(isinstance(label, (int, np.integer)) for label in unknown):
                hint = "; integer labels other than the default 0..k-1 of pandas are not read as positions"
            if is_feed:
                verb = "is not a species" if len(unknown) == 1 else "are not species"
                raise UnknownSpeciesError(
                    f"{name}: {listed} {verb} of this system (species are {', '.join(names)}){hint}"
                )
            raise CaseInputError(
                f"{name}: {listed} not reaction label(s) (labels are {', '.join(names)}){hint}"
            )
        if len(set(labels)) != len(labels):
            twice = sorted({str(label) for label in labels if labels.count(label) > 1})
            raise CaseInputError(f"{name}: {', '.join(twice)} given twice")
        if not is_feed and len(labels) != len(names):
            missing = [label for label in names if label not in labels]
            raise CaseInputError(f"{name}: no value for reaction(s) {', '.join(missing)}")
        values = []
        for label, column in zip(labels, columns):
            if np.iscomplexobj(column):
                raise CaseInputError(f"{name}[{label!r}] is complex; give real numbers: {column!r}")
            try:
                col = np.asarray(column, dtype=np.float64)
            except (TypeError, ValueError):
                raise CaseInputError(f"{name}[{label!r}] is not a number: {column!r}") from None
            if col.ndim > 1:
                raise CaseInputError(
                    f"{name}[{label!r}] must be a scalar or 1-D array (one value per case); "
                    f"got shape {col.shape}"
                )
            values.append(col.reshape(-1))
        n = max((v.size for v in values), default=1)
        arr = np.zeros((n, len(names)))
        for label, col in zip(labels, values):
            if col.size not in (1, n):
                raise CaseInputError(
                    f"{name}[{label!r}] has {col.size} values but others have {n}; give 1 or {n}"
                )
            arr[:, position[label]] = col
        return arr

    def _rows(self, value: Any, name: str, width: int) -> np.ndarray:
        if type(value) is np.ndarray and value.dtype == np.float64 and value.flags.c_contiguous:
            if value.ndim == 2 and value.shape[1] == width:
                return value
            if value.ndim == 1 and width > 1 and value.shape[0] == width:
                return value.reshape(1, -1)
        labelled = _labelled(value)
        if labelled is not None:
            return self._align(*labelled, name, self.labels)
        arr = np.asarray(value, dtype=np.float64)
        if arr.ndim <= 1 and width == 1:
            arr = arr.reshape(-1, 1)
        elif arr.ndim == 1:
            arr = arr.reshape(1, -1)
        if arr.ndim != 2 or arr.shape[1] != width:
            raise CaseInputError(
                f"{name} must have shape (N, {width}) or ({width},), one column per reaction "
                f"({', '.join(self.labels)}); got shape {np.shape(value)}"
            )
        return arr if arr.flags.c_contiguous else np.ascontiguousarray(arr)

    def _lnk_array(self, lnK: Any, K: Any, log10K: Any, T: np.ndarray | None) -> np.ndarray:
        if K is None and log10K is None and type(lnK) in (np.ndarray, list, tuple, float, int):
            return self._rows(lnK, "lnK", self.n_reactions)
        given = [(n, v) for n, v in (("lnK", lnK), ("K", K), ("log10K", log10K)) if v is not None]
        if len(given) > 1:
            raise CaseInputError(f"give only one of lnK=, K=, log10K= (got {', '.join(n for n, _ in given)})")
        if given:
            name, value = given[0]
            arr = self._rows(value, name, self.n_reactions)
            if name == "K":
                with np.errstate(divide="ignore", invalid="ignore"):
                    arr = np.log(arr)
            elif name == "log10K":
                arr = arr * LN10
            return arr
        if T is not None:
            return self.lnK(T.reshape(-1))
        if self._constant_lnk is not None:
            return self._constant_lnk
        if self.needs_T:
            raise CaseInputError("this system's K data depend on temperature: give T= (kelvin)")
        raise CaseInputError(
            "no equilibrium constants: give lnK=, K= or log10K= (one value per reaction, "
            f"{', '.join(self.labels)}), or T= for a system with K(T) data"
        )

    def solve(
        self,
        feed: ArrayLike,
        *,
        lnK: ArrayLike | None = None,
        K: ArrayLike | None = None,
        log10K: ArrayLike | None = None,
        T: ArrayLike | None = None,
        P: ArrayLike | None = None,
        tol: float = 1e-10,
        max_iter: int = 200,
        threads: int | None = None,
        invalid: str = "mark",
        x0: ArrayLike | None = None,
        sensitivities: bool = False,
        approach: Mapping[str, float] | None = None,
        adiabatic: bool = False,
        chain: bool = False,
        out: EquilibriumResult | None = None,
    ) -> EquilibriumResult:
        """Equilibrium of every case.

        Inputs broadcast: any of ``feed``, ``lnK`` (or ``K``/``log10K``/``T``)
        and ``P`` may be a single case while the others are batches.

        Parameters
        ----------
        feed : array_like, shape (N, S) or (S,), or labelled by species
            Feed amounts, mol. Arrays are in the order of ``species``.
            Labelled inputs are aligned by label: a mapping species ->
            amount(s), a pandas Series (one case) or DataFrame (a column per
            species), a numpy structured array or a pyarrow Table; missing
            species are zero, unknown labels raise UnknownSpeciesError.
        lnK, K, log10K : array_like, shape (N, R) or (R,), or labelled by reaction, optional
            Equilibrium constants on the system's standard pressure ``P0``;
            give at most one. Labelled inputs (as for ``feed``) need every
            reaction label. Without them, the system's K data are used
            (evaluated at ``T`` when they depend on temperature).
        T : float or array_like, shape (N,), optional
            Temperature, K, for K(T) data. A case whose ``T`` is not positive
            and finite is invalid input.
        P : float or array_like, shape (N,), optional
            Pressure, bar. Defaults to ``P0``. Other shapes (a ``(N, 1)``
            column, a grid) are refused, for ``T`` too.
        tol : float, default 1e-10, from 1e-15 to 1e-3
            Convergence: ``|ln Q - ln K| <= tol`` for every reaction of an
            independent set: the reactions as given (all-gas systems of up to
            20 reactions and 28 species, solved in batches, while every
            species holds at least 1e-9 of the gas), otherwise
            the same reactions rewritten per case in terms of the most
            abundant species, which keeps trace species precise.
        max_iter : int, default 200
            Newton iterations per case and attempt (a multi-phase case retried
            with a phase absent gets a second budget; ``result.iterations``
            counts both).
        threads : int, optional
            Worker threads (default: all cores). Results do not depend on it.
        invalid : {"mark", "raise"}, default "mark"
            Bad cases (negative or NaN feed, zero total, bad ln K, P or T) get
            ``Status.INVALID_INPUT`` and NaN outputs; ``"raise"`` raises
            :class:`InvalidCaseError` naming the first one instead.
        x0 : array_like, shape (N, R) or (R,), or labelled by reaction, optional
            Starting extents (a warm start, e.g. ``previous.extents``). Used
            where it puts every species that can be present above zero;
            elsewhere the default interior start is used. The equilibrium
            does not depend on it, only the iteration count does.
        sensitivities : bool, default False
            Also compute exact derivatives of the converged cases, read with
            :meth:`EquilibriumResult.sensitivity`.
        approach : mapping label -> kelvin, optional
            Temperature approach to equilibrium per reaction (needs ``T`` and
            K(T) data): the reaction is held ``dT`` short of equilibrium in
            the direction it runs for that case (the sign of its extent at
            equilibrium, found by a first solve), whichever way it is
            written: at ``K(T - dT)`` if it runs endothermic (reforming) and
            ``K(T + dT)`` if it runs exothermic (the shift). A reaction whose
            feed is already within its approach of equilibrium is held at
            zero extent (``result.held``). The temperature of each reaction
            is kept for ``sensitivity("T")``.
        chain : bool, default False
            Start each case from the solution of the case before it (within
            fixed chunks of 64 cases, so results still do not depend on the
            number of threads). Fewer iterations when neighbouring rows are
            alike (a sorted grid); more for unrelated rows. Results then
            depend, within ``tol``, on the order of the cases.
        out : EquilibriumResult, optional
            A result of an earlier solve of this system with as many cases:
            its arrays receive this solve's outputs (no new memory; the earlier
            result then shows the new values). Without it, large outputs
            (4 MiB and up) reuse the arrays of a freed result of the same size
            (see :func:`eqbatch.reuse_output_memory`).
        adiabatic : bool, default False
            ``T`` is the inlet temperature; find per case the outlet
            temperature (``result.T``) at which the mixture is at equilibrium
            and its enthalpy equals the inlet's (needs species data for every
            species). ``Status.OUT_OF_RANGE`` where no temperature in the
            data's range balances. ``tol``, ``max_iter``, ``x0`` and
            ``invalid`` apply as for an isothermal solve; derivatives hold
            the enthalpy balance (``sensitivity("T")`` is by the inlet
            temperature, ``sensitivity(wrt, of="T")`` gives the outlet
            temperature's); ``result.T_iterations`` counts the temperature
            iterations and ``result.iterations`` the Newton iterations of all
            of them.

        Returns
        -------
        EquilibriumResult

        Examples
        --------
        >>> s = ReactionSystem(["A", "B"], ["A = B"])
        >>> res = s.solve([1.0, 0.0], lnK=np.log([1.0, 3.0])[:, None])
        >>> res.amounts.round(6).tolist()
        [[0.5, 0.5], [0.25, 0.75]]
        """
        if adiabatic:
            if T is None or lnK is not None or K is not None or log10K is not None or approach:
                raise CaseInputError(
                    "adiabatic=True takes the inlet temperature T= and species data, nothing else"
                )
            if chain:
                raise CaseInputError(
                    "chain=True does not apply to adiabatic=True (each case's temperature "
                    "iterations already start from its own previous solution)"
                )
            from eqbatch.adiabatic import adiabatic_solve

            return adiabatic_solve(
                self,
                feed,
                T,
                P,
                tol=tol,
                max_iter=max_iter,
                threads=threads,
                invalid=invalid,
                x0=x0,
                sensitivities=sensitivities,
            )
        feed_arr = self._feed_array(feed)
        T_arr = None if T is None else _case_column(T, "T")
        if approach:
            if T_arr is None or lnK is not None or K is not None or log10K is not None:
                raise CaseInputError("approach= needs T= and the system's K(T) data (not explicit constants)")
            from eqbatch.thermo import check_approach

            approach = check_approach(self, approach)
        lnk_arr = self._lnk_array(lnK, K, log10K, T_arr)
        p_arr = self._p0_row if P is None else _case_column(P, "P")
        rows = (feed_arr.shape[0], lnk_arr.shape[0], p_arr.shape[0], 1 if T_arr is None else T_arr.shape[0])
        n = max(rows)
        if n > 1:
            for name, count in zip(("feed", "equilibrium constants", "P", "T"), rows):
                if count != n and count != 1:
                    raise CaseInputError(f"{name} has {count} cases but other inputs have {n}; give 1 or {n}")
        bad_T = None if T_arr is None else _bad_temperatures(T_arr)
        if bad_T is not None:
            # The core does not see T: a NaN ln K makes it mark the case INVALID_INPUT.
            # np.array copies, so the caller's ln K array is never written.
            cases = max(lnk_arr.shape[0], bad_T.shape[0])
            lnk_arr = np.array(np.broadcast_to(lnk_arr, (cases, self.n_reactions)))
            lnk_arr[np.broadcast_to(bad_T, (cases,))] = np.nan
        tol = _checked_tol(tol)
        if invalid not in ("mark", "raise"):
            raise CaseInputError(f"invalid must be 'mark' or 'raise', got {invalid!r}")
        if max_iter != 200 and not (
            isinstance(max_iter, (int, np.integer))
            and not isinstance(max_iter, bool)
            and 0 <= max_iter <= MAX_ITER
        ):
            raise CaseInputError(f"max_iter must be an integer from 0 to {MAX_ITER:,}, got {max_iter!r}")
        if threads is not None and not (isinstance(threads, (int, np.integer)) and threads >= 1):
            raise CaseInputError(f"threads must be a positive integer, got {threads!r}")
        start = None if x0 is None else self._rows(x0, "x0", self.n_reactions)
        if start is not None and start.shape[0] not in (1, n):
            raise CaseInputError(f"x0 has {start.shape[0]} cases but other inputs have {n}; give 1 or {n}")
        held = T_eff = None
        if approach:
            from eqbatch import approach as approach_module

            assert T_arr is not None  # checked above
            solved = approach_module.solve(
                self,
                approach,
                feed_arr,
                lnk_arr,
                T_arr,
                p_arr,
                n,
                (tol, max_iter, threads, start, chain),
                bad_T,
                self._outputs(out, n),
            )
            amounts, extents, status, iterations, absent = (
                solved.amounts,
                solved.extents,
                solved.status,
                solved.iterations,
                solved.absent,
            )
            lnk_arr, T_eff, held = solved.lnK, solved.T_eff, solved.held
        else:
            amounts, extents, status, iterations, absent = self._core.solve(
                feed_arr, lnk_arr, p_arr, n, tol, max_iter, threads, start, chain, self._outputs(out, n)
            )
        # Mole fractions are computed when first read (41 % less fresh memory per case).
        result = EquilibriumResult(
            self, amounts, extents, None, status, iterations, feed_arr, p_arr, T_arr, lnk_arr
        )
        result._T_eff = T_eff
        result.held = held
        result.absent = absent
        if invalid == "raise" and (status == Status.INVALID_INPUT).any():
            k = int(np.flatnonzero(status == Status.INVALID_INPUT)[0])
            T_k = None if T_arr is None else float(T_arr[k if T_arr.shape[0] > 1 else 0])
            why = self._why_invalid(result.feed[k], result.lnK[k], float(result.P[k]), T_k)
            raise InvalidCaseError(f"case {k}: {why}")
        if sensitivities:
            result._sens = self._core.sensitivities(feed_arr, p_arr, amounts, status, absent, threads)
            if held is not None and held.any():
                from eqbatch import approach as approach_module

                approach_module.held_sensitivities(self, result, held, threads)
        return result

    def _outputs(self, out: EquilibriumResult | None, n: int) -> tuple | None:
        """Output arrays for a solve of ``n`` cases: those of ``out`` (an
        earlier result of this system and size, overwritten), or a kept set
        of a freed result of this size (see :mod:`eqbatch.outputs`)."""
        if out is None:
            return outputs.take(n, self.n_species, self.n_reactions)
        if not isinstance(out, EquilibriumResult) or out.system is not self:
            raise CaseInputError("out= must be a result of an earlier solve of this system")
        if len(out) != n or out.absent is None:
            raise CaseInputError(f"out= holds {len(out)} cases, this solve has {n}")
        arrays = (out.amounts, out.extents, out.status, out.iterations, out.absent)
        out.invalidate()  # its values are about to change
        return arrays

    def dlnK_dT(self, T: ArrayLike) -> np.ndarray:
        """``(N, R)`` temperature derivative of ln K, 1/K, from the K(T) data;
        NaN rows where ``T`` is not positive and finite."""
        T = np.atleast_1d(np.asarray(T, dtype=np.float64))
        bad = _bad_temperatures(T) if T.ndim == 1 and T.shape[0] else None
        if bad is not None:
            T = np.where(bad, np.nan, T)  # no extrapolation warning for a temperature that is not one
        out = np.zeros((T.shape[0], self.n_reactions))
        for j, label in enumerate(self.labels):
            data = self.lnK_data.get(label)
            if data is None:
                raise CaseInputError(f"reaction {label!r} has no K data: d ln K / dT is unknown")
            if callable(data):
                with quiet_ranges():  # ln K at the same temperatures reports extrapolation
                    out[:, j] = data.derivative(T)
        if bad is not None:
            out[bad] = np.nan
        return out

    def _why_invalid(self, feed: np.ndarray, lnk: np.ndarray, P: float, T: float | None = None) -> str:
        """Which rule of the core's input check a case broke (see Status.INVALID_INPUT);
        a bad ``T`` reaches the core as a NaN ln K, so it is named before ln K."""
        if not np.all(np.isfinite(feed) & (feed >= 0)):
            return f"the feed has a negative or non-finite amount: {feed.tolist()}"
        if not feed.sum() > 0:
            return "the total feed is zero"
        if T is not None and not 0.0 < T < math.inf:
            return f"the temperature {T} K is not positive and finite"
        if not np.all(np.isfinite(lnk)):
            return f"ln K is not finite: {dict(zip(self.labels, lnk.tolist()))}"
        return f"the pressure {P} bar is not positive and finite"
