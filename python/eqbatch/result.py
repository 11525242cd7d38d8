"""The result of a batch solve: plain arrays with a status per case, and
what follows from them (mole fractions, conversions, messages, exact
derivatives, tables)."""

from __future__ import annotations

from typing import Any

import numpy as np

from eqbatch import _core, outputs
from eqbatch.columns import (
    STATUS_NAME,
    T_OUT,
    dry_columns,
    dry_fractions,
    input_columns,
    output_columns,
    phase_columns,
    phase_names,
    status_names,
    syngas_columns,
    with_units,
)
from eqbatch.errors import CaseInputError
from eqbatch.spec import SystemSpec
from eqbatch.status import CONVERGED_CODES, Status, status_words

#: Amounts at or below this are held at (or fell below) the core's float
#: floor, the smallest amount it follows.
FLOAT_FLOOR = _core.FLOAT_FLOOR * (1 + 1e-9)


class EquilibriumResult:
    """Equilibrium of ``N`` cases, as plain arrays.

    Made by :meth:`ReactionSystem.solve`; the arrays are its outputs (and,
    broadcast to ``N`` rows, its inputs).

    Parameters
    ----------
    system : SystemSpec
        The system solved (a :class:`~eqbatch.ReactionSystem`).
    amounts, extents, mole_fractions, status, iterations : ndarray
        The outputs (``mole_fractions`` None: computed when first read).
    feed, P, T, lnK : ndarray
        The inputs, one row or ``N`` (``T`` None without a temperature).

    Attributes
    ----------
    system : ReactionSystem
        The system solved.
    amounts : ndarray, shape (N, S)
        Equilibrium amounts, mol. Unreachable species are exactly 0.
    extents : ndarray, shape (N, R)
        Extents of the system's reactions, mol.
    mole_fractions : ndarray, shape (N, S)
        Mole fraction of each species within its own phase.
    status : ndarray of uint8, shape (N,)
        :class:`Status` codes.
    iterations : ndarray of uint32, shape (N,)
        Newton iterations per case.
    feed : ndarray, shape (N, S)
        The feed, mol (broadcast to every case).
    P : ndarray, shape (N,)
        Pressure, bar.
    T : ndarray, shape (N,) or None
        Temperature, K, when one was given (an adiabatic solve's outlet).
    lnK : ndarray, shape (N, R)
        The equilibrium constants used.
    absent : ndarray of uint8, shape (N,)
        Mask of the phases found absent (and stable) at equilibrium: bit 0
        the gas, bit 1 the liquid (see :meth:`absent_phases`).
    held : ndarray of bool, shape (N, R), or None
        With ``approach=``: reactions held at zero extent because the feed
        is already within their approach of equilibrium.
    T_iterations : ndarray, shape (N,), or None
        Temperature iterations of an adiabatic solve (equal to
        ``iterations`` for a case the core solved in one Newton iteration
        on extents and temperature: every step moves the temperature).

    Examples
    --------
    >>> from eqbatch import ReactionSystem
    >>> system = ReactionSystem(["N2", "H2", "NH3"], ["0.5 N2 + 1.5 H2 = NH3"])
    >>> res = system.solve([1.0, 3.0, 0.0], K=0.0065, P=[10.0, 100.0])
    >>> len(res), res.converged.tolist(), res.amounts[:, 2].round(4).tolist()
    (2, [True, True], [0.0794, 0.5273])
    >>> res.summary()
    '2 converged'
    """

    __slots__ = (
        "system",
        "amounts",
        "extents",
        "_mole_fractions",
        "status",
        "iterations",
        "_feed",
        "_P",
        "_T",
        "_lnK",
        "_sens",
        "_T_eff",
        "_energy",
        "T_iterations",
        "T_in",
        "absent",
        "held",
        "_ln_phi",
        "_dn_dT",
        "per_hour",
    )

    def __init__(
        self,
        system: SystemSpec,
        amounts: np.ndarray,
        extents: np.ndarray,
        mole_fractions: np.ndarray | None,
        status: np.ndarray,
        iterations: np.ndarray,
        feed: np.ndarray,
        P: np.ndarray,
        T: np.ndarray | None,
        lnK: np.ndarray,
    ) -> None:
        self.system = system
        self.amounts = amounts
        self.extents = extents
        self._mole_fractions = mole_fractions
        self.status = status
        self.iterations = iterations
        self._feed = feed
        self._P: np.ndarray | float = P  # (a float: a prepared solve's one pressure)
        self._T = T
        self._lnK = lnK
        self._sens: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
        #: (N, R) temperature at which each reaction's K was taken (approach).
        self._T_eff: np.ndarray | None = None
        #: Enthalpy balance of an adiabatic solve (see :class:`EnergyBalance`).
        self._energy: EnergyBalance | None = None
        #: (N,) temperature iterations of an adiabatic solve, else None.
        self.T_iterations: np.ndarray | None = None
        #: The feed was given as flows (kmol/h, kg/h): amounts and extents are
        #: mol/h, energies kJ/h (the units ``to_arrow()`` writes).
        self.per_hour = False
        #: (N,) inlet temperature of an energy-balance solve (``adiabatic=True``
        #: or ``duty=``), K, else None.
        self.T_in: np.ndarray | None = None
        #: (N,) uint64 mask of the phases found absent (and stable) at
        #: equilibrium: bit ``k`` is phase ``k`` of ``system.phase_names`` (see
        #: ``absent_phases`` and ``present``).
        self.absent: np.ndarray | None = None
        #: (N, R) bool, with ``approach=``: reactions held at zero extent
        #: because the feed is already within their approach of equilibrium.
        self.held: np.ndarray | None = None
        #: (N, S) ln phi of a non-ideal gas's species at the answer (None: ideal).
        self._ln_phi: np.ndarray | None = None
        #: (N, S) the part of dn/dT through ln phi / ln gamma (non-ideal phases).
        self._dn_dT: np.ndarray | None = None

    def invalidate(self) -> None:
        """Forget what was computed from the arrays (mole fractions, derivatives).

        A later solve with ``out=`` this result overwrites its arrays; it
        calls this first.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"])
        >>> first = system.solve([1.0, 0.0], lnK=0.0)
        >>> first.mole_fractions.tolist()
        [[0.5, 0.5]]
        >>> second = system.solve([1.0, 0.0], lnK=np.log(3.0), out=first)
        >>> second is not first, first.mole_fractions.round(6).tolist()
        (True, [[0.25, 0.75]])
        """
        self._mole_fractions = None
        self._sens = None
        self._dn_dT = None
        self._energy = None

    def __del__(self) -> None:
        # A large output set that nothing else uses is kept for the next solve
        # of its size (eqbatch.outputs); never an error at interpreter exit.
        try:
            if self.absent is not None:
                outputs.give_back((self.amounts, self.extents, self.status, self.iterations, self.absent))
        except Exception:  # noqa: BLE001 - a finaliser must not raise
            pass

    @property
    def mole_fractions(self) -> np.ndarray:
        """(N, S) mole fraction of each species within its own phase.

        0 in an empty phase, NaN for invalid or infeasible cases; computed
        from the amounts when first read (by the core's one definition).
        Assigning None makes the next read compute them again.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["Xa", "Xb", "Xc"], ["Xa = Xb"], phases={"Xc": "liquid"})
        >>> system.solve([1.0, 0.0, 2.0], lnK=0.0).mole_fractions.tolist()
        [[0.5, 0.5, 1.0]]
        """
        if self._mole_fractions is None:
            # (the core's one definition, also used for its batch outputs)
            self._mole_fractions = self.system._engine.mole_fractions(np.ascontiguousarray(self.amounts))
        return self._mole_fractions

    @mole_fractions.setter
    def mole_fractions(self, value: np.ndarray | None) -> None:
        # None: computed again from the amounts when next read.
        self._mole_fractions = value

    def __len__(self) -> int:
        return int(self.amounts.shape[0])

    def __repr__(self) -> str:
        return f"<EquilibriumResult: {len(self)} cases; {self.summary()}>"

    def _rows(self, a: np.ndarray) -> np.ndarray:
        n = len(self)
        return a if a.shape[0] == n else np.broadcast_to(a, (n,) + a.shape[1:])

    @property
    def feed(self) -> np.ndarray:
        """(N, S) the feed of every case, mol (a read-only view where one feed served all).

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"])
        >>> res = system.solve([1.0, 0.0], lnK=[[0.0], [1.0]], P=[1.0, 2.0])
        >>> res.feed.tolist(), res.P.tolist(), res.T, res.lnK.tolist()
        ([[1.0, 0.0], [1.0, 0.0]], [1.0, 2.0], None, [[0.0], [1.0]])
        """
        feed = self._feed
        return self._rows(feed if feed.ndim == 2 else feed[None])  # (S,): one row (a prepared solve)

    @property
    def P(self) -> np.ndarray:
        """(N,) the pressure of every case, bar (see :attr:`feed` for an example)."""
        P = self._P
        return self._rows(P if isinstance(P, np.ndarray) else np.array([P]))

    @property
    def T(self) -> np.ndarray | None:
        """(N,) the temperature of every case, K (an adiabatic solve's outlet), or
        None (see :attr:`feed` for an example)."""
        return None if self._T is None else self._rows(self._T)

    @property
    def lnK(self) -> np.ndarray:
        """(N, R) the equilibrium constants used, on the system's ``P0`` (see
        :attr:`feed` for an example)."""
        lnk = self._lnK
        return self._rows(lnk if lnk.ndim == 2 else lnk[None])

    # ------------------------------------------------------------ energy

    def _species_h_cp(self, T: np.ndarray, what: str) -> tuple[np.ndarray, np.ndarray]:
        """Every species' enthalpy (J/mol) and heat capacity (J/(mol K)) at
        ``T`` (N,), from the system's species data."""
        return self.system._species_h_cp(T, what)

    def _outlet_T(self, what: str) -> np.ndarray:
        if self._T is None:
            raise CaseInputError(f"{what} needs the temperature: solve with T= (and species data)")
        return np.ascontiguousarray(self.T, dtype=float)

    @property
    def enthalpy(self) -> np.ndarray:
        """(N,) the outlet mixture's enthalpy, kJ per case: ``sum n_i h_i(T)``
        on the formation scale of the species data (needs species data for
        every species and ``T``).

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> from eqbatch.thermo import CpPolynomial
        >>> data = {"A": CpPolynomial(a=(4.0,), dHf=0.0, S298=200.0),
        ...         "B": CpPolynomial(a=(4.0,), dHf=-20.0, S298=200.0)}
        >>> s = ReactionSystem(["A", "B"], ["A = B"], species_data=data, check_balance=False)
        >>> res = s.solve([1.0, 0.0], T=298.15)
        >>> float(res.enthalpy[0]) == -20.0 * float(res.amounts[0, 1])   # only B's formation enthalpy
        True
        """
        h, _ = self._species_h_cp(self._outlet_T("enthalpy"), "enthalpy")
        return np.sum(self.amounts * h, axis=1) / 1000.0

    @property
    def heat_capacity(self) -> np.ndarray:
        """(N,) the outlet mixture's heat capacity at fixed composition, kJ/K
        per case: ``sum n_i cp_i(T)`` (needs species data and ``T``).

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> from eqbatch.thermo import CpPolynomial
        >>> data = {"A": CpPolynomial(a=(4.0,), dHf=0.0, S298=200.0),
        ...         "B": CpPolynomial(a=(4.0,), dHf=-20.0, S298=200.0)}
        >>> s = ReactionSystem(["A", "B"], ["A = B"], species_data=data, check_balance=False)
        >>> round(float(s.solve([1.0, 1.0], T=500.0).heat_capacity[0]), 9)   # 2 mol at 4 R
        0.066515701
        """
        _, cp = self._species_h_cp(self._outlet_T("heat_capacity"), "heat_capacity")
        return np.sum(self.amounts * cp, axis=1) / 1000.0

    @property
    def reaction_enthalpy(self) -> np.ndarray:
        """(N, R) the standard reaction enthalpies at each case's temperature,
        J/mol (``system.dH(T)``; needs K(T) data and ``T``)."""
        return self.system.dH(self._outlet_T("reaction_enthalpy"))

    def duty(self, T_in: Any = None) -> np.ndarray:
        """Heat added to the reactor, kJ per case: the outlet's enthalpy at
        ``T`` minus the feed's at its inlet temperature (positive: heat in,
        an endothermic reformer; negative: heat removed).

        Parameters
        ----------
        T_in : float or array_like, shape (N,), optional
            Inlet temperature, K. Default: the inlet of an energy-balance
            solve (``result.T_in``), else ``T`` (the feed enters at the
            reactor's temperature: the duty is then the heat of reaction).

        Returns
        -------
        ndarray, shape (N,)
            kJ per case; zero (to rounding) for an adiabatic solve.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> from eqbatch.thermo import CpPolynomial
        >>> data = {"A": CpPolynomial(a=(4.0,), dHf=0.0, S298=200.0),
        ...         "B": CpPolynomial(a=(4.0,), dHf=-20.0, S298=200.0)}
        >>> s = ReactionSystem(["A", "B"], ["A = B"], species_data=data, check_balance=False)
        >>> res = s.solve([1.0, 0.0], T=400.0)
        >>> bool(abs(res.duty()[0] - (-20.0) * res.amounts[0, 1]) < 1e-9)   # the heat of reaction
        True
        """
        T_out = self._outlet_T("duty")
        if T_in is None:
            T_in = self.T_in if self.T_in is not None else T_out
        T_in = np.broadcast_to(np.asarray(T_in, dtype=float).reshape(-1), T_out.shape)
        h_in, _ = self._species_h_cp(T_in, "duty")
        return self.enthalpy - np.sum(self.feed * h_in, axis=1) / 1000.0

    @property
    def converged(self) -> np.ndarray:
        """(N,) bool: the case reached equilibrium.

        ``Status.CONVERGED``, or ``Status.UNDERFLOW`` where some species lie
        below float64's range.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> res = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"]).solve([[1.0, 0.0], [np.nan, 0.0]], lnK=0.0)
        >>> res.converged.tolist()
        [True, False]
        """
        return np.isin(self.status, CONVERGED_CODES)

    def message(self, case: int = 0) -> str:
        """A sentence on what happened to one case.

        Its status, the iterations it took (for an adiabatic solve,
        temperature iterations and Newton iterations in all), and any species
        that the feed cannot reach (they are exactly zero at equilibrium) or
        that lie below float64's range.

        Parameters
        ----------
        case : int, default 0
            Row of the case.

        Returns
        -------
        str

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["Xa", "Xb", "Xc"], ["Xa + Xb = Xc"])
        >>> system.solve([1.0, 0.0, 0.0], lnK=0.0).message(0)
        'case 0: ...; Xb, Xc cannot be formed from this feed (amount exactly 0)'
        """
        st = Status(int(self.status[case]))
        text = f"case {case}: {st.description}"
        if st == Status.INVALID_INPUT or st == Status.INFEASIBLE:
            return text
        count = int(self.iterations[case])
        newton = f"{count} Newton iteration{'' if count == 1 else 's'}"
        if self.T_iterations is not None:
            steps = int(self.T_iterations[case])
            text += f" after {steps} temperature iteration{'' if steps == 1 else 's'} ({newton} in all)"
            if st == Status.ITERATION_LIMIT:
                text += "; the enthalpy balance did not close within the iteration limits"
        else:
            text += f" after {count} iteration{'' if count == 1 else 's'}"
        feed = self.feed[case]
        absent = self.absent_phases(case)
        names = self.system.phase_names
        zero = [
            name
            for k, name in enumerate(self.system.species)
            if feed[k] == 0
            and self.amounts[case, k] == 0
            and self.system._reactive[k]
            and names[self.system.phase_index[k]] not in absent
        ]
        pure = {
            f"{name}({kind})": k
            for k, (name, kind) in enumerate(zip(self.system.species, self.system.phases))
        }
        settled = bool(self.converged[case])
        for phase in absent:
            k = pure.get(phase)
            a = float(self._activities([case])[0, k]) if k is not None else np.nan
            if np.isfinite(a) and a <= 1.0 + 1e-9:
                text += f"; the {phase} phase is absent (activity {a:.4g} <= 1: it would not form)"
            elif np.isfinite(a):
                # only where the search did not settle: a converged case has
                # every absent phase stable
                text += f"; the {phase} phase is absent although its activity is {a:.4g} > 1 (it would form)"
            elif settled:
                text += f"; the {phase} phase is absent (it would not form: it is stable empty)"
            else:
                text += f"; the {phase} phase is absent"
        if settled and self._on_phase_boundary([case])[0]:
            text += (
                "; a pure phase is on its boundary (activity 1 at zero amount): "
                "derivatives hold on one side only"
            )
        if self.held is not None and self.held[case].any():
            labels = [lab for lab, h in zip(self.system.labels, self.held[case]) if h]
            text += (
                f"; {', '.join(labels)} held at zero extent (the feed is already within "
                "the approach to equilibrium)"
            )
        if zero:
            text += f"; {', '.join(zero)} cannot be formed from this feed (amount exactly 0)"
        if st == Status.UNDERFLOW:
            held = [
                name for k, name in enumerate(self.system.species) if 0 < self.amounts[case, k] <= FLOAT_FLOOR
            ]
            text += (
                f"; {', '.join(held) or 'some species'} would lie below 1e-305 mol (amount is an upper bound)"
            )
        return text

    def absent_phases(self, case: int = 0) -> list[str]:
        """The phases of one case found absent at equilibrium.

        They would not form (a condensate above its dew point, say): the
        solve tried them absent and checked that they are stable empty.

        Parameters
        ----------
        case : int, default 0
            Row of the case.

        Returns
        -------
        list of str
            Names from ``system.phase_names`` (``"liquid"``, ``"C(solid)"``, ...).

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"], phases={"Xb": "liquid"})
        >>> system.solve([1.0, 0.0], lnK=0.0).absent_phases(0)
        []
        """
        if self.absent is None:
            return []
        mask = int(self.absent[case])
        return [name for bit, name in enumerate(self.system.phase_names) if mask >> bit & 1]

    @property
    def phase_amounts(self) -> np.ndarray:
        """(N, P) total amount of each phase (``system.phase_names``), mol; 0 for
        a phase absent at equilibrium, NaN for invalid or infeasible cases.

        Examples
        --------
        >>> import numpy as np
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["C", "CO2", "CO"], ["C + CO2 = 2 CO"], phases={"C": "solid"})
        >>> res = system.solve([0.1, 1.0, 0.0], lnK=np.log(2.0), P=3.0)  # too little carbon
        >>> res.phase_amounts.round(12).tolist(), res.present.tolist()
        ([[1.1, 0.0]], [[True, False]])
        """
        index = self.system.phase_index
        out = np.zeros((len(self), len(self.system.phase_names)))
        np.add.at(out.T, index, self.amounts.T)
        return out

    @property
    def present(self) -> np.ndarray:
        """(N, P) bool: which phases (``system.phase_names``) hold material at
        equilibrium (False for invalid or infeasible cases)."""
        return self.phase_amounts > 0

    @property
    def on_phase_boundary(self) -> np.ndarray:
        """(N,) bool: converged cases where a pure condensed species sits on
        the edge of its phase, absent with an activity within 1e-9 of 1 (in
        ``ln a``) or present with at most 1e-12 of the feed's total. Such a
        case's derivatives (:meth:`sensitivity`) hold on the side of the phase
        set found only: a change one way makes the phase appear or vanish,
        and the derivatives jump there.

        Examples
        --------
        >>> import numpy as np
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["C", "CO2", "CO"], ["C + CO2 = 2 CO"], phases={"C": "solid"})
        >>> # equal CO and CO2 at 1 bar: Q = 0.5, so K = 0.5 puts carbon just at its edge
        >>> system.solve([[0.0, 1.0, 1.0]] * 2, lnK=np.log([[0.5], [0.55]])).on_phase_boundary.tolist()
        [True, False]
        """
        return self._on_phase_boundary(slice(None))

    def _on_phase_boundary(self, rows: Any) -> np.ndarray:
        """:attr:`on_phase_boundary` of the cases ``rows`` (a slice or index array)."""
        pure = np.array([kind in ("solid", "pure_liquid") for kind in self.system.phases])
        converged = np.asarray(self.converged)[rows]
        if not pure.any():
            return np.zeros(converged.shape, dtype=bool)
        amounts = self.amounts[rows]
        feed = np.broadcast_to(np.asarray(self.feed, dtype=float), self.amounts.shape)[rows]
        with np.errstate(divide="ignore", invalid="ignore"):
            ln_a = np.log(self._activities(rows)[:, pure])
        edge_absent = (amounts[:, pure] == 0) & (np.abs(ln_a) <= 1e-9)
        edge_present = (amounts[:, pure] > 0) & (amounts[:, pure] <= 1e-12 * feed.sum(axis=1)[:, None])
        return converged & (edge_absent | edge_present).any(axis=1)

    @property
    def dry_mole_fractions(self) -> np.ndarray:
        """(N, S) dry-basis mole fraction of each gas species that is not
        condensable (``system.condensable``, water by default): its share of
        the gas without them, as a gas analyser after a condenser reads it;
        NaN for the condensable species, species outside the gas, and all
        species where the gas holds no condensable species.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
        >>> s.solve([1.0, 1.0, 0.0, 0.0], lnK=0.0).dry_mole_fractions.round(4).tolist()
        [[0.3333, nan, 0.3333, 0.3333]]
        """
        return dry_fractions(self.system, self.amounts)

    @property
    def fugacity_coefficients(self) -> np.ndarray:
        """(N, S) fugacity coefficient ``phi`` of each gas species at
        equilibrium (1 for an ideal gas; from the system's ``gas_model``
        otherwise); NaN for species not in the gas and for cases without an
        answer.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"])
        >>> s.solve([1.0, 0.0], lnK=0.0).fugacity_coefficients.tolist()
        [[1.0, 1.0]]
        """
        return self._coefficients(np.array([p == "gas" for p in self.system.phases]))

    @property
    def activity_coefficients(self) -> np.ndarray:
        """(N, S) activity coefficient ``gamma`` of each species of a solution
        phase at equilibrium (1 for an ideal solution; from the system's
        ``liquid_model`` otherwise); NaN for gas and pure species and for
        cases without an answer.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"], phases={"Xa": "liquid", "Xb": "liquid"})
        >>> s.solve([1.0, 0.0], lnK=0.0).activity_coefficients.tolist()
        [[1.0, 1.0]]
        """
        solution = np.array([p.startswith("liquid") for p in self.system.phases])
        return self._coefficients(solution)

    def _coefficients(self, members: np.ndarray) -> np.ndarray:
        """exp of the non-ideality coefficients of ``members`` (1 where ideal), NaN elsewhere."""
        if self._ln_phi is not None:
            out = np.exp(self._ln_phi)
        else:
            answered = np.isfinite(self.amounts).all(axis=1, keepdims=True)
            out = np.where(answered, 1.0, np.nan) * np.ones((1, self.system.n_species))
        out[:, ~members] = np.nan
        return out

    @property
    def activities(self) -> np.ndarray:
        """(N, S) activity of each species at equilibrium: ``y P / P0`` in the
        gas (``y phi P / P0`` with a real gas), ``x`` in a solution, 1 for a
        pure species that is present.

        A species at zero gets the activity it would have in equilibrium with
        the mixture, where the reactions fix it (``exp`` of the solution of
        ``nu[:, zero] ln a = ln K - nu[:, rest] ln a_rest``): for an absent pure
        species that is the figure practice quotes (the carbon activity), below
        1 exactly when it cannot form. NaN where the reactions do not fix it
        (a species no reaction with the present ones makes) and for invalid or
        infeasible cases.

        Examples
        --------
        >>> import numpy as np
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["C", "CO2", "CO"], ["C + CO2 = 2 CO"], phases={"C": "solid"})
        >>> res = system.solve([0.0, 1.0, 1.0], lnK=np.log(0.55))  # Q = 0.5 < K: no carbon
        >>> round(float(res.activities[0, 0]), 12)  # a_C = Q / K
        0.909090909091
        """
        return self._activities(slice(None))

    def _activities(self, rows: Any) -> np.ndarray:
        """:attr:`activities` of the cases ``rows`` (a slice or index array)."""
        amounts = self.amounts[rows]
        ln_a = self.system.ln_activities(amounts, self.P[rows])
        if self._ln_phi is not None:  # non-ideal phases: a = y phi P / P0, x gamma
            ln_a = ln_a + self._ln_phi[rows]
        lnK = self.lnK[rows]
        nu = self.system.stoich
        # the unknowns: species of phases holding nothing (ln_activities: NaN)
        unknown = np.isnan(ln_a) & np.isfinite(amounts).all(axis=1)[:, None]
        open_rows = np.flatnonzero(unknown.any(axis=1))
        if open_rows.size:
            patterns, which = np.unique(unknown[open_rows], axis=0, return_inverse=True)
            for k, pattern in enumerate(patterns):
                cases = open_rows[which.reshape(-1) == k]
                ln_a[np.ix_(cases, pattern)] = _implied_ln_a(nu, ln_a[cases], lnK[cases], pattern)
        with np.errstate(over="ignore"):
            return np.exp(ln_a)

    def summary(self) -> str:
        """Counts of cases by status, e.g. ``'998 converged, 2 invalid input'``.

        Returns
        -------
        str
            ``"no cases"`` for an empty result.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> ReactionSystem(["Xa", "Xb"], ["Xa = Xb"]).solve([[1.0, 0.0], [-1.0, 0.0]], lnK=0.0).summary()
        '1 converged, 1 invalid input'
        """
        codes, counts = np.unique(self.status, return_counts=True)
        return ", ".join(f"{c} {status_words(k)}" for k, c in zip(codes, counts)) or "no cases"

    def conversion(self, species: str) -> np.ndarray:
        """Fractional conversion ``(feed - n) / feed`` of a species.

        Parameters
        ----------
        species : str

        Returns
        -------
        ndarray, shape (N,)
            NaN where its feed is zero; negative where the equilibrium holds
            more than was fed.

        Raises
        ------
        UnknownSpeciesError
            ``species`` is not a species of the system.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> res = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"]).solve([[1.0, 0.0], [0.0, 1.0]], lnK=np.log(3.0))
        >>> res.conversion("Xa").round(6).tolist()
        [0.75, nan]
        """
        k = self.system.index(species)
        feed = self.feed[:, k]
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(feed > 0, (feed - self.amounts[:, k]) / feed, np.nan)

    def yields(self, per: str) -> np.ndarray:
        """The yield of every species per mole of ``per`` fed: ``(n_i - n0_i) /
        n0_per`` (mol made per mol fed; negative for a species consumed).
        The hydrogen yield of a reformer is ``yields("CH4")[:, H2]``.

        Parameters
        ----------
        per : str
            A fed species.

        Returns
        -------
        ndarray, shape (N, S)
            NaN rows where ``per`` is not fed.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
        >>> s.solve([1.0, 1.0, 0.0, 0.0], lnK=0.0).yields("CO").round(4).tolist()
        [[-0.5, -0.5, 0.5, 0.5]]
        """
        k = self.system.index(per)
        fed = self.feed[:, k]
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(fed[:, None] > 0, (self.amounts - self.feed) / fed[:, None], np.nan)

    @property
    def methane_slip(self) -> np.ndarray:
        """(N,) methane's dry-basis mole fraction at the outlet (what a
        reformer's outlet analyser reads after the condenser; the sweeps'
        ``ydry_CH4`` column): the dry mole fraction of ``CH4``.

        Raises
        ------
        UnknownSpeciesError
            The system has no ``CH4``.

        Examples
        --------
        >>> from eqbatch.demo import reformer_feed, reformer_system
        >>> res = reformer_system().solve(reformer_feed(3.0), T=1100.0, P=25.0)
        >>> round(float(res.methane_slip[0]), 4)  # 6.9 % dry at 1100 K, 25 bar, steam to carbon 3
        0.0695
        """
        return self.dry_mole_fractions[:, self.system.index("CH4")]

    def sensitivity(self, wrt: str, of: str = "amounts") -> np.ndarray:
        """Exact derivatives of the equilibrium (solve with ``sensitivities=True``).

        Parameters
        ----------
        wrt : {"lnK", "lnP", "P", "feed", "T"}
            ``"lnK"`` gives shape (N, S, R) (for ``of="extents"`` (N, R, R)),
            ``"feed"`` (N, S, S) (derivative by the feed of each species),
            the others (N, S). ``"T"`` needs K(T) data in the system; with
            ``approach=`` each reaction's d ln K / dT is taken at its own
            approach temperature, and for an adiabatic solve ``"T"`` is the
            inlet temperature.
        of : {"amounts", "mole_fractions", "extents", "T"}
            ``"T"`` is the temperature the equilibrium is at: for an
            adiabatic solve the outlet temperature, whose derivatives have
            shape (N,) for ``"T"``, ``"P"``, ``"lnP"``, (N, R) for ``"lnK"``
            and (N, S) for ``"feed"``; for an isothermal solve it is the
            given temperature (derivative 1 by ``"T"``, 0 by the rest).

        Returns
        -------
        ndarray
            Derivatives from the implicit function theorem applied to the
            converged Newton system; NaN for cases that did not converge.
            Species the feed cannot form have zero derivatives. An adiabatic
            solve's derivatives hold the enthalpy balance: the outlet
            temperature moves with the input, and the amounts with it.

        Raises
        ------
        CaseInputError
            The solve had no ``sensitivities=True``, or ``wrt="T"`` without a
            temperature.
        ValueError
            An unknown ``wrt`` or ``of``.

        Examples
        --------
        ``A = B`` with ``K = 3``: ``n_B = 3 / 4`` of the feed, and
        ``d n_B / d ln K = K / (1 + K)^2 = 3 / 16`` per mol.

        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"])
        >>> res = system.solve([1.0, 0.0], lnK=np.log(3.0), sensitivities=True)
        >>> res.sensitivity("lnK")[0].round(6).tolist()
        [[-0.1875], [0.1875]]
        """
        if self._sens is None:
            raise CaseInputError("derivatives were not computed: solve with sensitivities=True")
        if of not in ("amounts", "mole_fractions", "extents", "T"):
            raise ValueError(f"of must be 'amounts', 'mole_fractions', 'extents' or 'T', got {of!r}")
        d_lnk, d_lnp, d_feed = self._sens
        n, S = self.amounts.shape
        energy = self._energy
        dn: np.ndarray
        dT: np.ndarray
        if wrt == "lnK":
            dn, dT = d_lnk, np.zeros((n, d_lnk.shape[2]))
        elif wrt in ("lnP", "P"):
            dn, dT = d_lnp, np.zeros(n)
        elif wrt == "feed":
            dn, dT = d_feed, np.zeros((n, S))
        elif wrt == "T":
            if self._T is None:
                raise CaseInputError("no temperature was given to the solve: d/dT is undefined")
            if energy is None:
                dn, dT = np.einsum("nsr,nr->ns", d_lnk, self._lnk_slope()), np.ones(n)
                if self._dn_dT is not None:
                    dn = dn + self._dn_dT
            elif energy.by_enthalpy:
                raise CaseInputError(
                    "the inlet was given as an enthalpy (H_in=), not a temperature: d/dT is not an input's"
                )
            else:
                dn, dT = np.zeros((n, S)), np.zeros(n)
        else:
            raise ValueError(f"wrt must be 'lnK', 'lnP', 'P', 'feed' or 'T', got {wrt!r}")
        if energy is not None:
            dn, dT = energy.hold(wrt, dn, d_lnk, d_lnp, d_feed, self.amounts)
        if wrt == "P":
            scale = 1.0 / self.P
            dn = dn * scale[:, None]
            dT = dT * scale
        if of == "T":
            return dT
        if of == "amounts":
            return dn
        if of == "mole_fractions":
            return self._fraction_derivative(dn)
        nu = self.system.stoich
        change = dn - np.eye(nu.shape[1])[None] if wrt == "feed" else dn
        # n = n0 + nu^T xi with nu of full row rank: d xi = (nu nu^T)^-1 nu d(n - n0)
        gram = nu @ nu.T
        return np.einsum("rs,ns...->nr...", np.linalg.solve(gram, nu), change)

    def _lnk_slope(self) -> np.ndarray:
        """(N, R) d ln K / dT of the constants used: at the solve's
        temperature, or at each reaction's approach temperature."""
        if self._T_eff is not None:
            return self.system.dlnK_dT_at(np.broadcast_to(self._T_eff, (len(self), self.system.n_reactions)))
        return self.system.dlnK_dT(self.T)

    def _fraction_derivative(self, dn: np.ndarray) -> np.ndarray:
        index = self.system.phase_index
        out = np.empty_like(dn)
        n = self.amounts
        for phase in np.unique(index):
            mask = index == phase
            total = n[:, mask].sum(axis=1)
            d_total = dn[:, mask].sum(axis=1)
            shape = (-1,) + (1,) * (dn.ndim - 2)
            with np.errstate(divide="ignore", invalid="ignore"):
                inv = np.where(total > 0, 1.0 / total, 0.0).reshape(shape)
                y = self.mole_fractions[:, mask].reshape(n.shape[0], mask.sum(), *([1] * (dn.ndim - 2)))
                out[:, mask] = (dn[:, mask] - y * d_total[:, None]) * inv[:, None]
        return out

    def columns(self, inputs: bool = True) -> dict[str, np.ndarray]:
        """Named columns of every case, as views of the arrays.

        Parameters
        ----------
        inputs : bool, default True
            Start with the inputs: ``feed_<species>``, ``P_bar``, ``T_K``
            (when a temperature was given) and ``lnK_<label>``.

        Returns
        -------
        dict of str to ndarray
            Then ``n_<species>``, ``y_<species>``, ``extent_<label>``,
            ``status`` and ``iterations`` (names from :mod:`eqbatch.columns`);
            for an energy balance (``adiabatic=True`` or ``duty=``) ``T_K`` is
            the inlet temperature and a last column ``T_out_K`` the outlet's,
            as in sweeps.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> res = ReactionSystem(["Xa", "Xb"], {"iso": "Xa = Xb"}).solve([1.0, 0.0], lnK=0.0)
        >>> list(res.columns())  # doctest: +NORMALIZE_WHITESPACE
        ['feed_Xa', 'feed_Xb', 'P_bar', 'lnK_iso', 'n_Xa', 'n_Xb', 'y_Xa', 'y_Xb', 'extent_iso',
         'status', 'status_name', 'iterations']
        """
        spec = self.system
        balance = self.T_in is not None  # an energy balance: T_K is the inlet, T_out_K the outlet
        T_given = self._rows(self.T_in) if self.T_in is not None else self.T
        out = input_columns(spec, self.feed, self.P, T_given, self.lnK) if inputs else {}
        fractions = self.mole_fractions
        out.update(output_columns(spec, self.amounts, fractions, self.extents, self.status, self.iterations))
        if phase_names(spec):
            out.update(phase_columns(spec, self.present, self.activities))
        out.update(dry_columns(spec, self.amounts))
        out.update(syngas_columns(spec, self.amounts))
        if balance and self.T is not None:
            out[T_OUT] = self.T
        return out

    def to_pandas(self, inputs: bool = True) -> Any:
        """A :class:`pandas.DataFrame` with one row per case.

        Parameters
        ----------
        inputs : bool, default True
            Include the input columns (see :meth:`columns`).

        Returns
        -------
        pandas.DataFrame

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> system = ReactionSystem(["Xa", "Xb"], {"iso": "Xa = Xb"})
        >>> res = system.solve([1.0, 0.0], lnK=[[0.0], [np.log(3.0)]])
        >>> res.to_pandas(inputs=False)["y_Xb"].round(6).tolist()
        [0.5, 0.75]
        """
        import pandas as pd

        return pd.DataFrame(
            {
                k: status_names(v, "pandas") if k == STATUS_NAME else np.ascontiguousarray(v)
                for k, v in self.columns(inputs).items()
            }
        )

    def to_arrow(self, inputs: bool = True) -> Any:
        """A :class:`pyarrow.Table` with one row per case.

        Parameters
        ----------
        inputs : bool, default True
            Include the input columns (see :meth:`columns`).

        Returns
        -------
        pyarrow.Table

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> res = ReactionSystem(["Xa", "Xb"], {"iso": "Xa = Xb"}).solve([1.0, 0.0], lnK=0.0)
        >>> res.to_arrow().num_rows, res.to_arrow().column("status").to_pylist()
        (1, [0])
        """
        import pyarrow as pa

        cols = self.columns(inputs)
        table = pa.table(
            {
                k: status_names(v, "arrow") if k == STATUS_NAME else pa.array(np.ascontiguousarray(v))
                for k, v in cols.items()
            }
        )
        return table.cast(with_units(table.schema, self.per_hour))  # (each field's unit in its metadata)


