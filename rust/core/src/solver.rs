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

use crate::basis::{choose_basis, sort_by_amount};
use crate::face::Face;
use crate::linalg::solve_spd;
use crate::newton::{
    accept_quickly, h, hessian, residuals, sufficient_decrease, PhaseTerm, MAX_BACKTRACKS,
    TO_BOUNDARY,
};
use crate::status::Status;
use crate::system::{System, MAX_MIXTURES};

/// Solver settings shared by every case of a batch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SolveOptions {
    /// Largest allowed `|ln Q - ln K|` of any basis reaction at convergence.
    pub tol: f64,
    /// Newton iterations before giving up with [`Status::IterationLimit`].
    pub max_iter: u32,
    /// Start each case from the converged extents of the case before it in
    /// its chunk of the batch (where they are feasible). Fewer iterations for
    /// sweeps whose neighbouring cases are alike; results then depend (within
    /// the tolerance) on the order of the cases, though still not on the
    /// number of threads, since chunks are fixed.
    pub chain: bool,
    /// End a solve as [`Status::Stalled`] as soon as a pure condensed
    /// species is leaving the equilibrium (below a 1e-12 share of the feed
    /// and still shrinking), for [`crate::presence`] to solve without it.
    pub drop_vanishing: bool,
    /// Weight `mu` of a logarithmic barrier `-mu sum ln n` on the amounts of
    /// the pure condensed species and the totals of the mixture phases
    /// (for a system with more than the gas): it gives each pure species the
    /// curvature `mu / n^2` its linear Gibbs function lacks, and keeps every
    /// phase in ([`crate::barrier`]); 0 (the default) for the equilibrium
    /// itself.
    pub barrier: f64,
}

impl Default for SolveOptions {
    fn default() -> Self {
        SolveOptions {
            tol: 1e-10,
            max_iter: 200,
            chain: false,
            drop_vanishing: false,
            barrier: 0.0,
        }
    }
}

/// One case on its face: the inputs every solve path takes (assumed valid:
/// the batch driver checks them).
#[derive(Clone, Copy, Debug)]
pub struct Case<'a> {
    /// The zero-pattern face of the feed ([`crate::face`]).
    pub face: &'a Face,
    /// Feed amounts (S).
    pub feed: &'a [f64],
    /// ln K of the system's reactions (R).
    pub ln_k: &'a [f64],
    /// Pressure, bar.
    pub pressure: f64,
    /// Starting extents (R), used where they put every species that can be
    /// present above zero.
    pub start: Option<&'a [f64]>,
}

/// The sizes a solve works with: at run time on the general path, compile
/// time constants in the specialised kernels (so that loops unroll).
#[derive(Clone, Copy, Debug)]
struct Sizes {
    species: usize,
    reactions: usize,
    /// Dimension of the face (free reaction combinations).
    dim: usize,
}

/// `ln` of the share of its phase below which a species is minor and moves
/// in `ln n` (1e-2).
const LN_MINOR_SHARE: f64 = -4.605_170_185_988_091;
/// `ln` of the smallest amount the solver follows (1e-305 mol, in any
/// amount unit): float64's normal range ends near 2.2e-308, and the margin
/// keeps `1/n` and the Hessian entries built from it finite. A minor species
/// at this floor that equilibrium would push lower still is held there, its
/// reaction is left out of the convergence test, and the case ends
/// [`Status::Underflow`] instead of converged: its amount is then an upper
/// bound.
const LN_FLOOR: f64 = -702.288_453_363_184;
/// The smallest amount the solver follows, `exp(LN_FLOOR)`.
pub const FLOAT_FLOOR: f64 = 1e-305;

/// Borrowed working memory of one solve. The same code runs on heap
/// storage sized at run time ([`Workspace`]) and on stack arrays whose sizes
/// are compile-time constants ([`solve_fixed`]), where the short loops over
/// species and reactions unroll.
struct Scratch<'a> {
    amounts: &'a mut [f64],
    ln_amount: &'a mut [f64],
    inv_amount: &'a mut [f64],
    trial: &'a mut [f64],
    trial_ln: &'a mut [f64],
    change: &'a mut [f64],
    /// Per component species (the first `S - dim` entries): its chemical
    /// potential term and its 1 / n, gathered once per use.
    comp_mu: &'a mut [f64],
    comp_w: &'a mut [f64],
    /// Per component species: its amount when every pivot is zero,
    /// `n0_c - sum_j B[j, c] n0_pivot(j)`, a conserved quantity of the
    /// current basis computed from the feed (see [`conserved_base`]).
    comp_base: &'a mut [f64],
    order: &'a mut [usize],
    pivot_of: &'a mut [usize],
    /// The species that are no basis reaction's pivot, in index order.
    components: &'a mut [usize],
    pivots: &'a mut [usize],
    basis_stoich: &'a mut [f64],
    /// `basis_stoich` restricted to the component columns (`dim x (S - dim)`):
    /// each basis reaction holds its pivot with coefficient 1 and no other
    /// pivot, so these columns are all the rest of it.
    comp_stoich: &'a mut [f64],
    transform: &'a mut [f64],
    ln_k_face: &'a mut [f64],
    /// Per basis reaction: `gas change * ln(P/P0) - ln K` (the residual's
    /// constant part).
    basis_constant: &'a mut [f64],
    /// Per basis reaction: its pivot's `ln n - ln N_phase`.
    pivot_mu: &'a mut [f64],
    residual: &'a mut [f64],
    trial_residual: &'a mut [f64],
    hessian: &'a mut [f64],
    step: &'a mut [f64],
    du: &'a mut [f64],
    on_log_path: &'a mut [bool],
    frozen: &'a mut [bool],
    scale: &'a mut [f64],
    /// Per mixture phase `k` and basis reaction `j` (at `k * R + j`): the
    /// reaction's change of that phase's moles.
    phase_change: &'a mut [f64],
    basis_step: &'a mut [f64],
    face_step: &'a mut [f64],
    extents: &'a mut [f64],
}

/// Per-thread working memory for one case at a time; sized once for the
/// system and reused, so the solve allocates nothing per case.
#[derive(Clone, Debug)]
pub struct Workspace {
    species: Vec<f64>,
    species_idx: Vec<usize>,
    reactions: Vec<f64>,
    phase_change: Vec<f64>,
    reactions_idx: Vec<usize>,
    flags: Vec<bool>,
    by_species: Vec<f64>,
    square: Vec<f64>,
    n_species: usize,
    n_reactions: usize,
    /// The system's specialised kernel, if its size has one: solves on a
    /// full face take it (see [`Workspace::solve`]).
    kernel: Option<FixedKernel>,
}

/// Number of per-species `f64` arrays in a [`Scratch`].
const SPECIES_ARRAYS: usize = 9;
/// Number of per-reaction `f64` arrays in a [`Scratch`] (besides
/// `phase_change`, [`MAX_MIXTURES`] of them).
const REACTION_ARRAYS: usize = 11;

impl Workspace {
    pub fn new(system: &System) -> Self {
        let s = system.n_species();
        let r = system.n_reactions();
        Workspace {
            species: vec![0.0; SPECIES_ARRAYS * s],
            species_idx: vec![0; 3 * s],
            reactions: vec![0.0; REACTION_ARRAYS * r],
            phase_change: vec![0.0; MAX_MIXTURES * r],
            reactions_idx: vec![0; r],
            flags: vec![false; 2 * r],
            by_species: vec![0.0; 2 * r * s],
            square: vec![0.0; 2 * r * r],
            n_species: s,
            n_reactions: r,
            kernel: kernel_for(r, s, system.gas_only()),
        }
    }

