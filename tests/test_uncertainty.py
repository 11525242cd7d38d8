"""Monte Carlo on equilibrium constants, checked against sampling and
probabilities written independently in the tests."""

from __future__ import annotations

import math
import sys
from pathlib import Path

import eqbatch
import numpy as np
import pytest
from conftest import png_size
from eqbatch.uncertainty import R_KJ, lnK_covariance, monte_carlo
from scipy.stats import norm

WGS = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])


def wgs_conversion(lnK: np.ndarray) -> np.ndarray:
    # Equimolar feed: x^2 / (1 - x)^2 = K -> x = sqrt(K) / (1 + sqrt(K)) (closed form).
    root = np.exp(0.5 * lnK)
    return root / (1 + root)


def test_mean_and_spread_match_an_independent_sampling() -> None:
    mc = monte_carlo(WGS, feed=[1, 1, 0, 0], lnK=[0.8], lnK_sigma=[0.6], samples=40_000, seed=11)
    own = wgs_conversion(0.8 + 0.6 * np.random.default_rng(99).standard_normal(400_000))
    summ = mc.summary("conversion")
    k = summ.names.index("CO")
    assert abs(summ.mean[k] - own.mean()) < 4 * summ.mean_se[k]
    assert abs(summ.std[k] - own.std()) < 4 * summ.std_se[k]
    for q in (5, 50, 95):
        assert abs(summ.percentiles[q][k] - np.percentile(own, q)) < 4 * summ.percentile_se[q][k] + 1e-4


def test_delta_method_agrees_for_small_sigma() -> None:
    mc = monte_carlo(WGS, feed=[1, 1, 0, 0], lnK=[0.8], lnK_sigma=[0.01], samples=20_000, seed=1)
    summ = mc.summary("mole_fractions")
    big = summ.std > 0
    np.testing.assert_allclose(summ.linear_std[big], summ.std[big], rtol=0.03)


def test_seed_makes_it_reproducible() -> None:
    a = monte_carlo(WGS, feed=[1, 1, 0, 0], lnK=[0.8], lnK_sigma=[0.3], samples=500, seed=5)
    b = monte_carlo(WGS, feed=[1, 1, 0, 0], lnK=[0.8], lnK_sigma=[0.3], samples=500, seed=5)
    c = monte_carlo(WGS, feed=[1, 1, 0, 0], lnK=[0.8], lnK_sigma=[0.3], samples=500, seed=6)
    np.testing.assert_array_equal(a.amounts, b.amounts)
    assert not np.array_equal(a.amounts, c.amounts)


def test_probability_of_meeting_a_limit_matches_the_normal_law() -> None:
    # conversion >= 0.7  <=>  ln K >= 2 ln(0.7 / 0.3)  (monotone closed form)
    mu, sigma = 1.2, 0.5
    mc = monte_carlo(WGS, feed=[1, 1, 0, 0], lnK=[mu], lnK_sigma=[sigma], samples=50_000, seed=3)
    p, se = mc.probability("conversion", "CO", at_least=0.7)
    exact = 1 - norm.cdf((2 * math.log(0.7 / 0.3) - mu) / sigma)
    assert abs(p - exact) < 4 * se


def test_gibbs_energy_sigma_converts_through_RT() -> None:
    cov = lnK_covariance(WGS, dG_sigma=[3.0], T=700.0)
    assert cov[0, 0] == pytest.approx((3.0 / (R_KJ * 700.0)) ** 2)


def test_species_level_uncertainty_induces_the_right_correlation() -> None:
    system = eqbatch.ReactionSystem(
        ["CH4", "H2O", "CO", "H2", "CO2"], ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"]
    )
    sig = {"CH4": 0.8, "H2O": 0.5, "CO": 1.5, "CO2": 1.0}
    T = 900.0
    cov = lnK_covariance(system, species_dG_sigma=sig, T=T)
    # By hand: var(dG1) = s_CH4^2 + s_H2O^2 + s_CO^2, var(dG2) = s_CO^2 + s_H2O^2 + s_CO2^2,
    # cov(dG1, dG2) = s_H2O^2 (H2O on the left of both) - s_CO^2 (CO on opposite sides).
    rt2 = (R_KJ * T) ** 2
    expected = (
        np.array([[0.8**2 + 0.5**2 + 1.5**2, 0.5**2 - 1.5**2], [0.5**2 - 1.5**2, 1.5**2 + 0.5**2 + 1.0**2]])
        / rt2
    )
    np.testing.assert_allclose(cov, expected, rtol=1e-12)
    mc = monte_carlo(
        system, feed=[1, 3, 0, 0, 0], lnK=[1.0, 0.5], species_dG_sigma=sig, T=T, samples=40_000, seed=8
    )
    np.testing.assert_allclose(np.cov(mc.lnK.T), expected, rtol=0.05, atol=0.02 * expected.max())


