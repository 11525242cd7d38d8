//! The damped Newton iteration's pieces, written once for the general path
//! (one case in its per-case basis, [`crate::solver`]), the vector lanes
//! (eight cases on the reactions as given, [`crate::lanes`]) and the
//! sensitivities ([`crate::sensitivity`]): the rules of a step, the Gibbs
//! merit's exact change, the Hessian, its `L D L^T` solve and the residuals,
//! generic over one case (`f64`) or a lane group ([`crate::num::Lanes`]).
//!
//! The equilibrium of ideal mixtures is the minimum over the extents of
//!
//! ```text
//! g(xi) = sum_phases sum_i n_i ln(n_i / N_phase) + N_gas ln(P/P0) - sum_j xi_j ln K_j
//! ```
//!
//! a convex function whose gradient is the vector of residuals
//! `ln Q_j - ln K_j` and whose Hessian is
//! `sum_phases [nu diag(1/n) nu^T - d_p d_p^T / N_phase]`
//! (J. Nocedal and S. J. Wright, *Numerical Optimization*, 2nd ed.,
//! Springer 2006, sections 3.1 and 19.2 for the damped Newton method and the
//! fraction-to-boundary rule).

use crate::num::Num;

/// Fraction-to-boundary factor on the straight-line path: a step may remove
/// at most this fraction of what is left of any species. 0.9 rather than
/// 0.99: on workload (a) straight-line steps to 90 % of the way take fewer
/// iterations (5.27 against 5.73 per case; 80 % and 95 %: 5.36).
pub const TO_BOUNDARY: f64 = 0.9;
/// Armijo sufficient-decrease constant.
pub const ARMIJO: f64 = 1e-4;
/// Largest relative change of any amount for which the quadratic model of
/// the Gibbs function along a step is trusted (see [`accept_quickly`]).
pub const MODEL_TRUST: f64 = 0.1;
/// Backtracking halvings before a step is given up (the case stalls, or a
/// lane goes to the general path).
pub const MAX_BACKTRACKS: u32 = 40;
/// A pivot of `L D L^T` must exceed this fraction of its diagonal entry
/// (scale invariant: the diagonal of trace species is 1e80 times the rest).
pub const PIVOT_RATIO: f64 = 1e-12;

/// `(-1)^k / (k (k - 1))` for `k = 2..=12`: the series of [`phi`].
pub const PHI_SERIES: [f64; 11] = {
    let mut c = [0.0; 11];
    let mut k = 2;
    while k <= 12 {
        let sign = if k % 2 == 0 { 1.0 } else { -1.0 };
        c[k - 2] = sign / ((k * (k - 1)) as f64);
        k += 1;
    }
    c
};

/// `phi(x) = (1 + x) ln(1 + x) - x`, accurate for small `x` (where the
/// direct formula cancels) by its series `sum_{k>=2} (-1)^k x^k / (k (k-1))`.
#[inline(always)]
pub fn phi(x: f64) -> f64 {
    if x.abs() < 0.05 {
        phi_series(x)
    } else if x <= -1.0 {
        // (1 + x) ln(1 + x) -> 0 as the amount goes to zero.
        1.0
    } else {
        (1.0 + x) * x.ln_1p() - x
    }
}

/// The series of [`phi`] (Horner form), valid for `|x| < 0.05`.
#[inline(always)]
pub fn phi_series(x: f64) -> f64 {
    let mut sum = PHI_SERIES[PHI_SERIES.len() - 1];
    for &c in PHI_SERIES.iter().rev().skip(1) {
        sum = sum * x + c;
    }
    sum * x * x
}

/// `h(n, d) = (n + d) ln(1 + d/n) - d`, the second-order part of the change
/// of `n ln n`: the Gibbs change of a step is `r . dxi + sum h(n, dn) -
/// sum_phases h(N, dN)` exactly, every term accurate relative to itself, so
/// the line search still sees changes made by species of 1e-60 mol.
#[inline(always)]
pub fn h(n: f64, d: f64) -> f64 {
    if n > 0.0 {
        n * phi(d / n)
    } else {
        0.0
    }
}

/// The Armijo test on the exact Gibbs change `first_order + second_order`
/// of a trial step of length `alpha` along a direction of slope `slope`
/// (or, on a curved path, against the path's own first-order change).
#[inline(always)]
pub fn sufficient_decrease(first_order: f64, second_order: f64, alpha: f64, slope: f64) -> bool {
    let decrease = first_order + second_order;
    decrease <= ARMIJO * alpha * slope || (first_order < 0.0 && decrease <= ARMIJO * first_order)
}

