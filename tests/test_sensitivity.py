"""Exact sensitivities against closed forms and central finite differences."""

from __future__ import annotations

import eqbatch
import numpy as np
import pytest
from test_reference import random_system


def test_dissociation_derivatives_match_the_closed_form() -> None:
    # A = 2 B: x = sqrt(K / (K + 4 P)); differentiate by hand.
    K, P = 0.7, 2.0
    system = eqbatch.ReactionSystem(["A", "B"], ["A = 2 B"])
    res = system.solve([1.0, 0.0], K=[K], P=P, sensitivities=True)
    x = np.sqrt(K / (K + 4 * P))
    dx_dlnk = K * 0.5 / x * 4 * P / (K + 4 * P) ** 2
    dx_dlnp = P * 0.5 / x * (-4 * K) / (K + 4 * P) ** 2
    np.testing.assert_allclose(res.sensitivity("lnK")[0, :, 0], [-dx_dlnk, 2 * dx_dlnk], rtol=1e-9)
    np.testing.assert_allclose(res.sensitivity("lnK", of="extents")[0, 0, 0], dx_dlnk, rtol=1e-9)
    np.testing.assert_allclose(res.sensitivity("lnP")[0], [-dx_dlnp, 2 * dx_dlnp], rtol=1e-9)
    np.testing.assert_allclose(res.sensitivity("P")[0], [-dx_dlnp / P, 2 * dx_dlnp / P], rtol=1e-9)


def test_trace_species_derivative_keeps_relative_precision() -> None:
    # A = B, ln K = 200: n_A = 1 / (1 + K), d n_A / d ln K = -K / (1 + K)^2 ~ -exp(-200).
    system = eqbatch.ReactionSystem(["A", "B"], ["A = B"])
    res = system.solve([1.0, 0.0], lnK=[200.0], sensitivities=True)
    K = np.exp(200.0)
    assert res.sensitivity("lnK")[0, 0, 0] == pytest.approx(-K / (1 + K) ** 2, rel=1e-9)


def test_unreachable_species_have_zero_derivatives() -> None:
    system = eqbatch.ReactionSystem(["A", "X", "B", "C"], ["A + X = B", "B = X + C"])
    res = system.solve([1.0, 0.0, 0.0, 0.0], lnK=[1.0, 0.5], sensitivities=True)
    d = res.sensitivity("lnK")[0]
    assert np.all(d[[1, 2]] == 0.0)
    # A = C overall with K1 K2: n_C = K/(1+K), d n_C/d ln K_j = K/(1+K)^2 for both j.
    K = np.exp(1.5)
    np.testing.assert_allclose(d[3], [K / (1 + K) ** 2] * 2, rtol=1e-8)


def _fd(system, feed, lnK, P, wrt, h, of="amounts"):
    def solve(f, k, p):
        res = system.solve(f, lnK=k, P=p, tol=1e-13)
        assert res.converged[0]
        return getattr(res, of)[0]

    feed, lnK = np.asarray(feed, float), np.asarray(lnK, float)
    if wrt == "lnK":
        cols = []
        for r in range(lnK.size):
            e = np.zeros_like(lnK)
            e[r] = h
            cols.append((solve(feed, lnK + e, P) - solve(feed, lnK - e, P)) / (2 * h))
        return np.stack(cols, axis=-1)
    if wrt == "lnP":
        return (solve(feed, lnK, P * np.exp(h)) - solve(feed, lnK, P * np.exp(-h))) / (2 * h)
    if wrt == "feed":
        cols = []
        for k in range(feed.size):
            step = h * max(feed[k], 1e-3)
            e = np.zeros_like(feed)
            e[k] = step
            lo = np.maximum(feed - e, 0.0)
            cols.append((solve(feed + e, lnK, P) - solve(lo, lnK, P)) / (feed[k] + step - lo[k]))
        return np.stack(cols, axis=-1)
    raise ValueError(wrt)


