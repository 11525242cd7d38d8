//! A log-barrier path to the phase set of a case the active-set search
//! ([`crate::presence`]) could not settle.
//!
//! The search solves the case on one phase set at a time with the Newton
//! iteration of [`crate::solver`]. A pure condensed species has a Gibbs
//! function linear in its amount, so nothing in that iteration's quadratic
//! model keeps it away from zero: where the model's minimum lies beyond
//! `n = 0`, every step is cut at the boundary and the species is driven
//! down geometrically (to 1e-305) even when its amount at the minimum is a
//! mole or more. Phase sets whose other members fix the gas composition
//! fail the same way, and the search then runs out of sets to try.
//!
//! The barrier method minimises instead
//!
//! ```text
//! g(xi) - mu (sum_pure ln n_i + sum_mixtures ln N_p)
//! ```
//!
//! over the feed's face for a falling sequence of weights `mu`, each from
//! the minimiser of the one before (A. V. Fiacco and G. P. McCormick,
//! *Nonlinear Programming: Sequential Unconstrained Minimization
//! Techniques*, Wiley 1968; S. Boyd and L. Vandenberghe, *Convex
//! Optimization*, Cambridge 2004, section 11.3). Each minimiser is found by
//! the same Newton iteration ([`SolveOptions::barrier`]), whose basis
//! changes and logarithmic paths keep trace species exact on the way. The
//! barrier gives every pure species the curvature `mu / n^2` that the plain
//! function lacks, keeps every mixture phase in (a whole phase that an
//! attempt empties has no curvature left either), the problem stays
//! convex, and the minimisers follow a smooth path to the equilibrium:
//! phases that belong to it keep their amounts, those that do not fall as
//! `mu` does. At the end of the
//! path the phase set can be read off, and the amounts there are a start
//! from which the Newton iteration on that set converges in a few steps;
//! the search takes it from there, and its stability test still decides.
//!
//! It is the last fallback of the search, after every phase set has been
//! tried: in random networks with up to three pure phases, about one case
//! in ten thousand gets here, and it costs 7 to 21 barrier solves.

use crate::solver::{Case, SolveOptions, Workspace};
use crate::system::{System, MAX_PHASES};

/// The first barrier weight, as a share of the feed's total.
const FIRST_WEIGHT: f64 = 0.1;
/// Each weight is this times the one before.
const WEIGHT_FACTOR: f64 = 0.01;
/// Weights of the first stretch of the path: 1e-1 down to 1e-13 of the
/// feed's total.
pub const FIRST_STRETCH: usize = 7;
/// Weights of the second stretch, for a case the first did not settle:
/// on down to 1e-41 (a pure phase can be present in a trace: a solid tied
/// to a trace gas by a conserved quantity, 1e-30 mol of it).
pub const SECOND_STRETCH: usize = 14;
/// A phase whose amount falls by more than this factor over the last step
/// of the path (the weight falls by [`WEIGHT_FACTOR`]) is following the
/// weight down, and is taken to be absent: an absent pure species sits at
/// about `mu` over its affinity, a present one at its amount.
const FOLLOWS_WEIGHT: f64 = 0.1;

/// Where the barrier path ended.
#[derive(Clone, Debug, PartialEq)]
pub struct PathEnd {
    /// Extents of the user's reactions.
    pub extents: Vec<f64>,
    /// The amounts there (as the solve computed them, traces exact), with
    /// the species of the absent phases set to zero.
    pub amounts: Vec<f64>,
    /// Bit `k` set: phase `k` followed the weight down ([`FOLLOWS_WEIGHT`]).
    pub absent: u64,
    /// Newton iterations of every solve on the path.
    pub iterations: u32,
}

/// The barrier path of the module docs for one case, followed in
/// stretches ([`BarrierPath::descend`]).
pub struct BarrierPath {
    /// The next weight.
    weight: f64,
    /// Extents at the last weight solved for.
    extents: Option<Vec<f64>>,
    amounts: Vec<f64>,
    /// Phase totals at the last two weights solved for.
    before: [f64; MAX_PHASES],
    last: [f64; MAX_PHASES],
    /// Weights solved for.
    solved: usize,
    failed: bool,
}

impl BarrierPath {
    /// The path of `case` (whose feed sets the first weight).
    pub fn new(system: &System, case: &Case) -> Self {
        BarrierPath {
            weight: FIRST_WEIGHT * case.feed.iter().sum::<f64>(),
            extents: None,
            amounts: vec![0.0; system.n_species()],
            before: [0.0; MAX_PHASES],
            last: [0.0; MAX_PHASES],
            solved: 0,
            failed: false,
        }
    }