/// A trial point is accepted without the exact Gibbs change when the
/// directional derivative there is not positive (for a convex function
/// that guarantees a decrease), or when every amount changes by at most
/// [`MODEL_TRUST`] and the derivative has fallen to half its initial size
/// (the quadratic model then guarantees a quarter of the predicted
/// decrease).
#[inline(always)]
pub fn accept_quickly(derivative: f64, largest_relative: f64, slope: f64) -> bool {
    derivative <= 0.0 || (largest_relative <= MODEL_TRUST && derivative <= -0.5 * slope)
}

/// One phase's part of the Hessian: the total coefficient of its species in
/// each reaction (`change`, `dim` entries) and `1 / N_phase` (0 for an
/// empty phase).
pub struct PhaseTerm<'a, T> {
    pub change: &'a [f64],
    pub inv_total: T,
}

/// The upper triangle (and diagonal) of the Hessian of the Gibbs function
/// in the extents of `dim` reactions, into `out` (row stride `stride`):
///
/// ```text
/// H[j][k] = sum_c coef[j][c] coef[k][c] weight[c] + [j = k] pivot_weight[j]
///           - sum_phases change_p[j] change_p[k] / N_p
/// ```
///
/// `coef` holds `dim` rows of `width` entries (row-major) over the species
/// that enter through `weight` (`1 / n`; zero for species absent from the
/// face; only its length is used of each row); the general path passes its
/// basis reactions' component columns and the pivots' `1 / n` as
/// `pivot_weight` (each basis reaction holds its pivot with coefficient 1
/// and no other pivot), the lanes the reactions as given over every
/// species, the sensitivities the basis over every species.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
pub fn hessian<T: Num>(
    coef: &[f64],
    width: usize,
    weight: &[T],
    pivot_weight: Option<&[T]>,
    phases: &[PhaseTerm<T>],
    dim: usize,
    out: &mut [T],
    stride: usize,
) {
    let count = weight.len();
    for j in 0..dim {
        let row_j = &coef[j * width..j * width + count];
        let out_j = &mut out[j * stride..j * stride + dim];
        for k in j..dim {
            let row_k = &coef[k * width..k * width + count];
            let mut v = T::splat(0.0);
            for phase in phases {
                v = v.add_scaled(phase.inv_total, -(phase.change[j] * phase.change[k]));
            }
            for ((&a, &b), &w) in row_j.iter().zip(row_k).zip(weight) {
                v = v.add_scaled(w, a * b);
            }
            if j == k {
                if let Some(pivot) = pivot_weight {
                    v = v.add(pivot[j]);
                }
            }
            out_j[k] = v;
        }
    }
}

/// Solve `H x = rhs` (`n x n`, row stride `stride`) by a square-root-free
/// `L D L^T` factorisation ([`ldl_factor`], then [`ldl_substitute`]);
/// returns, per case, whether every pivot passed (where one did not, the
/// solution means nothing but is finite).
#[inline(always)]
pub fn ldl_solve<T: Num>(
    h: &mut [T],
    stride: usize,
    rhs: &mut [T],
    diag: &mut [T],
    n: usize,
    good: T::Mask,
) -> T::Mask {
    let good = ldl_factor(h, stride, diag, n, good);
    ldl_substitute(h, stride, rhs, diag, n);
    good
}

/// The `L D L^T` factors of `H`: reads the upper triangle and diagonal of
/// `h` and writes `L` below the diagonal (the upper triangle and diagonal
/// stay, so a caller can retry another way), with `D` in `diag`.
///
/// Like Cholesky, `L D L^T` without pivoting is invariant under symmetric
/// diagonal scaling, so the badly scaled Hessians of trace species lose
/// nothing; the pivot test is relative to each diagonal entry
/// ([`PIVOT_RATIO`]) for the same reason. It needs no square roots, which
/// for the two- and three-reaction systems that dominate batch work is most
/// of the cost. Returns, per case, whether every pivot passed (and `good`
/// was set); a failed case's pivots are replaced by 1 to keep its arithmetic
/// finite.
#[inline(always)]
pub fn ldl_factor<T: Num>(
    h: &mut [T],
    stride: usize,
    diag: &mut [T],
    n: usize,
    mut good: T::Mask,
) -> T::Mask {
    // (plain index loops: with sizes known at compile time they unroll)
    assert!(n <= stride && h.len() >= n * stride && diag.len() >= n);
    for j in 0..n {
        let mut d = h[j * stride + j];
        for k in 0..j {
            let l = h[j * stride + k];
            d = d.sub(l.mul(l).mul(diag[k]));
        }
        let ok = d.clearly_above(PIVOT_RATIO, h[j * stride + j]);
        good = T::both(good, ok);
        let pivot = T::select(ok, d, T::splat(1.0));
        diag[j] = pivot;
        for i in j + 1..n {
            let mut v = h[j * stride + i]; // A[i][j] from the upper triangle
            for k in 0..j {
                v = v.sub(h[i * stride + k].mul(h[j * stride + k]).mul(diag[k]));
            }
            h[i * stride + j] = v.div(pivot);
        }
    }
    good
}

