"""Single reactions whose equilibrium is the root of a polynomial, solved
independently with numpy / sympy in the test."""

from __future__ import annotations

import eqbatch
import numpy as np
import pytest
import sympy


def _root_in(coeffs: list[float], lo: float, hi: float) -> float:
    roots = np.roots(coeffs)
    real = [r.real for r in roots if abs(r.imag) < 1e-9 and lo - 1e-12 <= r.real <= hi + 1e-12]
    assert len(real) == 1, roots
    return real[0]


@pytest.mark.parametrize("K", [1e-6, 0.01, 1.0, 3.0, 250.0, 1e6])
@pytest.mark.parametrize("P", [0.01, 1.0, 50.0])
def test_dissociation_a_to_2b_is_a_quadratic(K: float, P: float) -> None:
    # A = 2 B, feed A = 1: (2x)^2 / ((1 - x)(1 + x)) * P/P0 = K  ->  x = sqrt(K / (K + 4 P))
    system = eqbatch.ReactionSystem(["A", "B"], ["A = 2 B"])
    res = system.solve([1.0, 0.0], K=[K], P=P)
    x = np.sqrt(K / (K + 4.0 * P))
    one_minus_x = 4.0 * P / ((K + 4.0 * P) * (1.0 + x))  # 1 - x without cancellation
    assert res.converged[0]
    np.testing.assert_allclose(res.extents[0, 0], x, rtol=1e-10)
    np.testing.assert_allclose(res.amounts[0], [one_minus_x, 2 * x], rtol=1e-10)


@pytest.mark.parametrize("K", [0.05, 1.0, 40.0, 1e4])
@pytest.mark.parametrize("P", [0.5, 1.0, 20.0])
def test_sulfur_trioxide_synthesis_is_a_cubic(K: float, P: float) -> None:
    # 2 SO2 + O2 = 2 SO3, feed SO2 = 2, O2 = 1: with extent x,
    # (2x)^2 (3 - x) = K (P/P0) (2 - 2x)^2 (1 - x)  ->  cubic in x, root in (0, 1).
    system = eqbatch.ReactionSystem(["SO2", "O2", "SO3"], ["2 SO2 + O2 = 2 SO3"])
    res = system.solve([2.0, 1.0, 0.0], K=[K], P=P)
    x = sympy.symbols("x")
    poly = sympy.Poly(sympy.expand(4 * x**2 * (3 - x) - K * P * 4 * (1 - x) ** 2 * (1 - x)), x)
    root = _root_in([float(c) for c in poly.all_coeffs()], 0.0, 1.0)
    assert res.converged[0]
    np.testing.assert_allclose(res.extents[0, 0], root, rtol=1e-9)


@pytest.mark.parametrize("K", [0.1, 4.0, 100.0])
def test_liquid_esterification_is_pressure_independent_quadratic(K: float) -> None:
    # Acid + alcohol = ester + water, all in one ideal liquid, feed 1:1:
    # x^2 / (1 - x)^2 = K  ->  x = sqrt(K) / (1 + sqrt(K)); P plays no part.
    names = ["acid", "alcohol", "ester", "water"]
    system = eqbatch.ReactionSystem(
        names, ["acid + alcohol = ester + water"], phases={n: "liquid" for n in names}
    )
    x = np.sqrt(K) / (1 + np.sqrt(K))
    for P in (0.1, 1.0, 100.0):
        res = system.solve([1.0, 1.0, 0.0, 0.0], K=[K], P=P)
        np.testing.assert_allclose(res.amounts[0], [1 - x, 1 - x, x, x], rtol=1e-10)


@pytest.mark.parametrize("K", [4.0, 10.0, 1000.0])
@pytest.mark.parametrize("P", [1.0, 5.0])
def test_condensation_of_a_pure_liquid(K: float, P: float) -> None:
    # V (gas) = L (liquid, alone in its phase, activity 1), with an inert gas.
    # Equilibrium: y_V = P0 / (K P) (a vapour-pressure condition); feed V = 1,
    # inert 1 -> n_V / (n_V + 1) = c, n_V = c / (1 - c), while c < 1/2 (below
    # that K P the liquid vanishes: see test_phases.py).
    system = eqbatch.ReactionSystem(["V", "L", "I"], ["V = L"], phases={"L": "liquid"})
    c = 1.0 / (K * P)
    res = system.solve([1.0, 0.0, 1.0], K=[K], P=P)
    n_v = c / (1 - c)
    assert res.converged[0]
    np.testing.assert_allclose(res.amounts[0, 0], n_v, rtol=1e-10)
    np.testing.assert_allclose(res.amounts[0, 1], 1 - n_v, rtol=1e-10)
    assert res.mole_fractions[0, 1] == 1.0


def test_ammonia_from_stoichiometric_feed_matches_quartic() -> None:
    # 0.5 N2 + 1.5 H2 = NH3, feed N2 = 1, H2 = 3: with NH3 = 2z, N2 = 1 - z,
    # H2 = 3(1 - z), total 4 - 2z: (2z)(4 - 2z) = K (P/P0) (1 - z)^0.5 (3(1-z))^1.5
    # squared: 4 z^2 (4 - 2z)^2 = K^2 P^2 27 (1 - z)^4 -> quartic, root in (0, 1).
    K, P = 0.0065, 30.0
    system = eqbatch.ReactionSystem(["N2", "H2", "NH3"], ["0.5 N2 + 1.5 H2 = NH3"])
    res = system.solve([1.0, 3.0, 0.0], K=[K], P=P)
    z = sympy.symbols("z")
    poly = sympy.Poly(sympy.expand(4 * z**2 * (4 - 2 * z) ** 2 - K**2 * P**2 * 27 * (1 - z) ** 4), z)
    root = _root_in([float(c) for c in poly.all_coeffs()], 0.0, 1.0)
    np.testing.assert_allclose(res.amounts[0, 2], 2 * root, rtol=1e-9)
