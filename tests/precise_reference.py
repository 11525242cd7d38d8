"""A high-precision equilibrium reference for one ideal phase, independent of eqbatch.

The equilibrium of an ideal mixture is the minimum of the Gibbs function
under the conservation constraints ``A n = b`` (``A`` spans the null space of
the stoichiometric matrix, ``b = A n0``). Its stationarity conditions give
every amount in closed form from the Lagrange multipliers ``lam`` and the
total ``B``:

    n_i = B x_i,   x_i = exp((A^T lam)_i - c_i),   c_i = g_i + ln(P / P0) (gas)

where ``g`` is any solution of ``nu g = -ln K``. For a fixed ``B``, ``lam``
minimises the strictly convex ``F(lam) = sum(x) - b . lam / B`` (a damped
Newton iteration converges from ``lam = 0``); ``B`` is then the root of
``ln sum(x) = 0``, found by a safeguarded Newton iteration. Every amount is
an exponential, never a difference, so a species of 1e-300 mol has the same
relative precision as the major ones. All of it runs in mpmath at ``digits``
significant digits (and mpmath's unbounded exponent range holds amounts far
below float64's).
"""

from __future__ import annotations

import mpmath
import numpy as np
import sympy


def conservation_rows(stoich: np.ndarray) -> list[list[int]]:
    """Integer rows spanning the null space of ``stoich`` (exact, by sympy)."""
    nu = sympy.Matrix([[sympy.nsimplify(v) for v in row] for row in np.asarray(stoich).tolist()])
    rows = []
    for vec in nu.nullspace():
        scale = sympy.ilcm(*[sympy.fraction(v)[1] for v in vec])
        rows.append([int(v * scale) for v in vec])
    return rows


class _NeedsDigits(Exception):
    """The Newton matrix ``A diag(x) A^T`` spans more orders of magnitude than
    the working precision holds; carries the amounts reached so far."""

    def __init__(self, amounts) -> None:
        super().__init__("more digits needed")
        self.amounts = amounts


def equilibrium(
    stoich: np.ndarray,
    feed,
    lnK,
    P: float = 1.0,
    P0: float = 1.0,
    gas: bool = True,
    digits: int = 50,
    guess=None,
) -> list:
    """Equilibrium amounts (mpmath numbers) of one ideal phase: a gas when
    ``gas`` (activities ``y P / P0``), else a liquid solution (``x``). Every
    species must be present at equilibrium (none unreachable from the feed).

    ``digits`` are the significant digits wanted beyond the spread of the
    amounts: the Newton matrix spans that spread (1e-300 beside 1 needs 300
    more), so the working precision grows with it. ``guess`` (amounts, float)
    only chooses where the iteration starts: the result is the root of the
    stationarity conditions above wherever it starts, but a start near it
    saves the many damped steps that an exponential model takes from far away.
    """
    # The constants bound the spread roughly: start there, and double when
    # the iteration shows that the spread is larger.
    work = digits + 20 + int(sum(abs(float(v)) for v in lnK) / 2.302585)
    for _ in range(6):
        try:
            return _equilibrium(stoich, feed, lnK, P, P0, gas, work, digits, guess)
        except _NeedsDigits as more:
            values = [v for v in more.amounts if v > 0]
            spread = float(mpmath.log10(max(values) / min(values)))
            work = max(2 * work, int(spread) + digits + 20)
    raise AssertionError("reference: precision kept growing")


