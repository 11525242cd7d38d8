"""Species thermochemistry and the equilibrium constants it implies: the
public home of the thermochemistry functions.

The data forms (:class:`NASA7`, :class:`Shomate`, :class:`CpPolynomial`,
:class:`MaierKelley`, :class:`Tabulated`, each
on its own standard pressure ``P_ref``) and the ln K they imply
(:class:`ThermoLnK`, put on the system's ``P0``) live in
:mod:`eqbatch.speciesdata`; data from the ``chemicals`` package
(:func:`chemicals_data`) in :mod:`eqbatch.compounds`; generated reaction sets
(:func:`independent_reactions`) in :mod:`eqbatch.equations`; approach
temperatures (:func:`approach_temperatures`) in :mod:`eqbatch.approach`. This
module gathers them and adds their inverse, :func:`equilibrium_temperature`:
the temperature at which a measured composition would be at equilibrium.
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np

from eqbatch.approach import approach_temperatures, check_approach
from eqbatch.compounds import chemicals_data
from eqbatch.equations import element_matrix, independent_reactions
from eqbatch.spec import SystemSpec
from eqbatch.speciesdata import (
    NASA7,
    T_REF,
    CpPolynomial,
    MaierKelley,
    R,
    Shomate,
    SpeciesData,
    Tabulated,
    ThermoLnK,
    species_data_from_table,
)

__all__ = [
    "NASA7",
    "R",
    "T_REF",
    "CpPolynomial",
    "MaierKelley",
    "Shomate",
    "SpeciesData",
    "Tabulated",
    "ThermoLnK",
    "approach_temperatures",
    "check_approach",
    "chemicals_data",
    "element_matrix",
    "equilibrium_temperature",
    "independent_reactions",
    "species_data_from_table",
]


def equilibrium_temperature(
    system: SystemSpec,
    amounts: Any,
    P: Any = None,
    *,
    T_guess: float = 900.0,
    tol: float = 1e-10,
    max_iter: int = 100,
) -> np.ndarray:
    """The temperature at which each reaction would be at equilibrium.

    For measured compositions, ``ln K(T) = ln Q`` is solved per reaction by
    Newton's method with the analytic ``d ln K / dT``: the inverse of an
    approach temperature.

    Parameters
    ----------
    system : ReactionSystem or SystemSpec
        With K(T) data.
    amounts : array_like, shape (N, S) or (S,)
        Measured amounts, mol.
    P : float or array_like, shape (N,), optional
        Pressure, bar (default ``P0``).
    T_guess : float, default 900
        Starting temperature, K.
    tol : float, default 1e-10
        Relative size of the last Newton step.
    max_iter : int, default 100
        Newton iterations.

    Returns
    -------
    ndarray, shape (N, R)
        K; NaN where a reaction involves an absent species, has no K(T) data,
        or no temperature matches.

    Examples
    --------
    The outlet of a solve at 1050 K is at equilibrium at 1050 K:

    >>> from eqbatch.demo import reformer_feed, reformer_system
    >>> system = reformer_system()
    >>> res = system.solve(reformer_feed(3.0), T=1050.0, P=20.0)
    >>> equilibrium_temperature(system, res.amounts, 20.0).round(6).tolist()
    [[1050.0, 1050.0]]
    """
    amounts = np.atleast_2d(np.asarray(amounts, dtype=float))
    n, S = amounts.shape
    P = np.full(n, system.P0) if P is None else np.broadcast_to(np.asarray(P, dtype=float), (n,))
    ln_a = system.ln_activities(amounts, P)
    out = np.full((n, system.n_reactions), np.nan)
    for j, label in enumerate(system.labels):
        data = system.lnK_data.get(label)
        if data is None or not callable(data):
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
            if not ok.all():
                T = np.where(ok, T, _at_a_data_break(data, ln_q, ~ok))
                ok |= np.isfinite(T)
        out[:, j] = np.where(ok, T, np.nan)
    return out


def _at_a_data_break(data: Any, ln_q: np.ndarray, cases: np.ndarray) -> np.ndarray:
    """For ``cases`` without a root: the end of a species-data range at which
    ``ln K - ln Q`` changes sign (data sets fitted range by range join with a
    small step in ln K, and a composition in that step is at equilibrium at
    the break itself); NaN elsewhere."""
    out = np.full(ln_q.shape, np.nan)
    breaks = sorted({end for _, d in getattr(data, "terms", []) for span in d.spans for end in span})
    for T_b in breaks:
        below = data(np.array([T_b * (1 - 1e-12)]))[0] - ln_q
        above = data(np.array([T_b * (1 + 1e-12)]))[0] - ln_q
        at = data(np.array([T_b]))[0] - ln_q
        hit = cases & np.isnan(out) & ((np.sign(below) != np.sign(above)) | (at == 0.0))
        hit &= np.isfinite(below) & np.isfinite(above)
        out[hit] = T_b
    return out
