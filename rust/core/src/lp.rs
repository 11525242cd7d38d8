//! A small dense linear-programme solver for the stoichiometric analyses
//! (which species a feed can reach, whether the extents are bounded).
//!
//! These programmes have a few dozen variables at most and are solved once
//! per system or per zero pattern of the feed, never per Newton iteration, so
//! a plain tableau simplex is the right tool: simple, exact enough, and free
//! of dependencies.

/// Pivot tolerance: coefficients of stoichiometric programmes are O(1)
/// rationals, so anything below this is round-off.
const PIVOT_EPS: f64 = 1e-9;

/// The result of [`maximize`].
#[derive(Clone, Debug, PartialEq)]
pub enum LpOutcome {
    /// An optimal vertex and the objective value there.
    Optimal { x: Vec<f64>, value: f64 },
    /// The objective grows without bound on the feasible set.
    Unbounded,
    /// The pivot limit was reached (cannot happen with Bland's rule unless
    /// round-off makes it cycle); treated as a failure by callers.
    PivotLimit,
}

/// Maximise `c . x` subject to `A x <= b`, `x >= 0`, where `b >= 0` so that
/// `x = 0` is a feasible starting vertex (no phase one is needed).
///
/// `a` is `m x n` row-major. Uses the tableau form of Dantzig's simplex method
/// with Bland's smallest-index rule, which cannot cycle on degenerate vertices
/// (R. G. Bland, "New finite pivoting rules for the simplex method",
/// Mathematics of Operations Research 2(2), 1977).
pub fn maximize(a: &[f64], b: &[f64], c: &[f64], m: usize, n: usize) -> LpOutcome {
    debug_assert_eq!(a.len(), m * n);
    debug_assert_eq!(b.len(), m);
    debug_assert_eq!(c.len(), n);
    let width = n + m + 1;
    let rhs = n + m;
    let mut tab = vec![0.0; (m + 1) * width];
    for i in 0..m {
        tab[i * width..i * width + n].copy_from_slice(&a[i * n..(i + 1) * n]);
        tab[i * width + n + i] = 1.0;
        tab[i * width + rhs] = b[i].max(0.0);
    }
    for j in 0..n {
        tab[m * width + j] = -c[j];
    }
    let mut basis: Vec<usize> = (n..n + m).collect();
    let max_pivots = 50 * (n + m) + 100;
    for _ in 0..max_pivots {
        let Some(entering) = (0..n + m).find(|&j| tab[m * width + j] < -PIVOT_EPS) else {
            let mut x = vec![0.0; n];
            for (row, &var) in basis.iter().enumerate() {
                if var < n {
                    x[var] = tab[row * width + rhs];
                }
            }
            return LpOutcome::Optimal {
                x,
                value: tab[m * width + rhs],
            };
        };
        let mut leaving: Option<usize> = None;
        let mut best_ratio = f64::INFINITY;
        for row in 0..m {
            let coef = tab[row * width + entering];
            if coef > PIVOT_EPS {
                let ratio = tab[row * width + rhs] / coef;
                let better = match leaving {
                    None => true,
                    Some(current) => {
                        ratio < best_ratio - 1e-12
                            || (ratio <= best_ratio + 1e-12 && basis[row] < basis[current])
                    }
                };
                if better {
                    leaving = Some(row);
                    best_ratio = ratio;
                }
            }
        }
        let Some(pivot_row) = leaving else {
            return LpOutcome::Unbounded;
        };
        pivot(&mut tab, width, m + 1, pivot_row, entering);
        basis[pivot_row] = entering;
    }
    LpOutcome::PivotLimit
}

fn pivot(tab: &mut [f64], width: usize, rows: usize, pivot_row: usize, col: usize) {
    let inv = 1.0 / tab[pivot_row * width + col];
    for k in 0..width {
        tab[pivot_row * width + k] *= inv;
    }
    for row in 0..rows {
        if row == pivot_row {
            continue;
        }
        let factor = tab[row * width + col];
        if factor != 0.0 {
            for k in 0..width {
                tab[row * width + k] -= factor * tab[pivot_row * width + k];
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn textbook_two_variable_programme() {
        // max 3x + 5y s.t. x <= 4, 2y <= 12, 3x + 2y <= 18: optimum (2, 6), value 36
        // (the classic Wyndor example of Hillier and Lieberman, Introduction to
        // Operations Research, from memory).
        let a = [1.0, 0.0, 0.0, 2.0, 3.0, 2.0];
        let b = [4.0, 12.0, 18.0];
        let c = [3.0, 5.0];
        match maximize(&a, &b, &c, 3, 2) {
            LpOutcome::Optimal { x, value } => {
                assert!((x[0] - 2.0).abs() < 1e-12 && (x[1] - 6.0).abs() < 1e-12);
                assert!((value - 36.0).abs() < 1e-12);
            }
            other => panic!("unexpected {other:?}"),
        }
    }

    #[test]
    fn detects_unbounded_objective() {
        // max x s.t. -x + y <= 1: x can grow forever.
        let a = [-1.0, 1.0];
        assert_eq!(
            maximize(&a, &[1.0], &[1.0, 0.0], 1, 2),
            LpOutcome::Unbounded
        );
    }

    #[test]
    fn degenerate_vertex_terminates() {
        // All right-hand sides zero: the origin is optimal for a bounded cone.
        let a = [1.0, -1.0, -1.0, 1.0, 1.0, 1.0];
        match maximize(&a, &[0.0, 0.0, 0.0], &[1.0, 1.0], 3, 2) {
            LpOutcome::Optimal { value, .. } => assert_eq!(value, 0.0),
            other => panic!("unexpected {other:?}"),
        }
    }
}
