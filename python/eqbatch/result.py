"""The result of a batch solve."""

from __future__ import annotations

from enum import IntEnum
from typing import TYPE_CHECKING, Any

import numpy as np

from eqbatch import _core, outputs

if TYPE_CHECKING:
    from eqbatch.system import ReactionSystem


class Status(IntEnum):
    """Per-case outcome, stored as small integers in ``result.status``.

    The numbers are a stable contract (they are written to result tables).
    """

    #: Every reaction satisfies its equilibrium condition within ``tol``.
    CONVERGED = 0
    #: ``max_iter`` Newton iterations were not enough; amounts are the last
    #: (feasible, conserving) iterate.
    ITERATION_LIMIT = 1
    #: Negative or non-finite feed, zero total feed, non-finite ln K, or a
    #: non-positive or non-finite pressure or temperature; every output of
    #: the case is NaN.
    INVALID_INPUT = 2
    #: No equilibrium exists for the feed (the extents are unbounded).
    INFEASIBLE = 3
    #: The Gibbs function could not be lowered further before ``tol`` was met
    #: (float64 limit for the case); amounts are the last iterate.
    STALLED = 4
    #: Adiabatic solve: no outlet temperature within the species data's
    #: range balances the enthalpy; amounts are those at the range's edge.
    OUT_OF_RANGE = 5
    #: At equilibrium, except that some species would lie below the smallest
    #: amount float64 can follow (about 1e-305 mol): they are held there (an
    #: upper bound) and the reactions that would push them lower are unmet.
    #: Counted as converged (``result.converged``); ``message`` names them.
    UNDERFLOW = 6

    @property
    def description(self) -> str:
        return _DESCRIPTIONS[self]


# Names and descriptions come from the core's one status table; the members
# above spell the same codes out for readers and type checkers.
_DESCRIPTIONS = {Status(code): text for code, _, text in _core.STATUS_TABLE}
if [(int(m), m.name) for m in Status] != [(code, name) for code, name, _ in _core.STATUS_TABLE]:
    raise ImportError("eqbatch.Status does not match the compiled core's status table: rebuild the extension")

#: Phase names by bit of the core's mask of absent phases.
PHASE_BITS = ("gas", "liquid")

#: Amounts at or below this are held at (or fell below) the core's float
#: floor, the smallest amount it follows.
FLOAT_FLOOR = _core.FLOAT_FLOOR * (1 + 1e-9)

#: Codes whose amounts are an equilibrium (``result.converged``).
CONVERGED_CODES = (Status.CONVERGED, Status.UNDERFLOW)