class EnergyBalance:
    """What an adiabatic solve's derivatives need.

    Per case the species' enthalpies at the outlet (``h_out``) and the inlet
    (``h_in``), J/mol, the feed's heat capacity at the inlet (``cp_feed``,
    J/K), the heat capacities at the outlet (``cp_out``), the outlet's
    ``d ln K / dT`` (``slope_out``) and the inlet temperature.

    The outlet temperature solves ``f = sum n_i h_i(T) - sum n0_i h_i(T_in) = 0``
    with ``n`` at equilibrium at ``T``. For an input ``theta``,
    ``dT/dtheta = -(df/dtheta) / (df/dT)`` with ``df/dT = sum n cp + sum h dn/dT``
    (``dn/dT`` at fixed inputs); the amounts then move by
    ``dn/dtheta + dn/dT dT/dtheta``.
    """

    __slots__ = ("h_out", "h_in", "cp_feed", "cp_out", "slope_out", "T_in", "by_enthalpy")

    def __init__(
        self,
        h_out: np.ndarray,
        h_in: np.ndarray,
        cp_feed: np.ndarray,
        cp_out: np.ndarray,
        slope_out: np.ndarray,
        T_in: np.ndarray,
        by_enthalpy: bool = False,
    ) -> None:
        self.h_out = h_out
        self.h_in = h_in
        self.cp_feed = cp_feed
        self.cp_out = cp_out
        self.slope_out = slope_out
        self.T_in = T_in
        #: The inlet was given as an enthalpy (``H_in=``): it, not the inlet
        #: temperature, is the fixed input (``h_in`` is then zero).
        self.by_enthalpy = by_enthalpy

    def hold(
        self,
        wrt: str,
        dn: np.ndarray,
        d_lnk: np.ndarray,
        d_lnp: np.ndarray,
        d_feed: np.ndarray,
        amounts: np.ndarray,
    ) -> tuple[np.ndarray, np.ndarray]:
        """Total derivatives ``(d n, d T_out)`` by ``wrt`` from the isothermal
        ones ``dn`` (at the outlet temperature)."""
        dn_dT = np.einsum("nsr,nr->ns", d_lnk, self.slope_out)
        df_dT = np.sum(amounts * self.cp_out, axis=1) + np.sum(self.h_out * dn_dT, axis=1)
        if wrt == "T":  # the inlet temperature: df/dT_in = -sum n0 cp(T_in)
            dT = self.cp_feed / df_dT
            return dn_dT * dT[:, None], dT
        if wrt == "lnK":
            dT = -np.einsum("ns,nsr->nr", self.h_out, dn) / df_dT[:, None]
            return dn + dn_dT[:, :, None] * dT[:, None, :], dT
        if wrt in ("lnP", "P"):
            dT = -np.sum(self.h_out * dn, axis=1) / df_dT
            return dn + dn_dT * dT[:, None], dT
        # feed: df/dn0_k = sum_i h_out_i dn_i/dn0_k - h_in_k
        dT = -(np.einsum("ns,nsk->nk", self.h_out, dn) - self.h_in) / df_dT[:, None]
        return dn + dn_dT[:, :, None] * dT[:, None, :], dT


