"""Liquid activity models (NRTL, Wilson) in the equilibrium: against an
independent numpy implementation (ln gamma from the excess Gibbs energy by
complex-step differentiation), the textbook infinite-dilution limits, an
independent scipy solution of a liquid esterification, and the ideal limit."""

from __future__ import annotations

import math

import eqbatch
import numpy as np
import pytest
from eqbatch.errors import CaseInputError, SystemDefinitionError

NAMES = ["AcOH", "EtOH", "EtOAc", "H2O"]
# Parameters of the tests (inputs of both computations, not check values).
NRTL_A = {("AcOH", "H2O"): 0.4, ("H2O", "AcOH"): 0.9, ("EtOAc", "H2O"): 1.2, ("H2O", "EtOAc"): 2.1}
NRTL_B = {("EtOH", "H2O"): 150.0, ("H2O", "EtOH"): 300.0, ("EtOH", "EtOAc"): -80.0, ("EtOAc", "EtOH"): 120.0}
NRTL_ALPHA = {("EtOAc", "H2O"): 0.2}
WILSON_A = {("AcOH", "H2O"): -0.3, ("H2O", "AcOH"): 0.2, ("EtOAc", "H2O"): -1.5, ("H2O", "EtOAc"): -0.6}
WILSON_B = {("EtOH", "H2O"): -90.0, ("H2O", "EtOH"): -40.0, ("EtOAc", "EtOH"): 60.0}
# UNIQUAC r and q of the four species (Poling, Prausnitz and O'Connell, 5th ed.,
# Table 8-20 style values; from memory, used here only as inputs)
UNIQUAC_R = {"AcOH": 2.2024, "EtOH": 2.1055, "EtOAc": 3.4786, "H2O": 0.92}
UNIQUAC_Q = {"AcOH": 2.072, "EtOH": 1.972, "EtOAc": 3.116, "H2O": 1.40}
UNIQUAC_B = {("EtOH", "H2O"): -60.0, ("H2O", "EtOH"): 40.0, ("EtOAc", "H2O"): -150.0, ("H2O", "EtOAc"): -30.0}


def matrix(table: dict, default: float, symmetric: bool = False) -> np.ndarray:
    out = np.full((4, 4), default)
    np.fill_diagonal(out, 0.0)
    for (i, j), v in table.items():
        out[NAMES.index(i), NAMES.index(j)] = v
        if symmetric:
            out[NAMES.index(j), NAMES.index(i)] = v
    return out


def excess_gibbs(kind: str, n: np.ndarray, T: float):
    """n g^E / (R T) for amounts n (complex allowed): NRTL
    sum_i n_i (sum_j x_j tau_ji G_ji) / (sum_k x_k G_ki); Wilson
    -sum_i n_i ln(sum_j x_j Lambda_ij); UNIQUAC sum n_i ln(Phi_i / x_i) +
    z/2 sum q_i n_i ln(theta_i / Phi_i) - sum q_i n_i ln(sum_j theta_j tau_ji)
    (Renon and Prausnitz 1968; Wilson 1964; Abrams and Prausnitz 1975)."""
    x = n / n.sum()
    if kind == "nrtl":
        tau = matrix(NRTL_A, 0.0) + matrix(NRTL_B, 0.0) / T
        G = np.exp(-matrix(NRTL_ALPHA, 0.3, symmetric=True) * tau)
        return np.sum(n * ((x @ (tau * G)) / (x @ G)))
    if kind == "uniquac":
        r = np.array([UNIQUAC_R[k] for k in NAMES])
        q = np.array([UNIQUAC_Q[k] for k in NAMES])
        tau = np.exp(matrix(UNIQUAC_B, 0.0) / T)
        phi, theta = r * x / (r @ x), q * x / (q @ x)
        comb = np.sum(n * np.log(phi / x)) + 5.0 * np.sum(q * n * np.log(theta / phi))
        return comb - np.sum(q * n * np.log(theta @ tau))
    lam = np.exp(matrix(WILSON_A, 0.0) + matrix(WILSON_B, 0.0) / T)
    return -np.sum(n * np.log(lam @ x))