@pytest.mark.parametrize("seed", range(12))
def test_random_systems_match_central_differences(seed: int) -> None:
    rng = np.random.default_rng(100 + seed)
    A, names, equations, mu = random_system(rng)
    system = eqbatch.ReactionSystem(names, equations)
    lnK = -(system.stoich @ mu)
    feed = rng.uniform(0.05, 2.0, len(names))
    P = float(10 ** rng.uniform(-1, 1))
    res = system.solve(feed, lnK=lnK, P=P, sensitivities=True, tol=1e-13)
    total = feed.sum()
    for wrt in ("lnK", "lnP", "feed"):
        fd = _fd(system, feed, lnK, P, wrt, 1e-5)
        exact = res.sensitivity(wrt)[0]
        np.testing.assert_allclose(exact, fd, rtol=2e-5, atol=2e-7 * total, err_msg=wrt)
    fd = _fd(system, feed, lnK, P, "lnK", 1e-5, of="mole_fractions")
    np.testing.assert_allclose(res.sensitivity("lnK", of="mole_fractions")[0], fd, rtol=2e-5, atol=2e-7)
    fd = _fd(system, feed, lnK, P, "lnK", 1e-5, of="extents")
    np.testing.assert_allclose(res.sensitivity("lnK", of="extents")[0], fd, rtol=2e-5, atol=2e-7 * total)


def test_temperature_derivative_with_K_of_T() -> None:
    from eqbatch.demo import reformer_feed, reformer_system

    system = reformer_system()
    feed = reformer_feed(3.0)[0]
    res = system.solve(feed, T=950.0, P=15.0, sensitivities=True)
    h = 1e-3
    up = system.solve(feed, T=950.0 + h, P=15.0, tol=1e-13).amounts[0]
    down = system.solve(feed, T=950.0 - h, P=15.0, tol=1e-13).amounts[0]
    np.testing.assert_allclose(res.sensitivity("T")[0], (up - down) / (2 * h), rtol=1e-5, atol=1e-10)


def test_liquid_phase_derivatives_match_differences() -> None:
    names = ["A_g", "A_l", "B_l", "N2"]
    system = eqbatch.ReactionSystem(names, ["A_g = A_l"], phases={"A_l": "liquid", "B_l": "liquid"})
    feed, lnK, P = np.array([1.0, 0.1, 1.0, 1.0]), np.array([1.0]), 2.0
    res = system.solve(feed, lnK=lnK, P=P, sensitivities=True, tol=1e-13)
    for wrt in ("lnK", "lnP", "feed"):
        np.testing.assert_allclose(
            res.sensitivity(wrt)[0], _fd(system, feed, lnK, P, wrt, 1e-5), rtol=2e-5, atol=1e-8, err_msg=wrt
        )


def test_sensitivities_need_to_be_requested(reforming) -> None:
    res = reforming.solve([1, 3, 0, 0, 0, 0], lnK=[1.0, 0.5])
    with pytest.raises(eqbatch.CaseInputError, match="sensitivities=True"):
        res.sensitivity("lnK")
    bad = reforming.solve([[1, 3, 0, 0, 0, 0], [-1, 3, 0, 0, 0, 0]], lnK=[1.0, 0.5], sensitivities=True)
    assert np.all(np.isnan(bad.sensitivity("lnK")[1])) and np.all(np.isfinite(bad.sensitivity("lnK")[0]))


def test_warm_start_gives_the_same_equilibrium_in_fewer_iterations(reforming) -> None:
    feed = [1.0, 3.0, 0.0, 0.0, 0.0, 0.1]
    first = reforming.solve(feed, lnK=[2.0, 0.5], P=10.0)
    near = reforming.solve(feed, lnK=[2.05, 0.52], P=10.5)
    warm = reforming.solve(feed, lnK=[2.05, 0.52], P=10.5, x0=first.extents[0])
    np.testing.assert_allclose(warm.amounts, near.amounts, rtol=1e-9)
    assert warm.iterations[0] < near.iterations[0]
    # an infeasible start is ignored, not trusted
    wild = reforming.solve(feed, lnK=[2.05, 0.52], P=10.5, x0=[5.0, 5.0])
    np.testing.assert_allclose(wild.amounts, near.amounts, rtol=1e-9)
