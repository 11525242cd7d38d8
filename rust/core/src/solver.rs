//! The per-case equilibrium solve: damped Newton on the extents with the
//! Gibbs function as merit function.
//!
//! For ideal mixtures the equilibrium is the unique minimiser over the
//! extents of
//!
//! ```text
//! g(xi) = sum_phases sum_i n_i ln(n_i / N_phase) + N_gas ln(P/P0) - sum_j xi_j ln K_j
//! ```
//!
//! a convex function whose gradient is the vector of reaction residuals
//! `ln Q_j - ln K_j` and whose Hessian is
//! `sum_phases [nu diag(1/n) nu^T - d_p d_p^T / N_phase]`. A Newton method
//! that keeps every amount positive and accepts only steps that lower `g`
//! (Armijo backtracking) converges from any strictly interior start; see
//! J. Nocedal and S. J. Wright, *Numerical Optimization*, 2nd ed., Springer
//! 2006, sections 3.1 and 19.2 (fraction-to-boundary rule).
//!
//! Three refinements make it a tool rather than a toy:
//!
//! * Each iteration the reactions are rewritten in the stoichiometric basis
//!   of the most abundant species ([`crate::basis`]), so trace species keep
//!   full relative precision.
//! * A non-component that is shrinking, or that is a minor species of its
//!   phase, moves along `n exp(alpha du)` with `du = dxi / n` instead of the
//!   straight line `n + alpha dxi`. Both paths have the Newton direction as
//!   tangent (so quadratic convergence is kept), but the curved one never
//!   leaves `n > 0` and is Newton's method in `ln n` for minor species,
//!   which moves a species by 80 orders of magnitude in one step where the
//!   straight line needs dozens of fraction-to-boundary cuts.
//! * The merit decrease is computed from the step, not as a difference of
//!   two O(N ln N) values: with `h(n, d) = (n + d) ln(1 + d/n) - d >= 0`,
//!   `g(new) - g(old) = r . dxi + sum_i h(n_i, dn_i) - sum_p h(N_p, dN_p)`
//!   exactly, and every term is accurate relative to itself, so the line
//!   search still sees changes made by species of 1e-60 mol.
//!
//! Convergence: the case is converged when every basis reaction satisfies
//! `|ln Q_j - ln K_j| <= tol`. For a non-component this bounds the relative
//! error of its amount by about `tol`; the criterion is scale-free (the same
//! for 1e-12 mol and 1e6 mol feeds).

use crate::basis::choose_basis;
use crate::face::Face;
use crate::linalg::solve_spd_scaled;
use crate::status::Status;
use crate::system::{System, N_PHASES};

/// Solver settings shared by every case of a batch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SolveOptions {
    /// Largest allowed `|ln Q - ln K|` of any basis reaction at convergence.
    pub tol: f64,
    /// Newton iterations before giving up with [`Status::IterationLimit`].
    pub max_iter: u32,
}

impl Default for SolveOptions {
    fn default() -> Self {
        SolveOptions {
            tol: 1e-10,
            max_iter: 200,
        }
    }
}

/// Fraction-to-boundary factor for species on the straight-line path: a
/// step may remove at most this fraction of what is left.
const TO_BOUNDARY: f64 = 0.99;
/// Armijo sufficient-decrease constant.
const ARMIJO: f64 = 1e-4;
/// Below this share of its phase a species is minor and moves in `ln n`.
const MINOR_SHARE: f64 = 1e-2;
/// Backtracking halvings before a case is declared stalled.
const MAX_BACKTRACKS: u32 = 60;
/// Relative amount below which float64 can no longer follow a species down
/// (the normal range ends near 2e-308): a species this far below its phase
/// total that equilibrium would push lower still is held where it is and
/// its reaction counts as satisfied. Its amount is then an upper bound.
const FLOOR_SHARE: f64 = 1e-280;
/// Absolute companion of [`FLOOR_SHARE`] for very small phase totals.
const FLOOR_ABS: f64 = 1e-295;

/// The smallest amount the solver follows in a phase of total `total`.
fn floor_amount(total: f64) -> f64 {
    (FLOOR_SHARE * total).max(FLOOR_ABS)
}

/// Per-thread working memory for one case at a time; sized once for the
/// system and reused, so the solve allocates nothing per case.
#[derive(Clone, Debug)]
pub struct Workspace {
    amounts: Vec<f64>,
    trial: Vec<f64>,
    change: Vec<f64>,
    ln_amount: Vec<f64>,
    order: Vec<usize>,
    pivot_of: Vec<usize>,
    pivots: Vec<usize>,
    basis_stoich: Vec<f64>,
    transform: Vec<f64>,
    ln_k_face: Vec<f64>,
    ln_k_basis: Vec<f64>,
    residual: Vec<f64>,
    hessian: Vec<f64>,
    step: Vec<f64>,
    du: Vec<f64>,
    on_log_path: Vec<bool>,
    frozen: Vec<bool>,
    scale: Vec<f64>,
    phase_change: Vec<f64>,
    face_step: Vec<f64>,
    extents: Vec<f64>,
}