def ln_gamma_numpy(kind: str, x: np.ndarray, T: float) -> np.ndarray:
    """d(n g^E/RT)/dn_i by the complex step (exact to rounding)."""
    h = 1e-30
    out = np.empty(4)
    for i in range(4):
        n = x.astype(complex)
        n[i] += 1j * h
        out[i] = excess_gibbs(kind, n, T).imag / h
    return out


def model(kind: str, among: tuple[str, ...] = tuple(NAMES)):
    """The test's model, its pairs restricted to the species ``among``."""

    def keep(table: dict) -> dict:
        return {pair: v for pair, v in table.items() if set(pair) <= set(among)}

    if kind == "nrtl":
        return eqbatch.NRTL(a=keep(NRTL_A), b=keep(NRTL_B), alpha=keep(NRTL_ALPHA))
    if kind == "uniquac":
        per = {n: UNIQUAC_R[n] for n in among}, {n: UNIQUAC_Q[n] for n in among}
        return eqbatch.UNIQUAC(r=per[0], q=per[1], b=keep(UNIQUAC_B))
    return eqbatch.Wilson(a=keep(WILSON_A), b=keep(WILSON_B))


def esterification(kind: str | None) -> eqbatch.ReactionSystem:
    return eqbatch.ReactionSystem(
        NAMES,
        ["AcOH + EtOH = EtOAc + H2O"],
        phases={n: "liquid" for n in NAMES},
        check_balance=False,
        liquid_model=None if kind is None else {"liquid": model(kind)},
    )


@pytest.mark.parametrize("kind", ["nrtl", "wilson", "uniquac"])
def test_activity_coefficients_against_the_excess_gibbs_energy(kind: str) -> None:
    # ln gamma at each equilibrium equals d(n g^E / RT)/dn_i of an independent
    # numpy g^E (complex step), and sum x_i ln gamma_i = g^E / RT (the
    # Gibbs-Duhem / Euler identity), both to 1e-12
    rng = np.random.default_rng(1)
    n = 30
    feed = rng.uniform(0.05, 1.0, (n, 4))
    T = rng.uniform(300.0, 370.0, n)
    res = esterification(kind).solve(feed, lnK=np.log(4.0), T=T)
    assert res.converged.all()
    for c in range(n):
        x = res.mole_fractions[c]
        ln_g = np.log(res.activity_coefficients[c])
        np.testing.assert_allclose(ln_g, ln_gamma_numpy(kind, x, T[c]), atol=1e-12)
        assert abs(x @ ln_g - excess_gibbs(kind, x, T[c])) < 1e-12


def test_esterification_against_an_independent_scipy_solution() -> None:
    # AcOH + EtOH = EtOAc + H2O in one NRTL liquid with K = 4 (the classical
    # value for this esterification near 25-80 C, common practice): the extent
    # where sum nu (ln x + ln gamma) = ln K, by scipy's brentq with the numpy
    # gamma above
    from scipy.optimize import brentq

    feed, T = np.array([1.0, 1.2, 0.0, 0.3]), 340.0
    nu = np.array([-1.0, -1.0, 1.0, 1.0])

    def residual(xi: float) -> float:
        n = feed + nu * xi
        x = n / n.sum()
        return float(nu @ (np.log(x) + ln_gamma_numpy("nrtl", x, T))) - math.log(4.0)

    xi = brentq(residual, 1e-12, 1.0 - 1e-12, xtol=1e-15, rtol=1e-15)
    res = esterification("nrtl").solve(feed, lnK=math.log(4.0), T=T)
    assert res.converged.all()
    np.testing.assert_allclose(res.extents[0, 0], xi, rtol=1e-9)
    ideal = esterification(None).solve(feed, lnK=math.log(4.0))
    assert abs(ideal.extents[0, 0] - xi) > 1e-3  # the model matters here