def test_ranking_shares_and_tornado() -> None:
    system = eqbatch.ReactionSystem(
        ["CH4", "H2O", "CO", "H2", "CO2"], ["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"]
    )
    mc = monte_carlo(
        system, feed=[1, 3, 0, 0, 0], lnK=[1.0, 0.5], P=5.0, lnK_sigma=[0.4, 0.1], samples=20_000, seed=2
    )
    rows = mc.ranking("mole_fractions", "H2")  # a table labelled by reaction
    assert list(rows.columns) == ["first_order_share", "sampled_share"] and rows.index.name == "reaction"
    assert rows.first_order_share.sum() == pytest.approx(1.0)
    assert np.all(np.abs(rows.first_order_share - rows.sampled_share) < 0.05)
    tornado = mc.tornado("mole_fractions", "H2")
    assert tornado.index[0] == rows.index[0]  # the same reaction matters most
    nominal = mc.nominal_value("mole_fractions", "H2")
    low, high = tornado.at_minus_sigma, tornado.at_plus_sigma
    assert np.all((np.minimum(low, high) < nominal) & (nominal < np.maximum(low, high)))
    summary = mc.summary("mole_fractions").to_pandas()
    sampled_h2 = mc.values("mole_fractions", "H2")[mc.converged]
    assert summary.loc["H2", "mean"] == pytest.approx(float(np.mean(sampled_h2)))


def test_cli_prints_the_summary_and_writes_pngs(tmp_path, capsys) -> None:
    from eqbatch.cli import main

    system = Path(eqbatch.__file__).parent / "data" / "reformer.toml"
    code = main(
        [
            "uncertainty",
            str(system),
            "--feed",
            "CH4=1,H2O=3",
            "--T",
            "900",
            "--P",
            "20",
            "--dG-sigma",
            "reforming=3,shift=2",
            "--samples",
            "3000",
            "--seed",
            "1",
            "--output",
            "y_H2",
            "--output",
            "conversion_CH4",
            "--limit",
            "conversion_CH4>=0.3",
            "--plots",
            str(tmp_path),
        ]
    )
    out = capsys.readouterr().out
    assert code == 0
    assert "Mole fractions" in out and "std (1st order)" in out and "P(conversion_CH4 >= 0.3)" in out
    w, h = png_size(tmp_path / "histogram.png")
    assert (w, h) == (840, 340)
    w, h = png_size(tmp_path / "tornado.png")
    assert w == 640 and h > 100


def test_table_of_cases_summarises_each_case() -> None:
    from eqbatch.uncertainty import monte_carlo_table

    out = monte_carlo_table(
        WGS,
        feed=[1, 1, 0, 0],
        lnK=[[0.5], [1.0], [1.5]],
        lnK_sigma=[0.2],
        samples=4000,
        seed=4,
        of="mole_fractions",
    )
    assert out["mean"].shape == (3, 4) and out["p95"].shape == (3, 4)
    # more favourable K -> more H2 on average
    assert out["mean"][0, 3] < out["mean"][1, 3] < out["mean"][2, 3]


sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "examples"))


def test_optimiser_example_finds_the_grid_optimum_with_a_correct_gradient() -> None:
    import optimise_hydrogen as ex
    from eqbatch.demo import reformer_feed

    result, warm = ex.optimise(warm=True)
    _, cold = ex.optimise(warm=False)
    # brute force on a grid around the answer, with the same objective
    T, P, S = (
        a.ravel()
        for a in np.meshgrid(
            np.linspace(1000, 1150, 31), np.geomspace(3, 12, 31), np.linspace(2.5, 3.5, 21), indexing="ij"
        )
    )
    res = ex.SYSTEM.solve(reformer_feed(S), T=T, P=P)
    value = res.amounts[:, ex.H2] / ex.METHANE - 0.25 * S - 0.05 * ((T - 800) / 100) ** 2 + 0.3 * np.log(P)
    assert -result.fun >= value.max() - 1e-6
    k = int(np.argmax(value))
    # refine the grid optimum without derivatives (Nelder-Mead) as the reference
    from scipy.optimize import minimize

    def negative(x):
        r = ex.SYSTEM.solve(reformer_feed(x[2])[0], T=x[0], P=x[1])
        return -(
            r.amounts[0, ex.H2] / ex.METHANE
            - 0.25 * x[2]
            - 0.05 * ((x[0] - 800) / 100) ** 2
            + 0.3 * np.log(x[1])
        )

    ref = minimize(
        negative,
        [T[k], P[k], S[k]],
        method="Nelder-Mead",
        options={"xatol": 1e-6, "fatol": 1e-12, "maxiter": 4000},
    )
    np.testing.assert_allclose(result.x, ref.x, rtol=5e-3)
    assert -result.fun == pytest.approx(-ref.fun, abs=1e-8)
    # the analytic gradient against central differences
    obj = ex.Objective(warm=False)
    x = np.array([1050.0, 8.0, 3.2])  # away from 1000 K, where the H2 data change range
    _, grad = obj.value_and_gradient(x)
    for i, h in enumerate((1e-3, 1e-5, 1e-6)):
        e = np.zeros(3)
        e[i] = h
        fd = (obj.value_and_gradient(x + e)[0] - obj.value_and_gradient(x - e)[0]) / (2 * h)
        assert grad[i] == pytest.approx(fd, rel=1e-5, abs=1e-9)
    # warm starts save Newton iterations
    assert warm.iterations / warm.calls < 0.85 * cold.iterations / cold.calls