    /// One valid case on its face: the system's specialised kernel where
    /// the face is full, else the general path ([`solve_on_face`]); the
    /// same results either way.
    pub(crate) fn solve(
        &mut self,
        system: &System,
        case: &Case,
        options: &SolveOptions,
        amounts: &mut [f64],
        extents: &mut [f64],
    ) -> (Status, u32) {
        solve_on_face(system, case, options, self.kernel, self, amounts, extents)
    }

    fn scratch(&mut self) -> Scratch<'_> {
        let (s, r) = (self.n_species, self.n_reactions);
        let [amounts, ln_amount, inv_amount, trial, trial_ln, change, comp_mu, comp_w, comp_base] =
            split_n::<SPECIES_ARRAYS, _>(&mut self.species, s);
        let [order, pivot_of, components] = split_n::<3, _>(&mut self.species_idx, s);
        let [basis_stoich, comp_stoich] = split_n::<2, _>(&mut self.by_species, r * s);
        let [ln_k_face, basis_constant, pivot_mu, residual, trial_residual, step, du, scale, basis_step, face_step, extents] =
            split_n::<REACTION_ARRAYS, _>(&mut self.reactions, r);
        let [on_log_path, frozen] = split_n::<2, _>(&mut self.flags, r);
        let [transform, hessian] = split_n::<2, _>(&mut self.square, r * r);
        Scratch {
            amounts,
            ln_amount,
            inv_amount,
            trial,
            trial_ln,
            change,
            comp_mu,
            comp_w,
            comp_base,
            order,
            pivot_of,
            components,
            pivots: &mut self.reactions_idx,
            basis_stoich,
            comp_stoich,
            transform,
            ln_k_face,
            basis_constant,
            pivot_mu,
            residual,
            trial_residual,
            hessian,
            step,
            du,
            on_log_path,
            frozen,
            scale,
            phase_change: &mut self.phase_change,
            basis_step,
            face_step,
            extents,
        }
    }
}

/// Split `data` into `N` consecutive pieces of `len` elements.
fn split_n<const N: usize, T>(data: &mut [T], len: usize) -> [&mut [T]; N] {
    let mut rest = data;
    std::array::from_fn(|_| {
        let (head, tail) = std::mem::take(&mut rest).split_at_mut(len);
        rest = tail;
        head
    })
}

/// Solve one case on its face, in heap working memory sized at run time.
/// `feed` (S), `ln_k` (R) and `pressure` are assumed valid (the batch driver
/// checks them). The equilibrium amounts and the extents of the user's
/// reactions are written to `amounts` (S) and `extents` (R); the status and
/// the number of Newton steps taken are returned.
///
/// Line search: a trial point is accepted without evaluating the Gibbs
/// change when the directional derivative there is not positive (for a
/// convex function that guarantees a decrease), or when every amount changes
/// by less than [`crate::newton::MODEL_TRUST`] and the derivative has fallen to half its
/// initial size (the quadratic model then guarantees a quarter of the
/// predicted decrease). Otherwise the exact change `r . dxi + sum h - sum h`
/// decides (Armijo). The logarithms of the trial point are those of the
/// next iteration, so an accepted step costs one set of logarithms.
pub fn solve_case(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    ws: &mut Workspace,
    amounts: &mut [f64],
    extents: &mut [f64],
) -> (Status, u32) {
    let (s, r) = (system.n_species(), system.n_reactions());
    let mut sc = ws.scratch();
    let sizes = Sizes {
        species: s,
        reactions: r,
        dim: case.face.dim,
    };
    let out = run(system, case, options, &mut sc, sizes, false);
    amounts.copy_from_slice(&sc.amounts[..s]);
    extents.copy_from_slice(&sc.extents[..r]);
    out
}

/// A solve specialised to `R` reactions and `S` species on a full face
/// (no unreachable species), with stack working memory: see [`kernel_for`].
pub type FixedKernel = fn(&System, &Case, &SolveOptions, &mut [f64], &mut [f64]) -> (Status, u32);

fn solve_fixed<const R: usize, const S: usize, const G: bool>(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    amounts_out: &mut [f64],
    extents_out: &mut [f64],
) -> (Status, u32) {
    let mut species = [[0.0; S]; SPECIES_ARRAYS];
    let mut species_idx = [[0usize; S]; 3];
    let mut reactions = [[0.0; R]; REACTION_ARRAYS];
    let mut phase_change = [[0.0; R]; MAX_MIXTURES];
    let mut pivots = [0usize; R];
    let mut flags = [[false; R]; 2];
    let mut by_species = [[[0.0; S]; R]; 2];
    let mut square = [[[0.0; R]; R]; 2];
    let [amounts, ln_amount, inv_amount, trial, trial_ln, change, comp_mu, comp_w, comp_base] =
        &mut species;
    let [order, pivot_of, components] = &mut species_idx;
    let [basis_stoich, comp_stoich] = &mut by_species;
    let [ln_k_face, basis_constant, pivot_mu, residual, trial_residual, step, du, scale, basis_step, face_step, extents] =
        &mut reactions;
    let [on_log_path, frozen] = &mut flags;
    let [transform, hessian] = &mut square;
    let mut sc = Scratch {
        amounts,
        ln_amount,
        inv_amount,
        trial,
        trial_ln,
        change,
        comp_mu,
        comp_w,
        comp_base,
        order,
        pivot_of,
        components,
        pivots: &mut pivots,
        basis_stoich: basis_stoich.as_flattened_mut(),
        comp_stoich: comp_stoich.as_flattened_mut(),
        transform: transform.as_flattened_mut(),
        ln_k_face,
        basis_constant,
        pivot_mu,
        residual,
        trial_residual,
        hessian: hessian.as_flattened_mut(),
        step,
        du,
        on_log_path,
        frozen,
        scale,
        phase_change: phase_change.as_flattened_mut(),
        basis_step,
        face_step,
        extents,
    };
    let sizes = Sizes {
        species: S,
        reactions: R,
        dim: R,
    };
    let out = run(system, case, options, &mut sc, sizes, G);
    amounts_out.copy_from_slice(&sc.amounts[..S]);
    extents_out.copy_from_slice(&sc.extents[..R]);
    out
}

/// One valid case on its face: the specialised `kernel` where there is one
/// and the face is full (no unreachable species), else the general path in
/// `ws`; the same results either way.
pub(crate) fn solve_on_face(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    kernel: Option<FixedKernel>,
    ws: &mut Workspace,
    amounts: &mut [f64],
    extents: &mut [f64],
) -> (Status, u32) {
    match kernel {
        Some(kernel) if case.face.dim == system.n_reactions() => {
            kernel(system, case, options, amounts, extents)
        }
        _ => solve_case(system, case, options, ws, amounts, extents),
    }
}

/// Every (reactions, species) pair with specialised kernels: the small
/// systems that dominate batch work (up to five reactions and twelve
/// species). `$m` is a macro that turns the list into a `match`; the solver
/// and the lane kernel ([`crate::lanes`]) use the same list.
macro_rules! for_small_systems {
    ($m:ident, $($arg:tt)*) => {
        $m! { $($arg)*;
            1 => [2, 3, 4, 5, 6],
            2 => [3, 4, 5, 6, 7, 8],
            3 => [4, 5, 6, 7, 8, 9],
            4 => [5, 6, 7, 8, 9, 10],
            5 => [6, 7, 8, 9, 10, 11, 12],
        }
    };
}
pub(crate) use for_small_systems;