@pytest.mark.parametrize("kind", ["nrtl", "wilson", "uniquac"])
def test_infinite_dilution_limits(kind: str) -> None:
    # A trace of ethyl acetate (x about 1e-13) in water: gamma at infinite
    # dilution, NRTL ln g1_inf = tau_21 + tau_12 G_12, Wilson
    # ln g1_inf = 1 - ln Lambda_12 - Lambda_21 and UNIQUAC's limit below
    # (textbook limits of the models)
    system = eqbatch.ReactionSystem(
        ["EtOAc", "H2O"],
        ["H2O = EtOAc"],
        phases={"EtOAc": "liquid", "H2O": "liquid"},
        check_balance=False,
        liquid_model={"liquid": model(kind, ("EtOAc", "H2O"))},
    )
    T = 330.0
    res = system.solve([0.0, 1.0], lnK=-30.0, T=T)
    assert res.converged.all() and res.mole_fractions[0, 0] < 1e-10
    i, j = NAMES.index("EtOAc"), NAMES.index("H2O")
    if kind == "nrtl":
        tau = matrix(NRTL_A, 0.0) + matrix(NRTL_B, 0.0) / T
        alpha = matrix(NRTL_ALPHA, 0.3, symmetric=True)
        expected = tau[j, i] + tau[i, j] * math.exp(-alpha[i, j] * tau[i, j])
    elif kind == "uniquac":
        # ln(r1/r2) + z/2 q1 ln(q1 r2 / (q2 r1)) + l1 - (r1/r2) l2 + q1 (1 - ln tau_21 - tau_12)
        r1, r2 = UNIQUAC_R["EtOAc"], UNIQUAC_R["H2O"]
        q1, q2 = UNIQUAC_Q["EtOAc"], UNIQUAC_Q["H2O"]
        l1, l2 = (5.0 * (r - q) - (r - 1.0) for r, q in ((r1, q1), (r2, q2)))
        tau = np.exp(matrix(UNIQUAC_B, 0.0) / T)
        expected = (
            math.log(r1 / r2)
            + 5.0 * q1 * math.log(q1 * r2 / (q2 * r1))
            + l1
            - r1 / r2 * l2
            + q1 * (1.0 - math.log(tau[j, i]) - tau[i, j])
        )
    else:
        lam = np.exp(matrix(WILSON_A, 0.0) + matrix(WILSON_B, 0.0) / T)
        expected = 1.0 - math.log(lam[i, j]) - lam[j, i]
    assert math.log(res.activity_coefficients[0, 0]) == pytest.approx(expected, abs=1e-9)
    assert math.log(res.activity_coefficients[0, 1]) == pytest.approx(0.0, abs=1e-9)


def test_zero_parameters_give_the_ideal_solution() -> None:
    feed = np.array([[1.0, 1.2, 0.0, 0.3], [0.5, 0.5, 0.5, 0.5]])
    zero = eqbatch.ReactionSystem(
        NAMES,
        ["AcOH + EtOH = EtOAc + H2O"],
        phases={n: "liquid" for n in NAMES},
        check_balance=False,
        liquid_model={"liquid": eqbatch.NRTL()},
    )
    a = zero.solve(feed, lnK=math.log(4.0), T=340.0)
    b = esterification(None).solve(feed, lnK=math.log(4.0))
    np.testing.assert_allclose(a.amounts, b.amounts, rtol=1e-12)
    np.testing.assert_allclose(a.activity_coefficients, 1.0, rtol=1e-15)


def test_clear_errors() -> None:
    with pytest.raises(SystemDefinitionError, match="no solution phase"):
        eqbatch.ReactionSystem(["A", "B"], ["A = B"], liquid_model={"liquid": eqbatch.NRTL()})
    with pytest.raises(SystemDefinitionError, match="two different species of the phase"):
        eqbatch.ReactionSystem(
            ["A", "B", "C"],
            ["A = B"],
            phases={"A": "liquid", "B": "liquid"},
            liquid_model={"liquid": eqbatch.NRTL(a={("A", "C"): 1.0})},
        )
    with pytest.raises(CaseInputError, match="give T="):
        esterification("nrtl").solve([1.0, 1.0, 0.0, 0.0], lnK=1.0)
    again = eqbatch.ReactionSystem(**esterification("wilson").arguments())
    a = again.solve([1.0, 1.0, 0.0, 0.0], lnK=1.0, T=330.0)
    b = esterification("wilson").solve([1.0, 1.0, 0.0, 0.0], lnK=1.0, T=330.0)
    np.testing.assert_array_equal(a.amounts, b.amounts)


