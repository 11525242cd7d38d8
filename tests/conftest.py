"""Shared helpers for the test-suite."""

from __future__ import annotations

import struct
from pathlib import Path

import eqbatch
import numpy as np
import pytest

REFORMING_SPECIES = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
REFORMING_REACTIONS = {"reforming": "CH4 + H2O = CO + 3 H2", "shift": "CO + H2O = CO2 + H2"}


@pytest.fixture
def reforming() -> eqbatch.ReactionSystem:
    return eqbatch.ReactionSystem(REFORMING_SPECIES, REFORMING_REACTIONS)


def log_residuals(
    system: eqbatch.ReactionSystem, amounts: np.ndarray, lnK: np.ndarray, P: float
) -> np.ndarray:
    """ln Q - ln K of every reaction as written, from amounts alone (an
    independent re-computation of the equilibrium conditions)."""
    nu = system.stoich
    ln_a = np.zeros(system.n_species)
    phases = np.array(system.phases)
    # Each mixture by its name; a pure species (solid, pure_liquid) has a = 1.
    for phase in set(phases) - {"solid", "pure_liquid"}:
        mask = phases == phase
        total = amounts[mask].sum()
        with np.errstate(divide="ignore"):
            ln_a[mask] = np.log(amounts[mask]) - np.log(total) if total > 0 else 0.0
        if phase == "gas":
            ln_a[mask] += np.log(P / system.P0)
    present = amounts > 0
    out = np.empty(system.n_reactions)
    for j in range(system.n_reactions):
        involved = nu[j] != 0
        if not np.all(present[involved]):
            out[j] = np.nan  # pinned reaction: not an equation at equilibrium
        else:
            out[j] = nu[j, involved] @ ln_a[involved] - lnK[j]
    return out


def gibbs(system, amounts: np.ndarray, lnK: np.ndarray, P: float) -> float:
    """G/RT of amounts, with standard potentials g solving nu g = -ln K (any
    solution gives the same differences between states of one feed); mixtures
    by phase name, a pure species only its n g (activity 1)."""
    from scipy.special import xlogy

    g = -np.linalg.lstsq(system.stoich, lnK, rcond=None)[0]
    phases = np.array(system.phases)
    total = float(amounts @ g)
    for phase in set(phases) - {"solid", "pure_liquid"}:
        part = amounts[phases == phase]
        size = part.sum()
        if size > 0:
            total += float(np.sum(xlogy(part, part / size)))
            if phase == "gas":
                total += size * np.log(P / system.P0)
    return total


def conservation_basis(system: eqbatch.ReactionSystem) -> np.ndarray:
    """Rows spanning the conserved combinations of amounts (null space of nu)."""
    _, sv, vt = np.linalg.svd(system.stoich)
    rank = int(np.sum(sv > 1e-10 * sv.max()))
    return vt[rank:]


def png_size(path: Path) -> tuple[int, int]:
    """Width and height of a PNG file, after checking its signature."""
    data = Path(path).read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])