macro_rules! kernel_table {
    ($r:expr, $s:expr, $gas:expr; $($rr:literal => [$($ss:literal),*]),* $(,)?) => {
        match ($r, $s, $gas) {
            $($(
                ($rr, $ss, true) => Some(solve_fixed::<$rr, $ss, true> as FixedKernel),
                ($rr, $ss, false) => Some(solve_fixed::<$rr, $ss, false> as FixedKernel),
            )*)*
            _ => None,
        }
    };
}

/// The specialised kernel for a system of `r` reactions and `s` species
/// (all in the gas phase when `gas_only`), if there is one; the general path
/// handles everything else and gives bit-identical results.
pub fn kernel_for(r: usize, s: usize, gas_only: bool) -> Option<FixedKernel> {
    for_small_systems!(kernel_table, r, s, gas_only)
}

/// Start from caller-given extents `x0` (a warm start, for instance the
/// solution of a neighbouring case) when they put every species that can be
/// present strictly above zero and keep the unreachable ones at zero;
/// returns `false` (and the default start is used) otherwise.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
pub(crate) fn warm_start(
    system: &System,
    face: &Face,
    feed: &[f64],
    x0: &[f64],
    amounts: &mut [f64],
    extents: &mut [f64],
    s: usize,
    r: usize,
) -> bool {
    let nu = system.stoich();
    let mut scale = 0.0_f64;
    for i in 0..s {
        scale = scale.max(feed[i]);
    }
    for i in 0..s {
        let mut v = feed[i];
        for j in 0..r {
            v += nu[j * s + i] * x0[j];
        }
        if face.unreachable[i] {
            if v.is_nan() || v.abs() > 1e-12 * scale {
                return false;
            }
            v = 0.0;
        } else if system.is_reactive(i) && !(v > 0.0 && v < f64::INFINITY) {
            return false;
        }
        amounts[i] = v;
    }
    extents[..r].copy_from_slice(&x0[..r]);
    true
}

/// Strictly interior start: move from the feed along the face's
/// reachability direction, halfway to the first species it would use up.
#[inline(always)]
pub(crate) fn interior_start(
    face: &Face,
    feed: &[f64],
    amounts: &mut [f64],
    extents: &mut [f64],
    s: usize,
    r: usize,
) {
    let mut t_max = f64::INFINITY;
    for i in 0..s {
        let dc = face.direction_change[i];
        if dc < 0.0 {
            t_max = t_max.min(feed[i] / -dc);
        }
    }
    let t = if t_max.is_finite() { 0.5 * t_max } else { 0.0 };
    for i in 0..s {
        amounts[i] = if face.unreachable[i] {
            0.0
        } else {
            feed[i] + t * face.direction_change[i]
        };
    }
    for j in 0..r {
        extents[j] = t * face.direction[j];
    }
}

/// Share of its phase below which a component's amount is taken from the
/// conserved quantities of the basis ([`component_update`]); above it the
/// running sum is as precise, and cheaper.
const TRACE_COMPONENT_SHARE: f64 = 1e-6;
/// `comp_base` of a component whose conserved quantity has not been needed
/// yet in this basis (it is computed when the component is first a trace).
const NOT_YET: f64 = f64::INFINITY;
/// Largest common denominator of a component's basis coefficients that
/// [`conserved_base`] looks for (coefficients of integer reactions are
/// ratios of small integers).
const MAX_DENOMINATOR: u32 = 720;

/// The change and new amount of one component on a trial step.
///
/// Written through the user's reactions, a component's amount is a running
/// sum `n0 + sum(nu * xi)` whose absolute error (about 1e-16 of the feed)
/// swamps a component that has itself become a trace (three trace products
/// and two reactions: one of them must be a component). A trace component
/// (`trace`: below [`TRACE_COMPONENT_SHARE`] of its phase) takes its amount
/// from `base + sum_j B[j, c] n_pivot(j)` instead, `base` the conserved
/// quantity of the basis ([`conserved_base`]), so it inherits the relative
/// precision of the pivots. Where that sum is not positive, the running sum
/// is used. `column` holds the component's coefficients at stride `nc`; a
/// `NaN` base marks a component no basis reaction touches.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn component_update(
    base: f64,
    trace: bool,
    column: &[f64],
    nc: usize,
    pivots: &[usize],
    trial: &[f64],
    basis_step: &[f64],
    amount: f64,
) -> (f64, f64) {
    let mut linear = 0.0;
    for (j, &step) in basis_step.iter().enumerate() {
        linear += column[j * nc] * step;
    }
    if base.is_nan() || linear == 0.0 {
        return (0.0, amount); // no basis reaction touches it
    }
    if trace && base.is_finite() {
        let mut conserved = base;
        for (j, &p) in pivots.iter().enumerate() {
            conserved += column[j * nc] * trial[p];
        }
        if conserved > 0.0 && conserved < f64::INFINITY {
            return (conserved - amount, conserved);
        }
    }
    (linear, amount + linear)
}

/// The conserved quantity `n0_c - sum_j B[j, c] n0_pivot(j)` of component
/// `c` (feed index `i`, coefficients `column` at stride `nc`) in the
/// current basis, or `NaN` if no basis reaction touches it.
///
/// It is often a difference of nearly equal feed amounts (a stoichiometric
/// CO + 3 H2 feed written in decimals: 0.1 and 0.3 are not exact in binary,
/// and their true difference of 1e-17 is the whole trace), so it is computed
/// without cancellation error: the coefficients are scaled to integers
/// (their common denominator, at most [`MAX_DENOMINATOR`]), every product
/// and sum is carried exactly in two doubles (the error-free
/// transformations of T. J. Dekker, "A floating-point technique for
/// extending the available precision", Numer. Math. 18, 1971, and D. E.
/// Knuth, TAOCP vol. 2), and the result is rounded once.
fn conserved_base(feed: &[f64], i: usize, column: &[f64], nc: usize, pivots: &[usize]) -> f64 {
    let dim = pivots.len();
    if (0..dim).all(|j| column[j * nc] == 0.0) {
        return f64::NAN;
    }
    // (Rounding by conversion to an integer: `f64::round` is a library call
    // on processors without SSE4.1.)
    let nearest = |v: f64| (v + 0.5 * v.signum()) as i64 as f64;
    let near_integer = |v: f64| v.abs() < 1e15 && (v - nearest(v)).abs() <= 1e-9 * v.abs().max(1.0);
    let scale = (1..=MAX_DENOMINATOR)
        .map(f64::from)
        .find(|&d| (0..dim).all(|j| near_integer(d * column[j * nc])));
    let (d, integer) = match scale {
        Some(d) => (d, true),
        None => (1.0, false),
    };
    let (mut hi, mut lo) = two_product(d, feed[i]);
    for (j, &p) in pivots.iter().enumerate() {
        let c = d * column[j * nc];
        let c = if integer { nearest(c) } else { c };
        let (product, error) = two_product(-c, feed[p]);
        let (sum, carry) = two_sum(hi, product);
        hi = sum;
        lo += carry + error;
    }
    let total = hi + lo;
    if d == 1.0 {
        return total;
    }
    // One division of the double-double by the integer d, rounded once.
    let q = total / d;
    let (qd, error) = two_product(q, d);
    let remainder = ((hi - qd) - error) + lo;
    q + remainder / d
}

