"""Property tests (hypothesis): facts that hold for every equilibrium."""

from __future__ import annotations

import eqbatch
import numpy as np
from conftest import REFORMING_REACTIONS, REFORMING_SPECIES, conservation_basis, log_residuals
from hypothesis import given, settings
from hypothesis import strategies as st

SYSTEM = eqbatch.ReactionSystem(REFORMING_SPECIES, REFORMING_REACTIONS)

amount = st.one_of(st.just(0.0), st.floats(1e-6, 10.0))
feeds = st.lists(amount, min_size=6, max_size=6).filter(lambda f: sum(f[:5]) > 0)
ln_ks = st.lists(st.floats(-30.0, 30.0), min_size=2, max_size=2)
pressures = st.floats(1e-2, 1e2)


@settings(max_examples=300, deadline=None)
@given(feed=feeds, lnK=ln_ks, P=pressures)
def test_conservation_positivity_and_residuals(feed, lnK, P) -> None:
    feed = np.array(feed)
    res = SYSTEM.solve(feed, lnK=lnK, P=P)
    assert res.status[0] == eqbatch.Status.CONVERGED, res.message(0)
    n = res.amounts[0]
    assert np.all(n >= 0)
    # Every conserved combination (here C, H, O and N) to 1e-12 relative.
    basis = conservation_basis(SYSTEM)
    scale = np.abs(basis) @ (n + feed)
    assert np.all(np.abs(basis @ (n - feed)) <= 1e-12 * scale + 1e-300)
    # n = feed + nu^T xi
    np.testing.assert_allclose(n, feed + SYSTEM.stoich.T @ res.extents[0], atol=1e-11 * feed.sum())
    # Equilibrium conditions of every reaction that is not pinned, recomputed here.
    r = log_residuals(SYSTEM, n, np.array(lnK), P)
    r = r[np.isfinite(r)]
    assert np.all(np.abs(r) < 1e-8)


@settings(max_examples=100, deadline=None)
@given(
    feed=st.lists(st.floats(1e-3, 10.0), min_size=5, max_size=5),
    lnK=st.floats(-20, 20),
    P1=pressures,
    P2=pressures,
)
def test_pressure_independence_when_gas_moles_are_conserved(feed, lnK, P1, P2) -> None:
    # Water-gas shift conserves gas moles: P and P0 cancel (DESIGN.md).
    system = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2", "N2"], ["CO + H2O = CO2 + H2"])
    a = system.solve(feed, lnK=[lnK], P=P1).amounts
    b = system.solve(feed, lnK=[lnK], P=P2).amounts
    np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-14)


@settings(max_examples=100, deadline=None)
@given(lnK=st.floats(-12, 6), P=st.floats(1e-2, 1e2), factor=st.floats(1.5, 100.0), inert=st.floats(0.0, 5.0))
def test_conversion_rises_with_pressure_when_gas_moles_fall(lnK, P, factor, inert) -> None:
    # Le Chatelier: 0.5 N2 + 1.5 H2 = NH3 lowers the gas moles.
    system = eqbatch.ReactionSystem(["N2", "H2", "NH3", "Ar"], ["0.5 N2 + 1.5 H2 = NH3"])
    res = system.solve([1.0, 3.0, 0.0, inert], lnK=[lnK], P=[P, P * factor])
    assert res.amounts[1, 2] > res.amounts[0, 2]


@settings(max_examples=100, deadline=None)
@given(feed=feeds, lnK=ln_ks, P=pressures, perm=st.permutations(list(range(6))))
def test_invariant_to_species_order(feed, lnK, P, perm) -> None:
    shuffled = eqbatch.ReactionSystem([REFORMING_SPECIES[k] for k in perm], REFORMING_REACTIONS)
    a = SYSTEM.solve(feed, lnK=lnK, P=P).amounts[0]
    b = shuffled.solve([feed[k] for k in perm], lnK=lnK, P=P).amounts[0]
    np.testing.assert_allclose(b, a[list(perm)], rtol=1e-9, atol=1e-14 * sum(feed))


@settings(max_examples=100, deadline=None)
@given(feed=feeds, lnK=ln_ks, P=pressures)
def test_doubling_a_reaction_and_its_lnK_changes_nothing(feed, lnK, P) -> None:
    doubled = eqbatch.ReactionSystem(
        REFORMING_SPECIES, ["2 CH4 + 2 H2O = 2 CO + 6 H2", "CO + H2O = CO2 + H2"]
    )
    a = SYSTEM.solve(feed, lnK=lnK, P=P)
    b = doubled.solve(feed, lnK=[2 * lnK[0], lnK[1]], P=P)
    np.testing.assert_allclose(b.amounts, a.amounts, rtol=1e-9, atol=1e-14 * sum(feed))
    np.testing.assert_allclose(b.extents[0, 0] * 2, a.extents[0, 0], rtol=1e-8, atol=1e-12 * sum(feed))


@settings(max_examples=100, deadline=None)
@given(feed=feeds, lnK=ln_ks, P=pressures, scale=st.sampled_from([1e-12, 1e-6, 1e3, 1e6]))
def test_amounts_scale_with_the_feed(feed, lnK, P, scale) -> None:
    # Intensive state depends only on composition: scaling the feed scales amounts.
    a = SYSTEM.solve(feed, lnK=lnK, P=P).amounts
    b = SYSTEM.solve(np.array(feed) * scale, lnK=lnK, P=P).amounts
    np.testing.assert_allclose(b, a * scale, rtol=1e-9, atol=1e-14 * sum(feed) * scale)
