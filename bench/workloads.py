"""Benchmark workloads, generated from a seed (scenarios of our own)."""

from __future__ import annotations

import numpy as np
import sympy

from bench.peers.common import Problem

XU_FROMENT = {  # ln K = a + b / T, 1 atm basis (see python/eqbatch/data/reformer.toml)
    "reforming": (30.114, -26830.0),
    "shift": (-4.036, 4400.0),
}


def _nu(species, equations):
    import eqbatch

    system = eqbatch.ReactionSystem(species, equations)
    return system.stoich.copy()


def reforming(n: int, seed: int = 1) -> Problem:
    """(a) steam reforming + water-gas shift with a nitrogen inert: 700-1200 K,
    1-40 bar, steam-to-carbon 1.5-5; K(T) from the Xu-Froment correlations."""
    rng = np.random.default_rng(seed)
    species = ("CH4", "H2O", "CO", "H2", "CO2", "N2")
    equations = ("CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2")
    T = rng.uniform(700.0, 1200.0, n)
    P = rng.uniform(1.0, 40.0, n)
    s2c = rng.uniform(1.5, 5.0, n)
    feed = np.zeros((n, 6))
    feed[:, 0] = 0.98
    feed[:, 1] = 0.98 * s2c
    feed[:, 5] = 0.02
    lnk = np.column_stack([a + b / T for a, b in XU_FROMENT.values()])
    return Problem("reforming", _nu(species, equations), feed, lnk, P, 1.01325, species, equations)


def five_reactions(n: int, seed: int = 2) -> Problem:
    """(b) a five-reaction C1/C2 network (reforming, shift, methanol, methane
    coupling, ethane dehydrogenation) with ln K spread over +-30."""
    rng = np.random.default_rng(seed)
    species = ("CH4", "H2O", "CO", "H2", "CO2", "CH3OH", "C2H6", "C2H4", "N2")
    equations = (
        "CH4 + H2O = CO + 3 H2",
        "CO + H2O = CO2 + H2",
        "CO + 2 H2 = CH3OH",
        "2 CH4 = C2H6 + H2",
        "C2H6 = C2H4 + H2",
    )
    feed = np.zeros((n, 9))
    feed[:, 0] = 1.0
    feed[:, 1] = rng.uniform(1.0, 4.0, n)
    feed[:, 8] = 0.1
    lnk = rng.uniform(-30.0, 30.0, (n, 5))
    P = 10 ** rng.uniform(-1.0, 2.0, n)
    return Problem("five_reactions", _nu(species, equations), feed, lnk, P, 1.0, species, equations)


def random_network(n: int, n_reactions: int = 20, seed: int = 3) -> Problem:
    """(c) a large network: n_reactions + 4 species built from four elements,
    every independent reaction among them, ln K from species potentials in
    +-10 (so the constants are mutually consistent), all species fed."""
    rng = np.random.default_rng(seed)
    n_species = n_reactions + 4
    while True:
        A = rng.integers(0, 4, size=(4, n_species))
        A[:, :4] = np.eye(4, dtype=int) * rng.integers(1, 3, size=4)  # an elemental species each
        if np.linalg.matrix_rank(A) == 4 and np.all(A.sum(axis=0) > 0):
            break
    rows = []
    for vec in sympy.Matrix(A.tolist()).nullspace():
        lcm = sympy.ilcm(*[sympy.fraction(v)[1] for v in vec])
        rows.append([float(v * lcm) for v in vec])
    nu = np.array(rows)
    species = tuple(f"X{k}" for k in range(n_species))
    mu = rng.uniform(-10.0, 10.0, n_species)
    base_lnk = -(nu @ mu)
    lnk = base_lnk[None, :] + rng.normal(0.0, 0.5, (n, nu.shape[0])) @ np.eye(nu.shape[0])
    feed = rng.uniform(0.05, 1.0, (n, n_species))
    P = 10 ** rng.uniform(-1.0, 1.5, n)
    return Problem(f"network_{nu.shape[0]}", nu, feed, lnk, P, 1.0, species, ())