/// `a + b = s + e` exactly (Knuth's two-sum).
#[inline(always)]
fn two_sum(a: f64, b: f64) -> (f64, f64) {
    let s = a + b;
    let bb = s - a;
    (s, (a - (s - bb)) + (b - bb))
}

/// `a * b = p + e` exactly (Dekker's two-product with Veltkamp's split:
/// plain multiplications, so it costs the same with or without a fused
/// multiply-add unit, which `f64::mul_add` would otherwise call a library
/// function for).
#[inline(always)]
fn two_product(a: f64, b: f64) -> (f64, f64) {
    let p = a * b;
    let (a_hi, a_lo) = split(a);
    let (b_hi, b_lo) = split(b);
    (
        p,
        ((a_hi * b_hi - p) + a_hi * b_lo + a_lo * b_hi) + a_lo * b_lo,
    )
}

/// `a = hi + lo` with each half of 26 significant bits (Veltkamp).
#[inline(always)]
fn split(a: f64) -> (f64, f64) {
    let c = 134_217_729.0 * a; // 2^27 + 1
    let hi = c - (c - a);
    (hi, a - hi)
}

/// `ln Q - ln K` of every basis reaction (into `out`) at the point whose
/// logarithms are `ln_n`, with phase totals `ln_totals`: the components' and
/// pivots' `ln n - ln N_phase` are gathered (into `mu` and `pivot_mu`), then
/// [`residuals`] adds them up.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn basis_residuals(
    out: &mut [f64],
    mu: &mut [f64],
    pivot_mu: &mut [f64],
    ln_n: &[f64],
    ln_totals: &[f64; SLOTS],
    phase_of: impl Fn(usize) -> usize,
    pure: impl Fn(usize) -> bool,
    barrier: f64,
    pivots: &[usize],
    components: &[usize],
    comp_stoich: &[f64],
    constant: &[f64],
) {
    // (a pure species' activity is 1: no term but the barrier's -mu / n)
    let pure_mu = |i: usize| {
        if barrier > 0.0 {
            -barrier * (-ln_n[i]).exp()
        } else {
            0.0
        }
    };
    for (m, &i) in mu.iter_mut().zip(components) {
        *m = if pure(i) {
            pure_mu(i)
        } else {
            ln_n[i] - ln_totals[phase_of(i)]
        };
    }
    for (m, &p) in pivot_mu.iter_mut().zip(pivots) {
        *m = if pure(p) {
            pure_mu(p)
        } else {
            ln_n[p] - ln_totals[phase_of(p)]
        };
    }
    residuals(
        comp_stoich,
        components.len(),
        mu,
        Some(pivot_mu),
        constant,
        out,
    );
}

/// What stays fixed through one solve: the case's inputs cut to size, the
/// sizes and the phase of each species.
#[derive(Clone, Copy)]
struct Problem<'a> {
    system: &'a System,
    face: &'a Face,
    /// Feed amounts (S).
    feed: &'a [f64],
    /// `ln(P / P0)`.
    ln_pressure: f64,
    s: usize,
    r: usize,
    /// Dimension of the face (the number of basis reactions).
    dim: usize,
    /// Number of components, `S - dim`.
    nc: usize,
    /// Every species is a gas. With this a compile-time constant (the
    /// specialised kernels), every phase lookup folds away.
    gas_only: bool,
    /// Mixture phases (the gas and the solutions): slots `0..n_mix` of the
    /// phase totals.
    n_mix: usize,
    /// Total feed, the scale of a pure species' amount.
    feed_total: f64,
    /// [`SolveOptions::barrier`] (0 for an all-gas system).
    barrier: f64,
}

/// Slots of the per-phase totals: one per mixture phase and, last, [`SINK`].
const SLOTS: usize = MAX_MIXTURES + 1;
/// The slot pure species add their amounts to: never read (a pure species
/// is a phase of its own, with mole fraction 1).
const SINK: usize = MAX_MIXTURES;
/// A pure species below this fraction of the total feed that a Newton step
/// would shrink further is taken to be leaving the equilibrium (with
/// [`SolveOptions::drop_vanishing`]): its Gibbs function is linear, so
/// nothing slows it down but the fraction-to-boundary rule, and a
/// phase-set change ([`crate::presence`]) finds the answer sooner.
pub(crate) const PURE_VANISHING: f64 = 1e-12;

impl<'a> Problem<'a> {
    /// The fixed part of a solve of `case` with sizes `sizes`.
    #[inline(always)]
    fn new(
        system: &'a System,
        case: &Case<'a>,
        sizes: Sizes,
        gas_only: bool,
        barrier: f64,
    ) -> Self {
        let s = sizes.species;
        Problem {
            system,
            face: case.face,
            feed: &case.feed[..s],
            ln_pressure: (case.pressure / system.p0()).ln(),
            s,
            r: sizes.reactions,
            dim: sizes.dim,
            nc: s - sizes.dim,
            gas_only,
            n_mix: if gas_only { 1 } else { system.n_mixtures() },
            feed_total: if gas_only {
                0.0
            } else {
                case.feed[..s].iter().sum()
            },
            barrier: if gas_only { 0.0 } else { barrier },
        }
    }

    /// `ln N` of each mixture phase as the residuals take it: with a
    /// barrier, `ln N + mu / N` (the barrier `-mu ln N` on the phase's total
    /// adds `-mu / N` to each of its species' chemical potentials).
    #[inline(always)]
    fn barrier_ln_totals(&self, totals: &[f64; SLOTS], ln_totals: &[f64; SLOTS]) -> [f64; SLOTS] {
        let mut out = *ln_totals;
        if self.barrier > 0.0 {
            for k in 0..self.n_mix {
                if totals[k] > 0.0 {
                    out[k] += self.barrier / totals[k];
                }
            }
        }
        out
    }

    /// The weight of species `i` (amount `n > 0`) in the Hessian: `1 / n`
    /// for a mixture species, the barrier's `mu / n^2` for a pure one (whose
    /// Gibbs function is linear: none without a barrier).
    #[inline(always)]
    fn curvature(&self, i: usize, n: f64) -> f64 {
        if self.is_pure(i) {
            self.barrier / (n * n)
        } else {
            1.0 / n
        }
    }

    /// What a component's amount is compared with to call it a trace: its
    /// phase's total, or for a pure species (a phase of its own) the feed's.
    #[inline(always)]
    fn trace_scale(&self, i: usize, totals: &[f64; SLOTS]) -> f64 {
        if self.is_pure(i) {
            self.feed_total
        } else {
            totals[self.phase_of(i)]
        }
    }

    /// Whether species `i` is a pure condensed species.
    #[inline(always)]
    fn is_pure(&self, i: usize) -> bool {
        !self.gas_only && self.system.is_pure(i)
    }

    /// The phase index of species `i`.
    #[inline(always)]
    fn phase_of(&self, i: usize) -> usize {
        if self.gas_only {
            0
        } else {
            let k = self.system.phase_index(i);
            if k < self.n_mix {
                k
            } else {
                SINK
            }
        }
    }
}

