"""The reaction system users build and solve: a checked description
(:class:`~eqbatch.spec.SystemSpec`) that runs batches of cases through the
compiled core.

A solve turns its inputs into arrays (:mod:`eqbatch.inputs`), checks its
options, calls the core (through :mod:`eqbatch.approach` for approach
temperatures, or around it in :mod:`eqbatch.adiabatic` for an adiabatic
outlet) and wraps the outputs in an :class:`~eqbatch.EquilibriumResult`.
Keep the path of a plain float64 case lean: optimisers call it thousands of
times.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from eqbatch import approach as approach_module
from eqbatch import outputs
from eqbatch.adiabatic import adiabatic_solve
from eqbatch.definition import define
from eqbatch.equations import molar_mass as formula_molar_mass
from eqbatch.errors import CaseInputError, InvalidCaseError
from eqbatch.inputs import (
    MAX_ITER,
    TOL_RANGE,
    case_column,
    checked_options,
    feed_array,
    lnk_array,
    reaction_rows,
    why_invalid,
)
from eqbatch.prepared import PreparedSolve
from eqbatch.realgas import nonideal_sensitivities, solve_real, warn_if_not_ideal
from eqbatch.result import EquilibriumResult, Status
from eqbatch.spec import PHASES, ArrayLike, KData, SystemSpec, bad_temperatures
from eqbatch.system_file import read_spec
from eqbatch.units import amounts_in_mol, is_quantity, pressure_input, temperature_input

# MAX_ITER, PHASES, TOL_RANGE, ArrayLike and KData live in inputs and spec;
# they are named here too for code that imported them from eqbatch.system.
__all__ = ["MAX_ITER", "PHASES", "TOL_RANGE", "ArrayLike", "KData", "ReactionSystem"]


def _rebuild_system(arguments: dict[str, Any]) -> ReactionSystem:
    arguments = dict(arguments)
    return ReactionSystem(arguments.pop("species"), arguments.pop("reactions"), **arguments)


class ReactionSystem(SystemSpec):
    """Species in phases and the reactions between them.

    A :class:`~eqbatch.spec.SystemSpec` (the checked description: names,
    stoichiometry, phases, ``P0``, formulas, K data and species data) that
    solves: :meth:`solve` runs batches of cases through the compiled core.

    Parameters
    ----------
    species : sequence of str
        Species names, unique. Names that are chemical formulas (``CH4``,
        ``CH3OH``) are atom-balance checked; other names are labels.
    reactions : sequence of str, or mapping label -> equation, or sequence of (label, equation)
        Equations such as ``"CH4 + H2O = CO + 3 H2"`` (``<=>`` also accepted,
        coefficients may be fractions: ``"0.5 N2 + 1.5 H2 = NH3"``). Labels
        default to ``r1``, ``r2``, ...
    phases : mapping species -> str, optional
        Phase of each species; unlisted species are ideal-gas. ``"liquid"``
        is the ideal liquid solution and ``"liquid:<name>"`` another one;
        ``"solid"`` and ``"pure_liquid"`` make a species a phase of its own
        (activity 1 while present). Which phases are present is decided per
        case.
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
    species_data : mapping species -> NASA7, Shomate, CpPolynomial, MaierKelley or Tabulated, optional
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
    gas_model : {"ideal", "peng-robinson", "srk"}, default "ideal"
        The gas's equation of state: fugacity coefficients from the
        Peng-Robinson (1976) or Soave-Redlich-Kwong (1972) cubic with the van
        der Waals one-fluid mixing rules, per case at its composition,
        temperature and pressure (:mod:`eqbatch.realgas`). A non-ideal case
        needs ``T`` even when ``lnK`` is given.
    critical : mapping species -> {"Tc": K, "Pc": bar, "omega": -}, or "chemicals"
        Critical constants of every gas species (needed by a non-ideal
        ``gas_model``); ``"chemicals"`` takes them from the ``chemicals``
        package (``system.gas.sources`` says from where). Given with an
        ideal gas, they serve a warning (:class:`NonIdealGasWarning`) where
        the equilibrium gas's compressibility factor is more than 5 % from 1.
    kij : mapping (species, species) -> float, optional
        Binary interaction parameters of the mixing rule (default 0).
    condensable : sequence of str, optional
        The gas species a dry basis leaves out (``result.dry_mole_fractions``,
        the ``ydry_<species>`` columns of tables and sweeps). Default: water
        (``H2O``) where the system has it; ``[]`` for no dry basis.
    feed_species : sequence of str, optional
        With ``reactions="auto"``: the species the process feeds. Each
        generated reaction is written in the direction it runs from such a
        feed (steam reforming, not methanation, for ``["CH4", "H2O"]``)
        where the feed fixes it (:func:`eqbatch.equations.cone_directions`).
        Generated reactions are labelled from their reactants
        (``CH4+H2O``).
    liquid_model : mapping phase -> NRTL or Wilson, optional
        Activity-coefficient models of solution phases (``"liquid"``,
        ``"liquid:<name>"``; :mod:`eqbatch.activity`): activities ``x gamma``
        per case at the phase's composition and ``T`` (needed even when
        ``lnK`` is given).

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
        gas_model: str | None = None,
        critical: Mapping[str, Mapping[str, float]] | str | None = None,
        kij: Mapping[tuple[str, str], float] | None = None,
        liquid_model: Mapping[str, Any] | None = None,
        condensable: Sequence[str] | None = None,
        feed_species: Sequence[str] | None = None,
    ) -> None:
        spec = define(
            species,
            reactions,
            phases=phases,
            P0=P0,
            formulas=formulas,
            check_balance=check_balance,
            lnK=lnK,
            species_data=species_data,
            thermo=thermo,
            gas_model=gas_model,
            critical=critical,
            kij=kij,
            liquid_model=liquid_model,
            condensable=condensable,
            feed_species=feed_species,
        )
        super().__init__(**spec._values())

    @classmethod
    def from_spec(cls, spec: SystemSpec) -> ReactionSystem:
        """The system a checked description describes.

        Parameters
        ----------
        spec : SystemSpec
            From :func:`eqbatch.definition.define` or
            :func:`eqbatch.system_file.read_spec`.

        Returns
        -------
        ReactionSystem

        Examples
        --------
        >>> from eqbatch.definition import define
        >>> spec = define(["Xa", "Xb"], ["Xa = Xb"], lnK=[0.0])
        >>> ReactionSystem.from_spec(spec).solve([1.0, 0.0]).amounts.tolist()
        [[0.5, 0.5]]
        """
        system = cls.__new__(cls)
        SystemSpec.__init__(system, **spec._values())
        return system

    @classmethod
    def from_toml(cls, path: str | os.PathLike[str]) -> ReactionSystem:
        """Read a system file (TOML); see the README for the format.

        Parameters
        ----------
        path : str or path-like

        Returns
        -------
        ReactionSystem

        Raises
        ------
        SystemFileError
            The file is missing, not TOML, or has a bad key (the message names
            the file and the key).
        SystemDefinitionError
            The system it holds is malformed (the message names the file).

        Examples
        --------
        >>> from importlib import resources
        >>> with resources.as_file(resources.files("eqbatch") / "data/reformer.toml") as path:
        ...     system = ReactionSystem.from_toml(path)
        >>> system.labels
        ('reforming', 'shift')
        """
        return cls.from_spec(read_spec(path))

    def __reduce__(self) -> tuple[Any, ...]:
        # Built again from its arguments (checked again) where it is unpickled: Dask workers.
        return (_rebuild_system, (self.arguments(),))

    # ----------------------------------------------------------------- solve

    def molar_mass(self, species: str) -> float | None:
        """A species' molar mass, kg/mol, from its formula (IUPAC standard
        atomic weights, :data:`eqbatch.equations.ATOMIC_WEIGHTS`); None
        without one.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
        >>> round(s.molar_mass("H2O") * 1000, 3)  # g/mol
        18.015
        """
        return formula_molar_mass(self.formulas.get(species))

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
        duty: ArrayLike | None = None,
        H_in: ArrayLike | None = None,
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
            Convergence: ``|ln Q - ln K| <= tol`` for every reaction of the
            per-case basis, the reactions rewritten so that each has a
            species of its own (one of the least abundant) with coefficient
            1; that species' amount then carries a relative error of about
            ``tol``, however small it is. Every solve path meets this (the
            batch path that iterates on the reactions as given stops where
            it holds for any such rewriting).
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
        approach : mapping label -> kelvin (a value or one per case), optional
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
            of them; ``result.T_in`` is the inlet temperature. All-gas ideal
            systems whose every ln K comes from species data are solved in
            the core by one Newton iteration on extents and temperature
            together; the cases it leaves (traces below 1e-9 of the gas,
            outlets outside the data's range), and other systems, by Newton
            on the temperature around isothermal solves.
        duty : float or array_like, shape (N,), optional
            Heat added to the reactor, kJ per case (negative: removed): the
            outlet's enthalpy is the feed's plus ``duty``, solved as for
            ``adiabatic=True`` (which is ``duty=0``).
        H_in : float or array_like, shape (N,), optional
            With ``adiabatic=True`` or ``duty=``, the feed's enthalpy (kJ per
            case, on the formation scale of the species data) instead of its
            temperature ``T``: the inlet temperature is the one at which the
            feed has that enthalpy (``result.T_in``; NaN and invalid input
            where none between half the data's lowest temperature and twice
            their highest fits).

        Returns
        -------
        EquilibriumResult

        Raises
        ------
        CaseInputError
            Inputs whose shapes do not fit the system or each other, labels
            that are not the system's (:class:`UnknownSpeciesError` for a
            species), options out of range, missing K data, or, with
            ``invalid="raise"``, a bad case (:class:`InvalidCaseError`).

        Examples
        --------
        >>> s = ReactionSystem(["A", "B"], ["A = B"])
        >>> res = s.solve([1.0, 0.0], lnK=np.log([1.0, 3.0])[:, None])
        >>> res.amounts.round(6).tolist()
        [[0.5, 0.5], [0.25, 0.75]]
        """
        if duty is not None and adiabatic:
            raise CaseInputError("give adiabatic=True (no heat exchanged) or duty= (heat added), not both")
        # plant units: "870C", "29 barg", pint quantities, a feed in kmol/h or kg/h
        if type(T) is not float and T is not None and not isinstance(T, np.ndarray):
            T = temperature_input(T)
        if type(P) is not float and P is not None and not isinstance(P, np.ndarray):
            P = pressure_input(P)
        per_hour = False
        if isinstance(feed, Mapping) and any(isinstance(v, str) or is_quantity(v) for v in feed.values()):
            feed, per_hour = amounts_in_mol(dict(feed), self.molar_mass)
        if self.nonideal is not None:
            unsupported = [
                name
                for name, given in (
                    (
                        "adiabatic=True or duty= with sensitivities=True",
                        (adiabatic or duty is not None) and sensitivities,
                    ),
                    ("approach= with sensitivities=True", bool(approach) and sensitivities),
                )
                if given
            ]
            if unsupported:
                raise CaseInputError(
                    f"{', '.join(unsupported)} not yet available with {self.nonideal} "
                    "(the ideal solve has them)"
                )
        if H_in is not None and not (adiabatic or duty is not None):
            raise CaseInputError("H_in= is the inlet of an energy balance: give adiabatic=True or duty=")
        if adiabatic or duty is not None:
            what = "adiabatic=True" if adiabatic else "duty="
            if (
                (T is None) == (H_in is None)
                or lnK is not None
                or K is not None
                or log10K is not None
                or approach
            ):
                raise CaseInputError(
                    f"{what} takes the inlet as a temperature T= or an enthalpy H_in= (one of them) "
                    "and species data, no equilibrium constants or approach"
                )
            if chain:
                raise CaseInputError(
                    "chain=True does not apply to adiabatic=True (each case's temperature "
                    "iterations already start from its own previous solution)"
                )
            tol = checked_options(tol, invalid, max_iter, threads)  # (as an isothermal solve checks them)
            balanced = adiabatic_solve(
                self,
                self.solve,
                feed,
                T,
                P,
                tol=tol,
                max_iter=max_iter,
                threads=threads,
                invalid=invalid,
                x0=x0,
                sensitivities=sensitivities,
                duty=duty,
                H_in=H_in,
            )
            balanced.per_hour = per_hour
            return balanced
        feed_arr = feed_array(self, feed)
        T_arr = None if T is None else case_column(T, "T")
        if approach:
            if T_arr is None or lnK is not None or K is not None or log10K is not None:
                raise CaseInputError("approach= needs T= and the system's K(T) data (not explicit constants)")
            approach = approach_module.check_approach(self, approach)
        dh = None
        if approach:
            # (with the reaction enthalpies of the same evaluation: their signs
            # say which way an approach moves each temperature)
            assert T_arr is not None
            dh = np.full((T_arr.shape[0], self.n_reactions), np.nan)
            lnk_arr = self._lnK_rows(T_arr.reshape(-1), dh)
        else:
            lnk_arr = lnk_array(self, lnK, K, log10K, T_arr)
        p_arr = self._p0_row if P is None else case_column(P, "P")
        rows = (feed_arr.shape[0], lnk_arr.shape[0], p_arr.shape[0], 1 if T_arr is None else T_arr.shape[0])
        n = max(rows)
        if n > 1:
            for name, count in zip(("feed", "equilibrium constants", "P", "T"), rows):
                if count != n and count != 1:
                    raise CaseInputError(f"{name} has {count} cases but other inputs have {n}; give 1 or {n}")
        for label, dT in (approach or {}).items():
            if np.ndim(dT) and np.shape(dT)[0] not in (1, n):
                raise CaseInputError(
                    f"approach[{label!r}] has {np.shape(dT)[0]} cases but other inputs have {n}"
                )
        bad_T = None if T_arr is None else bad_temperatures(T_arr)
        if bad_T is not None:
            # The core does not see T: a NaN ln K makes it mark the case INVALID_INPUT.
            # np.array copies, so the caller's ln K array is never written.
            cases = max(lnk_arr.shape[0], bad_T.shape[0])
            lnk_arr = np.array(np.broadcast_to(lnk_arr, (cases, self.n_reactions)))
            lnk_arr[np.broadcast_to(bad_T, (cases,))] = np.nan
        tol = checked_options(tol, invalid, max_iter, threads)
        start = None if x0 is None else reaction_rows(self, x0, "x0")
        if start is not None and start.shape[0] not in (1, n):
            raise CaseInputError(f"x0 has {start.shape[0]} cases but other inputs have {n}; give 1 or {n}")
        held = T_eff = ln_phi = None
        if approach:
            assert T_arr is not None  # checked above
            solved = approach_module.solve(
                self,
                approach,
                feed_arr,
                lnk_arr,
                T_arr,
                p_arr,
                n,
                approach_module.CoreOptions(tol, max_iter, threads, start, chain),
                bad_T,
                self._outputs(out, n),
                dh,
            )
            amounts, extents, status, iterations, absent = (
                solved.amounts,
                solved.extents,
                solved.status,
                solved.iterations,
                solved.absent,
            )
            lnk_arr, T_eff, held, ln_phi = solved.lnK, solved.T_eff, solved.held, solved.ln_phi
        elif self.nonideal is not None:
            solved_real, ln_phi = solve_real(
                self, feed_arr, lnk_arr, p_arr, T_arr, n, tol, max_iter, threads, start, chain=chain
            )
            if out is not None:  # (the earlier result's arrays receive the values)
                kept = self._outputs(out, n)
                assert kept is not None
                for target, values in zip(kept, solved_real):
                    np.copyto(target, values)
                solved_real = kept
            amounts, extents, status, iterations, absent = solved_real
        else:
            amounts, extents, status, iterations, absent = self._engine.solve(
                feed_arr, lnk_arr, p_arr, n, tol, max_iter, threads, start, chain, self._outputs(out, n)
            )
        # Mole fractions are computed when first read (41 % less fresh memory per case).
        result = EquilibriumResult(
            self, amounts, extents, None, status, iterations, feed_arr, p_arr, T_arr, lnk_arr
        )
        result._T_eff = T_eff
        result.held = held
        result.absent = absent
        if self.nonideal is not None:
            result._ln_phi = ln_phi
        elif self.gas is not None:
            warn_if_not_ideal(self, amounts, T_arr, p_arr, result.converged)
        if invalid == "raise" and (status == Status.INVALID_INPUT).any():
            k = int(np.flatnonzero(status == Status.INVALID_INPUT)[0])
            T_k = None if T_arr is None else float(T_arr[k if T_arr.shape[0] > 1 else 0])
            why = why_invalid(self, result.feed[k], result.lnK[k], float(result.P[k]), T_k)
            raise InvalidCaseError(f"case {k}: {why}")
        if sensitivities:
            result._sens = self._engine.sensitivities(feed_arr, p_arr, amounts, status, absent, threads)
            if self.nonideal is not None:
                assert T_arr is not None  # solve_real needs it
                result._sens, result._dn_dT = nonideal_sensitivities(self, result, T_arr, threads)
            if held is not None and held.any():
                approach_module.held_sensitivities(self, result, held, threads)
        result.per_hour = per_hour
        return result

    def prepare(
        self,
        cases: int = 1,
        *,
        tol: float = 1e-10,
        max_iter: int = 200,
        threads: int | None = None,
        sensitivities: bool = False,
    ) -> PreparedSolve:
        """A solver for repeated calls on ``cases`` cases, with the options checked once.

        For optimisers and other loops that solve the same system many times:
        each call of the returned object's ``solve(feed, lnK=, T=, P=)`` skips
        the option checks, labelled inputs and output allocation of
        :meth:`solve` and writes into the same arrays (the result object is
        the same at every call). The equilibrium is the same to the bit.

        Parameters
        ----------
        cases : int, default 1
            Cases per call.
        tol, max_iter, threads, sensitivities
            As for :meth:`solve`, fixed for every call.

        Returns
        -------
        PreparedSolve

        Raises
        ------
        CaseInputError
            An option out of range.

        Examples
        --------
        >>> s = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"])
        >>> run = s.prepare(sensitivities=True)
        >>> res = run.solve([1.0, 0.0], lnK=[0.0])
        >>> res.amounts.tolist(), res.sensitivity("lnK")[0, :, 0].round(6).tolist()
        ([[0.5, 0.5]], [-0.25, 0.25])
        """
        return PreparedSolve(
            self, cases, tol=tol, max_iter=max_iter, threads=threads, sensitivities=sensitivities
        )

    def _outputs(self, out: EquilibriumResult | None, n: int) -> outputs.Outputs | None:
        """Output arrays for a solve of ``n`` cases: those of ``out`` (an
        earlier result of this system and size, overwritten), or a kept set
        of a freed result of this size (see :mod:`eqbatch.outputs`)."""
        if out is None:
            return outputs.take(n, len(self.species), len(self.labels))
        if not isinstance(out, EquilibriumResult) or out.system is not self:
            raise CaseInputError("out= must be a result of an earlier solve of this system")
        if len(out) != n or out.absent is None:
            raise CaseInputError(f"out= holds {len(out)} cases, this solve has {n}")
        arrays = (out.amounts, out.extents, out.status, out.iterations, out.absent)
        out.invalidate()  # its values are about to change
        return arrays
