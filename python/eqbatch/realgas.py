"""Real gases: fugacity coefficients from a cubic equation of state.

``ReactionSystem(..., gas_model="peng-robinson" | "srk", critical=...,
kij=...)`` makes the gas of a system non-ideal: the equilibrium conditions
become ``sum_i nu_ji (ln y_i + ln phi_i + ln P/P0) = ln K_j`` with ``phi``
from the Peng-Robinson (1976) or Soave-Redlich-Kwong (1972) equation and the
van der Waals one-fluid mixing rules, per case at its composition,
temperature and pressure; the core solves them by successive substitution on
``phi`` (see ``rust/core/src/realgas.rs``). Critical constants come per
species as ``{"Tc": K, "Pc": bar, "omega": -}`` or from the ``chemicals``
package (``critical="chemicals"``, each value's source recorded).

Hydrogen and helium take their ordinary critical constants: the ``chemicals``
package carries no effective (quantum-corrected) constants, and none are
invented here; give your own in ``critical=`` to use them.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from eqbatch.activity import core_arguments
from eqbatch.compounds import identify
from eqbatch.errors import CaseInputError, NonIdealGasWarning, SystemDefinitionError
from eqbatch.outputs import Outputs

#: The gas models a system takes, and the core's code of each cubic.
GAS_MODELS = ("ideal", "peng-robinson", "srk")
_KIND = {"peng-robinson": 0, "srk": 1}
_ALIASES = {
    "pr": "peng-robinson",
    "peng_robinson": "peng-robinson",
    "soave": "srk",
    "soave-redlich-kwong": "srk",
}


@dataclass(frozen=True)
class GasModel:
    """A checked non-ideal gas model of a system.

    Attributes
    ----------
    kind : str
        ``"peng-robinson"`` or ``"srk"``; ``"ideal"`` for an ideal gas given
        critical constants (used only to warn where it is not ideal, see
        :func:`warn_if_not_ideal`).
    critical : dict
        Per gas species, ``{"Tc": K, "Pc": bar, "omega": -}``.
    kij : dict
        Binary parameters by species pair (both orders hold the same value).
    sources : dict
        Where each species' constants came from.
    """

    kind: str
    critical: dict[str, dict[str, float]]
    kij: dict[tuple[str, str], float]
    sources: dict[str, str]

    def arrays(self, species: Sequence[str]) -> tuple[list[float], list[float], list[float], list[float]]:
        """``Tc``, ``Pc``, ``omega`` per species (NaN outside the gas) and
        ``kij`` as ``S x S`` values, in the order of ``species``."""
        nan = float("nan")
        tc = [self.critical.get(s, {}).get("Tc", nan) for s in species]
        pc = [self.critical.get(s, {}).get("Pc", nan) for s in species]
        omega = [self.critical.get(s, {}).get("omega", nan) for s in species]
        kij = [self.kij.get((a, b), 0.0) if a != b else 0.0 for a in species for b in species]
        return tc, pc, omega, kij

    def arguments(self) -> dict[str, Any]:
        """``gas_model``, ``critical`` and ``kij`` as :class:`~eqbatch.ReactionSystem` takes them."""
        pairs = {tuple(sorted(pair)): value for pair, value in self.kij.items()}
        return {
            "gas_model": self.kind,
            "critical": {s: dict(v) for s, v in self.critical.items()},
            "kij": {pair: value for pair, value in sorted(pairs.items()) if value != 0.0},
        }


def read_gas_model(
    species: Sequence[str],
    phases: Sequence[str],
    gas_model: str | None,
    critical: Mapping[str, Mapping[str, float]] | str | None,
    kij: Mapping[tuple[str, str], float] | None,
    formulas: Mapping[str, Any] | None,
) -> GasModel | None:
    """The checked gas model (None for an ideal gas).

    Raises
    ------
    SystemDefinitionError
        An unknown model, a gas species without critical constants, a value
        that is not a positive finite number (an acentric factor may be
        negative), ``critical``/``kij`` without a non-ideal model, or a
        ``kij`` pair that names no gas species.
    """
    model = "ideal" if gas_model is None else str(gas_model).strip().lower()
    model = _ALIASES.get(model, model)
    if model not in GAS_MODELS:
        raise SystemDefinitionError(f"gas_model must be one of {', '.join(GAS_MODELS)}; got {gas_model!r}")
    if model == "ideal":
        if kij:
            raise SystemDefinitionError(
                "kij= belongs to a non-ideal gas: give gas_model='peng-robinson' or 'srk'"
            )
        if critical is None:
            return None
        # (an ideal gas with critical constants: they only tell when it is not)
    gas = [s for s, p in zip(species, phases) if p == "gas"]
    if not gas:
        raise SystemDefinitionError(f"gas_model={model!r}, critical=: the system has no gas species")
    table: dict[str, dict[str, float]] = {}
    sources: dict[str, str] = {}
    if isinstance(critical, str):
        if critical.strip().lower() != "chemicals":
            raise SystemDefinitionError(f"critical must be a mapping or 'chemicals'; got {critical!r}")
        for name in gas:
            text = (formulas or {}).get(name)
            table[name], sources[name] = critical_from_chemicals(
                name, text if isinstance(text, str) else None
            )
    else:
        given = dict(critical or {})
        unknown = sorted(set(given) - set(species))
        if unknown:
            raise SystemDefinitionError(f"critical= names no species of the system: {', '.join(unknown)}")
        missing = [name for name in gas if name not in given]
        if missing:
            raise SystemDefinitionError(
                f"gas_model={model!r} needs critical constants of every gas species; missing: "
                f"{', '.join(missing)} (give critical={{species: {{'Tc': K, 'Pc': bar, 'omega': ...}}}} "
                "or critical='chemicals')"
            )
        for name in gas:
            values = given[name]
            if not isinstance(values, Mapping) or set(values) != {"Tc", "Pc", "omega"}:
                raise SystemDefinitionError(
                    f"critical[{name!r}] must have exactly Tc (K), Pc (bar) and omega; got {values!r}"
                )
            table[name] = {k: float(values[k]) for k in ("Tc", "Pc", "omega")}
            sources[name] = "given"
    for name, values in table.items():
        tc, pc, omega = values["Tc"], values["Pc"], values["omega"]
        if not (math.isfinite(tc) and tc > 0 and math.isfinite(pc) and pc > 0 and math.isfinite(omega)):
            raise SystemDefinitionError(
                f"critical constants of {name!r}: Tc {tc!r} K and Pc {pc!r} bar must be positive, "
                f"omega {omega!r} finite"
            )
        if pc > 5000:
            raise SystemDefinitionError(f"critical pressure of {name!r} is {pc!r}: in bar, not Pa or kPa")
    pairs: dict[tuple[str, str], float] = {}
    for pair, value in (kij or {}).items():
        if not (
            isinstance(pair, tuple) and len(pair) == 2 and all(p in gas for p in pair) and pair[0] != pair[1]
        ):
            raise SystemDefinitionError(f"kij key {pair!r} must be a pair of two different gas species")
        v = float(value)
        if not math.isfinite(v) or abs(v) >= 1.0:
            raise SystemDefinitionError(f"kij[{pair!r}] = {value!r} must be a finite number between -1 and 1")
        pairs[pair] = pairs[pair[::-1]] = v
    return GasModel(model, table, pairs, sources)


def critical_from_chemicals(name: str, formula: str | None) -> tuple[dict[str, float], str]:
    """``Tc`` (K), ``Pc`` (bar) and ``omega`` of one species from the
    ``chemicals`` package (its first ranked source for each), and their
    provenance.

    Examples
    --------
    >>> values, source = critical_from_chemicals("NH3", None)
    >>> round(values["Tc"], 1), round(values["Pc"], 2)
    (405.6, 113.63)
    """
    try:
        from chemicals.acentric import omega, omega_methods
        from chemicals.critical import Pc, Pc_methods, Tc, Tc_methods
    except ImportError:
        raise SystemDefinitionError(
            "critical='chemicals' needs the chemicals package: pip install chemicals"
        ) from None

    def has_data(cas: str) -> bool:
        return bool(Tc_methods(cas)) and bool(Pc_methods(cas)) and bool(omega_methods(cas))

    compound = identify(name, formula, has_data, "critical temperature, pressure and acentric factor")
    cas = compound.cas
    tc_m, pc_m, om_m = Tc_methods(cas)[0], Pc_methods(cas)[0], omega_methods(cas)[0]
    values = {
        "Tc": float(Tc(cas, method=tc_m)),
        "Pc": float(Pc(cas, method=pc_m)) / 1e5,
        "omega": float(omega(cas, method=om_m)),
    }
    source = (
        f"chemicals: {compound.name}, CAS {cas} ({compound.how}); Tc {values['Tc']:g} K ({tc_m}), "
        f"Pc {values['Pc']:g} bar ({pc_m}), omega {values['omega']:g} ({om_m})"
    )
    return values, source


def solve_real(
    system: Any,
    feed: np.ndarray,
    lnk: np.ndarray,
    P: np.ndarray,
    T: np.ndarray | None,
    n: int,
    tol: float,
    max_iter: int,
    threads: int | None,
    start: np.ndarray | None,
    engine: Any = None,
    chain: bool = False,
) -> tuple[Outputs, np.ndarray]:
    """The core's solve with the system's non-ideal phases (the gas's cubic,
    the solutions' activity models): ``(amounts, extents, status,
    iterations, absent)`` and ``ln phi`` / ``ln gamma`` (N, S). ``engine``:
    the compiled system to solve, ``system``'s own by default, or one of
    its reactions only (the same species and phase models; an approach
    solve re-solves held cases so). ``chain``: the first pass starts each case
    without a start of its own from the one before it (the later passes start
    from the pass before)."""
    if T is None:
        raise CaseInputError(
            f"{system.nonideal}: the fugacity and activity coefficients depend on temperature; give T= "
            "(also when the equilibrium constants are given)"
        )
    engine = system._engine if engine is None else engine
    temperature = np.ascontiguousarray(T, dtype=np.float64)
    return engine.solve_real(
        np.ascontiguousarray(feed),
        np.ascontiguousarray(lnk),
        np.ascontiguousarray(P),
        temperature,
        n,
        tol,
        max_iter,
        threads,
        start,
        *_core_model(system),
        chain,
    )


#: How far the compressibility factor may be from 1 before an ideal-gas solve warns.
Z_TOLERANCE = 0.05


def compressibility(system: Any, amounts: np.ndarray, T: np.ndarray, P: np.ndarray) -> np.ndarray:
    """(N,) Peng-Robinson compressibility factor of the gas of ``amounts``
    (N, S) at ``T`` (K) and ``P`` (bar), by the core's cubic with the
    critical constants ``system.gas`` holds (NaN where a case has no gas)."""
    model: GasModel = system.gas
    return system._engine.compressibility(
        np.ascontiguousarray(amounts, dtype=np.float64),
        np.ascontiguousarray(np.atleast_1d(T), dtype=np.float64),
        np.ascontiguousarray(np.atleast_1d(P), dtype=np.float64),
        None,
        *model.arrays(system.species),
    )


def warn_if_not_ideal(
    system: Any, amounts: np.ndarray, T: np.ndarray | None, P: np.ndarray, ok: np.ndarray
) -> None:
    """Warn once (:class:`~eqbatch.NonIdealGasWarning`) when the equilibrium
    gas of some converged cases (``ok``) of an ideal-gas solve has a
    compressibility factor more than :data:`Z_TOLERANCE` from 1, by the
    critical constants the system was given (none given, or no ``T``: no
    test)."""
    model: GasModel | None = system.gas
    if model is None or T is None or not ok.any():
        return
    n = len(ok)
    T_all, P_all = np.broadcast_to(T, (n,)), np.broadcast_to(P, (n,))
    z = compressibility(system, amounts[ok], T_all[ok], P_all[ok])
    off = np.abs(z - 1.0) > Z_TOLERANCE
    if off.any():
        worst = float(np.nanmax(np.abs(z - 1.0)))
        warnings.warn(
            NonIdealGasWarning(
                f"ideal gas: in {int(off.sum()):,} of {n:,} cases the equilibrium gas's compressibility "
                f"factor (Peng-Robinson, from the critical constants given) is more than "
                f"{Z_TOLERANCE:.0%} from 1 (up to {worst:.1%}); give gas_model='peng-robinson' "
                "for fugacity coefficients"
            ),
            stacklevel=3,
        )


def _core_model(system: Any) -> tuple:
    """The core's description of the system's non-ideal phases: cubic kind
    (None: ideal gas), Tc, Pc, omega, kij and the solutions' models."""
    model: GasModel | None = system.real_gas
    solutions = core_arguments(system.species, system.phases, system.liquid_models or {})
    if model is None:
        return None, [], [], [], [], solutions
    return (_KIND[model.kind], *model.arrays(system.species), solutions)