/// The state of a solve that the steps of a Newton iteration share (the
/// per-species and per-reaction arrays are in the [`Scratch`]).
struct Iterate {
    /// Phase totals of the current amounts.
    totals: [f64; SLOTS],
    /// Their logarithms ([`ln_of_totals`]).
    ln_totals: [f64; SLOTS],
    /// The scratch holds a basis valid for the current abundance order.
    basis_ready: bool,
    /// How much of the abundance order the basis was chosen from: a reorder
    /// that starts past it keeps the basis.
    basis_prefix: usize,
    /// `Scratch::residual` holds the residuals at the current point (from
    /// the line search, when the basis has not changed since).
    residual_known: bool,
    /// Newton steps taken.
    iterations: u32,
}

/// A feasible trial point of the line search; its amounts, changes and
/// logarithms are in the [`Scratch`].
#[derive(Clone, Copy)]
struct Trial {
    /// First-order change of the merit function, `residual . basis_step`.
    first_order: f64,
    /// The largest `|change| / n` of any species.
    largest_relative: f64,
    /// Phase totals at the trial point, and their logarithms.
    totals: [f64; SLOTS],
    ln_totals: [f64; SLOTS],
}

/// `ln` of each phase total, 0 for an empty phase.
#[inline(always)]
fn ln_of_totals(totals: [f64; SLOTS]) -> [f64; SLOTS] {
    totals.map(|n| if n > 0.0 { n.ln() } else { 0.0 })
}

/// Interior start, then damped Newton iterations; see the module docs.
/// Each iteration: 1. the basis ([`update_basis`]), 2. residuals and the
/// convergence test ([`residual_test`]), 3. the Newton system
/// ([`newton_step`]), 4. the path and the largest step ([`step_bound`]),
/// 5. backtracking ([`line_search`]) and the move ([`take_step`]).
#[inline(always)]
fn run(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    sc: &mut Scratch,
    sizes: Sizes,
    gas_only: bool,
) -> (Status, u32) {
    let p = Problem::new(system, case, sizes, gas_only, options.barrier);
    start_point(&p, case.start, sc);
    if p.dim == 0 {
        return (Status::Converged, 0);
    }
    let mut it = Iterate::new(&p, case.ln_k, sc);
    loop {
        if !update_basis(&p, sc, &mut it) {
            return (Status::Stalled, it.iterations);
        }
        // `held`: some species is held at the float floor with its reaction unmet.
        let (worst, held) = residual_test(&p, sc, &it, options.tol);
        if !worst.is_finite() {
            return (Status::Stalled, it.iterations);
        }
        if worst <= options.tol {
            let status = if held {
                Status::Underflow
            } else {
                Status::Converged
            };
            return (status, it.iterations);
        }
        if it.iterations >= options.max_iter {
            return (Status::IterationLimit, it.iterations);
        }
        if !newton_step(&p, sc, &it) {
            return (Status::Stalled, it.iterations);
        }
        let Some((slope, alpha_max, vanishing)) = step_bound(&p, sc, &it) else {
            return (Status::Stalled, it.iterations);
        };
        if vanishing && options.drop_vanishing {
            return (Status::Stalled, it.iterations);
        }
        let Some(trial) = line_search(&p, sc, &it, slope, alpha_max) else {
            return (Status::Stalled, it.iterations);
        };
        take_step(&p, sc, &mut it, &trial);
    }
}

/// The starting amounts and extents (into `sc`): `start` where it is
/// feasible ([`warm_start`]), else [`interior_start`]. Also resets the
/// abundance order.
#[inline(always)]
fn start_point(p: &Problem, start: Option<&[f64]>, sc: &mut Scratch) {
    let (s, r) = (p.s, p.r);
    let amounts = &mut sc.amounts[..s];
    let start = start.map(|x0| &x0[..r]);
    for (k, slot) in sc.order[..s].iter_mut().enumerate() {
        // Every case starts from the same order, so that ties between equal
        // amounts break the same way whatever the previous case was.
        *slot = k;
    }
    if !start.is_some_and(|x0| warm_start(p.system, p.face, p.feed, x0, amounts, sc.extents, s, r))
    {
        interior_start(p.face, p.feed, amounts, sc.extents, s, r);
    }
}

impl Iterate {
    /// The state at the starting point, before any basis: also writes the
    /// face's `ln K` (from `ln_k`, R) and each species' `ln n` and `1 / n`
    /// into `sc`.
    #[inline(always)]
    fn new(p: &Problem, ln_k: &[f64], sc: &mut Scratch) -> Self {
        let (s, r, dim) = (p.s, p.r, p.dim);
        let ln_k = &ln_k[..r];
        let amounts = &sc.amounts[..s];
        for f in 0..dim {
            let mut v = 0.0;
            for j in 0..r {
                v += p.face.basis[j * dim + f] * ln_k[j];
            }
            sc.ln_k_face[f] = v;
        }
        let mut totals = [0.0; SLOTS];
        for i in 0..s {
            let n = amounts[i];
            totals[p.phase_of(i)] += n;
            sc.ln_amount[i] = if n > 0.0 { n.ln() } else { 0.0 };
            // Species in no reaction never enter the Hessian; leaving their
            // 1/n at zero keeps a subnormal inert from turning 0 * inf into NaN.
            // A pure species' Gibbs function is linear: no curvature either.
            sc.inv_amount[i] = if n > 0.0 && p.system.is_reactive(i) {
                p.curvature(i, n)
            } else {
                0.0
            };
        }
        Iterate {
            totals,
            ln_totals: ln_of_totals(totals),
            basis_ready: false,
            basis_prefix: 0,
            residual_known: false,
            iterations: 0,
        }
    }
}

/// Step 1: the per-case stoichiometric basis, re-derived only when the
/// abundance order changes within the part that chose it, and then only if
/// the `dim` least abundant species are no longer the pivots (the same
/// pivots in another order give the same reactions, in another order).
/// Returns `false` if no basis can be chosen.
#[inline(always)]
fn update_basis(p: &Problem, sc: &mut Scratch, it: &mut Iterate) -> bool {
    let (s, dim) = (p.s, p.dim);
    let first_moved = sort_by_amount(&sc.amounts[..s], &mut sc.order[..s]);
    if it.basis_ready && first_moved < it.basis_prefix {
        if sc.order[..dim]
            .iter()
            .all(|&i| sc.pivot_of[i] != usize::MAX)
        {
            it.basis_prefix = dim;
        } else {
            it.basis_ready = false;
        }
    }
    if !it.basis_ready {
        it.residual_known = false;
        match choose_new_basis(p, sc) {
            Some(examined) => it.basis_prefix = examined,
            None => return false,
        }
        rebase_trace_components(p, sc, it);
        basis_constants(p, sc);
        it.basis_ready = true;
    }
    true
}

/// A basis for the current abundance order ([`choose_basis`]): its
/// reactions, transform and pivots, then the components (the species that
/// are no pivot, in index order) and the reactions' component columns
/// (`comp_stoich`). Returns how much of the order was examined, `None` if
/// there is no basis.
#[inline(always)]
fn choose_new_basis(p: &Problem, sc: &mut Scratch) -> Option<usize> {
    let (s, dim, nc) = (p.s, p.dim, p.nc);
    let basis_stoich = &mut sc.basis_stoich[..dim * s];
    // Each basis reaction is its pivot species plus some of the `nc`
    // components (see `comp_stoich`): later loops visit only those.
    let comp_stoich = &mut sc.comp_stoich[..dim * nc];
    let components = &mut sc.components[..nc];
    let examined = choose_basis(
        &p.face.stoich,
        dim,
        s,
        &sc.order[..s],
        basis_stoich,
        &mut sc.transform[..dim * dim],
        &mut sc.pivots[..dim],
        &mut sc.pivot_of[..s],
    )?;
    let mut c = 0;
    for i in 0..s {
        if sc.pivot_of[i] == usize::MAX {
            components[c] = i;
            c += 1;
        }
    }
    debug_assert_eq!(c, nc);
    for j in 0..dim {
        for c in 0..nc {
            comp_stoich[j * nc + c] = basis_stoich[j * s + components[c]];
        }
    }
    Some(examined)
}