class EquilibriumResult:
    """Equilibrium of ``N`` cases, as plain arrays.

    Attributes
    ----------
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
        Temperature, K, when one was given.
    lnK : ndarray, shape (N, R)
        The equilibrium constants used.
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
        "absent",
        "held",
    )

    def __init__(
        self,
        system: ReactionSystem,
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
        self._P = P
        self._T = T
        self._lnK = lnK
        self._sens: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
        #: (N, R) temperature at which each reaction's K was taken (approach).
        self._T_eff: np.ndarray | None = None
        #: Enthalpy balance of an adiabatic solve (see :class:`EnergyBalance`).
        self._energy: EnergyBalance | None = None
        #: (N,) temperature iterations of an adiabatic solve, else None.
        self.T_iterations: np.ndarray | None = None
        #: (N,) uint8 mask of the phases found absent (and stable) at
        #: equilibrium: bit 0 the gas, bit 1 the liquid (see ``absent_phases``).
        self.absent: np.ndarray | None = None
        #: (N, R) bool, with ``approach=``: reactions held at zero extent
        #: because the feed is already within their approach of equilibrium.
        self.held: np.ndarray | None = None

    def invalidate(self) -> None:
        """Forget what was computed from the arrays (mole fractions,
        derivatives): a later solve with ``out=`` this result overwrites them."""
        self._mole_fractions = None
        self._sens = None
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
        """(N, S) mole fraction of each species within its own phase (0 in an
        empty phase, NaN for invalid or infeasible cases), computed from the
        amounts when first read."""
        if self._mole_fractions is None:
            # (the core's one definition, also used for its batch outputs)
            self._mole_fractions = self.system._core.mole_fractions(np.ascontiguousarray(self.amounts))
        return self._mole_fractions

    @mole_fractions.setter
    def mole_fractions(self, value: np.ndarray | None) -> None:
        # None: computed again from the amounts when next read.
        self._mole_fractions = value

    def __len__(self) -> int:
        return self.amounts.shape[0]

    def __repr__(self) -> str:
        return f"<EquilibriumResult: {len(self)} cases; {self.summary()}>"

    def _rows(self, a: np.ndarray) -> np.ndarray:
        n = len(self)
        return a if a.shape[0] == n else np.broadcast_to(a, (n,) + a.shape[1:])

    @property
    def feed(self) -> np.ndarray:
        return self._rows(self._feed)

    @property
    def P(self) -> np.ndarray:
        return self._rows(self._P)

    @property
    def T(self) -> np.ndarray | None:
        return None if self._T is None else self._rows(self._T)

    @property
    def lnK(self) -> np.ndarray:
        return self._rows(self._lnK)

    @property
    def converged(self) -> np.ndarray:
        """``(N,)`` bool: the case reached equilibrium (``Status.CONVERGED``,
        or ``Status.UNDERFLOW`` where some species lie below float64's range)."""
        return np.isin(self.status, CONVERGED_CODES)

    def message(self, case: int = 0) -> str:
        """A sentence on what happened to one case: its status, the iterations
        it took (for an adiabatic solve, temperature iterations and Newton
        iterations in all), and any species that the feed cannot reach (they
        are exactly zero at equilibrium) or that lie below float64's range."""
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
        zero = [
            name
            for k, name in enumerate(self.system.species)
            if feed[k] == 0
            and self.amounts[case, k] == 0
            and self.system._reactive[k]
            and self.system.phases[k] not in absent
        ]
        for phase in absent:
            text += f"; the {phase} phase is absent (it would not form: it is stable empty)"
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
        """The phases of one case found absent at equilibrium because they
        would not form (a condensate above its dew point, say): the solve
        tried them absent and checked that they are stable empty."""
        if self.absent is None:
            return []
        mask = int(self.absent[case])
        return [name for bit, name in enumerate(PHASE_BITS) if mask >> bit & 1]

    def summary(self) -> str:
        """Counts of cases by status, e.g. ``'998 converged, 2 invalid input'``."""
        codes, counts = np.unique(self.status, return_counts=True)
        return (
            ", ".join(f"{c} {Status(int(k)).name.lower().replace('_', ' ')}" for k, c in zip(codes, counts))
            or "no cases"
        )

    def conversion(self, species: str) -> np.ndarray:
        """``(N,)`` fractional conversion ``(feed - n) / feed`` of a species;
        NaN where its feed is zero."""
        k = self.system.index(species)
        feed = self.feed[:, k]
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(feed > 0, (feed - self.amounts[:, k]) / feed, np.nan)

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
        """
        from eqbatch.errors import CaseInputError

        if self._sens is None:
            raise CaseInputError("derivatives were not computed: solve with sensitivities=True")
        if of not in ("amounts", "mole_fractions", "extents", "T"):
            raise ValueError(f"of must be 'amounts', 'mole_fractions', 'extents' or 'T', got {of!r}")
        d_lnk, d_lnp, d_feed = self._sens
        n, S = self.amounts.shape
        energy = self._energy
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
        phases = np.array(self.system.phases)
        out = np.empty_like(dn)
        n = self.amounts
        for phase in ("gas", "liquid"):
            mask = phases == phase
            if not mask.any():
                continue
            total = n[:, mask].sum(axis=1)
            d_total = dn[:, mask].sum(axis=1)
            shape = (-1,) + (1,) * (dn.ndim - 2)
            with np.errstate(divide="ignore", invalid="ignore"):
                inv = np.where(total > 0, 1.0 / total, 0.0).reshape(shape)
                y = self.mole_fractions[:, mask].reshape(n.shape[0], mask.sum(), *([1] * (dn.ndim - 2)))
                out[:, mask] = (dn[:, mask] - y * d_total[:, None]) * inv[:, None]
        return out

    def columns(self, inputs: bool = True) -> dict[str, np.ndarray]:
        """Named columns: the inputs (``feed_<species>``, ``P_bar``, ``T_K``,
        ``lnK_<label>``) when ``inputs``, then ``n_<species>``, ``y_<species>``,
        ``extent_<label>``, ``status`` and ``iterations``."""
        sp = self.system.species
        labels = self.system.labels
        out: dict[str, np.ndarray] = {}
        if inputs:
            feed = self.feed
            for k, name in enumerate(sp):
                out[f"feed_{name}"] = feed[:, k]
            out["P_bar"] = np.asarray(self.P)
            if self._T is not None:
                out["T_K"] = np.asarray(self.T)
            lnk = self.lnK
            for j, label in enumerate(labels):
                out[f"lnK_{label}"] = lnk[:, j]
        for k, name in enumerate(sp):
            out[f"n_{name}"] = self.amounts[:, k]
        for k, name in enumerate(sp):
            out[f"y_{name}"] = self.mole_fractions[:, k]
        for j, label in enumerate(labels):
            out[f"extent_{label}"] = self.extents[:, j]
        out["status"] = self.status
        out["iterations"] = self.iterations
        return out

    def to_pandas(self, inputs: bool = True) -> Any:
        """A :class:`pandas.DataFrame` with one row per case (see :meth:`columns`)."""
        import pandas as pd

        return pd.DataFrame({k: np.ascontiguousarray(v) for k, v in self.columns(inputs).items()})

    def to_arrow(self, inputs: bool = True) -> Any:
        """A :class:`pyarrow.Table` with one row per case (see :meth:`columns`)."""
        import pyarrow as pa

        cols = self.columns(inputs)
        return pa.table({k: pa.array(np.ascontiguousarray(v)) for k, v in cols.items()})


class EnergyBalance:
    """What an adiabatic solve's derivatives need: per case the species'
    enthalpies at the outlet (``h_out``) and the inlet (``h_in``), J/mol,
    the feed's heat capacity at the inlet (``cp_feed``, J/K), the heat
    capacities at the outlet (``cp_out``), the outlet's ``d ln K / dT`` and
    the inlet temperature.

    The outlet temperature solves ``f = sum n_i h_i(T) - sum n0_i h_i(T_in) = 0``
    with ``n`` at equilibrium at ``T``. For an input ``theta``,
    ``dT/dtheta = -(df/dtheta) / (df/dT)`` with ``df/dT = sum n cp + sum h dn/dT``
    (``dn/dT`` at fixed inputs); the amounts then move by
    ``dn/dtheta + dn/dT dT/dtheta``.
    """

    __slots__ = ("h_out", "h_in", "cp_feed", "cp_out", "slope_out", "T_in")

    def __init__(self, h_out, h_in, cp_feed, cp_out, slope_out, T_in) -> None:
        self.h_out = h_out
        self.h_in = h_in
        self.cp_feed = cp_feed
        self.cp_out = cp_out
        self.slope_out = slope_out
        self.T_in = T_in

    def hold(self, wrt, dn, d_lnk, d_lnp, d_feed, amounts):
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