/// Forward and back substitution with the factors of [`ldl_factor`].
#[inline(always)]
pub fn ldl_substitute<T: Num>(h: &[T], stride: usize, rhs: &mut [T], diag: &[T], n: usize) {
    assert!(n <= stride && h.len() >= n * stride && diag.len() >= n && rhs.len() >= n);
    for i in 0..n {
        let mut v = rhs[i];
        for k in 0..i {
            v = v.sub(h[i * stride + k].mul(rhs[k]));
        }
        rhs[i] = v;
    }
    for i in 0..n {
        rhs[i] = rhs[i].div(diag[i]);
    }
    for i in (0..n).rev() {
        let mut v = rhs[i];
        for k in i + 1..n {
            v = v.sub(h[k * stride + i].mul(rhs[k]));
        }
        rhs[i] = v;
    }
}

/// `ln Q_j - ln K_j` of `dim` reactions into `out`:
/// `constant[j] + sum_c coef[j][c] mu[c] + pivot_mu[j]`, with `mu` the
/// species' `ln a` (up to the pressure term, which `constant` carries with
/// `-ln K`) over the `width` species of `coef`, and `pivot_mu` the pivot
/// species' on the general path. No test for zero coefficients: a branch
/// per term costs more than the multiplication.
#[inline(always)]
pub fn residuals<T: Num>(
    coef: &[f64],
    width: usize,
    mu: &[T],
    pivot_mu: Option<&[T]>,
    constant: &[T],
    out: &mut [T],
) {
    for (j, res) in out.iter_mut().enumerate() {
        let mut v = constant[j];
        if let Some(pivot) = pivot_mu {
            v = v.add(pivot[j]);
        }
        for (c, &m) in coef[j * width..(j + 1) * width].iter().zip(mu) {
            v = v.add_scaled(m, *c);
        }
        *res = v;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::num::{Lanes, LANES};

    #[test]
    fn phi_series_agrees_with_direct_formula_below_the_switch() {
        // Just below the switch the direct formula is still accurate to ~1e-14
        // relative, so the series must agree with it there.
        for &x in &[0.049, -0.049, 0.02] {
            let direct = (1.0 + x) * f64::ln_1p(x) - x;
            assert!((phi(x) - direct).abs() < 1e-12 * direct, "x = {x}");
        }
        assert_eq!(phi(0.0), 0.0);
        // phi(-1) is the limit 1: the amount is used up completely.
        assert_eq!(phi(-1.0), 1.0);
    }

    #[test]
    fn ldl_solves_a_badly_scaled_system_for_one_case_and_for_lanes() {
        // H = D A D with A = [[2, 1], [1, 2]] and D = diag(1e40, 1): the exact
        // solution of H x = (3e40, 3) is x = (1e-40, 1).
        let (a, b) = (1e40, 1.0);
        let mut h = [2.0 * a * a, a * b, a * b, 2.0 * b * b];
        let mut rhs = [3.0 * a, 3.0 * b];
        let mut diag = [0.0; 2];
        assert!(ldl_solve(&mut h, 2, &mut rhs, &mut diag, 2, true));
        assert!((rhs[0] * a - 1.0).abs() < 1e-15 && (rhs[1] - 1.0).abs() < 1e-15);
        // The same in every lane but one, whose matrix is singular.
        let lanes = |v: f64| [v; LANES];
        let mut hw: [Lanes; 4] = [
            lanes(2.0 * a * a),
            lanes(a * b),
            lanes(a * b),
            lanes(2.0 * b * b),
        ];
        hw[3][5] = 0.5 * b * b; // [[2, 1], [1, 0.5]] scaled: singular
        let mut rw = [lanes(3.0 * a), lanes(3.0 * b)];
        let mut dw = [lanes(0.0); 2];
        let good = ldl_solve(&mut hw, 2, &mut rw, &mut dw, 2, [true; LANES]);
        for l in 0..LANES {
            assert_eq!(good[l], l != 5, "lane {l}");
            if l != 5 {
                assert!((rw[0][l] * a - 1.0).abs() < 1e-15 && (rw[1][l] - 1.0).abs() < 1e-15);
            }
            assert!(rw[0][l].is_finite() && rw[1][l].is_finite());
        }
    }
}