/// Components from the conserved quantities of a new basis and the pivots
/// (see [`component_update`]): a trace component then keeps the relative
/// precision of the pivots it is made of. Sets each component's `comp_base`
/// (computed only when a component is first a trace, else [`NOT_YET`]),
/// moves the trace components to their conserved amounts, and updates the
/// phase totals if any moved.
#[inline(always)]
fn rebase_trace_components(p: &Problem, sc: &mut Scratch, it: &mut Iterate) {
    let (s, dim, nc) = (p.s, p.dim, p.nc);
    let amounts = &mut sc.amounts[..s];
    let comp_stoich = &sc.comp_stoich[..dim * nc];
    let components = &sc.components[..nc];
    let mut moved = false;
    for c in 0..nc {
        let i = components[c];
        let touched = (0..dim).any(|j| comp_stoich[j * nc + c] != 0.0);
        let trace = amounts[i] < TRACE_COMPONENT_SHARE * p.trace_scale(i, &it.totals);
        sc.comp_base[c] = match (touched, trace) {
            (false, _) => f64::NAN,
            (true, false) => NOT_YET,
            (true, true) => conserved_base(p.feed, i, &comp_stoich[c..], nc, &sc.pivots[..dim]),
        };
        let base = sc.comp_base[c];
        if !trace || !base.is_finite() {
            continue;
        }
        let mut v = base;
        for j in 0..dim {
            v += comp_stoich[j * nc + c] * amounts[sc.pivots[j]];
        }
        if v > 0.0 && v < f64::INFINITY && v != amounts[i] {
            amounts[i] = v;
            sc.ln_amount[i] = v.ln();
            sc.inv_amount[i] = p.curvature(i, v);
            moved = true;
        }
    }
    if moved {
        it.totals = [0.0; SLOTS];
        for i in 0..s {
            it.totals[p.phase_of(i)] += amounts[i];
        }
        it.ln_totals = ln_of_totals(it.totals);
    }
}

/// Per reaction of a new basis: its change of each mixture phase's moles
/// and the constant part of its residual, `gas change * ln(P/P0) - ln K`.
#[inline(always)]
fn basis_constants(p: &Problem, sc: &mut Scratch) {
    let (s, dim) = (p.s, p.dim);
    let basis_stoich = &sc.basis_stoich[..dim * s];
    let transform = &sc.transform[..dim * dim];
    for j in 0..dim {
        let mut v = 0.0;
        for k in 0..dim {
            v += transform[j * dim + k] * sc.ln_k_face[k];
        }
        let mut change = [0.0; SLOTS];
        for i in 0..s {
            change[p.phase_of(i)] += basis_stoich[j * s + i];
        }
        for k in 0..p.n_mix {
            sc.phase_change[k * p.r + j] = change[k];
        }
        sc.basis_constant[j] = change[0] * p.ln_pressure - v;
    }
}

/// Step 2: residuals `ln Q - ln K` of the basis reactions (already known
/// from the line search when the basis has not changed), and which pivots
/// are held at the float floor (`frozen`). Returns the largest residual of
/// the reactions not held, and whether a held one is unmet (above `tol`).
#[inline(always)]
fn residual_test(p: &Problem, sc: &mut Scratch, it: &Iterate, tol: f64) -> (f64, bool) {
    let (dim, nc) = (p.dim, p.nc);
    let mut worst = 0.0_f64;
    let mut held = false;
    if !it.residual_known {
        basis_residuals(
            &mut sc.residual[..dim],
            &mut sc.comp_mu[..nc],
            &mut sc.pivot_mu[..dim],
            sc.ln_amount,
            &p.barrier_ln_totals(&it.totals, &it.ln_totals),
            |i| p.phase_of(i),
            |i| p.is_pure(i),
            p.barrier,
            &sc.pivots[..dim],
            &sc.components[..nc],
            &sc.comp_stoich[..dim * nc],
            &sc.basis_constant[..dim],
        );
    }
    for j in 0..dim {
        let res = sc.residual[j];
        let sp = sc.pivots[j];
        // Only a minor species of its phase is held at the floor: when a
        // whole phase shrinks there (a phase that should vanish), its
        // species keep their share and the case must not pass as converged.
        let ln_total = it.ln_totals[p.phase_of(sp)];
        sc.frozen[j] = !p.is_pure(sp)
            && res > 0.0
            && sc.ln_amount[sp] <= LN_FLOOR + 1e-6
            && sc.ln_amount[sp] - ln_total <= LN_MINOR_SHARE;
        if !sc.frozen[j] {
            worst = worst.max(res.abs());
        } else if res > tol {
            held = true;
        }
    }
    (worst, held)
}

/// Step 3: the Newton system `H step = -residual`, solved into `sc.step`
/// (a reaction held at the float floor is left out: its row and column of
/// `H` become the identity's, its step 0). Returns `false` if `H` is not
/// positive definite.
#[inline(always)]
fn newton_step(p: &Problem, sc: &mut Scratch, it: &Iterate) -> bool {
    let (dim, nc) = (p.dim, p.nc);
    let hess = &mut sc.hessian[..dim * dim];
    for c in 0..nc {
        sc.comp_w[c] = sc.inv_amount[sc.components[c]];
    }
    // (the pivots' 1 / n, in `du` until step 4 needs it)
    for j in 0..dim {
        sc.du[j] = sc.inv_amount[sc.pivots[j]];
    }
    let r = p.r;
    // (a barrier -mu ln N on a phase's total adds +mu / N^2 along its change)
    let phase_terms: [PhaseTerm<f64>; MAX_MIXTURES] = std::array::from_fn(|k| PhaseTerm {
        change: &sc.phase_change[k * r..k * r + dim],
        inv_total: if it.totals[k] > 0.0 {
            (1.0 - p.barrier / it.totals[k]) / it.totals[k]
        } else {
            0.0
        },
    });
    let phase_terms = &phase_terms[..p.n_mix];
    hessian(
        &sc.comp_stoich[..dim * nc],
        nc,
        &sc.comp_w[..nc],
        Some(&sc.du[..dim]),
        phase_terms,
        dim,
        hess,
        dim,
    );
    for j in 0..dim {
        if sc.frozen[j] {
            // A species held at the float floor: its reaction is left out.
            for k in 0..dim {
                let (a, b) = (j.min(k), j.max(k));
                hess[a * dim + b] = if j == k { 1.0 } else { 0.0 };
            }
        }
        sc.step[j] = if sc.frozen[j] { 0.0 } else { -sc.residual[j] };
    }
    solve_spd(hess, &mut sc.step[..dim], &mut sc.scale[..dim], dim)
}

