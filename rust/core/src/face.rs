//! Which species a feed can reach, and the face of the extent polytope the
//! equilibrium lies on.
//!
//! A species with zero feed is *reachable* when some combination of
//! reactions (run forwards or backwards) makes it without consuming anything
//! that is absent. Reachability depends only on which feed entries are zero,
//! not on their values: the feasible set `{xi : n0 + nu^T xi >= 0}` is convex
//! and contains `xi = 0`, so a species is reachable exactly when some
//! direction `d` has `(nu^T d)_k >= 0` for every zero-feed species `k` and
//! `> 0` for it. One linear programme per zero pattern finds the largest set
//! of species that can be made positive together, and a direction that does
//! it. Unreachable species are exactly zero at equilibrium; the reactions
//! are restricted to the subspace that leaves them at zero (the face), and
//! the solve proceeds on that face from a strictly interior start.

use crate::linalg::null_space;
use crate::lp::{maximize, LpOutcome};
use crate::system::System;

/// The result of the zero-pattern analysis, shared by every case with the
/// same pattern.
#[derive(Clone, Debug)]
pub struct Face {
    /// Species that are exactly zero at equilibrium (zero feed, unreachable).
    pub unreachable: Vec<bool>,
    /// Dimension of the face (number of free reaction combinations).
    pub dim: usize,
    /// `R x dim` row-major: original extents = `basis * face extents`.
    pub basis: Vec<f64>,
    /// `dim x S` row-major stoichiometry of the face reactions; the columns of
    /// unreachable species are exactly zero.
    pub stoich: Vec<f64>,
    /// A direction in original extents that makes every reachable zero-feed
    /// species positive (`(nu^T d)_k >= 1`); zero when every species is fed.
    pub direction: Vec<f64>,
    /// `nu^T direction`, per species (exactly zero on unreachable species).
    pub direction_change: Vec<f64>,
}

/// Why a face could not be computed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FaceError {
    /// The reachability programme did not terminate (round-off cycling).
    LinearProgramme,
}

/// Faces a system has already analysed, by zero pattern (the pattern's bit
/// words), kept for later batches: a face depends on the system and the
/// pattern only, and its linear programme is most of the cost of a
/// one-case call. Holds at most [`FaceMemo::CAPACITY`] patterns (later ones
/// are analysed per batch, as before). A clone starts empty.
#[derive(Debug, Default)]
pub struct FaceMemo(std::sync::Mutex<Vec<(Vec<u64>, SharedFace)>>);

/// A face analysis shared between batches.
pub type SharedFace = std::sync::Arc<Result<Face, FaceError>>;

impl FaceMemo {
    pub const CAPACITY: usize = 64;

    /// The face of pattern `key`, from the memo or from `analyse`.
    pub fn get_or_analyse(
        &self,
        key: &[u64],
        analyse: impl FnOnce() -> Result<Face, FaceError>,
    ) -> SharedFace {
        // (a poisoned lock only means another thread panicked mid-insert of
        // a complete entry; the list is still valid)
        let found = {
            let memo = self.0.lock().unwrap_or_else(|e| e.into_inner());
            memo.iter().find(|(k, _)| k == key).map(|(_, f)| f.clone())
        };
        if let Some(face) = found {
            return face;
        }
        let face = std::sync::Arc::new(analyse());
        let mut memo = self.0.lock().unwrap_or_else(|e| e.into_inner());
        if memo.len() < Self::CAPACITY && !memo.iter().any(|(k, _)| k == key) {
            memo.push((key.to_vec(), face.clone()));
        }
        face
    }
}

impl Clone for FaceMemo {
    fn clone(&self) -> Self {
        FaceMemo::default()
    }
}

/// Analyse a zero pattern: `zero_feed[i]` is true where species `i` has zero
/// feed. Inert species are ignored.
pub fn analyse(system: &System, zero_feed: &[bool]) -> Result<Face, FaceError> {
    analyse_with(system, zero_feed, &vec![false; system.n_species()])
}

