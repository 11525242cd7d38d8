//! The per-case stoichiometric basis.
//!
//! Written in terms of the user's reactions, the amount of a trace species is
//! `n0 + sum(nu * xi)`, a difference of O(1) numbers that cancels to zero in
//! float64 long before the species reaches 1e-40 mol. The remedy of Smith and
//! Missen (W. R. Smith and R. W. Missen, *Chemical Reaction Equilibrium
//! Analysis: Theory and Algorithms*, Wiley, 1982, ch. 2 and 6) is to rewrite
//! the reactions, case by case and iteration by iteration, as formation
//! reactions of the least abundant species (the non-components) from the most
//! abundant ones (the components). Each non-component then appears in exactly
//! one reaction with coefficient 1, so its amount changes by its own extent
//! and keeps full relative precision, while the components are large enough
//! that their updates lose nothing.

/// Relative size below which an eliminated coefficient counts as zero.
const ELIM_TOL: f64 = 1e-9;

/// Sort species indices by amount, least abundant first (stable insertion
/// sort: S is small and the order barely changes between iterations, so this
/// is close to linear and allocates nothing). Returns the first position
/// whose entry changed (`order.len()` when nothing moved).
#[inline(always)]
pub fn sort_by_amount(amounts: &[f64], order: &mut [usize]) -> usize {
    let s = order.len();
    let mut first_moved = s;
    for k in 1..s {
        let mut m = k;
        while m > 0 && amounts[order[m - 1]] > amounts[order[m]] {
            order.swap(m - 1, m);
            m -= 1;
        }
        if m < k {
            first_moved = first_moved.min(m);
        }
    }
    first_moved
}

/// Rewrite the face reactions `face_stoich` (`dim x S`) by Gauss-Jordan
/// elimination, taking as pivot columns the species in `order` (least
/// abundant first, see [`sort_by_amount`]).
///
/// On return `basis_stoich = transform * face_stoich` has the unit vector
/// `e_j` in column `pivots[j]`, and `pivot_of[i]` is the row whose pivot is
/// species `i` (or `usize::MAX` for components). Returns how many entries
/// of `order` were examined (the basis depends on nothing after them), or
/// `None` if fewer than `dim` independent pivots were found (cannot happen
/// for a valid face).
#[allow(clippy::too_many_arguments)]
#[inline(always)]
pub fn choose_basis(
    face_stoich: &[f64],
    dim: usize,
    n_species: usize,
    order: &[usize],
    basis_stoich: &mut [f64],
    transform: &mut [f64],
    pivots: &mut [usize],
    pivot_of: &mut [usize],
) -> Option<usize> {
    let s = n_species;
    basis_stoich[..dim * s].copy_from_slice(&face_stoich[..dim * s]);
    transform[..dim * dim].fill(0.0);
    for j in 0..dim {
        transform[j * dim + j] = 1.0;
    }
    pivot_of.fill(usize::MAX);
    let mut scale = 0.0_f64;
    for v in &face_stoich[..dim * s] {
        scale = scale.max(v.abs());
    }
    let eps = ELIM_TOL * scale;
    let mut row = 0;
    let mut examined = 0;
    for idx in 0..s {
        if row == dim {
            break;
        }
        examined = idx + 1;
        let species = order[idx];
        let mut best = row;
        let mut best_abs = 0.0;
        for r in row..dim {
            let v = basis_stoich[r * s + species].abs();
            if v > best_abs {
                best_abs = v;
                best = r;
            }
        }
        if best_abs <= eps {
            continue;
        }
        if best != row {
            swap_rows(basis_stoich, s, row, best);
            swap_rows(transform, dim, row, best);
        }
        let inv = 1.0 / basis_stoich[row * s + species];
        for v in &mut basis_stoich[row * s..(row + 1) * s] {
            *v *= inv;
        }
        for v in &mut transform[row * dim..(row + 1) * dim] {
            *v *= inv;
        }
        basis_stoich[row * s + species] = 1.0;
        for r in 0..dim {
            if r == row {
                continue;
            }
            let factor = basis_stoich[r * s + species];
            if factor != 0.0 {
                let (target, pivot) = two_rows(basis_stoich, s, r, row);
                for (t, p) in target.iter_mut().zip(pivot) {
                    *t -= factor * p;
                }
                let (target, pivot) = two_rows(transform, dim, r, row);
                for (t, p) in target.iter_mut().zip(pivot) {
                    *t -= factor * p;
                }
                basis_stoich[r * s + species] = 0.0;
            }
        }
        pivots[row] = species;
        pivot_of[species] = row;
        row += 1;
    }
    // Clean round-off so that species untouched by a reaction stay untouched.
    for v in basis_stoich[..dim * s].iter_mut() {
        if v.abs() <= 1e-13 * scale {
            *v = 0.0;
        }
    }
    (row == dim).then_some(examined)
}

/// Rows `a` (mutable) and `b` (`a != b`) of a row-major matrix of `width` columns.
#[inline(always)]
fn two_rows(m: &mut [f64], width: usize, a: usize, b: usize) -> (&mut [f64], &[f64]) {
    if a < b {
        let (head, tail) = m.split_at_mut(b * width);
        (&mut head[a * width..(a + 1) * width], &tail[..width])
    } else {
        let (head, tail) = m.split_at_mut(a * width);
        (&mut tail[..width], &head[b * width..(b + 1) * width])
    }
}

/// Swap rows `a < b` of a row-major matrix of `width` columns.
#[inline(always)]
fn swap_rows(m: &mut [f64], width: usize, a: usize, b: usize) {
    let (head, tail) = m.split_at_mut(b * width);
    head[a * width..(a + 1) * width].swap_with_slice(&mut tail[..width]);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn trace_species_become_the_pivots() {
        // CH4 + H2O = CO + 3 H2 ; CO + H2O = CO2 + H2, species CH4 H2O CO H2 CO2.
        let nu = [-1.0, -1.0, 1.0, 3.0, 0.0, 0.0, -1.0, -1.0, 1.0, 1.0];
        let amounts = [1e-30, 2.0, 1e-3, 3.0, 0.9];
        let (mut order, mut b, mut t, mut piv, mut of) =
            ([0, 1, 2, 3, 4], [0.0; 10], [0.0; 4], [0; 2], [0; 5]);
        assert_eq!(sort_by_amount(&amounts, &mut order), 1);
        assert_eq!(sort_by_amount(&amounts, &mut order), 5); // nothing moved
        assert_eq!(order, [0, 2, 4, 1, 3]);
        let examined = choose_basis(&nu, 2, 5, &order, &mut b, &mut t, &mut piv, &mut of);
        assert_eq!(examined, Some(2));
        assert_eq!(piv, [0, 2]); // CH4 then CO
                                 // each pivot column is a unit vector
        assert_eq!((b[0], b[5]), (1.0, 0.0));
        assert_eq!((b[2], b[7]), (0.0, 1.0));
        // basis_stoich == transform * nu
        for j in 0..2 {
            for i in 0..5 {
                let v: f64 = (0..2).map(|k| t[j * 2 + k] * nu[k * 5 + i]).sum();
                assert!((v - b[j * 5 + i]).abs() < 1e-14);
            }
        }
    }
}
