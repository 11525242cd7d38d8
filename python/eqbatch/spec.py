"""What a reaction system is, as plain values.

:class:`SystemSpec` is the description at the bottom of the package: species
names and phases, reaction labels, equations and stoichiometry, the standard
pressure, formulas, K data and species data, already checked. Arguments are
checked into one by :func:`eqbatch.definition.define`, system files are read
into one by :func:`eqbatch.system_file.read_spec`, and results, analyses and
sweeps depend on it; :class:`~eqbatch.ReactionSystem` is a SystemSpec that
solves. Besides the values it answers what they alone determine: where a
name is, which species react, and ln K and d ln K / dT at a temperature
(with data used outside their range reported once per data set).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, fields
from functools import cached_property
from typing import Any

import numpy as np

from eqbatch import _core
from eqbatch.errors import CaseInputError, UnknownSpeciesError
from eqbatch.kdata import LnKFunction, quiet_ranges, report_extrapolation
from eqbatch.speciesdata import R, SpeciesData, ThermoLnK

#: Phase kinds accepted in ``phases=`` and system files: the ideal-gas
#: mixture, the default ideal liquid solution (``"liquid:<name>"`` adds
#: further solutions), and pure condensed species (each a phase of its own,
#: activity 1 while present).
PHASES = ("gas", "liquid", "solid", "pure_liquid")
#: Kinds that make a species a phase of its own.
PURE_KINDS = ("solid", "pure_liquid")
#: The core's phase code of a pure condensed species.
_PURE_CODE = 255
#: Most solution phases the core takes (the default liquid and six named).
MAX_SOLUTIONS = 7


def phase_key(phase: str) -> str | None:
    """The canonical form of a phase given by a user (lower case, stripped;
    ``"liquid:<name>"`` with a name of letters, digits and underscores), or
    None if it is not one.

    Examples
    --------
    >>> phase_key(" Solid"), phase_key("liquid:Organic"), phase_key("plasma")
    ('solid', 'liquid:organic', None)
    """
    key = str(phase).strip().lower()
    if key in PHASES:
        return key
    kind, _, name = key.partition(":")
    if kind == "liquid" and name and name.replace("_", "a").isalnum() and name.isascii():
        return key
    return None


def _phase_codes(phases: Sequence[str]) -> list[int]:
    """The core's code of each species' phase: 0 the gas, 1 the liquid,
    2.. the named solutions (in sorted order of their names), 255 a pure
    species."""
    named = sorted({p for p in phases if p.startswith("liquid:")})
    codes = {"gas": 0, "liquid": 1, **{name: 2 + k for k, name in enumerate(named)}}
    return [_PURE_CODE if p in PURE_KINDS else codes[p] for p in phases]


#: K data a reaction can be given: a constant ln K, or ln K as a function of T.
KData = float | LnKFunction
#: K data of a reaction in a system: given, or from its species' data.
ReactionK = float | LnKFunction | ThermoLnK

#: Anything numpy can read as an array (or, where documented, a labelled input).
ArrayLike = Any

#: One extrapolation check: ``(subject, T_min, T_max, what, tail, reaction indices)``.
RangeCheck = tuple[str, float, float, str, str, list[int]]


def compile_system(stoich: np.ndarray, phases: Sequence[str], P0: float) -> _core.System:
    """The core's form of a stoichiometry, its species' phases and ``P0``.

    Raises
    ------
    eqbatch._core.StoichiometryError
        Dependent, unbounded, empty or non-finite reactions (the core's
        check; :func:`eqbatch.definition.define` turns it into a
        :class:`~eqbatch.SystemDefinitionError` naming the reactions).
    """
    return _core.System(np.ascontiguousarray(stoich), _phase_codes(phases), P0)


def bad_temperatures(T: np.ndarray) -> np.ndarray | None:
    """Mask of the temperatures (1-D, K) that are not positive and finite, or
    None if all are (the common case, checked without allocating for one case)."""
    if T.shape[0] == 1:
        return None if 0.0 < T[0] < math.inf else np.ones(1, dtype=bool)
    bad = ~((T > 0.0) & (T < math.inf))
    return bad if bad.any() else None


@dataclass(frozen=True, eq=False, repr=False)
class SystemSpec:
    """A reaction system as plain values, already checked.

    Build one from a system's arguments with :func:`eqbatch.definition.define`
    (what :class:`~eqbatch.ReactionSystem` does) or from a system file with
    :func:`eqbatch.system_file.read_spec`; the constructor takes values that
    are already checked.

    Parameters
    ----------
    species : tuple of str
        Species names, in the order of every amount array.
    labels : tuple of str
        Reaction labels, in the order of every extent and ln K array.
    equations : tuple of str
        The reactions' equations as given.
    stoich : ndarray, shape (R, S)
        Stoichiometric coefficients, products positive (read-only).
    phases : tuple of str
        Phase of each species: ``"gas"``, ``"liquid"``, ``"liquid:<name>"``,
        ``"solid"`` or ``"pure_liquid"`` (see :data:`PHASES`).
    P0 : float
        Standard-state pressure of the K data, bar.
    formulas : dict
        Element counts of each species, or None where it has no formula.
    lnK_data : dict
        K data per reaction label: a constant ln K, an
        :class:`~eqbatch.LnKFunction` or a :class:`~eqbatch.speciesdata.ThermoLnK`
        (from species data). Reactions without K data are absent.
    species_data : dict
        Standard-state data per species (given, or from a data source).
    given_formulas : dict
        The ``formulas=`` argument as given.
    check_balance : bool
        Whether the reactions' atom balance was checked.
    given_lnK : dict
        The K data given (without those from species data).
    gas : GasModel or None
        The gas's equation of state (:mod:`eqbatch.realgas`); None for an
        ideal gas.
    liquid_models : dict or None
        Activity models of solution phases by phase name
        (:mod:`eqbatch.activity`); None where every solution is ideal.
    given_condensable : tuple of str or None
        The species a dry basis leaves out, as given (None: water, where the
        system has it; see :attr:`condensable`).

    Examples
    --------
    >>> from eqbatch.definition import define
    >>> spec = define(["N2", "H2", "NH3"], {"synthesis": "N2 + 3 H2 = 2 NH3"}, lnK=[-10.0])
    >>> spec.labels, spec.stoich.tolist(), spec.lnK_data
    (('synthesis',), [[-1.0, -3.0, 2.0]], {'synthesis': -10.0})
    >>> spec.index("NH3"), spec.reactants()
    (2, ['N2', 'H2'])
    """

    species: tuple[str, ...]
    labels: tuple[str, ...]
    equations: tuple[str, ...]
    stoich: np.ndarray
    phases: tuple[str, ...]
    P0: float
    formulas: dict[str, dict[str, int] | None]
    lnK_data: dict[str, ReactionK]
    species_data: dict[str, SpeciesData]
    given_formulas: dict[str, str | None]
    check_balance: bool
    given_lnK: dict[str, KData]
    gas: Any = None  # an eqbatch.realgas.GasModel (the description sits below that module)
    liquid_models: Any = None  # phase name -> eqbatch.activity.NRTL or Wilson
    given_condensable: tuple[str, ...] | None = None

    def __post_init__(self) -> None:
        self.stoich.setflags(write=False)

    def _values(self) -> dict[str, Any]:
        """The fields, by name (what the constructor takes)."""
        return {f.name: getattr(self, f.name) for f in fields(SystemSpec)}

    def __reduce__(self) -> tuple[Any, ...]:
        # The compiled and cached values are made again where it is unpickled.
        return (_spec_from_values, (self._values(),))

    def __repr__(self) -> str:
        eqs = "; ".join(f"{lab}: {eq}" for lab, eq in zip(self.labels, self.equations))
        return f"<{type(self).__name__} {self.n_species} species, {self.n_reactions} reactions: {eqs}>"

    # ------------------------------------------------------ derived, cached

    @property
    def condensable(self) -> tuple[str, ...]:
        """The species a dry basis leaves out: as given, else ``("H2O",)``."""
        return self.given_condensable if self.given_condensable is not None else ("H2O",)

    @property
    def real_gas(self) -> Any:
        """The gas's equation of state when it is not ideal (else None)."""
        return self.gas if self.gas is not None and self.gas.kind != "ideal" else None

    @property
    def nonideal(self) -> str | None:
        """What makes the system non-ideal, in words (None for ideal phases)."""
        parts = [f"gas_model={self.real_gas.kind!r}"] if self.real_gas is not None else []
        parts += [f"liquid_model[{phase!r}]" for phase in (self.liquid_models or {})]
        return ", ".join(parts) or None

    @cached_property
    def _engine(self) -> _core.System:
        """The compiled system the core solves."""
        return compile_system(self.stoich, self.phases, self.P0)

    @cached_property
    def phase_index(self) -> np.ndarray:
        """(S,) index of each species' phase: 0 the gas, then the solution
        phases (``"liquid"``, then ``"liquid:<name>"`` in sorted order), then
        one per pure condensed species, in species order (bit ``k`` of a
        result's ``absent`` mask is phase ``k``)."""
        out = np.array(self._engine.phase_index, dtype=np.intp)
        out.setflags(write=False)
        return out

    @cached_property
    def phase_names(self) -> tuple[str, ...]:
        """Name of each phase, by :attr:`phase_index`: ``"gas"``, ``"liquid"``,
        ``"liquid:<name>"``, and ``"<species>(solid)"`` or
        ``"<species>(pure_liquid)"`` for a pure species.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["C", "CO2", "CO"], ["C + CO2 = 2 CO"], phases={"C": "solid"})
        >>> system.phase_names
        ('gas', 'C(solid)')
        """
        names = ["gas"] + [""] * (self._engine.n_phases - 1)
        for name, phase, k in zip(self.species, self.phases, self.phase_index):
            names[k] = f"{name}({phase})" if phase in PURE_KINDS else phase
        return tuple(names)

    def ln_activities(self, amounts: np.ndarray, P: np.ndarray) -> np.ndarray:
        """(N, S) ln of each species' activity at ``amounts`` (N, S) and
        pressures ``P`` (N,), bar: ``ln(y P / P0)`` in the gas, ``ln x`` in a
        solution, 0 for a pure species that is present; -inf for a species
        at zero in a phase that holds something, NaN where its phase is empty
        (an absent pure species included) or the amounts are NaN."""
        amounts = np.asarray(amounts, dtype=float)
        out = np.empty_like(amounts)
        index = self.phase_index
        with np.errstate(divide="ignore", invalid="ignore"):
            for k in np.unique(index):
                mask = index == k
                part = amounts[:, mask]
                if self.phases[int(np.flatnonzero(mask)[0])] in PURE_KINDS:
                    out[:, mask] = np.where(part > 0, 0.0, np.nan)
                    continue
                total = part.sum(axis=1, keepdims=True)
                out[:, mask] = np.log(part) - np.log(np.where(total > 0, total, np.nan))
                if k == 0:
                    out[:, mask] += np.log(np.asarray(P, dtype=float) / self.P0).reshape(-1, 1)
        return out

    @cached_property
    def _thermo_table(self) -> tuple[np.ndarray, _core.ThermoTable] | None:
        """The reactions whose K come from species data (:class:`ThermoLnK`)
        and the core's table that evaluates their ln K and dH per temperature;
        None if there are none."""
        rows = [j for j, label in enumerate(self.labels) if isinstance(self.lnK_data.get(label), ThermoLnK)]
        datasets: list[Any] = []
        where: dict[int, int] = {}
        for j in rows:
            for _, d in self.lnK_data[self.labels[j]].terms:  # type: ignore[union-attr]
                if id(d) not in where:
                    where[id(d)] = len(datasets)
                    datasets.append(d)
        if not rows:
            return None
        coef = np.zeros((len(rows), len(datasets)))
        shift = np.zeros(len(rows))
        for k, j in enumerate(rows):
            data = self.lnK_data[self.labels[j]]
            assert isinstance(data, ThermoLnK)
            for c, d in data.terms:
                coef[k, where[id(d)]] += c
            shift[k] = data.ln_k_shift
        table = _core.ThermoTable([d._segments() for d in datasets], coef, shift)
        return np.array(rows, dtype=np.intp), table

    @cached_property
    def _species_table(self) -> _core.ThermoTable:
        """The core's table of every species' data, for enthalpies and heat
        capacities (callers check first that every species has data:
        :meth:`_enthalpy_data`)."""
        data = [self.species_data[name] for name in self.species]
        return _core.ThermoTable([d._segments() for d in data], np.zeros((0, len(data))), np.zeros(0))

    @cached_property
    def _energy_table(self) -> tuple[_core.ThermoTable, float, float] | None:
        """The core's table for adiabatic solves in one Newton iteration
        (every species' data, the reactions as rows, each reaction's
        constant ln K shift) and the data's temperature range, K; None
        unless the system is all gas and ideal and every reaction's ln K
        comes from the species' own data (only then is the iteration's
        merit function the mixture's entropy)."""
        if any(p != "gas" for p in self.phases) or self.nonideal is not None:
            return None
        if any(sp not in self.species_data for sp in self.species):
            return None
        where = {id(self.species_data[sp]): i for i, sp in enumerate(self.species)}
        if len(where) != self.n_species:
            return None
        shift = np.zeros(self.n_reactions)
        for j, label in enumerate(self.labels):
            data = self.lnK_data.get(label)
            if not isinstance(data, ThermoLnK):
                return None
            row = np.zeros(self.n_species)
            for c, d in data.terms:
                if id(d) not in where:
                    return None
                row[where[id(d)]] += c
            if not np.array_equal(row, self.stoich[j]):
                return None
            shift[j] = data.ln_k_shift
        every = [self.species_data[sp] for sp in self.species]
        table = _core.ThermoTable(
            [d._segments() for d in every], np.ascontiguousarray(self.stoich, dtype=float), shift
        )
        return table, max(d.range[0] for d in every), min(d.range[1] for d in every)

    def _enthalpy_data(self, what: str = "adiabatic=True") -> tuple[list[SpeciesData], float, float]:
        """Every species' data and the temperature range all of them cover, K.

        Raises
        ------
        CaseInputError
            Some species has no species data (``what`` names the caller).
        """
        missing = [s for s in self.species if s not in self.species_data]
        if missing:
            raise CaseInputError(
                f"{what} needs species data (enthalpies) for every species; none for {', '.join(missing)}"
            )
        data = [self.species_data[s] for s in self.species]
        return data, max(d.range[0] for d in data), min(d.range[1] for d in data)

    def _species_h_cp(self, T: np.ndarray, what: str = "adiabatic=True") -> tuple[np.ndarray, np.ndarray]:
        """Every species' enthalpy (J/mol, formation scale) and heat capacity
        (J/(mol K)) at ``T`` (N,), in the core (no range warnings: callers
        report or bound the range)."""
        self._enthalpy_data(what)
        return self._species_table.species(np.ascontiguousarray(T, dtype=float))

    def _thermo_columns(
        self, T: np.ndarray, out: np.ndarray, dh: bool = False, dh_out: np.ndarray | None = None
    ) -> np.ndarray:
        """Write ln K (or, with ``dh``, the reaction enthalpy, J/mol) of the
        species-data reactions at ``T`` (1-D) into their columns of ``out``
        (and the enthalpies into ``dh_out`` too, from the same evaluation);
        returns a mask of the columns written."""
        done = np.zeros(self.n_reactions, dtype=bool)
        fast = self._thermo_table
        if fast is not None and T.shape[0]:
            rows, table = fast
            lnk, dH = table.evaluate(np.ascontiguousarray(T))
            out[:, rows] = dH if dh else lnk
            if dh_out is not None:
                dh_out[:, rows] = dH
            done[rows] = True
        return done

    @cached_property
    def _index(self) -> dict[str, int]:
        return {name: k for k, name in enumerate(self.species)}

    @cached_property
    def _reactive(self) -> np.ndarray:
        """(S,) bool: the species in some reaction."""
        return np.any(self.stoich != 0, axis=0)

    @cached_property
    def _p0_row(self) -> np.ndarray:
        """The pressure of a solve without ``P``: ``[P0]``."""
        return np.array([self.P0])

    @cached_property
    def _constant_lnk(self) -> np.ndarray | None:
        """(1, R) ln K when every reaction has a constant (read-only), else None."""
        if len(self.lnK_data) != len(self.labels):
            return None
        if not all(isinstance(v, float) for v in self.lnK_data.values()):
            return None
        row = np.array([[self.lnK_data[label] for label in self.labels]], dtype=np.float64)
        row.setflags(write=False)
        return row

    @cached_property
    def _range_checks(self) -> list[RangeCheck]:
        """What :meth:`lnK` checks for extrapolation: per ln K(T) correlation
        with a fitted range and per species data set used by some reaction,
        ``(subject, T_min, T_max, what, tail, reaction indices)``."""
        checks: list[RangeCheck] = []
        from_data: dict[str, list[int]] = {}
        for j, label in enumerate(self.labels):
            data = self.lnK_data.get(label)
            if isinstance(data, LnKFunction) and data.valid_range is not None:
                lo, hi = data.valid_range
                checks.append((f"ln K of {label!r}", lo, hi, "correlation", "", [j]))
            elif isinstance(data, ThermoLnK):
                for k in np.flatnonzero(self.stoich[j]):
                    from_data.setdefault(self.species[k], []).append(j)
        for name in self.species:
            if name in from_data:
                species_data, used = self.species_data[name], from_data[name]
                subject = f"species data of {name!r} ({species_data.source.split(';')[0]})"
                tail = ", in ln K of " + ", ".join(repr(self.labels[j]) for j in used)
                lo, hi = species_data.range
                checks.append((subject, float(lo), float(hi), "data", tail, used))
        return checks

    # -------------------------------------------------------------- names

    @property
    def n_species(self) -> int:
        """Number of species, ``S``.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["CO", "H2O", "CO2", "H2", "N2"], ["CO + H2O = CO2 + H2"])
        >>> system.n_species, system.n_reactions
        (5, 1)
        """
        return len(self.species)

    @property
    def n_reactions(self) -> int:
        """Number of reactions, ``R`` (see :attr:`n_species` for an example)."""
        return len(self.labels)

    def index(self, species: str) -> int:
        """Column of ``species`` in the amount arrays.

        Parameters
        ----------
        species : str

        Returns
        -------
        int

        Raises
        ------
        UnknownSpeciesError
            ``species`` is not a species of the system (the message lists them).

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"]).index("CO2")
        2
        """
        try:
            return self._index[species]
        except KeyError:
            raise UnknownSpeciesError(
                f"{species!r} is not a species of this system (species are {', '.join(self.species)})"
            ) from None

    def reactants(self) -> list[str]:
        """Species consumed by at least one reaction as written.

        Returns
        -------
        list of str
            In the order of ``species``.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> ReactionSystem(["CO", "H2O", "CO2", "H2", "N2"], ["CO + H2O = CO2 + H2"]).reactants()
        ['CO', 'H2O']
        """
        return [s for k, s in enumerate(self.species) if np.any(self.stoich[:, k] < 0)]

    def reacting_species(self) -> list[str]:
        """Species in at least one reaction, on either side.

        Those whose conversion means something (an inert keeps its feed). A
        generated reaction may write a fed species as a product (methane in
        ``CO + 3 H2 = CH4 + H2O``); its conversion is still defined, and
        negative where the equilibrium makes more of it than was fed.

        Returns
        -------
        list of str
            In the order of ``species``.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> ReactionSystem(["CO", "H2O", "CO2", "H2", "N2"], ["CO + H2O = CO2 + H2"]).reacting_species()
        ['CO', 'H2O', 'CO2', 'H2']
        """
        return [s for k, s in enumerate(self.species) if self._reactive[k]]

    def arguments(self) -> dict[str, Any]:
        """The keyword arguments that build this system again.

        ``ReactionSystem(**spec.arguments())`` is the same system (species data
        taken from a data source are included, so none is looked up again).
        Its ``repr`` is the system's content that a sweep records.

        Returns
        -------
        dict
            ``species``, ``reactions`` (label, equation pairs), ``phases``,
            ``P0``, ``formulas``, ``check_balance``, ``species_data`` and ``lnK``
            (and ``gas_model``, ``critical`` and ``kij`` of a non-ideal gas).

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"], lnK=[0.3])
        >>> ReactionSystem(**s.arguments()).equations
        ('CO + H2O = CO2 + H2',)
        """
        return (
            {
                "species": list(self.species),
                "reactions": list(zip(self.labels, self.equations)),
                "phases": dict(zip(self.species, self.phases)),
                "P0": self.P0,
                "formulas": dict(self.given_formulas),
                "check_balance": self.check_balance,
                "species_data": dict(self.species_data),
                "lnK": dict(self.given_lnK),
            }
            | (self.gas.arguments() if self.gas is not None else {})
            | ({"liquid_model": dict(self.liquid_models)} if self.liquid_models else {})
        )

    @property
    def _spec(self) -> dict[str, Any]:
        """:meth:`arguments` (the name older code and tests read)."""
        return self.arguments()

    # ------------------------------------------------------------ K data

    @property
    def needs_T(self) -> bool:
        """Whether some reaction's K is a function of temperature.

        Examples
        --------
        >>> from eqbatch import LnKFunction, ReactionSystem
        >>> ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"],
        ...                lnK=[LnKFunction(a=-4.33, b=4577.8)]).needs_T
        True
        """
        return any(callable(v) for v in self.lnK_data.values())

    def lnK(self, T: ArrayLike) -> np.ndarray:
        """ln K of every reaction at temperatures ``T`` from the system's K data.

        Parameters
        ----------
        T : float or array_like, shape (N,)
            Temperature, K.

        Returns
        -------
        ndarray, shape (N, R)
            NaN rows where ``T`` is not positive and finite. Data used
            outside their range warn once per data set
            (:class:`~eqbatch.ExtrapolationWarning`).

        Raises
        ------
        CaseInputError
            A reaction has no K data, or ``T`` is not 1-D.

        Examples
        --------
        >>> from eqbatch import LnKFunction, ReactionSystem
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"],
        ...                    lnK=[LnKFunction(a=-4.33, b=4577.8)])
        >>> s.lnK([800.0, 1000.0]).round(4).tolist()
        [[1.3922], [0.2478]]
        """
        return self._lnK_rows(T, None)

    def _lnK_rows(self, T: ArrayLike, dh_out: np.ndarray | None) -> np.ndarray:
        """:meth:`lnK` at ``T``, and with ``dh_out`` ((N, R)) the reaction
        enthalpies (J/mol: the sign of d ln K / dT) written into the columns
        of species-data reactions from the same evaluation (an approach
        solve needs both; other columns are left as they are)."""
        T = np.atleast_1d(np.asarray(T, dtype=np.float64))
        if T.ndim != 1:
            raise CaseInputError(f"T must be a scalar or a 1-D array, got shape {T.shape}")
        missing = [label for label in self.labels if label not in self.lnK_data]
        if missing:
            raise CaseInputError(
                f"reaction(s) {', '.join(map(repr, missing))} have no K data in the system; "
                "give lnK=, K= or log10K= to solve()"
            )
        bad = bad_temperatures(T) if T.shape[0] else None
        if bad is not None:
            T = np.where(bad, np.nan, T)  # no extrapolation warning for a temperature that is not one
        out = np.empty((T.shape[0], self.n_reactions))
        with quiet_ranges():  # reported below, once per data set with the count of cases
            done = self._thermo_columns(T, out, dh_out=dh_out)  # species data: in the core
            for j in np.flatnonzero(~done):
                out[:, j] = self._lnk_column(int(j), T)
        self._report_ranges(T)
        if bad is not None:
            out[bad] = np.nan
        return out

    def lnK_at(self, T: ArrayLike, columns: np.ndarray | None = None) -> np.ndarray:
        """ln K of each reaction at its own temperature.

        Parameters
        ----------
        T : array_like, shape (N, R)
            Column ``j`` is the temperature of reaction ``j`` (an approach
            temperature, say), K.
        columns : ndarray of bool, shape (R,), optional
            Only these reactions (the other columns are NaN).

        Returns
        -------
        ndarray, shape (N, R)
            NaN where a temperature is not positive and finite.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["Xa", "Xb", "Xc"], ["Xa = Xb", "Xb = Xc"], lnK=[{"b": 1000.0}, {"b": -500.0}])
        >>> s.lnK_at([[500.0, 1000.0]]).tolist()
        [[2.0, -0.5]]
        """
        T = np.asarray(T, dtype=np.float64)
        out = np.full(T.shape, np.nan)
        with np.errstate(invalid="ignore"):
            good = np.where((T > 0.0) & (T < math.inf), T, np.nan)
        fast = self._thermo_table if T.ndim == 2 and T.shape[0] else None
        done = np.zeros(self.n_reactions, dtype=bool) if columns is None else ~np.asarray(columns, dtype=bool)
        if fast is not None:  # species data: in the core, one column at a time
            rows, table = fast
            for k, j in enumerate(rows):
                if not done[j]:
                    out[:, j] = table.evaluate(np.ascontiguousarray(good[:, j]))[0][:, k]
                    done[j] = True
        with quiet_ranges(), np.errstate(invalid="ignore"):
            for j in np.flatnonzero(~done):
                out[:, j] = self._lnk_column(int(j), good[:, j])
        with np.errstate(invalid="ignore"):
            self._report_ranges(np.where((T > 0.0) & (T < math.inf), T, np.nan), by_reaction=True)
        return out

    def dlnK_dT(self, T: ArrayLike) -> np.ndarray:
        """Temperature derivative of ln K, 1/K, from the K(T) data.

        Parameters
        ----------
        T : float or array_like, shape (N,)
            Temperature, K.

        Returns
        -------
        ndarray, shape (N, R)
            Zero for constant K; NaN rows where ``T`` is not positive and finite.

        Raises
        ------
        CaseInputError
            A reaction has no K data.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["Xa", "Xb", "Xc"], ["Xa = Xb", "Xb = Xc"], lnK=[{"b": 1000.0}, 0.5])
        >>> s.dlnK_dT(500.0).tolist()
        [[-0.004, 0.0]]
        """
        T = np.atleast_1d(np.asarray(T, dtype=np.float64))
        bad = bad_temperatures(T) if T.ndim == 1 and T.shape[0] else None
        if bad is not None:
            T = np.where(bad, np.nan, T)  # no extrapolation warning for a temperature that is not one
        out = np.zeros((T.shape[0], self.n_reactions))
        for label in self.labels:
            if label not in self.lnK_data:
                raise CaseInputError(f"reaction {label!r} has no K data: d ln K / dT is unknown")
        done = self._thermo_columns(T, out, dh=True) if T.ndim == 1 else np.zeros(self.n_reactions, bool)
        out[:, done] /= R * (T * T)[:, None]  # van 't Hoff: d ln K / dT = dH / (R T^2)
        for j, label in enumerate(self.labels):
            data = self.lnK_data[label]
            if callable(data) and not done[j]:
                with quiet_ranges():  # ln K at the same temperatures reports extrapolation
                    out[:, j] = data.derivative(T)
        if bad is not None:
            out[bad] = np.nan
        return out

    def dlnK_dT_at(self, T: ArrayLike) -> np.ndarray:
        """d ln K / dT of each reaction at its own temperature, 1/K.

        Parameters
        ----------
        T : array_like, shape (N, R)
            Column ``j`` is the temperature of reaction ``j``, K (as in
            :meth:`lnK_at`).

        Returns
        -------
        ndarray, shape (N, R)

        Raises
        ------
        CaseInputError
            A reaction has no K data.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["Xa", "Xb", "Xc"], ["Xa = Xb", "Xb = Xc"], lnK=[{"b": 1000.0}, {"b": 1000.0}])
        >>> s.dlnK_dT_at([[500.0, 1000.0]]).tolist()
        [[-0.004, -0.001]]
        """
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

    def dG(self, T: ArrayLike) -> np.ndarray:
        """Standard reaction Gibbs energy at ``T``, J/mol: ``-R T ln K``.

        Parameters
        ----------
        T : float or array_like, shape (N,)
            Temperature, K.

        Returns
        -------
        ndarray, shape (N, R)

        Raises
        ------
        CaseInputError
            A reaction has no K data.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"], lnK=[{"a": 2.0}])
        >>> s.dG(1000.0).round(1).tolist()
        [[-16628.9]]
        """
        T = np.atleast_1d(np.asarray(T, dtype=np.float64))
        return -R * T[:, None] * self.lnK(T)

    def dH(self, T: ArrayLike) -> np.ndarray:
        """Standard reaction enthalpy at ``T``, J/mol: ``R T^2 d ln K / dT``.

        Parameters
        ----------
        T : float or array_like, shape (N,)
            Temperature, K.

        Returns
        -------
        ndarray, shape (N, R)

        Raises
        ------
        CaseInputError
            A reaction has no K data.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"], lnK=[{"a": 2.0, "b": 1000.0}])
        >>> s.dH([500.0, 1000.0]).round(3).tolist()
        [[-8314.463], [-8314.463]]
        """
        T = np.atleast_1d(np.asarray(T, dtype=np.float64))
        return R * (T * T)[:, None] * self.dlnK_dT(T)

    def _lnk_column(self, j: int, T: np.ndarray) -> np.ndarray:
        """ln K of reaction ``j`` at temperatures ``T`` (1-D), from its K data."""
        data = self.lnK_data[self.labels[j]]
        return data(T) if callable(data) else np.full(T.shape, float(data))

    def _report_ranges(self, T: np.ndarray, by_reaction: bool = False) -> None:
        """Warn once per data set evaluated outside its range at ``T`` (K):
        ``(N,)`` for every reaction, or with ``by_reaction`` ``(N, R)`` (column
        ``j`` is reaction ``j``'s temperature: an approach solve's second
        evaluation of the same cases, which a collecting CLI counts once)."""
        for subject, lo, hi, what, tail, used in self._range_checks:
            T_used = T[:, used] if by_reaction else T
            report_extrapolation(subject, T_used, lo, hi, what=what, tail=tail, revises=by_reaction)


def _spec_from_values(values: dict[str, Any]) -> SystemSpec:
    return SystemSpec(**values)