impl Workspace {
    pub fn new(system: &System) -> Self {
        let s = system.n_species();
        let r = system.n_reactions();
        Workspace {
            amounts: vec![0.0; s],
            trial: vec![0.0; s],
            change: vec![0.0; s],
            ln_amount: vec![0.0; s],
            order: vec![0; s],
            pivot_of: vec![0; s],
            pivots: vec![0; r],
            basis_stoich: vec![0.0; r * s],
            transform: vec![0.0; r * r],
            ln_k_face: vec![0.0; r],
            ln_k_basis: vec![0.0; r],
            residual: vec![0.0; r],
            hessian: vec![0.0; r * r],
            step: vec![0.0; r],
            du: vec![0.0; r],
            on_log_path: vec![false; r],
            frozen: vec![false; r],
            scale: vec![0.0; r],
            phase_change: vec![0.0; N_PHASES * r],
            face_step: vec![0.0; r],
            extents: vec![0.0; r],
        }
    }

    /// Amounts of the last solved case.
    pub fn amounts(&self) -> &[f64] {
        &self.amounts
    }

    /// Extents (in the user's reactions) of the last solved case.
    pub fn extents(&self) -> &[f64] {
        &self.extents
    }
}

/// `phi(x) = (1 + x) ln(1 + x) - x`, accurate for small `x` (where the
/// direct formula cancels) by its series `sum_{k>=2} (-1)^k x^k / (k (k-1))`.
fn phi(x: f64) -> f64 {
    if x.abs() < 0.05 {
        let mut term = x * x;
        let mut sum = 0.0;
        let mut sign = 1.0;
        for k in 2..=12 {
            let kf = k as f64;
            sum += sign * term / (kf * (kf - 1.0));
            term *= x;
            sign = -sign;
        }
        sum
    } else if x <= -1.0 {
        // (1 + x) ln(1 + x) -> 0 as the amount goes to zero.
        1.0
    } else {
        (1.0 + x) * x.ln_1p() - x
    }
}

/// `h(n, d) = (n + d) ln(1 + d/n) - d`, the second-order part of the change
/// of `n ln n`.
fn h(n: f64, d: f64) -> f64 {
    if n > 0.0 {
        n * phi(d / n)
    } else {
        0.0
    }
}

