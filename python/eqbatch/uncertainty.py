"""How sure is this conversion? Monte Carlo on equilibrium constants, the
first-order (delta-method) estimate beside it, and which reaction's data
matters most.

Uncertainty in ln K can be given three ways:

* ``lnK_sigma``: standard deviations of ln K, optionally with a correlation
  matrix between reactions;
* ``dG_sigma``: standard deviations of the standard reaction Gibbs energies,
  kJ/mol, at temperature ``T`` (``sigma_lnK = sigma_G / (R T)``), optionally
  correlated;
* ``species_dG_sigma``: independent standard deviations of the species'
  standard Gibbs energies of formation, kJ/mol. Reactions that share species
  then get the covariance ``nu diag(sigma^2) nu^T / (R T)^2``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from eqbatch.adiabatic import adiabatic_solve
from eqbatch.errors import CaseInputError
from eqbatch.result import EquilibriumResult
from eqbatch.system import ReactionSystem

#: Molar gas constant, kJ/(mol K) (CODATA 2018).
R_KJ = 8.314462618e-3


def lnK_covariance(
    system: ReactionSystem,
    *,
    lnK_sigma: Sequence[float] | Mapping[str, float] | None = None,
    dG_sigma: Sequence[float] | Mapping[str, float] | None = None,
    correlation: np.ndarray | None = None,
    species_dG_sigma: Mapping[str, float] | None = None,
    T: float | None = None,
) -> np.ndarray:
    """The (R, R) covariance matrix of ln K implied by the given uncertainties.

    Parameters
    ----------
    system : ReactionSystem
    lnK_sigma : sequence or mapping label -> float, optional
        Standard deviations of ln K (one value for all, one per reaction, or
        by label; unlisted reactions are certain).
    dG_sigma : sequence or mapping label -> float, optional
        Standard deviations of the standard reaction Gibbs energies, kJ/mol
        (needs ``T``): ``sigma_lnK = sigma_G / (R T)``.
    correlation : array_like, shape (R, R), optional
        Correlation between the reactions' ln K (with ``lnK_sigma`` or
        ``dG_sigma``); default independent.
    species_dG_sigma : mapping species -> float, optional
        Independent standard deviations of the species' Gibbs energies of
        formation, kJ/mol (needs ``T``): ``nu diag(sigma^2) nu^T / (R T)^2``.
    T : float, optional
        Temperature, K.

    Returns
    -------
    ndarray, shape (R, R)

    Raises
    ------
    CaseInputError
        Not exactly one kind of uncertainty, a missing ``T``, an unknown
        label, a negative or non-finite sigma, or a correlation matrix that
        is not symmetric positive semi-definite with unit diagonal.

    Examples
    --------
    Reactions that share a species share its uncertainty, with opposite signs here:

    >>> s = ReactionSystem(["Xa", "Xb", "Xc"], ["Xa = Xb", "Xb = Xc"])
    >>> lnK_covariance(s, species_dG_sigma={"Xb": 2.0}, T=500.0).round(3).tolist()
    [[0.231, -0.231], [-0.231, 0.231]]
    """
    given = [x is not None for x in (lnK_sigma, dG_sigma, species_dG_sigma)]
    if sum(given) != 1:
        raise CaseInputError("give exactly one of lnK_sigma=, dG_sigma=, species_dG_sigma=")
    R = system.n_reactions
    if species_dG_sigma is not None:
        if T is None:
            raise CaseInputError("species_dG_sigma needs the temperature T (K)")
        var = np.zeros(system.n_species)
        for name, value in species_dG_sigma.items():
            var[system.index(name)] = _sigma(value, "species_dG_sigma", name) ** 2
        if correlation is not None:
            raise CaseInputError(
                "species Gibbs energies are taken as independent; correlation= does not apply"
            )
        return (system.stoich * var) @ system.stoich.T / (R_KJ * T) ** 2
    values = lnK_sigma if lnK_sigma is not None else dG_sigma
    sigma = _per_reaction(system, values, "lnK_sigma" if lnK_sigma is not None else "dG_sigma")
    if dG_sigma is not None:
        if T is None:
            raise CaseInputError("dG_sigma needs the temperature T (K): sigma_lnK = sigma_G / (R T)")
        sigma = sigma / (R_KJ * T)
    C = np.eye(R) if correlation is None else np.asarray(correlation, dtype=float)
    if C.shape != (R, R) or not np.allclose(C, C.T) or np.any(np.abs(np.diag(C) - 1) > 1e-12):
        raise CaseInputError(f"correlation must be a symmetric ({R}, {R}) matrix with unit diagonal")
    if np.linalg.eigvalsh(C).min() < -1e-10:
        raise CaseInputError("correlation matrix is not positive semi-definite")
    return sigma[:, None] * C * sigma[None, :]


def _sigma(value: Any, name: str, label: str) -> float:
    """One standard deviation as a float, refused unless finite and not negative."""
    try:
        sigma = float(value)
    except (TypeError, ValueError):
        sigma = math.nan
    if isinstance(value, bool) or not 0.0 <= sigma < math.inf:
        raise CaseInputError(
            f"{name}[{label!r}] = {value!r}: a standard deviation must be a finite number, not negative"
        )
    return sigma


def _per_reaction(system: ReactionSystem, values: Any, name: str) -> np.ndarray:
    if isinstance(values, Mapping):
        out = np.zeros(system.n_reactions)
        for label, v in values.items():
            if label not in system.labels:
                raise CaseInputError(
                    f"{name}: {label!r} is not a reaction label ({', '.join(system.labels)})"
                )
            out[system.labels.index(label)] = _sigma(v, name, label)
        return out
    arr = np.asarray(values, dtype=float).reshape(-1)
    if arr.size == 1:
        arr = np.full(system.n_reactions, arr[0])
    if arr.size != system.n_reactions:
        raise CaseInputError(f"{name} needs one value per reaction ({', '.join(system.labels)})")
    return np.array([_sigma(v, name, label) for v, label in zip(arr.tolist(), system.labels)])


def _sqrt_psd(cov: np.ndarray) -> np.ndarray:
    """A factor L with L L^T = cov for a positive semi-definite cov."""
    w, v = np.linalg.eigh(cov)
    return v * np.sqrt(np.clip(w, 0.0, None))


@dataclass
class Summary:
    """Monte Carlo statistics of one output array (last axis: species or
    reactions), each with its Monte Carlo standard error.

    Attributes
    ----------
    names : tuple of str
        The species or reactions.
    mean, std : ndarray
        Sample mean and standard deviation.
    percentiles : dict of float to ndarray
        Sample percentiles.
    mean_se, std_se : ndarray
        Their Monte Carlo standard errors.
    percentile_se : dict of float to ndarray
        Standard errors of the percentiles (order-statistic intervals).
    linear_std : ndarray or None
        The first-order (delta-method) standard deviation, from
        :meth:`MonteCarloResult.summary`.
    """

    names: tuple[str, ...]
    mean: np.ndarray
    std: np.ndarray
    percentiles: dict[float, np.ndarray]
    mean_se: np.ndarray
    std_se: np.ndarray
    percentile_se: dict[float, np.ndarray]
    linear_std: np.ndarray | None = None

    def to_pandas(self) -> Any:
        """The statistics as a :class:`pandas.DataFrame`, one row per output
        (index ``output``): ``mean``, ``mean_se``, ``std``, ``std_se``, a
        ``p<q>`` and ``p<q>_se`` per percentile, and ``linear_std`` where known.

        Examples
        --------
        >>> summary = summarise(np.array([[1.0], [2.0], [3.0], [4.0]]), ["x"], [50.0])
        >>> list(summary.to_pandas().columns)
        ['mean', 'mean_se', 'std', 'std_se', 'p50', 'p50_se']
        """
        import pandas as pd

        data: dict[str, Any] = {"mean": self.mean, "mean_se": self.mean_se}
        data |= {"std": self.std, "std_se": self.std_se}
        for q in sorted(self.percentiles):
            data[f"p{q:g}"] = self.percentiles[q]
            data[f"p{q:g}_se"] = self.percentile_se[q]
        if self.linear_std is not None:
            data["linear_std"] = self.linear_std
        return pd.DataFrame(data, index=pd.Index(list(self.names), name="output"))

    def table(self) -> str:
        """The statistics as a text table, one row per output.

        Returns
        -------
        str
            Columns: output, mean, its standard error, std, its standard
            error, the percentiles, and the first-order std where known.

        Examples
        --------
        >>> summary = summarise(np.array([[1.0], [2.0], [3.0], [4.0]]), ["x"], [50.0])
        >>> print(summary.table())
        output  mean  +-se  std    +-se  p50
        ------  ----  ----  -----  ----  ---
        x       2.5   0.65  1.291  0.53  2.5
        """
        qs = sorted(self.percentiles)
        head = ["output", "mean", "+-se", "std", "+-se"] + [f"p{q:g}" for q in qs]
        if self.linear_std is not None:
            head.append("std (1st order)")
        rows = []
        for k, name in enumerate(self.names):
            row = [
                name,
                f"{self.mean[k]:.6g}",
                f"{self.mean_se[k]:.2g}",
                f"{self.std[k]:.4g}",
                f"{self.std_se[k]:.2g}",
            ] + [f"{self.percentiles[q][k]:.6g}" for q in qs]
            if self.linear_std is not None:
                row.append(f"{self.linear_std[k]:.4g}")
            rows.append(row)
        widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
        lines = ["  ".join(h.ljust(w) for h, w in zip(head, widths)), "  ".join("-" * w for w in widths)]
        lines += ["  ".join(c.ljust(w) for c, w in zip(r, widths)) for r in rows]
        return "\n".join(lines)


def summarise(values: np.ndarray, names: Sequence[str], percentiles: Sequence[float]) -> Summary:
    """Mean, standard deviation and percentiles over axis 0 with Monte Carlo
    standard errors: ``std / sqrt(n)`` for the mean, ``std / sqrt(2 (n - 1))``
    for the standard deviation (normal theory), and for a percentile the
    half-width of the distribution-free 68 % order-statistic interval
    (ranks ``n q +- sqrt(n q (1 - q))``)."""
    values = np.asarray(values, dtype=float)
    n = values.shape[0]
    mean = values.mean(axis=0)
    std = values.std(axis=0, ddof=1) if n > 1 else np.zeros_like(mean)
    ordered = np.sort(values, axis=0)
    pct, pct_se = {}, {}
    for q in percentiles:
        p = q / 100.0
        pct[q] = np.percentile(values, q, axis=0)
        half = math.sqrt(n * p * (1 - p))
        lo = int(np.clip(math.floor(n * p - half), 0, n - 1))
        hi = int(np.clip(math.ceil(n * p + half), 0, n - 1))
        pct_se[q] = 0.5 * (ordered[hi] - ordered[lo])
    return Summary(
        names=tuple(names),
        mean=mean,
        std=std,
        percentiles=pct,
        mean_se=std / math.sqrt(n),
        std_se=std / math.sqrt(max(2 * (n - 1), 1)),
        percentile_se=pct_se,
    )


@dataclass
class MonteCarloResult:
    """Samples of one case's equilibrium under uncertain ln K (from :func:`monte_carlo`).

    Outputs are named by kind (``of``: ``"amounts"``, ``"mole_fractions"``,
    ``"extents"`` or ``"conversion"``) and by species or reaction label.

    Attributes
    ----------
    system : ReactionSystem
    amounts, mole_fractions : ndarray, shape (samples, S)
    extents : ndarray, shape (samples, R)
    lnK : ndarray, shape (samples, R)
        The sampled constants.
    converged : ndarray, shape (samples,)
    nominal : EquilibriumResult
        The solve at the nominal ln K, with sensitivities.
    covariance : ndarray, shape (R, R)
        Covariance of ln K used for sampling.
    feed : ndarray, shape (S,)
        The case's feed.
    percentiles : tuple of float
        Percentiles :meth:`summary` reports.

    Examples
    --------
    >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    >>> mc = monte_carlo(s, feed=[1, 1, 0, 0], lnK=[1.0], lnK_sigma=[0.3], samples=1000, seed=1)
    >>> mc.samples, mc.amounts.shape, round(mc.nominal_value("conversion", "CO"), 4)
    (1000, (1000, 4), 0.6225)
    """

    system: ReactionSystem
    amounts: np.ndarray
    mole_fractions: np.ndarray
    extents: np.ndarray
    lnK: np.ndarray
    converged: np.ndarray
    nominal: EquilibriumResult
    covariance: np.ndarray
    feed: np.ndarray
    percentiles: tuple[float, ...] = (5.0, 50.0, 95.0)
    #: (samples,) the temperature of each sample's equilibrium (an adiabatic
    #: outlet, or the sampled temperature), K, or None without ``T``.
    T: np.ndarray | None = None
    #: Standard deviation of the (inlet) temperature sampled, K.
    T_sigma: float = 0.0
    #: (samples,) the sampled inlet temperatures of an adiabatic study, K, else None.
    T_in: np.ndarray | None = None
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def samples(self) -> int:
        """Number of samples (see the class example)."""
        return int(self.amounts.shape[0])

    def _values(
        self, of: str, amounts: np.ndarray, fractions: np.ndarray, extents: np.ndarray
    ) -> tuple[np.ndarray, tuple[str, ...]]:
        """One output (rows of cases) from amounts, mole fractions and extents, with its names."""
        if of == "amounts":
            return amounts, tuple(self.system.species)
        if of == "mole_fractions":
            return fractions, tuple(self.system.species)
        if of == "extents":
            return extents, tuple(self.system.labels)
        if of == "T":
            if self.T is None:
                raise CaseInputError("of='T' needs a Monte Carlo study with T")
            T = self.T if amounts.shape[0] == self.samples else np.asarray(self.nominal.T)
            return np.asarray(T, dtype=float).reshape(-1, 1)[: amounts.shape[0]], ("T",)
        if of == "conversion":
            names = self._converted()
            idx = [self.system.index(s) for s in names]
            return 1.0 - amounts[:, idx] / self.feed[idx], names
        raise CaseInputError(
            f"of must be 'amounts', 'mole_fractions', 'extents', 'conversion' or 'T', got {of!r}"
        )

    def _converted(self) -> tuple[str, ...]:
        """Fed species that take part in a reaction, on either side (a
        negative conversion is net production)."""
        return tuple(s for s in self.system.reacting_species() if self.feed[self.system.index(s)] > 0)

    def _position(self, of: str, name: str) -> int:
        """Column of ``name`` among the outputs ``of``, else CaseInputError listing them."""
        _, names = self._values(of, self.amounts[:0], self.mole_fractions[:0], self.extents[:0])
        if name not in names:
            raise CaseInputError(f"{name!r} is not among the {of} outputs ({', '.join(names)})")
        return names.index(name)

    def _output(self, of: str) -> tuple[np.ndarray, tuple[str, ...], np.ndarray]:
        """Samples, names and the first-order Jacobian (at nominal, by ln K) of an output."""
        values, names = self._values(of, self.amounts, self.mole_fractions, self.extents)
        if of == "conversion":
            idx = [self.system.index(s) for s in names]
            jac = -self.nominal.sensitivity("lnK")[0][idx] / self.feed[idx][:, None]
        else:
            jac = np.atleast_2d(self.nominal.sensitivity("lnK", of=of)[0])
        return values, names, jac

    def _temperature_jacobian(self, of: str) -> np.ndarray:
        """d output / d T (the inlet's, for an adiabatic study) at nominal."""
        if of == "conversion":
            idx = [self.system.index(s) for s in self._converted()]
            return -self.nominal.sensitivity("T")[0][idx] / self.feed[idx]
        return np.atleast_1d(self.nominal.sensitivity("T", of=of)[0])

    def summary(self, of: str = "mole_fractions") -> Summary:
        """Statistics of an output over the converged samples.

        With Monte Carlo standard errors, and the first-order (delta-method)
        standard deviation ``sqrt(J C J^T)`` beside them so one can see when
        linearisation is not enough.

        Parameters
        ----------
        of : {"mole_fractions", "amounts", "extents", "conversion"}
            ``"conversion"`` covers the fed species that react.

        Returns
        -------
        Summary

        Raises
        ------
        CaseInputError
            An unknown ``of``.

        Examples
        --------
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
        >>> mc = monte_carlo(s, feed=[1, 1, 0, 0], lnK=[1.0], lnK_sigma=[0.1], samples=4000, seed=1)
        >>> summary = mc.summary("conversion")
        >>> summary.names, bool(abs(summary.std[0] - summary.linear_std[0]) < 0.1 * summary.linear_std[0])
        (('CO', 'H2O'), True)
        """
        values, names, jac = self._output(of)
        ok = self.converged
        out = summarise(values[ok], names, self.percentiles)
        variance = np.einsum("kr,rs,ks->k", jac, self.covariance, jac)
        if self.T_sigma:
            variance = variance + (self._temperature_jacobian(of) * self.T_sigma) ** 2
        out.linear_std = np.sqrt(np.maximum(variance, 0.0))
        return out

    def nominal_value(self, of: str, name: str) -> float:
        """An output at the nominal ln K.

        Parameters
        ----------
        of : {"amounts", "mole_fractions", "extents", "conversion"}
        name : str
            Species or reaction label.

        Returns
        -------
        float

        Raises
        ------
        CaseInputError
            ``name`` is not among the outputs ``of``.

        Examples
        --------
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
        >>> mc = monte_carlo(s, feed=[1, 1, 0, 0], lnK=[0.0], lnK_sigma=[0.3], samples=100, seed=1)
        >>> mc.nominal_value("mole_fractions", "H2")
        0.25
        """
        n = self.nominal
        values, _ = self._values(of, n.amounts, n.mole_fractions, n.extents)
        return float(values[0, self._position(of, name)])

    def values(self, of: str, name: str) -> np.ndarray:
        """The samples of one output, e.g. ``values("conversion", "CH4")``.

        Parameters
        ----------
        of : {"amounts", "mole_fractions", "extents", "conversion"}
        name : str
            Species or reaction label.

        Returns
        -------
        ndarray, shape (samples,)
            NaN for samples that did not converge.

        Raises
        ------
        CaseInputError
            ``name`` is not among the outputs ``of``.

        Examples
        --------
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
        >>> mc = monte_carlo(s, feed=[1, 1, 0, 0], lnK=[0.0], lnK_sigma=[0.3], samples=100, seed=1)
        >>> mc.values("extents", "r1").shape
        (100,)
        """
        k = self._position(of, name)
        values, _, _ = self._output(of)
        return values[:, k]

    def probability(
        self, of: str, name: str, *, at_least: float | None = None, at_most: float | None = None
    ) -> tuple[float, float]:
        """Probability that an output meets a limit, with its Monte Carlo standard error.

        Parameters
        ----------
        of : {"amounts", "mole_fractions", "extents", "conversion"}
        name : str
            Species or reaction label.
        at_least, at_most : float
            The limit; give exactly one.

        Returns
        -------
        (float, float)
            The fraction of converged samples meeting it, and its standard
            error ``sqrt(p (1 - p) / n)``.

        Raises
        ------
        CaseInputError
            Not exactly one limit, or an unknown output.

        Examples
        --------
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
        >>> mc = monte_carlo(s, feed=[1, 1, 0, 0], lnK=[0.0], lnK_sigma=[0.3], samples=4000, seed=1)
        >>> p, se = mc.probability("conversion", "CO", at_least=0.5)   # 0.5 is the nominal
        >>> bool(abs(p - 0.5) < 3 * se + 0.01)
        True
        """
        if (at_least is None) == (at_most is None):
            raise CaseInputError("give exactly one of at_least=, at_most=")
        v = self.values(of, name)[self.converged]
        hits = v >= at_least if at_least is not None else v <= at_most
        p = float(hits.mean())
        return p, math.sqrt(max(p * (1 - p), 0.0) / max(v.size, 1))

    def ranking(self, of: str, name: str) -> Any:
        """Which reaction's uncertainty matters most for one output.

        The first-order share is ``J_r (C J^T)_r / (J C J^T)``; the sampled one
        is the squared correlation of the output with that reaction's ln K
        (they agree when the response is linear and the constants independent).

        Parameters
        ----------
        of : {"amounts", "mole_fractions", "extents", "conversion"}
        name : str
            Species or reaction label.

        Returns
        -------
        pandas.DataFrame
            One row per reaction (index ``reaction``, its label), largest
            first-order share first; columns ``first_order_share`` (of the
            variance) and ``sampled_share``.

        Raises
        ------
        CaseInputError
            An unknown output.

        Examples
        --------
        >>> from eqbatch.demo import reformer_feed, reformer_system
        >>> mc = monte_carlo(reformer_system(), feed=reformer_feed(3.0)[0], T=1050.0, P=20.0,
        ...                  dG_sigma={"reforming": 3.0, "shift": 0.3}, samples=2000, seed=1)
        >>> table = mc.ranking("conversion", "CH4")
        >>> list(table.index), list(table.columns)
        (['reforming', 'shift'], ['first_order_share', 'sampled_share'])
        """
        k = self._position(of, name)
        values, _, jac = self._output(of)
        j = jac[k]
        total = float(j @ self.covariance @ j)
        first = (j * (self.covariance @ j)) / total if total > 0 else np.zeros_like(j)
        v = values[self.converged, k]
        sampled = []
        for r in range(self.system.n_reactions):
            x = self.lnK[self.converged, r]
            if np.std(x) == 0 or np.std(v) == 0:
                sampled.append(0.0)
            else:
                sampled.append(float(np.corrcoef(x, v)[0, 1] ** 2))
        rows = sorted(zip(self.system.labels, first.tolist(), sampled), key=lambda row: -abs(row[1]))
        return _labelled(rows, ["first_order_share", "sampled_share"])

    def tornado(self, of: str, name: str) -> Any:
        """An output with each reaction's ln K moved by one standard deviation.

        Full nonlinear solves at the nominal ln K shifted by -1 and +1
        standard deviation of each reaction in turn (a tornado chart's bars).

        Parameters
        ----------
        of : {"amounts", "mole_fractions", "extents", "conversion"}
        name : str
            Species or reaction label.

        Returns
        -------
        pandas.DataFrame
            One row per reaction (index ``reaction``), widest swing first;
            columns ``at_minus_sigma`` and ``at_plus_sigma`` (the output with
            that reaction's ln K moved by -1 and +1 standard deviation).

        Raises
        ------
        CaseInputError
            An unknown output.

        Examples
        --------
        >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
        >>> mc = monte_carlo(s, feed=[1, 1, 0, 0], lnK=[0.0], lnK_sigma=[0.3], samples=100, seed=1)
        >>> mc.tornado("conversion", "CO").round(4).to_dict("index")
        {'r1': {'at_minus_sigma': 0.4626, 'at_plus_sigma': 0.5374}}
        """
        k = self._position(of, name)
        sigma = np.sqrt(np.diag(self.covariance))
        base = self.nominal.lnK[0]
        rows = []
        for r, label in enumerate(self.system.labels):
            shifted = np.tile(base, (2, 1))
            shifted[0, r] -= sigma[r]
            shifted[1, r] += sigma[r]
            # (a non-ideal phase's coefficients need the temperature)
            T_nominal = self.nominal.T
            T = None if self.system.nonideal is None or T_nominal is None else T_nominal[0]
            res = self.system.solve(self.feed, lnK=shifted, P=self.nominal.P[0], T=T)
            out, _ = self._values(of, res.amounts, res.mole_fractions, res.extents)
            rows.append((label, float(out[0, k]), float(out[1, k])))
        rows.sort(key=lambda row: -abs(row[2] - row[1]))
        return _labelled(rows, ["at_minus_sigma", "at_plus_sigma"])


def _labelled(rows: list[tuple[str, float, float]], columns: list[str]) -> Any:
    """Rows ``(reaction label, a, b)`` as a DataFrame indexed by ``reaction``."""
    import pandas as pd

    index = pd.Index([r[0] for r in rows], name="reaction")
    return pd.DataFrame([r[1:] for r in rows], index=index, columns=columns, dtype=float)


def monte_carlo(
    system: ReactionSystem,
    *,
    feed: Any,
    P: float | None = None,
    T: float | None = None,
    lnK: Any = None,
    lnK_sigma: Any = None,
    dG_sigma: Any = None,
    correlation: np.ndarray | None = None,
    species_dG_sigma: Mapping[str, float] | None = None,
    samples: int = 10_000,
    seed: int | np.random.SeedSequence | None = None,
    percentiles: Sequence[float] = (5.0, 50.0, 95.0),
    threads: int | None = None,
    T_sigma: float | None = None,
    adiabatic: bool = False,
) -> MonteCarloResult:
    """Sample ln K from a multivariate normal around its nominal value and
    solve every sample (batched through the core).

    Parameters
    ----------
    system : ReactionSystem
    feed : array_like (S,) or mapping
        One case's feed (for tables of cases see :func:`monte_carlo_table`).
    P, T : float, optional
        Pressure (bar) and temperature (K); ``T`` gives the nominal ln K from
        the system's K(T) data and converts Gibbs-energy uncertainties.
    lnK : array_like (R,), optional
        Nominal ln K (instead of K(T)).
    lnK_sigma, dG_sigma, correlation, species_dG_sigma
        The uncertainty; see the module docs and :func:`lnK_covariance`.
    samples : int, default 10000
    seed : int or numpy.random.SeedSequence, optional
        Seed of the numpy Generator: the same seed gives the same samples.
    percentiles : sequence of float, default (5, 50, 95)
        Percentiles the summaries report.
    threads : int, optional
        Worker threads of the solves.
    T_sigma : float, optional
        Standard deviation of the temperature, K (needs ``T`` and K(T)
        data): each sample's ln K is taken at its own sampled temperature,
        plus its sampled deviation. With ``adiabatic`` it is the inlet's.
    adiabatic : bool, default False
        Each sample is an adiabatic bed with inlet temperature ``T`` (needs
        species data): the sampled ln K deviations (from ``species_dG_sigma``
        and the rest, converted at the nominal outlet temperature) shift the
        species data's ln K at every temperature, and ``result.T`` holds the
        outlet temperatures (``summary("T")``).

    Returns
    -------
    MonteCarloResult

    Raises
    ------
    CaseInputError
        ``samples`` not a positive integer, more than one case, or a bad
        uncertainty (see :func:`lnK_covariance`).

    Examples
    --------
    >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    >>> mc = monte_carlo(s, feed=[1, 1, 0, 0], lnK=[1.0], lnK_sigma=[0.3], samples=2000, seed=1)
    >>> p, se = mc.probability("conversion", "CO", at_least=0.6)
    >>> 0.4 < p < 0.9
    True
    """
    if isinstance(samples, bool) or not (isinstance(samples, (int, np.integer)) and samples >= 1):
        raise CaseInputError(f"samples must be a positive integer, got {samples!r}")
    if (T_sigma is not None or adiabatic) and (T is None or lnK is not None):
        raise CaseInputError("T_sigma= and adiabatic=True need T= and the system's K(T) data, not lnK=")
    sigma_T = 0.0 if T_sigma is None else float(T_sigma)
    if not (0.0 <= sigma_T < math.inf):
        raise CaseInputError(
            f"T_sigma must be a finite, non-negative temperature difference (K), got {T_sigma!r}"
        )
    if adiabatic:
        nominal = system.solve(feed, T=T, P=P, adiabatic=True, sensitivities=True)
    else:
        nominal = system.solve(feed, lnK=lnK, T=T, P=P, sensitivities=True)
    if len(nominal) != 1:
        raise CaseInputError("monte_carlo takes one case; use monte_carlo_table for many")
    if sigma_T and lnK_sigma is None and dG_sigma is None and species_dG_sigma is None:
        cov = np.zeros((system.n_reactions, system.n_reactions))  # the temperature alone is uncertain
    else:
        cov = lnK_covariance(
            system,
            lnK_sigma=lnK_sigma,
            dG_sigma=dG_sigma,
            correlation=correlation,
            species_dG_sigma=species_dG_sigma,
            T=float(nominal.T[0]) if adiabatic and nominal.T is not None else T,
        )
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((int(samples), system.n_reactions))
    shift = z @ _sqrt_psd(cov).T
    T_samples = None
    if T is not None:
        T_samples = np.full(int(samples), float(np.asarray(T, dtype=float).reshape(-1)[0]))
        if sigma_T:
            T_samples = T_samples + sigma_T * rng.standard_normal(int(samples))
    if adiabatic:
        res = adiabatic_solve(
            system, system.solve, nominal.feed[0], T_samples, nominal.P[0], threads=threads, lnk_shift=shift
        )
        lnk = res.lnK
        T_out = res.T
    else:
        lnk = (system.lnK(T_samples) if sigma_T else nominal.lnK[0]) + shift
        T_phases = None if system.nonideal is None else T_samples  # non-ideal coefficients need T
        res = system.solve(nominal.feed[0], lnK=lnk, P=nominal.P[0], T=T_phases, threads=threads)
        T_out = T_samples
    return MonteCarloResult(
        system,
        res.amounts,
        res.mole_fractions,
        res.extents,
        lnk,
        res.converged,
        nominal,
        cov,
        nominal.feed[0].copy(),
        tuple(percentiles),
        T_out,
        sigma_T,
        T_samples if adiabatic else None,
    )


def monte_carlo_table(
    system: ReactionSystem,
    *,
    feed: Any,
    P: Any = None,
    T: Any = None,
    lnK: Any = None,
    samples: int = 1_000,
    seed: int | None = None,
    of: str = "mole_fractions",
    percentiles: Sequence[float] = (5.0, 50.0, 95.0),
    threads: int | None = None,
    **uncertainty: Any,
) -> dict[str, np.ndarray]:
    """Monte Carlo for a whole table of cases without holding every sample.

    Each case is sampled and summarised in turn. Case ``k`` uses the seed
    sequence spawned from ``seed`` for index ``k``, so results are
    reproducible and do not depend on the table's order of evaluation.

    Parameters
    ----------
    system : ReactionSystem
    feed, P, T, lnK
        The cases, as for :meth:`ReactionSystem.solve` (broadcast).
    samples : int, default 1000
        Samples per case.
    seed : int, optional
    of : {"mole_fractions", "amounts", "extents", "conversion", "T"}
        The output summarised (``"T"``: the equilibrium temperature, with
        ``T_sigma`` or ``adiabatic``).
    percentiles : sequence of float, default (5, 50, 95)
    threads : int, optional
    **uncertainty
        ``lnK_sigma``, ``dG_sigma``, ``correlation`` or ``species_dG_sigma``
        (see :func:`lnK_covariance`), and ``T_sigma`` and ``adiabatic`` (see
        :func:`monte_carlo`; ``of="T"`` then summarises the outlet
        temperatures).

    Returns
    -------
    dict of str to ndarray
        Arrays of shape (N, S) (or (N, R) for extents): ``mean``, ``std``,
        ``linear_std`` and ``p<q>`` for each percentile ``q``.

    Raises
    ------
    CaseInputError
        As for :func:`monte_carlo`.

    Examples
    --------
    >>> s = ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    >>> table = monte_carlo_table(s, feed=[[1, 1, 0, 0], [1, 3, 0, 0]], lnK=[0.0], lnK_sigma=[0.2],
    ...                           samples=500, seed=1, of="conversion")
    >>> sorted(table), table["mean"].shape
    (['linear_std', 'mean', 'p5', 'p50', 'p95', 'std'], (2, 2))
    """
    base = system.solve(feed, lnK=lnK, T=T, P=P)
    n = len(base)
    T_rows = None if base.T is None else np.asarray(base.T)
    children = np.random.SeedSequence(seed).spawn(n)
    out: dict[str, list[np.ndarray]] = {}
    for k in range(n):
        mc = monte_carlo(
            system,
            feed=base.feed[k],
            P=float(base.P[k]),
            T=None if T_rows is None else float(T_rows[k]),
            lnK=base.lnK[k] if T_rows is None else None,
            samples=samples,
            seed=children[k],
            percentiles=percentiles,
            threads=threads,
            **uncertainty,
        )
        summ = mc.summary(of)
        assert summ.linear_std is not None  # MonteCarloResult.summary gives it
        out.setdefault("mean", []).append(summ.mean)
        out.setdefault("std", []).append(summ.std)
        out.setdefault("linear_std", []).append(summ.linear_std)
        for q in percentiles:
            out.setdefault(f"p{q:g}", []).append(summ.percentiles[q])
    return {key: np.vstack(v) for key, v in out.items()}