/// Step 4: the path of each basis reaction (`on_log_path`, and `du`, the
/// step in its pivot's `ln n`), and the largest step that keeps every amount
/// positive. Returns the slope `residual . step` and that largest step
/// (at most 1); `None` if the step is no descent direction.
#[inline(always)]
fn step_bound(p: &Problem, sc: &mut Scratch, it: &Iterate) -> Option<(f64, f64, bool)> {
    let (s, dim, nc) = (p.s, p.dim, p.nc);
    let amounts = &sc.amounts[..s];
    let mut slope = 0.0;
    let mut alpha_max = 1.0_f64;
    let mut vanishing = false;
    for j in 0..dim {
        slope += sc.residual[j] * sc.step[j];
        let sp = sc.pivots[j];
        let pure = p.is_pure(sp);
        // (a pure species carries no 1/n in the Hessian: its own here)
        let du = if pure {
            sc.step[j] / sc.amounts[sp]
        } else {
            sc.step[j] * sc.inv_amount[sp]
        };
        sc.du[j] = du;
        let ln_share = sc.ln_amount[sp] - it.ln_totals[p.phase_of(sp)];
        // A shrinking pivot moves in ln n (a pure one too: a trace of solid
        // made with a trace product follows it down in a few steps).
        let on_log = du < 0.0 || (!pure && ln_share < LN_MINOR_SHARE);
        sc.on_log_path[j] = on_log;
        if !on_log {
            continue;
        }
        vanishing |= pure && sc.amounts[sp] < PURE_VANISHING * p.feed_total;
        if du > 0.0 {
            // Do not let a minor species grow past its whole phase in one go.
            let room = 1.0 - ln_share;
            if du > room {
                alpha_max = alpha_max.min(room / du);
            }
        } else {
            // Nor shrink below what float64 can follow.
            let depth = LN_FLOOR - sc.ln_amount[sp];
            if depth < 0.0 && depth > du {
                alpha_max = alpha_max.min(depth / du);
            }
        }
    }
    if slope.is_nan() || slope >= 0.0 {
        return None;
    }
    let tiny = PURE_VANISHING * p.feed_total;
    for j in 0..dim {
        let lin = sc.step[j];
        if !sc.on_log_path[j] && lin < 0.0 {
            let sp = sc.pivots[j];
            alpha_max = alpha_max.min(TO_BOUNDARY * amounts[sp] / -lin);
            vanishing |= p.is_pure(sp) && amounts[sp] < tiny;
        }
    }
    let comp_stoich = &sc.comp_stoich[..dim * nc];
    for c in 0..nc {
        let mut lin = 0.0;
        for j in 0..dim {
            lin += comp_stoich[j * nc + c] * sc.step[j];
        }
        if lin < 0.0 {
            let i = sc.components[c];
            alpha_max = alpha_max.min(TO_BOUNDARY * amounts[i] / -lin);
            vanishing |= p.is_pure(i) && amounts[i] < tiny;
        }
    }
    Some((slope, alpha_max, vanishing))
}

/// Step 5: backtracking along the path from `alpha_max`, halving the step
/// until the trial point ([`trial_point`]) is feasible and accepted
/// ([`trial_accepted`]), at most [`MAX_BACKTRACKS`] times. Returns the
/// accepted point (its arrays in `sc`), or `None`.
#[inline(always)]
fn line_search(
    p: &Problem,
    sc: &mut Scratch,
    it: &Iterate,
    slope: f64,
    alpha_max: f64,
) -> Option<Trial> {
    let mut alpha = alpha_max;
    for _ in 0..MAX_BACKTRACKS {
        if let Some(trial) = trial_point(p, sc, it, alpha) {
            if trial_accepted(p, sc, it, &trial, alpha, slope) {
                return Some(trial);
            }
        }
        alpha *= 0.5;
    }
    None
}

/// The point at `alpha` along the path: the basis reactions' steps
/// (`basis_step`), every species' change (`change`; a component's from
/// [`component_update`]), new amount (`trial`) and its logarithm
/// (`trial_ln`). `None` if some amount leaves `(0, inf)`.
#[inline(always)]
fn trial_point(p: &Problem, sc: &mut Scratch, it: &Iterate, alpha: f64) -> Option<Trial> {
    let (s, dim, nc) = (p.s, p.dim, p.nc);
    let amounts = &sc.amounts[..s];
    let comp_stoich = &sc.comp_stoich[..dim * nc];
    let mut first_order = 0.0;
    for j in 0..dim {
        let d = if sc.on_log_path[j] {
            amounts[sc.pivots[j]] * (alpha * sc.du[j]).exp_m1()
        } else {
            alpha * sc.step[j]
        };
        sc.basis_step[j] = d;
        first_order += sc.residual[j] * d;
    }
    for j in 0..dim {
        let sp = sc.pivots[j];
        sc.change[sp] = sc.basis_step[j];
        sc.trial[sp] = amounts[sp] + sc.basis_step[j];
    }
    for c in 0..nc {
        let i = sc.components[c];
        let trace = amounts[i] < TRACE_COMPONENT_SHARE * p.trace_scale(i, &it.totals);
        if trace && sc.comp_base[c] == NOT_YET {
            sc.comp_base[c] = conserved_base(p.feed, i, &comp_stoich[c..], nc, &sc.pivots[..dim]);
        }
        let (change, new) = component_update(
            sc.comp_base[c],
            trace,
            &comp_stoich[c..],
            nc,
            &sc.pivots[..dim],
            sc.trial,
            &sc.basis_step[..dim],
            amounts[i],
        );
        sc.change[i] = change;
        sc.trial[i] = new;
    }
    let mut largest_relative = 0.0_f64;
    let mut totals = [0.0; SLOTS];
    for i in 0..s {
        let d = sc.change[i];
        let new = if d != 0.0 { sc.trial[i] } else { amounts[i] };
        if d != 0.0 {
            // (false for NaN as well)
            if !(new > 0.0 && new < f64::INFINITY) {
                return None;
            }
            largest_relative = largest_relative.max((d * sc.inv_amount[i]).abs());
            sc.trial_ln[i] = new.ln();
        } else {
            sc.trial_ln[i] = sc.ln_amount[i];
        }
        sc.trial[i] = new;
        totals[p.phase_of(i)] += new;
    }
    Some(Trial {
        first_order,
        largest_relative,
        totals,
        ln_totals: ln_of_totals(totals),
    })
}

