"""The result of a batch solve."""

from __future__ import annotations

from enum import IntEnum
from typing import TYPE_CHECKING, Any

import numpy as np

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
    #: non-positive or non-finite pressure; every output of the case is NaN.
    INVALID_INPUT = 2
    #: No equilibrium exists for the feed (the extents are unbounded).
    INFEASIBLE = 3
    #: The Gibbs function could not be lowered further before ``tol`` was met
    #: (float64 limit for the case); amounts are the last iterate.
    STALLED = 4
    #: Adiabatic solve: no outlet temperature within the species data's
    #: range balances the enthalpy; amounts are those at the range's edge.
    OUT_OF_RANGE = 5

    @property
    def description(self) -> str:
        return _DESCRIPTIONS[self]


_DESCRIPTIONS = {
    Status.CONVERGED: "converged",
    Status.ITERATION_LIMIT: "iteration limit reached before convergence",
    Status.INVALID_INPUT: "invalid input (negative/NaN feed, zero total, bad ln K or pressure)",
    Status.INFEASIBLE: "infeasible: the extents are unbounded for this feed",
    Status.STALLED: "stalled: no further decrease of the Gibbs function",
    Status.OUT_OF_RANGE: "no adiabatic outlet temperature within the data's temperature range",
}


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

    @property
    def mole_fractions(self) -> np.ndarray:
        """(N, S) mole fraction of each species within its own phase (0 in an
        empty phase, NaN for invalid or infeasible cases), computed from the
        amounts when first read."""
        if self._mole_fractions is None:
            self._mole_fractions = mole_fractions_of(self.system.phases, self.amounts)
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
        """``(N,)`` bool: the case reached equilibrium."""
        return self.status == Status.CONVERGED

    def message(self, case: int = 0) -> str:
        """A sentence on what happened to one case, naming any species that
        the feed cannot reach (they are exactly zero at equilibrium)."""
        st = Status(int(self.status[case]))
        text = f"case {case}: {st.description}"
        if st in (Status.CONVERGED, Status.ITERATION_LIMIT, Status.STALLED):
            count = int(self.iterations[case])
            text += f" after {count} iteration{'' if count == 1 else 's'}"
            feed = self.feed[case]
            zero = [
                name
                for k, name in enumerate(self.system.species)
                if feed[k] == 0 and self.amounts[case, k] == 0 and self.system._reactive[k]
            ]
            if zero:
                text += f"; {', '.join(zero)} cannot be formed from this feed (amount exactly 0)"
        return text

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
            the others (N, S). ``"T"`` needs K(T) data in the system.
        of : {"amounts", "mole_fractions", "extents"}

        Returns
        -------
        ndarray
            Derivatives from the implicit function theorem applied to the
            converged Newton system; NaN for cases that did not converge.
            Species the feed cannot form have zero derivatives.
        """
        if self._sens is None:
            from eqbatch.errors import CaseInputError

            raise CaseInputError("derivatives were not computed: solve with sensitivities=True")
        d_lnk, d_lnp, d_feed = self._sens
        if wrt == "lnK":
            dn = d_lnk
        elif wrt == "lnP":
            dn = d_lnp
        elif wrt == "P":
            dn = d_lnp / self.P[:, None]
        elif wrt == "feed":
            dn = d_feed
        elif wrt == "T":
            if self._T is None:
                from eqbatch.errors import CaseInputError

                raise CaseInputError("no temperature was given to the solve: d/dT is undefined")
            slope = self.system.dlnK_dT(self.T)
            dn = np.einsum("nsr,nr->ns", d_lnk, slope)
        else:
            raise ValueError(f"wrt must be 'lnK', 'lnP', 'P', 'feed' or 'T', got {wrt!r}")
        if of == "amounts":
            return dn
        if of == "mole_fractions":
            return self._fraction_derivative(dn)
        if of == "extents":
            nu = self.system.stoich
            change = dn - np.eye(nu.shape[1])[None] if wrt == "feed" else dn
            # n = n0 + nu^T xi with nu of full row rank: d xi = (nu nu^T)^-1 nu d(n - n0)
            gram = nu @ nu.T
            return np.einsum("rs,ns...->nr...", np.linalg.solve(gram, nu), change)
        raise ValueError(f"of must be 'amounts', 'mole_fractions' or 'extents', got {of!r}")

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


def mole_fractions_of(phases, amounts: np.ndarray) -> np.ndarray:
    """Mole fractions within each phase, as the core defines them: ``n_i / N``
    of the species' phase, 0 where the phase is empty, NaN where the amounts are."""
    amounts = np.asarray(amounts, dtype=np.float64)
    phases = np.asarray(phases)
    out = np.empty_like(amounts)
    for phase in np.unique(phases):
        cols = np.flatnonzero(phases == phase)
        part = amounts[:, cols]
        total = part.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            y = np.where(total > 0, part / np.where(total > 0, total, 1.0), 0.0)
        y[np.isnan(total[:, 0])] = np.nan
        out[:, cols] = y
    return out