/// [`analyse`] with some zero-feed species `forbidden` to form at all (the
/// species of a phase held absent, see [`crate::presence`]): they are
/// unreachable by decree, and the face keeps them at zero.
pub fn analyse_with(
    system: &System,
    zero_feed: &[bool],
    forbidden: &[bool],
) -> Result<Face, FaceError> {
    let s = system.n_species();
    let r = system.n_reactions();
    let nu = system.stoich();
    let zero: Vec<usize> = (0..s)
        .filter(|&i| (zero_feed[i] || forbidden[i]) && system.is_reactive(i))
        .collect();
    let banned: Vec<usize> = zero.iter().copied().filter(|&k| forbidden[k]).collect();
    let mut unreachable = vec![false; s];
    let mut direction = vec![0.0; r];
    if !zero.is_empty() {
        // Variables: p (r), q (r), support s_k (|zero|), all >= 0; d = p - q.
        // Rows: s_k - (nu^T d)_k <= 0 ; s_k <= 1 ; (nu^T d)_k <= 0 for a
        // forbidden k (it may not form).   Maximise sum s_k.
        let nz = zero.len();
        let n_var = 2 * r + nz;
        let m = 2 * nz + banned.len();
        let mut a = vec![0.0; m * n_var];
        let mut b = vec![0.0; m];
        for (row, &k) in zero.iter().enumerate() {
            for j in 0..r {
                a[row * n_var + j] = -nu[j * s + k];
                a[row * n_var + r + j] = nu[j * s + k];
            }
            a[row * n_var + 2 * r + row] = 1.0;
            a[(nz + row) * n_var + 2 * r + row] = 1.0;
            b[nz + row] = 1.0;
        }
        for (extra, &k) in banned.iter().enumerate() {
            let row = 2 * nz + extra;
            for j in 0..r {
                a[row * n_var + j] = nu[j * s + k];
                a[row * n_var + r + j] = -nu[j * s + k];
            }
        }
        let mut c = vec![0.0; n_var];
        for v in c[2 * r..].iter_mut() {
            *v = 1.0;
        }
        let x = match maximize(&a, &b, &c, m, n_var) {
            LpOutcome::Optimal { x, .. } => x,
            LpOutcome::Unbounded | LpOutcome::PivotLimit => return Err(FaceError::LinearProgramme),
        };
        for (row, &k) in zero.iter().enumerate() {
            // The optimum puts every reachable species at support 1 (directions
            // add, and d is unbounded), so 0.5 separates the two sets robustly.
            unreachable[k] = x[2 * r + row] < 0.5 || forbidden[k];
        }
        for j in 0..r {
            direction[j] = x[j] - x[r + j];
        }
    }
    let blocked: Vec<usize> = (0..s).filter(|&i| unreachable[i]).collect();
    let (basis, dim) = if blocked.is_empty() {
        let mut eye = vec![0.0; r * r];
        for j in 0..r {
            eye[j * r + j] = 1.0;
        }
        (eye, r)
    } else {
        // Face directions: {d : (nu^T d)_k = 0 for every unreachable k}.
        let mut m = vec![0.0; blocked.len() * r];
        for (row, &k) in blocked.iter().enumerate() {
            for j in 0..r {
                m[row * r + j] = nu[j * s + k];
            }
        }
        null_space(&m, blocked.len(), r, 1e-12)
    };
    let mut stoich = vec![0.0; dim * s];
    for f in 0..dim {
        for i in 0..s {
            if unreachable[i] {
                continue;
            }
            let v: f64 = (0..r).map(|j| basis[j * dim + f] * nu[j * s + i]).sum();
            stoich[f * s + i] = if v.abs() < 1e-13 { 0.0 } else { v };
        }
    }
    let mut direction_change = vec![0.0; s];
    for i in 0..s {
        if !unreachable[i] {
            direction_change[i] = (0..r).map(|j| direction[j] * nu[j * s + i]).sum();
        }
    }
    Ok(Face {
        unreachable,
        dim,
        basis,
        stoich,
        direction,
        direction_change,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_pattern_is_analysed_once_per_system_and_kept_up_to_capacity() {
        let sys = crate::fixtures::reforming();
        let memo = FaceMemo::default();
        let mut calls = 0;
        let zero = vec![false; sys.n_species()];
        let first = memo.get_or_analyse(&[1], || {
            calls += 1;
            analyse(&sys, &zero)
        });
        let again = memo.get_or_analyse(&[1], || {
            calls += 1;
            analyse(&sys, &zero)
        });
        assert_eq!(calls, 1);
        assert!(std::sync::Arc::ptr_eq(&first, &again));
        for k in 0..2 * FaceMemo::CAPACITY as u64 {
            memo.get_or_analyse(&[k + 2], || analyse(&sys, &zero));
        }
        assert_eq!(memo.0.lock().unwrap().len(), FaceMemo::CAPACITY);
        assert!(memo.clone().0.lock().unwrap().is_empty());
    }
    use crate::system::Phase;

    fn system(nu: Vec<f64>, r: usize, s: usize) -> System {
        System::new(nu, r, s, vec![Phase::Gas; s], 1.0).unwrap()
    }

    #[test]
    fn reverse_reaction_reaches_reactants() {
        // A + B = C with only C fed: A and B are reachable by the reverse reaction.
        let sys = system(vec![-1.0, -1.0, 1.0], 1, 3);
        let face = analyse(&sys, &[true, true, false]).unwrap();
        assert_eq!(face.unreachable, vec![false, false, false]);
        assert_eq!(face.dim, 1);
        assert!(face.direction_change[0] >= 1.0 - 1e-12);
    }

    #[test]
    fn missing_co_reactant_pins_the_reaction() {
        // A + B = C with only A fed: nothing can happen.
        let sys = system(vec![-1.0, -1.0, 1.0], 1, 3);
        let face = analyse(&sys, &[false, true, true]).unwrap();
        assert_eq!(face.unreachable, vec![false, true, true]);
        assert_eq!(face.dim, 0);
    }

    #[test]
    fn catalytic_cycle_reaches_product_through_a_combination() {
        // r1: A + X = B, r2: B = X + C. Feed A only. Neither reaction can run
        // alone, but r1 + r2 (A = C) can: C reachable, X and B not.
        // species: A X B C
        let sys = system(vec![-1.0, -1.0, 1.0, 0.0, 0.0, 1.0, -1.0, 1.0], 2, 4);
        let face = analyse(&sys, &[false, true, true, true]).unwrap();
        assert_eq!(face.unreachable, vec![false, true, true, false]);
        assert_eq!(face.dim, 1);
        // The face reaction is a multiple of A = C with zero X and B columns.
        let row = &face.stoich[0..4];
        assert_eq!(row[1], 0.0);
        assert_eq!(row[2], 0.0);
        assert!((row[0] + row[3]).abs() < 1e-12 && row[3] != 0.0);
    }
}