/// Whether the line search takes the feasible `trial` at step `alpha`: its
/// basis residuals (into `trial_residual`) give the directional derivative
/// of the merit function along the path there, which may accept it at once
/// ([`accept_quickly`]); otherwise the exact change `r . dxi + sum h - sum h`
/// decides ([`sufficient_decrease`]).
#[inline(always)]
fn trial_accepted(
    p: &Problem,
    sc: &mut Scratch,
    it: &Iterate,
    trial: &Trial,
    alpha: f64,
    slope: f64,
) -> bool {
    let (s, dim, nc) = (p.s, p.dim, p.nc);
    basis_residuals(
        &mut sc.trial_residual[..dim],
        &mut sc.comp_mu[..nc],
        &mut sc.pivot_mu[..dim],
        sc.trial_ln,
        &p.barrier_ln_totals(&trial.totals, &trial.ln_totals),
        |i| p.phase_of(i),
        |i| p.is_pure(i),
        p.barrier,
        &sc.pivots[..dim],
        &sc.components[..nc],
        &sc.comp_stoich[..dim * nc],
        &sc.basis_constant[..dim],
    );
    let mut derivative = 0.0;
    for j in 0..dim {
        let res = sc.trial_residual[j];
        let velocity = if sc.on_log_path[j] {
            sc.trial[sc.pivots[j]] * sc.du[j]
        } else {
            sc.step[j]
        };
        derivative += res * velocity;
    }
    if accept_quickly(derivative, trial.largest_relative, slope) {
        return true;
    }
    let amounts = &sc.amounts[..s];
    let mut second_order = 0.0;
    let mut phase_delta = [0.0; SLOTS];
    for i in 0..s {
        if !p.is_pure(i) {
            second_order += h(amounts[i], sc.change[i]);
            phase_delta[p.phase_of(i)] += sc.change[i];
        } else if p.barrier > 0.0 && sc.change[i] != 0.0 {
            // -mu ln(1 + d/n) beyond its first-order part -mu d/n
            let x = sc.change[i] / amounts[i];
            second_order += p.barrier * (x - x.ln_1p());
        }
    }
    for k in 0..p.n_mix {
        second_order -= h(it.totals[k], phase_delta[k]);
        if p.barrier > 0.0 && phase_delta[k] != 0.0 {
            let x = phase_delta[k] / it.totals[k];
            second_order += p.barrier * (x - x.ln_1p());
        }
    }
    sufficient_decrease(trial.first_order, second_order, alpha, slope)
}

/// Moves to the accepted `trial`: amounts with their logarithms and
/// reciprocals, phase totals, residuals, and the extents of the user's
/// reactions (`dxi = basis * transform^T * dxi_basis`); counts the step.
#[inline(always)]
fn take_step(p: &Problem, sc: &mut Scratch, it: &mut Iterate, trial: &Trial) {
    let (s, r, dim) = (p.s, p.r, p.dim);
    let amounts = &mut sc.amounts[..s];
    for i in 0..s {
        if sc.change[i] != 0.0 {
            amounts[i] = sc.trial[i];
            sc.ln_amount[i] = sc.trial_ln[i];
            sc.inv_amount[i] = p.curvature(i, sc.trial[i]);
        }
    }
    it.totals = trial.totals;
    it.ln_totals = trial.ln_totals;
    sc.residual[..dim].copy_from_slice(&sc.trial_residual[..dim]);
    it.residual_known = true;
    let transform = &sc.transform[..dim * dim];
    for f in 0..dim {
        let mut v = 0.0;
        for j in 0..dim {
            v += transform[j * dim + f] * sc.basis_step[j];
        }
        sc.face_step[f] = v;
    }
    for k in 0..r {
        let mut v = 0.0;
        for f in 0..dim {
            v += p.face.basis[k * dim + f] * sc.face_step[f];
        }
        sc.extents[k] += v;
    }
    it.iterations += 1;
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::face::analyse;
    use crate::system::Phase;

    /// Solve on the general path and, where one exists, on the specialised
    /// kernel, and insist that both give the same bits.
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
        let options = SolveOptions::default();
        let mut ws = Workspace::new(&sys);
        let (mut amounts, mut extents) = (vec![0.0; s], vec![0.0; r]);
        let case = Case {
            face: &face,
            feed,
            ln_k,
            pressure: p,
            start: None,
        };
        let (st, it) = solve_case(&sys, &case, &options, &mut ws, &mut amounts, &mut extents);
        if let Some(kernel) = kernel_for(r, s, true) {
            let (mut a2, mut e2) = (vec![0.0; s], vec![0.0; r]);
            let (st2, it2) = kernel(&sys, &case, &options, &mut a2, &mut e2);
            assert_eq!((st, it), (st2, it2));
            let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
            assert_eq!(bits(&amounts), bits(&a2));
            assert_eq!(bits(&extents), bits(&e2));
        }
        (amounts, st, it)
    }

    #[test]
    fn isomerisation_matches_closed_form() {
        // A = B, K = 3: n_B / n_A = 3 (closed form).
        let (n, st, _) = solve(vec![-1.0, 1.0], 1, &[1.0, 0.0], &[3.0_f64.ln()], 1.0);
        assert_eq!(st, Status::Converged);
        assert!((n[0] - 0.25).abs() < 1e-10 && (n[1] - 0.75).abs() < 1e-10);
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
    fn trace_component_keeps_its_balance_with_the_trace_pivots() {
        // Steam at 298 K: 2 H2 + O2 = 2 H2O (ln K 184.42), H2 + O2 = 2 OH
        // (ln K -27.66); species H2 O2 H2O OH, feed pure H2O. Three trace
        // species and two reactions, so one trace is a component; the
        // balances of the feed fix H2 = 2 O2 + OH / 2 exactly. A 50-digit
        // reference gives H2 = 2.528e-27 and O2 = 1.264e-27 (the values of
        // the issue that reported the fault, from an independent mpmath solve).
        let nu = vec![-2.0, -1.0, 2.0, 0.0, -1.0, -1.0, 0.0, 2.0];
        let (n, st, _) = solve(nu, 2, &[0.0, 0.0, 1.0, 0.0], &[184.42, -27.66], 1.0);
        assert_eq!(st, Status::Converged);
        let (h2, o2, oh) = (n[0], n[1], n[3]);
        assert!(((h2 - (2.0 * o2 + 0.5 * oh)) / h2).abs() < 1e-12, "{n:?}");
        assert!((h2 / 2.528e-27 - 1.0).abs() < 1e-3, "{h2:e}");
        assert!((o2 / 1.264e-27 - 1.0).abs() < 1e-3, "{o2:e}");
    }

    #[test]
    fn the_floor_and_its_logarithm_agree() {
        assert!((FLOAT_FLOOR.ln() - LN_FLOOR).abs() < 1e-12);
    }

    #[test]
    fn conserved_base_is_exact_for_decimal_feeds() {
        // CO + 3 H2 = CH4 + H2O with H2 the pivot: CO = base + H2 / 3 with
        // base = n0_CO - n0_H2 / 3. For the binary numbers nearest 0.1 and 0.3,
        // 3602879701896397 / 2^55 and 5404319552844595 / 2^54, that is exactly
        // (3 x 3602879701896397 - 2 x 5404319552844595) / (3 x 2^55) = 1 / (3 x 2^55).
        let base = conserved_base(&[0.1, 0.3, 0.0, 0.0], 0, &[1.0 / 3.0], 1, &[1]);
        let exact = 1.0 / (3.0 * 2.0_f64.powi(55));
        assert!((base / exact - 1.0).abs() < 1e-15, "{base:e} vs {exact:e}");
        // A component no basis reaction touches has none.
        assert!(conserved_base(&[0.1, 0.3], 0, &[0.0], 1, &[1]).is_nan());
    }

    #[test]
    fn species_below_the_float_floor_make_the_case_underflow() {
        // A = B: n_B / n_A = K (closed form). exp(-800) is below float64;
        // exp(-690) = 2.6e-300 is inside it.
        let (n, st, _) = solve(vec![-1.0, 1.0], 1, &[1.0, 0.0], &[-800.0], 1.0);
        assert_eq!(st, Status::Underflow);
        assert!(st.is_converged());
        assert!(n[1] > 0.0 && n[1] <= 1.000_001e-305, "{:e}", n[1]);
        let (n, st, _) = solve(vec![-1.0, 1.0], 1, &[1.0, 0.0], &[-690.0], 1.0);
        assert_eq!(st, Status::Converged);
        assert!((n[1] / (-690.0_f64).exp() - 1.0).abs() < 1e-9, "{:e}", n[1]);
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