/// Solve one case on its face. `feed` (S), `ln_k` (R) and `pressure` are
/// assumed valid (the batch driver checks them). On return the workspace
/// holds the amounts and extents; the status and the number of Newton steps
/// taken are returned.
pub fn solve_case(
    system: &System,
    face: &Face,
    feed: &[f64],
    ln_k: &[f64],
    pressure: f64,
    options: &SolveOptions,
    ws: &mut Workspace,
) -> (Status, u32) {
    let s = system.n_species();
    let r = system.n_reactions();
    let dim = face.dim;
    let phases = system.phases();
    let ln_pressure = (pressure / system.p0()).ln();

    // Strictly interior start: move from the feed along the face's
    // reachability direction, halfway to the first species it would use up.
    let mut t_max = f64::INFINITY;
    for i in 0..s {
        let dc = face.direction_change[i];
        if dc < 0.0 {
            t_max = t_max.min(feed[i] / -dc);
        }
    }
    let t = if t_max.is_finite() { 0.5 * t_max } else { 0.0 };
    for i in 0..s {
        ws.amounts[i] = if face.unreachable[i] {
            0.0
        } else {
            feed[i] + t * face.direction_change[i]
        };
    }
    for j in 0..r {
        ws.extents[j] = t * face.direction[j];
    }
    if dim == 0 {
        return (Status::Converged, 0);
    }
    for f in 0..dim {
        ws.ln_k_face[f] = (0..r).map(|j| face.basis[j * dim + f] * ln_k[j]).sum();
    }

    let mut iterations = 0;
    loop {
        if !choose_basis(
            &face.stoich,
            dim,
            s,
            &ws.amounts,
            &mut ws.order,
            &mut ws.basis_stoich,
            &mut ws.transform,
            &mut ws.pivots,
            &mut ws.pivot_of,
        ) {
            return (Status::Stalled, iterations);
        }
        let mut totals = [0.0; N_PHASES];
        for i in 0..s {
            totals[phases[i].index()] += ws.amounts[i];
        }
        let ln_totals = totals.map(|n| if n > 0.0 { n.ln() } else { 0.0 });
        for i in 0..s {
            ws.ln_amount[i] = if ws.amounts[i] > 0.0 {
                ws.amounts[i].ln() - ln_totals[phases[i].index()]
            } else {
                0.0
            };
        }
        let mut worst = 0.0_f64;
        for j in 0..dim {
            let row = &ws.basis_stoich[j * s..(j + 1) * s];
            let mut res = -(0..dim)
                .map(|k| ws.transform[j * dim + k] * ws.ln_k_face[k])
                .sum::<f64>();
            ws.ln_k_basis[j] = -res;
            let mut pc = [0.0; N_PHASES];
            for i in 0..s {
                let c = row[i];
                if c != 0.0 {
                    res += c * ws.ln_amount[i];
                    pc[phases[i].index()] += c;
                }
            }
            res += pc[0] * ln_pressure;
            for p in 0..N_PHASES {
                ws.phase_change[p * r + j] = pc[p];
            }
            ws.residual[j] = res;
            let sp = ws.pivots[j];
            // At the float64 floor and still too abundant for equilibrium:
            // hold it there (see FLOOR_SHARE).
            ws.frozen[j] =
                res > 0.0 && ws.amounts[sp] <= floor_amount(totals[phases[sp].index()]) * 1.000_001;
            if !ws.frozen[j] {
                worst = worst.max(res.abs());
            }
        }
        if !worst.is_finite() {
            return (Status::Stalled, iterations);
        }
        if worst <= options.tol {
            break;
        }
        if iterations >= options.max_iter {
            return (Status::IterationLimit, iterations);
        }

        // Newton system H step = -residual.
        for j in 0..dim {
            for k in j..dim {
                let mut v = 0.0;
                for i in 0..s {
                    let a = ws.basis_stoich[j * s + i];
                    let b = ws.basis_stoich[k * s + i];
                    if a != 0.0 && b != 0.0 {
                        v += a * b / ws.amounts[i];
                    }
                }
                for p in 0..N_PHASES {
                    if totals[p] > 0.0 {
                        v -= ws.phase_change[p * r + j] * ws.phase_change[p * r + k] / totals[p];
                    }
                }
                if ws.frozen[j] || ws.frozen[k] {
                    v = if j == k { 1.0 } else { 0.0 };
                }
                ws.hessian[j * dim + k] = v;
                ws.hessian[k * dim + j] = v;
            }
            ws.step[j] = if ws.frozen[j] { 0.0 } else { -ws.residual[j] };
        }
        if !solve_spd_scaled(
            &mut ws.hessian[..dim * dim],
            &mut ws.step[..dim],
            &mut ws.scale[..dim],
            dim,
        ) {
            return (Status::Stalled, iterations);
        }

        // Path choice and the largest step that keeps every amount positive.
        let mut slope = 0.0;
        let mut alpha_max = 1.0_f64;
        for j in 0..dim {
            slope += ws.residual[j] * ws.step[j];
            let sp = ws.pivots[j];
            let n = ws.amounts[sp];
            ws.du[j] = ws.step[j] / n;
            let share = n / totals[phases[sp].index()];
            ws.on_log_path[j] = ws.du[j] < 0.0 || share < MINOR_SHARE;
            if ws.on_log_path[j] && ws.du[j] > 0.0 {
                // Do not let a minor species grow past its whole phase in one go.
                let room = (1.0 / share).ln() + 1.0;
                alpha_max = alpha_max.min(room / ws.du[j]);
            } else if ws.du[j] < 0.0 {
                // Nor shrink below what float64 can follow.
                let floor = floor_amount(totals[phases[sp].index()]);
                let depth = (floor / n).ln();
                if depth < 0.0 && depth > ws.du[j] {
                    alpha_max = alpha_max.min((depth / ws.du[j]).max(0.0));
                }
            }
        }
        if slope.is_nan() || slope >= 0.0 {
            return (Status::Stalled, iterations);
        }
        for i in 0..s {
            if ws.pivot_of[i] != usize::MAX && ws.on_log_path[ws.pivot_of[i]] {
                continue;
            }
            let lin: f64 = (0..dim)
                .map(|j| ws.basis_stoich[j * s + i] * ws.step[j])
                .sum();
            if lin < 0.0 {
                alpha_max = alpha_max.min(TO_BOUNDARY * ws.amounts[i] / -lin);
            }
        }

        let mut alpha = alpha_max;
        let mut accepted = false;
        for _ in 0..MAX_BACKTRACKS {
            // Non-components first, then components from them.
            for i in 0..s {
                ws.change[i] = 0.0;
            }
            for j in 0..dim {
                let sp = ws.pivots[j];
                ws.change[sp] = if ws.on_log_path[j] {
                    ws.amounts[sp] * (alpha * ws.du[j]).exp_m1()
                } else {
                    alpha * ws.step[j]
                };
            }
            let mut feasible = true;
            let mut first_order = 0.0;
            for j in 0..dim {
                first_order += ws.residual[j] * ws.change[ws.pivots[j]];
            }
            let mut second_order = 0.0;
            let mut phase_delta = [0.0; N_PHASES];
            for i in 0..s {
                if ws.pivot_of[i] == usize::MAX {
                    let mut d = 0.0;
                    for j in 0..dim {
                        let c = ws.basis_stoich[j * s + i];
                        if c != 0.0 {
                            d += c * ws.change[ws.pivots[j]];
                        }
                    }
                    ws.change[i] = d;
                }
                let new = ws.amounts[i] + ws.change[i];
                if ws.change[i] != 0.0 && !(new > 0.0 && new.is_finite()) {
                    feasible = false;
                    break;
                }
                ws.trial[i] = new;
                second_order += h(ws.amounts[i], ws.change[i]);
                phase_delta[phases[i].index()] += ws.change[i];
            }
            if feasible {
                for p in 0..N_PHASES {
                    second_order -= h(totals[p], phase_delta[p]);
                }
                let decrease = first_order + second_order;
                if decrease <= ARMIJO * alpha * slope
                    || (first_order < 0.0 && decrease <= ARMIJO * first_order)
                {
                    accepted = true;
                    break;
                }
            }
            alpha *= 0.5;
        }
        if !accepted {
            return (Status::Stalled, iterations);
        }
        ws.amounts[..s].copy_from_slice(&ws.trial[..s]);
        // Extents of the user's reactions: dxi = basis * transform^T * dxi_basis,
        // where dxi_basis[j] is the change of pivot species j.
        for f in 0..dim {
            ws.face_step[f] = (0..dim)
                .map(|j| ws.transform[j * dim + f] * ws.change[ws.pivots[j]])
                .sum();
        }
        for k in 0..r {
            ws.extents[k] += (0..dim)
                .map(|f| face.basis[k * dim + f] * ws.face_step[f])
                .sum::<f64>();
        }
        iterations += 1;
    }
    (Status::Converged, iterations)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::face::analyse;
    use crate::system::Phase;

    fn solve(
        nu: Vec<f64>,
        r: usize,
        feed: &[f64],
        ln_k: &[f64],
        p: f64,
    ) -> (Vec<f64>, Status, u32) {
        let s = feed.len();
        let sys = System::new(nu, r, s, vec![Phase::Gas; s], 1.0).unwrap();
        let zero: Vec<bool> = feed.iter().map(|&v| v == 0.0).collect();
        let face = analyse(&sys, &zero).unwrap();
        let mut ws = Workspace::new(&sys);
        let (st, it) = solve_case(
            &sys,
            &face,
            feed,
            ln_k,
            p,
            &SolveOptions::default(),
            &mut ws,
        );
        (ws.amounts().to_vec(), st, it)
    }

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
    fn isomerisation_matches_closed_form() {
        // A = B, K = 3: n_B / n_A = 3 (closed form).
        let (n, st, _) = solve(vec![-1.0, 1.0], 1, &[1.0, 0.0], &[3.0_f64.ln()], 1.0);
        assert_eq!(st, Status::Converged);
        assert!((n[0] - 0.25).abs() < 1e-12 && (n[1] - 0.75).abs() < 1e-12);
    }

    #[test]
    fn extreme_constants_keep_trace_precision() {
        // A = B with ln K = +-200: the minor species is exp(-200) relative, to
        // full relative precision (closed form n_minor / n_major = exp(-200)).
        for &ln_k in &[200.0, -200.0] {
            let (n, st, it) = solve(vec![-1.0, 1.0], 1, &[1.0, 0.0], &[ln_k], 1.0);
            assert_eq!(st, Status::Converged);
            let (minor, major) = if ln_k > 0.0 {
                (n[0], n[1])
            } else {
                (n[1], n[0])
            };
            let expect = (-200.0_f64).exp() / (1.0 + (-200.0_f64).exp());
            assert!(
                ((minor - expect) / expect).abs() < 1e-9,
                "{minor:e} vs {expect:e}"
            );
            assert!((major - 1.0).abs() < 1e-15);
            assert!(it < 30, "{it} iterations");
        }
    }

    #[test]
    fn dissociation_with_gas_mole_change_matches_quadratic() {
        // A = 2 B at P/P0 = 1, K = 0.5, feed A = 1: with extent x,
        // (2x)^2 / ((1 - x)(1 + x)) = K -> x = sqrt(K / (4 + K)).
        let k: f64 = 0.5;
        let (n, st, _) = solve(vec![-1.0, 2.0], 1, &[1.0, 0.0], &[k.ln()], 1.0);
        assert_eq!(st, Status::Converged);
        let x = (k / (4.0 + k)).sqrt();
        assert!((n[0] - (1.0 - x)).abs() < 1e-12 && (n[1] - 2.0 * x).abs() < 1e-12);
    }
}