def ln_coefficients(
    system: Any, amounts: np.ndarray, T: np.ndarray, P: np.ndarray, threads: int | None
) -> np.ndarray:
    """(N, S) ``ln phi`` / ``ln gamma`` of ``amounts`` at ``T`` and ``P``
    (one value or one per row) for the system's non-ideal phases."""
    return system._engine.ln_coefficients(
        np.ascontiguousarray(amounts, dtype=np.float64),
        np.ascontiguousarray(np.atleast_1d(T), dtype=np.float64),
        np.ascontiguousarray(np.atleast_1d(P), dtype=np.float64),
        threads,
        *_core_model(system),
    )


#: The gas constant, J / (mol K) (CODATA 2018).
R_J = 8.314462618


def departure_enthalpy(
    system: Any, amounts: np.ndarray, T: np.ndarray, P: np.ndarray, threads: int | None
) -> tuple[np.ndarray, np.ndarray]:
    """(N,) enthalpy of ``amounts`` at ``T`` and ``P`` beyond the ideal
    mixture's, J: the gas's residual enthalpy (from its cubic) plus each
    solution's excess enthalpy (from its activity model), and its derivative
    in ``T`` at fixed amounts, J/K. Both from the Gibbs-Helmholtz relation
    ``H = -R T^2 d/dT sum_i n_i ln phi_i`` (``ln gamma_i`` in a solution) at
    fixed ``P`` and amounts, with the core's own coefficients: the balance
    then uses the equation of state the equilibrium uses. The derivatives
    are five-point central differences in steps of 1e-3 ``T`` (truncation
    about 1e-12 relative)."""
    n = amounts.shape[0]
    Tn = np.broadcast_to(np.asarray(T, dtype=float), (n,))
    Pn = np.broadcast_to(np.asarray(P, dtype=float), (n,))
    h = 1e-3 * Tn
    g = [
        np.sum(amounts * ln_coefficients(system, amounts, Tn + k * h, Pn, threads), axis=1)
        for k in (-2, -1, 0, 1, 2)
    ]
    d1 = (g[0] - 8.0 * g[1] + 8.0 * g[3] - g[4]) / (12.0 * h)
    d2 = (-g[0] + 16.0 * g[1] - 30.0 * g[2] + 16.0 * g[3] - g[4]) / (12.0 * h * h)
    return -R_J * Tn * Tn * d1, -R_J * (2.0 * Tn * d1 + Tn * Tn * d2)


