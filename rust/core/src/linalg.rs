//! Small dense linear algebra: the sizes here are the number of reactions
//! (a few to a few dozen), so straightforward loops beat any BLAS call.

use crate::newton::{ldl_factor, ldl_substitute};

/// Solve `H x = rhs` for a symmetric positive definite `H` (`n x n`,
/// row-major; only its upper triangle and diagonal are read, the lower
/// triangle is overwritten) by the `L D L^T` factorisation of
/// [`crate::newton::ldl_factor`], falling back to [`solve_spd_scaled`]
/// when a pivot is not clearly positive. `scale` is caller-provided scratch
/// of length `n`.
#[inline(always)]
pub fn solve_spd(h: &mut [f64], rhs: &mut [f64], scale: &mut [f64], n: usize) -> bool {
    if !ldl_factor(h, n, scale, n, true) {
        return solve_spd_scaled(h, rhs, scale, n);
    }
    ldl_substitute(h, n, rhs, scale, n);
    rhs.iter().all(|v| v.is_finite())
}

/// Solve `H x = rhs` for a symmetric positive (semi-)definite `H` (`n x n`,
/// row-major, overwritten) by Cholesky factorisation after symmetric diagonal
/// scaling `D H D` with `D = diag(H)^-1/2`.
///
/// The scaling matters: in the per-case stoichiometric basis the Hessian has
/// diagonal entries `1/n` for trace species that can be 1e80 times larger
/// than the rest. Cholesky is invariant under such scaling in exact
/// arithmetic, and the scaled matrix has unit diagonal and a modest condition
/// number, so the factorisation keeps full relative precision in every
/// direction. If the scaled matrix is not numerically positive definite, a
/// growing multiple of the identity is added (a Levenberg-style shift), which
/// still yields a descent direction. Returns `false` only when every shift
/// fails or the input is not finite. `scale` is caller-provided scratch of
/// length `n`.
#[inline(always)]
pub fn solve_spd_scaled(h: &mut [f64], rhs: &mut [f64], scale: &mut [f64], n: usize) -> bool {
    for i in 0..n {
        let d = h[i * n + i];
        if !(d > 0.0 && d.is_finite()) {
            return false;
        }
        scale[i] = 1.0 / d.sqrt();
    }
    for i in 0..n {
        for j in 0..n {
            h[i * n + j] *= scale[i] * scale[j];
        }
        rhs[i] *= scale[i];
    }
    // Keep the scaled matrix in the upper triangle and factor into the lower
    // one, so a failed attempt can be retried with a shift.
    let mut shift = 0.0;
    for _attempt in 0..8 {
        if cholesky_in_place(h, n, shift) {
            forward_back(h, rhs, n);
            for i in 0..n {
                rhs[i] *= scale[i];
            }
            return rhs.iter().all(|v| v.is_finite());
        }
        shift = if shift == 0.0 { 1e-12 } else { shift * 100.0 };
    }
    false
}

/// Factor `A + shift I = L L^T` reading `A` from the upper triangle (and
/// diagonal) and writing `L` strictly below the diagonal, with the diagonal of
/// `L` kept in the diagonal slot. The upper triangle is left intact. The
/// diagonal of `A` is 1 after scaling, so it is recovered as `1` on retry.
#[inline(always)]
fn cholesky_in_place(h: &mut [f64], n: usize, shift: f64) -> bool {
    for j in 0..n {
        // Scaled diagonal is exactly 1 (up to rounding), independent of
        // earlier attempts that overwrote the diagonal slot.
        let mut diag = 1.0 + shift;
        for k in 0..j {
            diag -= h[j * n + k] * h[j * n + k];
        }
        if diag.is_nan() || diag <= 1e-14 {
            return false;
        }
        let ljj = diag.sqrt();
        h[j * n + j] = ljj;
        for i in j + 1..n {
            let mut s = h[j * n + i]; // A[j][i] == A[i][j], from the upper triangle
            for k in 0..j {
                s -= h[i * n + k] * h[j * n + k];
            }
            h[i * n + j] = s / ljj;
        }
    }
    true
}

#[inline(always)]
fn forward_back(l: &[f64], x: &mut [f64], n: usize) {
    for i in 0..n {
        let mut s = x[i];
        for k in 0..i {
            s -= l[i * n + k] * x[k];
        }
        x[i] = s / l[i * n + i];
    }
    for i in (0..n).rev() {
        let mut s = x[i];
        for k in i + 1..n {
            s -= l[k * n + i] * x[k];
        }
        x[i] = s / l[i * n + i];
    }
}

/// A solution of `A x = b` (`a` is `rows x cols`, row-major) by Gauss-Jordan
/// elimination with partial pivoting, free variables set to zero; `None`
/// if the system is inconsistent (a residual above 1e-8 of the largest
/// entry of `b`, or of 1). Pivots below 1e-12 of the largest entry of `a`
/// count as zero.
pub fn particular_solution(a: &[f64], b: &[f64], rows: usize, cols: usize) -> Option<Vec<f64>> {
    let mut m = a.to_vec();
    let mut rhs = b.to_vec();
    let scale = m
        .iter()
        .fold(0.0_f64, |acc, v| acc.max(v.abs()))
        .max(1e-300);
    let rhs_scale = rhs.iter().fold(0.0_f64, |acc, v| acc.max(v.abs())).max(1.0);
    let eps = 1e-12 * scale;
    let mut pivots = Vec::new();
    let mut row = 0;
    for col in 0..cols {
        if row == rows {
            break;
        }
        let (best, best_abs) = (row..rows)
            .map(|r| (r, m[r * cols + col].abs()))
            .fold((row, -1.0), |acc, v| if v.1 > acc.1 { v } else { acc });
        if best_abs <= eps {
            continue;
        }
        for k in 0..cols {
            m.swap(row * cols + k, best * cols + k);
        }
        rhs.swap(row, best);
        let inv = 1.0 / m[row * cols + col];
        for k in 0..cols {
            m[row * cols + k] *= inv;
        }
        rhs[row] *= inv;
        for r in 0..rows {
            let factor = m[r * cols + col];
            if r != row && factor != 0.0 {
                for k in 0..cols {
                    m[r * cols + k] -= factor * m[row * cols + k];
                }
                rhs[r] -= factor * rhs[row];
            }
        }
        pivots.push(col);
        row += 1;
    }
    if rhs[row..].iter().any(|v| v.abs() > 1e-8 * rhs_scale) {
        return None;
    }
    let mut x = vec![0.0; cols];
    for (r, &col) in pivots.iter().enumerate() {
        x[col] = rhs[r];
    }
    Some(x)
}

