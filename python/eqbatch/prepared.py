"""Repeated solves of one system and one batch size, for optimisers.

An optimiser, a root finder around the solver or a control loop calls
``solve`` on the same system thousands of times with a new ``lnK`` (or
``T``), feed or pressure each time. :meth:`ReactionSystem.prepare` checks the
options and makes the output arrays once; each call of the returned
:class:`PreparedSolve` then only converts its inputs and runs the core, and
writes into the same arrays. The equilibrium is the one ``system.solve``
gives, to the bit.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from eqbatch.errors import CaseInputError
from eqbatch.inputs import case_column, checked_options, feed_array, lnk_array
from eqbatch.outputs import Outputs
from eqbatch.realgas import nonideal_sensitivities, solve_real
from eqbatch.result import EquilibriumResult
from eqbatch.spec import SystemSpec, bad_temperatures


class PreparedSolve:
    """Solves of a fixed number of cases of one system, into the same arrays.

    Made by :meth:`ReactionSystem.prepare`. Each call returns the same
    :class:`EquilibriumResult` object with new values, its derivatives
    (``result.sensitivity(...)``) included: copy what must outlive the next
    call (``result.amounts.copy()``, ``result.sensitivity("lnK").copy()``).

    Parameters
    ----------
    system : ReactionSystem
    cases : int
        Cases per call. Every input of a call has one row or ``cases`` rows.
    tol, max_iter, threads, sensitivities
        As for :meth:`ReactionSystem.solve`, fixed for every call.
    """

    __slots__ = (
        "system",
        "cases",
        "_tol",
        "_max_iter",
        "_threads",
        "_sensitivities",
        "_arrays",
        "_result",
        "_floats",
        "_words",
        "_derivs",
        "_sens_views",
        "_core",
        "_P0",
        "_real",
    )

    def __init__(
        self,
        system: SystemSpec,
        cases: int = 1,
        *,
        tol: float = 1e-10,
        max_iter: int = 200,
        threads: int | None = None,
        sensitivities: bool = False,
    ) -> None:
        if not (isinstance(cases, (int, np.integer)) and not isinstance(cases, bool) and cases >= 1):
            raise CaseInputError(f"cases must be a positive integer, got {cases!r}")
        self.system = system
        self.cases = int(cases)
        self._tol = checked_options(tol, "mark", max_iter, threads)
        self._max_iter = int(max_iter)
        self._threads = threads
        self._sensitivities = bool(sensitivities)
        n, s, r = self.cases, system.n_species, system.n_reactions
        # Two buffers the core writes in one call (`System.solve_prepared`);
        # the result's arrays are views of them.
        iteration_words, status_words = -(-n // 2), -(-n // 8)
        self._floats = np.zeros(n * (s + r))
        self._words = np.zeros(n + iteration_words + status_words, dtype=np.uint64)
        self._arrays: Outputs = (
            self._floats[: n * s].reshape(n, s),
            self._floats[n * s :].reshape(n, r),
            self._words[n + iteration_words :].view(np.uint8)[:n],
            self._words[n : n + iteration_words].view(np.uint32)[:n],
            self._words[:n],
        )
        # (with sensitivities: one buffer of derivatives, by ln K, ln P and the
        # feed, whose views the result holds)
        k = n if sensitivities else 0
        self._derivs = d = np.zeros(k * (s * r + s + s * s))
        self._sens_views = (
            d[: k * s * r].reshape(k, s, r),
            d[k * s * r : k * s * (r + 1)].reshape(k, s),
            d[k * s * (r + 1) :].reshape(k, s, s),
        )
        self._core = system._engine.solve_prepared
        # (non-ideal phases: every call takes the general conversion and the
        # successive-substitution solve, which needs T; nothing skips it)
        self._real = system.nonideal is not None
        self._P0 = float(system.P0)
        amounts, extents, status, iterations, absent = self._arrays
        p0 = system._p0_row  # placeholders until the first call
        self._result = EquilibriumResult(system, amounts, extents, None, status, iterations, p0, p0, None, p0)
        self._result.absent = absent

    def solve(self, feed: Any, *, lnK: Any = None, T: Any = None, P: Any = None) -> EquilibriumResult:
        """Equilibrium of ``cases`` cases (inputs as for :meth:`ReactionSystem.solve`).

        Parameters
        ----------
        feed : array_like, shape (cases, S) or (S,)
            Feed amounts, mol, in the order of ``system.species``.
        lnK : array_like, shape (cases, R) or (R,), optional
            ln K of every reaction, on ``P0``; without it, the system's K
            data at ``T`` (or its constants).
        T : float or array_like, shape (cases,), optional
            Temperature, K, for K(T) data.
        P : float or array_like, shape (cases,), optional
            Pressure, bar; defaults to ``P0``.

        Returns
        -------
        EquilibriumResult
            The same object at every call (its arrays overwritten).

        Raises
        ------
        CaseInputError
            Inputs whose shapes do not fit.

        Examples
        --------
        >>> from eqbatch import ReactionSystem
        >>> s = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"])
        >>> solve = s.prepare().solve
        >>> [round(float(solve([1.0, 0.0], lnK=[k]).amounts[0, 1]), 6) for k in (0.0, np.log(3.0))]
        [0.5, 0.75]
        """
        if T is None and not self._real and type(feed) is np.ndarray and type(lnK) is np.ndarray:
            # The optimiser's call: float64 arrays, a float pressure, written
            # out in line (a call costs about two microseconds; each Python
            # step here is a few per cent of it). The core checks shapes,
            # dtype and layout; anything it refuses takes the general
            # conversion below, which explains what is wrong.
            if P is None:
                P = self._P0
            if type(P) is float:
                try:
                    n, floats, words = self.cases, self._floats, self._words
                    self._core(feed, lnK, P, n, self._tol, self._max_iter, self._threads, floats, words)
                except (TypeError, ValueError):
                    pass
                else:
                    result = self._result
                    # (result.invalidate(), in line)
                    result._mole_fractions = result._sens = result._dn_dT = result._energy = None
                    result._feed, result._lnK, result._P, result._T = feed, lnK, P, None
                    if self._sensitivities:
                        self.system._engine.sensitivities_prepared(
                            feed, P, n, floats, words, self._threads, self._derivs
                        )
                        result._sens = self._sens_views
                    return result
        system, n = self.system, self.cases
        feed_arr = feed_array(system, feed)
        T_arr = None if T is None else case_column(T, "T")
        lnk_arr = lnk_array(system, lnK, None, None, T_arr)
        p_arr = system._p0_row if P is None else case_column(P, "P")
        for name, arr in (("feed", feed_arr), ("ln K", lnk_arr), ("P", p_arr)):
            if arr.shape[0] != n and arr.shape[0] != 1:
                raise CaseInputError(f"{name} has {arr.shape[0]} cases; this prepared solve takes 1 or {n}")
        if T_arr is not None:
            if T_arr.shape[0] not in (1, n):
                raise CaseInputError(f"T has {T_arr.shape[0]} cases; this prepared solve takes 1 or {n}")
            bad = bad_temperatures(T_arr)
            if bad is not None:  # the core sees a NaN ln K and marks the case invalid
                rows = max(lnk_arr.shape[0], bad.shape[0])
                lnk_arr = np.array(np.broadcast_to(lnk_arr, (rows, lnk_arr.shape[1])))
                lnk_arr[np.broadcast_to(bad, (rows,))] = np.nan
        return self._run(feed_arr, lnk_arr, p_arr, T_arr)

    def _run(
        self, feed: np.ndarray, lnk: np.ndarray, p: np.ndarray, T: np.ndarray | None
    ) -> EquilibriumResult:
        """The core's solve into the prepared arrays (inputs already in its layout)."""
        result, system, n = self._result, self.system, self.cases
        if self._real:
            threads = self._threads
            solved, ln_phi = solve_real(system, feed, lnk, p, T, n, self._tol, self._max_iter, threads, None)
            for target, values in zip(self._arrays, solved):
                np.copyto(target, values)
            result._ln_phi = ln_phi
        else:
            system._engine.solve(
                feed, lnk, p, n, self._tol, self._max_iter, self._threads, None, False, self._arrays
            )
        result.invalidate()
        result._feed, result._lnK, result._P, result._T = feed, lnk, p, T  # (one row may be 1-D)
        if self._sensitivities:
            self._add_sensitivities(feed, p)
            if self._real:
                assert T is not None
                result._sens, result._dn_dT = nonideal_sensitivities(system, result, T, self._threads)
        return result

    def _add_sensitivities(self, feed: np.ndarray, p: np.ndarray) -> None:
        """The derivatives of the solve just run, into the result."""
        amounts, _, status, _, absent = self._arrays
        rows = feed if feed.ndim == 2 else feed[None]
        engine = self.system._engine
        self._result._sens = engine.sensitivities(rows, p, amounts, status, absent, self._threads)

    __call__ = solve