def test_liquid_sensitivities_match_finite_differences() -> None:
    # NRTL esterification with K = 4 as K(T) data (constant): d n / d(ln K, T,
    # feed) against central differences of the solve (gamma depends on T
    # through b / T, so dn/dT is the activity model's alone)
    system = eqbatch.ReactionSystem(
        NAMES,
        {"ester": "AcOH + EtOH = EtOAc + H2O"},
        phases={n: "liquid" for n in NAMES},
        check_balance=False,
        lnK={"ester": {"a": math.log(4.0)}},
        liquid_model={"liquid": model("nrtl")},
    )
    feed, T = np.array([1.0, 1.2, 0.1, 0.3]), 340.0
    res = system.solve(feed, T=T, sensitivities=True)
    assert res.converged.all()
    h = 1e-5
    lnk = system.lnK(T)[0]
    fd = (system.solve(feed, lnK=lnk + h, T=T).amounts - system.solve(feed, lnK=lnk - h, T=T).amounts)[0] / (
        2 * h
    )
    np.testing.assert_allclose(res.sensitivity("lnK")[0, :, 0], fd, rtol=1e-5, atol=1e-10)
    fd_t = (system.solve(feed, T=T + 0.01).amounts - system.solve(feed, T=T - 0.01).amounts)[0] / 0.02
    assert np.abs(fd_t).max() > 1e-6  # the model's temperature dependence shows
    np.testing.assert_allclose(res.sensitivity("T")[0], fd_t, rtol=1e-5, atol=1e-10)
    for k in range(4):
        step = np.zeros(4)
        step[k] = h
        fd_f = (system.solve(feed + step, T=T).amounts - system.solve(feed - step, T=T).amounts)[0] / (2 * h)
        np.testing.assert_allclose(res.sensitivity("feed")[0, :, k], fd_f, rtol=1e-5, atol=1e-9)


def test_a_system_file_describes_the_same_liquid_model(tmp_path) -> None:
    def pairs(table: dict) -> str:
        return "{ " + ", ".join(f'"{i}-{j}" = {v}' for (i, j), v in table.items()) + " }"

    def per_species(table: dict) -> str:
        return "{ " + ", ".join(f"{k} = {v}" for k, v in table.items()) + " }"

    for kind, body in (
        ("nrtl", [f"a = {pairs(NRTL_A)}", f"b = {pairs(NRTL_B)}", f"alpha = {pairs(NRTL_ALPHA)}"]),
        (
            "uniquac",
            [f"r = {per_species(UNIQUAC_R)}", f"q = {per_species(UNIQUAC_Q)}", f"b = {pairs(UNIQUAC_B)}"],
        ),
    ):
        path = tmp_path / f"{kind}.toml"
        lines = [
            f"species = {NAMES!r}".replace("'", '"'),
            "check_balance = false",
            "[[reactions]]",
            'equation = "AcOH + EtOH = EtOAc + H2O"',
            "[phases]",
            *[f'{n} = "liquid"' for n in NAMES],
            "[liquid_model.liquid]",
            f'model = "{kind}"',
            *body,
        ]
        path.write_text("\n".join(lines) + "\n")
        from_file = eqbatch.ReactionSystem.from_toml(path)
        a = from_file.solve([1.0, 1.2, 0.0, 0.3], lnK=math.log(4.0), T=340.0)
        b = esterification(kind).solve([1.0, 1.2, 0.0, 0.3], lnK=math.log(4.0), T=340.0)
        assert a.converged.all()
        np.testing.assert_array_equal(a.amounts, b.amounts)