/// A basis of the null space of the `rows x cols` matrix `m` (row-major):
/// returns `(basis, k)` with `basis` a `cols x k` row-major matrix whose
/// columns span `{x : m x = 0}`. Reduced row-echelon form with partial
/// pivoting; entries below `tol` times the largest entry count as zero.
pub fn null_space(m: &[f64], rows: usize, cols: usize, tol: f64) -> (Vec<f64>, usize) {
    let mut a = m.to_vec();
    let max_abs = a.iter().fold(0.0_f64, |acc, v| acc.max(v.abs()));
    let eps = tol * max_abs.max(1.0);
    let mut pivot_cols = Vec::new();
    let mut row = 0;
    for col in 0..cols {
        if row == rows {
            break;
        }
        let (best, best_abs) = (row..rows)
            .map(|r| (r, a[r * cols + col].abs()))
            .fold((row, -1.0), |acc, v| if v.1 > acc.1 { v } else { acc });
        if best_abs <= eps {
            continue;
        }
        for k in 0..cols {
            a.swap(row * cols + k, best * cols + k);
        }
        let inv = 1.0 / a[row * cols + col];
        for k in 0..cols {
            a[row * cols + k] *= inv;
        }
        for r in 0..rows {
            if r != row {
                let factor = a[r * cols + col];
                if factor != 0.0 {
                    for k in 0..cols {
                        a[r * cols + k] -= factor * a[row * cols + k];
                    }
                }
            }
        }
        pivot_cols.push(col);
        row += 1;
    }
    let free: Vec<usize> = (0..cols).filter(|c| !pivot_cols.contains(c)).collect();
    let k = free.len();
    let mut basis = vec![0.0; cols * k];
    for (b, &fc) in free.iter().enumerate() {
        basis[fc * k + b] = 1.0;
        for (r, &pc) in pivot_cols.iter().enumerate() {
            let v = -a[r * cols + fc];
            basis[pc * k + b] = if v.abs() <= eps { 0.0 } else { v };
        }
    }
    (basis, k)
}

#[cfg(test)]
mod tests {
    use super::*;

    type Solver = fn(&mut [f64], &mut [f64], &mut [f64], usize) -> bool;

    /// H = D A D with A well conditioned and D spanning `spread` orders of
    /// magnitude either way: every solution component must keep its
    /// relative precision.
    fn check_badly_scaled(solve: Solver, spread: f64) {
        let d = [spread, 1.0, 1.0 / spread];
        let a = [2.0, 0.5, 0.1, 0.5, 3.0, 0.2, 0.1, 0.2, 1.5];
        let x_true = [1.0 / spread, 2.0, -3.0 * spread];
        let mut h = [0.0; 9];
        for i in 0..3 {
            for j in 0..3 {
                h[i * 3 + j] = d[i] * a[i * 3 + j] * d[j];
            }
        }
        let mut rhs = [0.0; 3];
        for i in 0..3 {
            rhs[i] = (0..3).map(|j| h[i * 3 + j] * x_true[j]).sum();
        }
        let mut scale = [0.0; 3];
        assert!(solve(&mut h, &mut rhs, &mut scale, 3));
        for i in 0..3 {
            assert!(((rhs[i] - x_true[i]) / x_true[i]).abs() < 1e-13, "{rhs:?}");
        }
    }

    #[test]
    fn scaled_cholesky_keeps_full_relative_precision() {
        check_badly_scaled(solve_spd_scaled, 1e20);
    }

    #[test]
    fn ldl_keeps_full_relative_precision() {
        check_badly_scaled(solve_spd, 1e30);
    }

    #[test]
    fn ldl_falls_back_on_a_singular_matrix() {
        // Rank one: the shifted, scaled Cholesky still returns a finite step.
        let mut h = [1.0, 1.0, 1.0, 1.0];
        let mut rhs = [1.0, 1.0];
        let mut scale = [0.0; 2];
        assert!(solve_spd(&mut h, &mut rhs, &mut scale, 2));
        assert!(rhs.iter().all(|v| v.is_finite()));
    }

    #[test]
    fn null_space_of_rank_one_matrix() {
        let m = [1.0, 2.0, -1.0];
        let (basis, k) = null_space(&m, 1, 3, 1e-12);
        assert_eq!(k, 2);
        for b in 0..k {
            let dot: f64 = (0..3).map(|c| m[c] * basis[c * k + b]).sum();
            assert!(dot.abs() < 1e-14);
        }
    }

    #[test]
    fn null_space_of_full_rank_square_is_empty() {
        let (_, k) = null_space(&[1.0, 2.0, 3.0, 4.0], 2, 2, 1e-12);
        assert_eq!(k, 0);
    }
}