    /// Follows the path of `case` on its feed's face (its start is not
    /// used) over `levels` more weights, each solve from the one before:
    /// where it ends then, `None` before two weights are solved for. A
    /// solve that does not converge ends the path at the weight before.
    pub fn descend(
        &mut self,
        system: &System,
        case: &Case,
        options: &SolveOptions,
        ws: &mut Workspace,
        levels: usize,
    ) -> Option<PathEnd> {
        let (s, r) = (system.n_species(), system.n_reactions());
        let mut iterations = 0;
        let mut extents = vec![0.0; r];
        let mut amounts = vec![0.0; s];
        for _ in 0..levels {
            if self.failed {
                break;
            }
            let centred = SolveOptions {
                barrier: self.weight,
                chain: false,
                drop_vanishing: false,
                ..*options
            };
            let on_path = Case {
                start: self.extents.as_deref(),
                ..*case
            };
            let (status, its) = ws.solve(system, &on_path, &centred, &mut amounts, &mut extents);
            iterations += its;
            if !status.is_converged() {
                self.failed = true;
                break;
            }
            self.extents = Some(extents.clone());
            self.amounts.copy_from_slice(&amounts);
            self.before = self.last;
            self.last = [0.0; MAX_PHASES];
            for i in 0..s {
                self.last[system.phase_index(i)] += amounts[i];
            }
            self.solved += 1;
            self.weight *= WEIGHT_FACTOR;
        }
        if self.solved < 2 {
            return None;
        }
        let absent = (0..system.n_phases())
            .filter(|&phase| self.last[phase] <= FOLLOWS_WEIGHT * self.before[phase])
            .fold(0u64, |mask, phase| mask | 1 << phase);
        // (the species of the absent phases at zero: about `mu` over their
        // affinity now, so conservation moves by as little)
        let mut amounts = self.amounts.clone();
        for i in 0..s {
            if absent & 1 << system.phase_index(i) != 0 {
                amounts[i] = 0.0;
            }
        }
        Some(PathEnd {
            extents: self.extents.clone()?,
            amounts,
            absent,
            iterations,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::face::analyse;
    use crate::system::Phase;

    /// Graphite + CO2 = 2 CO (C, CO2, CO) with 0.3 mol C and 1 mol CO2.
    fn boudouard() -> System {
        System::new(
            vec![-1.0, -1.0, 2.0],
            1,
            3,
            vec![Phase::Pure, Phase::Gas, Phase::Gas],
            1.0,
        )
        .unwrap()
    }

    /// The root in `(lo, hi)` of an increasing `f`, by bisection.
    fn bisect(f: impl Fn(f64) -> f64, mut lo: f64, mut hi: f64) -> f64 {
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if f(mid) > 0.0 {
                hi = mid;
            } else {
                lo = mid;
            }
        }
        0.5 * (lo + hi)
    }

    #[test]
    fn a_barrier_solve_finds_the_centre_of_its_weight() {
        // At extent x: C 0.3 - x, CO2 1 - x, CO 2x (gas 1 + x). The centre
        // for weight mu (on n_C and on the gas's total) zeroes
        // 2 ln(y_CO P) - ln(y_CO2 P) + mu / n_C - mu / (1 + x) - ln K,
        // increasing in x on (0, 0.3): bisection, independent of the solver.
        let system = boudouard();
        let (feed, ln_k, p) = ([0.3, 1.0, 0.0], [0.0], 1.0);
        let face = analyse(&system, &[false, false, true]).unwrap();
        let case = Case {
            face: &face,
            feed: &feed,
            ln_k: &ln_k,
            pressure: p,
            start: None,
        };
        let mut ws = Workspace::new(&system);
        for mu in [0.05, 1e-4, 1e-9] {
            let options = SolveOptions {
                barrier: mu,
                tol: 1e-13,
                ..SolveOptions::default()
            };
            let (mut n, mut x) = (vec![0.0; 3], vec![0.0; 1]);
            let (status, _) = ws.solve(&system, &case, &options, &mut n, &mut x);
            assert!(status.is_converged(), "{status:?}");
            let centre = bisect(
                |x| {
                    let gas = 1.0 + x;
                    2.0 * (2.0 * x / gas * p).ln() - ((1.0 - x) / gas * p).ln() + mu / (0.3 - x)
                        - mu / gas
                        - ln_k[0]
                },
                1e-300,
                0.3 - 1e-300,
            );
            assert!(
                (x[0] - centre).abs() < 1e-12,
                "mu {mu}: {} against {centre}",
                x[0]
            );
            assert!((n[0] - (0.3 - x[0])).abs() < 1e-15);
        }
    }

    #[test]
    fn the_path_ends_at_the_phase_set_of_the_closed_form() {
        // Without carbon limits, 4 x^2 P / (1 - x^2) = K, x^2 = K / (4P + K):
        // K = 0.1 gives x = 0.156 < 0.3 (graphite left over, 0.144 mol);
        // K = 1 gives x = 0.447 > 0.3 (graphite used up: absent).
        let system = boudouard();
        let feed = [0.3, 1.0, 0.0];
        let face = analyse(&system, &[false, false, true]).unwrap();
        let mut ws = Workspace::new(&system);
        for (k, carbon_left) in [(0.1_f64, true), (1.0, false)] {
            let ln_k = [k.ln()];
            let case = Case {
                face: &face,
                feed: &feed,
                ln_k: &ln_k,
                pressure: 1.0,
                start: None,
            };
            let options = SolveOptions::default();
            let mut path = BarrierPath::new(&system, &case);
            let end = path
                .descend(&system, &case, &options, &mut ws, FIRST_STRETCH)
                .expect("the path is followed");
            let graphite = 1 << system.phase_index(0);
            if carbon_left {
                let x = (k / (4.0 + k)).sqrt();
                assert_eq!(end.absent, 0);
                assert!(
                    (end.amounts[0] - (0.3 - x)).abs() < 1e-9,
                    "{:?}",
                    end.amounts
                );
            } else {
                assert_eq!(end.absent, graphite);
                assert_eq!(end.amounts[0], 0.0);
                assert!((end.amounts[2] - 0.6).abs() < 1e-9, "{:?}", end.amounts);
            }
        }
    }
}