#: Relative step of the central differences of ln phi / ln gamma.
_STEP = 1e-6


def nonideal_sensitivities(
    system: Any, result: Any, T: np.ndarray, threads: int | None
) -> tuple[tuple[np.ndarray, np.ndarray, np.ndarray], np.ndarray]:
    """Derivatives of a non-ideal solve from the core's ideal ones at the
    same answer.

    With ``L = ln phi`` (or ``ln gamma``) the answer is the ideal equilibrium
    at ``ln K' = ln K - nu L(n, T, P)``; the core gives its derivatives
    ``S_K``, ``S_P``, ``S_F`` at fixed ``ln K'``. Then
    ``(I + S_K nu J) dn = S_K d ln K + (S_P - S_K nu L_lnP) d ln P + S_F dn0
    - S_K nu L_T dT`` with ``J = dL/dn``, ``L_lnP`` and ``L_T`` by central
    differences of the core's ``L`` (steps of 1e-6 of the amounts' total,
    of ``P`` and of ``T``; one-sided three-point differences for amounts
    within a step of zero). Returns ``(d_lnK, d_lnP, d_feed)`` in the core's
    layout and ``dn/dT``'s extra term (N, S)."""
    d_lnk, d_lnp, d_feed = result._sens
    n, S = result.amounts.shape
    nu = system.stoich  # (R, S)
    amounts = result.amounts
    P = np.broadcast_to(result.P, (n,)).astype(float)
    Tn = np.broadcast_to(np.asarray(T, dtype=float), (n,))
    base = ln_coefficients(system, amounts, Tn, P, threads)
    h = _STEP * np.nansum(amounts, axis=1)
    J = np.zeros((n, S, S))  # J[c, i, k] = d L_i / d n_k
    for k in range(S):
        up, down, up2 = amounts.copy(), amounts.copy(), amounts.copy()
        up[:, k] += h
        down[:, k] -= h
        up2[:, k] += 2 * h
        central = amounts[:, k] >= h
        f_up = ln_coefficients(system, up, Tn, P, threads)
        f_down = ln_coefficients(system, np.where(central[:, None], down, amounts), Tn, P, threads)
        f_up2 = ln_coefficients(system, up2, Tn, P, threads)
        one_sided = (-3.0 * base + 4.0 * f_up - f_up2) / (2.0 * h[:, None])
        J[:, :, k] = np.where(central[:, None], (f_up - f_down) / (2.0 * h[:, None]), one_sided)
    L_lnp = (
        ln_coefficients(system, amounts, Tn, P * (1 + _STEP), threads)
        - ln_coefficients(system, amounts, Tn, P * (1 - _STEP), threads)
    ) / (2.0 * _STEP)
    dT = _STEP * Tn
    hot, cold = (ln_coefficients(system, amounts, Tn + sign * dT, P, threads) for sign in (1, -1))
    L_T = (hot - cold) / (2.0 * dT[:, None])
    SKnu = np.einsum("csr,rk->csk", d_lnk, nu)  # S_K nu, (N, S, S)
    M = np.eye(S)[None] + SKnu @ J
    ok = np.isfinite(M).all(axis=(1, 2))
    M[~ok] = np.eye(S)
    solve = np.linalg.solve
    new_lnk = solve(M, d_lnk)
    new_lnp = solve(M, (d_lnp - np.einsum("csk,ck->cs", SKnu, L_lnp))[:, :, None])[:, :, 0]
    new_feed = solve(M, d_feed)
    extra_T = solve(M, -np.einsum("csk,ck->cs", SKnu, L_T)[:, :, None])[:, :, 0]
    for arr in (new_lnk, new_lnp, new_feed, extra_T):
        arr[~ok] = np.nan
    return (new_lnk, new_lnp, new_feed), extra_T