def _equilibrium(
    stoich: np.ndarray,
    feed,
    lnK,
    P: float,
    P0: float,
    gas: bool,
    work: int,
    digits: int,
    guess,
) -> list:
    with mpmath.workdps(work):
        nu = mpmath.matrix(
            [[mpmath.mpf(sympy.nsimplify(v).evalf(digits + 10)) for v in row] for row in stoich]
        )
        S = nu.cols
        ln_k = mpmath.matrix([mpmath.mpf(float(v)) for v in lnK])
        # g = -nu^T (nu nu^T)^-1 ln K, one of the solutions of nu g = -ln K
        gram = nu * nu.T
        g = -(nu.T * mpmath.lu_solve(gram, ln_k))
        shift = mpmath.log(mpmath.mpf(P) / mpmath.mpf(P0)) if gas else mpmath.mpf(0)
        c = [g[i] + shift for i in range(S)]
        A = conservation_rows(stoich)
        C = len(A)
        n0 = [mpmath.mpf(float(v)) for v in feed]
        b = [mpmath.fsum(A[k][i] * n0[i] for i in range(S)) for k in range(C)]
        tiny = mpmath.mpf(10) ** (-(work - 10))
        floor = mpmath.mpf(10) ** (-(work - 12))

        def fractions(lam):
            return [mpmath.exp(mpmath.fsum(A[k][i] * lam[k] for k in range(C)) - c[i]) for i in range(S)]

        def inner(beta, lam):
            """Minimise F(lam) = sum(x) - e^-beta b . lam by damped Newton."""
            scale = mpmath.exp(-beta)
            target = [scale * v for v in b]

            def value(lam_):
                return mpmath.fsum(fractions(lam_)) - mpmath.fsum(t * v for t, v in zip(target, lam_))

            best, since = None, 0
            for _ in range(3000):
                x = fractions(lam)
                grad = [mpmath.fsum(A[k][i] * x[i] for i in range(S)) - target[k] for k in range(C)]
                size = mpmath.fsum(abs(A[k][i]) * x[i] for k in range(C) for i in range(S)) + mpmath.fsum(
                    abs(t) for t in target
                )
                worst = max(abs(v) for v in grad) / size
                if worst <= tiny:
                    return lam, x
                if best is None or worst < best / 2:
                    best, since = worst, 0
                else:
                    since += 1
                if since > 40 and worst < floor * max(x) / min(x):
                    # stuck at the round-off of the working precision
                    raise _NeedsDigits([mpmath.exp(beta) * v for v in x])
                H = mpmath.matrix(C, C)
                for k in range(C):
                    for m in range(C):
                        H[k, m] = mpmath.fsum(A[k][i] * A[m][i] * x[i] for i in range(S))
                try:
                    step = mpmath.lu_solve(H, mpmath.matrix([-v for v in grad]))
                except ZeroDivisionError:  # singular at this precision
                    raise _NeedsDigits([mpmath.exp(beta) * v for v in x]) from None
                f0 = value(lam)
                slope = mpmath.fsum(grad[k] * step[k] for k in range(C))
                alpha = mpmath.mpf(1)
                if -slope <= floor * (abs(f0) + 1):
                    # the decrease is below what F resolves: the quadratic
                    # region, where the full step is safe (and a line search
                    # would only see round-off)
                    lam = [lam[k] + step[k] for k in range(C)]
                    continue
                while True:
                    trial = [lam[k] + alpha * step[k] for k in range(C)]
                    if value(trial) <= f0 + mpmath.mpf("1e-4") * alpha * slope:
                        lam = trial
                        break
                    alpha /= 2
                    if alpha < tiny:
                        raise _NeedsDigits([mpmath.exp(beta) * v for v in x])
            raise AssertionError("reference: inner Newton did not converge")

        # Outer: ln sum(x) = 0 in beta = ln B, Newton with a bisection bracket.
        total = mpmath.fsum(n0)
        lo, hi = mpmath.log(total) - 60, mpmath.log(total) + 60
        beta = mpmath.log(total)
        if guess is not None:
            beta = mpmath.log(mpmath.fsum(max(float(v), 1e-300) for v in guess))
        # Start where ln x_i = (A^T lam)_i - c_i is closest (least squares) to
        # the guess's ln(n_i / B), or to 0 without a guess.
        At = mpmath.matrix([[A[k][i] for k in range(C)] for i in range(S)])
        target = list(c)
        if guess is not None:
            amounts = [max(float(v), 1e-300) for v in guess]
            target = [c[i] + mpmath.log(amounts[i]) - beta for i in range(S)]
        lam_m = mpmath.lu_solve(At.T * At, At.T * mpmath.matrix(target))
        lam = [lam_m[k] for k in range(C)]
        for _ in range(400):
            lam, x = inner(beta, lam)
            phi = mpmath.log(mpmath.fsum(x))
            if abs(phi) <= 1000 * tiny:  # the inner solve resolves sum(x) to ~tiny
                return [mpmath.exp(beta) * v for v in x]
            if phi > 0:  # too little total: sum(x) falls as B grows
                lo = beta
            else:
                hi = beta
            H = mpmath.matrix(C, C)
            for k in range(C):
                for m in range(C):
                    H[k, m] = mpmath.fsum(A[k][i] * A[m][i] * x[i] for i in range(S))
            scaled_b = mpmath.matrix([mpmath.exp(-beta) * v for v in b])
            dlam = -mpmath.lu_solve(H, scaled_b)
            dsum = mpmath.fsum(scaled_b[k] * dlam[k] for k in range(C))  # d sum(x) / d beta
            newton = beta - phi * mpmath.fsum(x) / dsum
            beta = newton if lo < newton < hi else (lo + hi) / 2
        raise AssertionError("reference: outer iteration did not converge")


def as_floats(amounts) -> np.ndarray:
    """Amounts as float64 (values below float64's range become 0)."""
    return np.array([float(v) for v in amounts])