def _implied_ln_a(nu: np.ndarray, ln_a: np.ndarray, lnK: np.ndarray, unknown: np.ndarray) -> np.ndarray:
    """(N, U) ln a of the ``unknown`` species (columns) of cases whose other
    species have ``ln_a`` (N, S; -inf at zero): from the reactions whose other
    species are all present (least squares) where those fix every unknown,
    else from a reaction in which it is the only unknown (which may give
    +-inf), else NaN."""
    cols = np.flatnonzero(unknown)
    known_cols = np.flatnonzero(~unknown)
    with np.errstate(invalid="ignore"):
        known = ln_a[:, known_cols] @ nu[:, known_cols].T  # (N, R), -inf where a zero takes part
    rhs = lnK - known
    finite = np.isfinite(rhs).all(axis=0)
    a = nu[np.ix_(finite, cols)]
    if finite.any() and np.linalg.matrix_rank(a) == cols.size:
        return np.linalg.lstsq(a, rhs[:, finite].T, rcond=None)[0].T
    out = np.full((ln_a.shape[0], cols.size), np.nan)
    for c, i in enumerate(cols):
        alone = (nu[:, i] != 0) & (np.count_nonzero(nu[:, cols], axis=1) == 1)
        for j in np.flatnonzero(alone & finite) if (alone & finite).any() else np.flatnonzero(alone)[:1]:
            out[:, c] = rhs[:, j] / nu[j, i]
            break
    return out