# --- uncertain temperatures and adiabatic beds -------------------------------------


def test_uncertain_inlet_temperature_of_an_adiabatic_bed() -> None:
    # A reformer bed fed at 800 K +- 5 K: the outlet's spread against finite differences
    # of direct adiabatic solves (an independent computation of dT_out/dT_in), and each
    # sample against a direct adiabatic solve of its own inlet temperature.
    from eqbatch.demo import reformer_system

    system = reformer_system()
    feed = {"CH4": 1.0, "H2O": 3.0}
    mc = monte_carlo(system, feed=feed, T=800.0, P=20.0, adiabatic=True, T_sigma=5.0, samples=3000, seed=5)
    assert mc.converged.all() and mc.T is not None
    rng = np.random.default_rng(5)
    rng.standard_normal((3000, system.n_reactions))  # the ln K draws come first
    inlets = 800.0 + 5.0 * rng.standard_normal(3000)
    np.testing.assert_array_equal(mc.T_in, inlets)
    direct = system.solve(feed, T=inlets[:20], P=20.0, adiabatic=True)
    np.testing.assert_allclose(mc.T[:20], direct.T, rtol=1e-9)
    up, down = (system.solve(feed, T=t, P=20.0, adiabatic=True).T[0] for t in (801.0, 799.0))
    slope = (up - down) / 2.0
    summary = mc.summary("T")
    assert summary.std[0] == pytest.approx(abs(slope) * 5.0, rel=0.05)  # sampling error about 1.3 %
    assert summary.linear_std[0] == pytest.approx(abs(slope) * 5.0, rel=1e-3)


def test_uncertain_gibbs_energy_in_an_adiabatic_bed_keeps_each_sample_balanced() -> None:
    # CH4 formation Gibbs energy +- 1 kJ/mol: only reforming's ln K moves, by 1 kJ/(R T)
    # at the outlet temperature (the definition ln K = -dG / (R T)); every sample is at
    # equilibrium with its own constants and keeps the feed's enthalpy (energy balance
    # from the species data's numpy formulas).
    from eqbatch.demo import reformer_system

    system = reformer_system()
    feed = np.array([1.0, 3.0, 0.0, 0.0, 0.0, 0.0])
    mc = monte_carlo(
        system,
        feed=feed,
        T=800.0,
        P=20.0,
        adiabatic=True,
        species_dG_sigma={"CH4": 1.0},
        samples=3000,
        seed=7,
    )
    assert mc.converged.all()
    shift = mc.lnK - system.lnK(mc.T)
    assert np.std(shift[:, 0]) == pytest.approx(1000.0 / (8.314462618 * float(mc.nominal.T[0])), rel=0.05)
    assert np.abs(shift[:, 1]).max() < 1e-12
    iso = system.solve(feed, lnK=mc.lnK[:50], P=20.0, tol=1e-12)
    np.testing.assert_allclose(iso.amounts, mc.amounts[:50], rtol=1e-8, atol=1e-12)
    data = [system.species_data[s] for s in system.species]
    h_in = sum(f * float(d.h(800.0)) for f, d in zip(feed, data))
    h_out = [sum(n * float(d.h(t)) for n, d in zip(row, data)) for row, t in zip(mc.amounts[:20], mc.T[:20])]
    np.testing.assert_allclose(h_out, h_in, rtol=1e-9)


def test_temperature_sigma_needs_a_temperature() -> None:
    with pytest.raises(eqbatch.CaseInputError, match="need T="):
        monte_carlo(WGS, feed=[1, 1, 0, 0], lnK=[0.8], T_sigma=5.0, samples=10)


def test_monte_carlo_table_of_adiabatic_outlets() -> None:
    # Each row of the table is the monte_carlo study of that case with its own seed
    # from the spawned sequence (the table's documented reproducibility): an
    # independent call per case gives the same summary.
    from eqbatch.demo import reformer_system
    from eqbatch.uncertainty import monte_carlo_table

    system = reformer_system()
    feed = {"CH4": 1.0, "H2O": 3.0}
    table = monte_carlo_table(
        system, feed=feed, T=[800.0, 900.0], P=20.0, samples=400, seed=3, of="T", T_sigma=5.0, adiabatic=True
    )
    seeds = np.random.SeedSequence(3).spawn(2)
    for k, T in enumerate((800.0, 900.0)):
        one = monte_carlo(
            system, feed=feed, T=T, P=20.0, samples=400, seed=seeds[k], T_sigma=5.0, adiabatic=True
        )
        assert table["mean"][k, 0] == pytest.approx(float(np.mean(one.T)), rel=1e-12)
        assert table["std"][k, 0] == pytest.approx(one.summary("T").std[0], rel=1e-12)
    assert np.all(table["mean"][:, 0] < [800.0, 900.0])  # an endothermic bed cools
