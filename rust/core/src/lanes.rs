//! The lane kernel: [`LANES`] all-gas cases solved in lockstep, one case per
//! vector lane.
//!
//! Batch work on small systems is dominated by logarithms and short loops
//! over a handful of species; done one case at a time, neither fills a
//! vector unit. Here every quantity is an array over lanes (`[f64; LANES]`)
//! and every operation a loop over lanes without branches, so that the
//! compiler turns it into vector instructions (AVX-512, AVX2 + FMA or SSE2,
//! chosen at run time, see [`lane_kernel_for`]), with an inlined logarithm
//! ([`crate::ln`]).
//!
//! The method is the damped Newton iteration of [`crate::solver`] on the
//! extents of the reactions as given: same start (the caller's extents where
//! they are strictly feasible, else the interior start), same Gibbs merit,
//! same line-search acceptance, fraction-to-boundary steps on the straight
//! line (the shared rules of [`crate::newton`]: [`TO_BOUNDARY`],
//! [`MAX_BACKTRACKS`], the Hessian and its `L D L^T` solve). Lanes converge,
//! backtrack and stop independently; a lane that has finished takes the next
//! case, and no lane's arithmetic mixes with another's, so a result depends on
//! its own case only, never on the cases beside it. The reactions as given are well conditioned only
//! while no species is a trace: a lane whose reactive species fall below
//! [`SHARE`] of the gas, that needs more than [`STEPS`] Newton steps, or that
//! meets a Hessian that is not clearly positive definite or a line search
//! without decrease, is finished by the general solve (per-case basis, log
//! paths for trace species), continuing from the lane's last point.
//!
//! Systems with a specialised size (`for_small_systems`) get a kernel with
//! compile-time sizes; larger ones up to [`MAX_LANE_REACTIONS`] and
//! [`MAX_LANE_SPECIES`] share one with run-time sizes, whose loops over
//! species and reactions are not unrolled but still work on all lanes at
//! once (2-5x faster than the general solve on 7-20 reaction networks).
//!
//! Convergence means what it means on the general path: `|ln Q - ln K| <=
//! tol` for every reaction of the per-case basis. The lanes iterate on the
//! reactions as given and stop when theirs are at most `tol / gain`, where
//! the system's [`System::basis_gain`] bounds how much any basis can enlarge
//! them, so the stopping point meets `tol` whichever basis the general solve
//! would have chosen. Where that target is out of reach, or the system has
//! too many candidate bases to compute the gain, they stop at `tol` and the
//! general solve checks the point in its own basis (see `lane_tolerance`).

use crate::face::Face;
use crate::ln::ln_normal;
use crate::newton::{
    hessian, ldl_solve, sufficient_decrease, PhaseTerm, MAX_BACKTRACKS, MODEL_TRUST, PHI_SERIES,
    TO_BOUNDARY,
};
use crate::solver::{
    for_small_systems, interior_start, kernel_for, solve_on_face, warm_start, Case, SolveOptions,
    Workspace,
};
use crate::status::Status;
use crate::system::System;

pub use crate::num::LANES;
/// Smallest share of the gas any reactive species may hold on the lane path.
const SHARE: f64 = 1e-9;
/// Smallest amount or total the lane path works with (far from subnormal
/// numbers, which [`ln_normal`] does not take).
const SMALLEST: f64 = 1e-250;
/// Newton steps after which an unconverged lane goes to the general solve.
const STEPS: u32 = 30;

#[cfg(test)]
thread_local! {
    /// Lanes handed to the general solve on this thread (tests only).
    static HANDBACKS: std::cell::Cell<usize> = const { std::cell::Cell::new(0) };
}

/// One case for the lane kernel: valid inputs on a full face (no
/// unreachable species), optionally starting extents; its outputs go to row
/// `row`.
pub struct LaneCase<'a> {
    pub row: usize,
    pub feed: &'a [f64],
    pub start: Option<&'a [f64]>,
    pub ln_k: &'a [f64],
    pub pressure: f64,
    pub face: &'a Face,
}

impl<'a> LaneCase<'a> {
    /// The case for the scalar solve, starting from `start`.
    fn scalar(&self, start: Option<&'a [f64]>) -> Case<'a> {
        Case {
            face: self.face,
            feed: self.feed,
            ln_k: self.ln_k,
            pressure: self.pressure,
            start,
        }
    }
}

/// Solve a list of cases, [`LANES`] at a time (a lane that finishes takes
/// the next case): amounts to `amounts[row * S..]`, extents to
/// `extents[row * R..]`, status and iterations to `out[row]`.
pub type LaneKernel =
    fn(&System, &[LaneCase], &SolveOptions, &mut [f64], &mut [f64], &mut [(Status, u32)]);

/// Largest systems the lane kernel takes: the small sizes of
/// `for_small_systems` have kernels of their own (sizes known at compile
/// time, loops unrolled); larger ones up to these share one kernel with run-time
/// sizes (its loops over species and reactions are not unrolled, but every
/// operation in them still works on all lanes at once).
pub const MAX_LANE_REACTIONS: usize = 20;
pub const MAX_LANE_SPECIES: usize = 28;

/// The lane kernel for an all-gas system of `r` reactions and `s` species,
/// compiled for the widest vector instructions this processor has.
pub fn lane_kernel_for(r: usize, s: usize) -> Option<LaneKernel> {
    macro_rules! pick {
        ($r:expr, $s:expr; $($rr:literal => [$($ss:literal),*]),* $(,)?) => {
            match ($r, $s) {
                $($(($rr, $ss) => Some(dispatch::<$rr, $ss, true>()),)*)*
                _ => None,
            }
        };
    }
    for_small_systems!(pick, r, s).or_else(|| {
        ((1..=MAX_LANE_REACTIONS).contains(&r) && s <= MAX_LANE_SPECIES)
            .then(dispatch::<MAX_LANE_REACTIONS, MAX_LANE_SPECIES, false>)
    })
}

fn dispatch<const R: usize, const S: usize, const EXACT: bool>() -> LaneKernel {
    #[cfg(target_arch = "x86_64")]
    {
        if x86::Avx512::detect().is_some() {
            return x86::solve_avx512::<R, S, EXACT>;
        }
        if x86::Avx2::detect().is_some() {
            return x86::solve_avx2::<R, S, EXACT>;
        }
    }
    solve_portable::<R, S, EXACT>
}

/// Calls with fewer cases than this run through a one-lane instance of the
/// kernel (plain scalar code, the same arithmetic lane for lane, so the
/// same bits): a vector group costs as much per iteration for one case as
/// for eight, about six times a lone lane's work on workload (a).
const NARROW_BELOW: usize = 4;

/// The kernel without extra target features (lanes as plain loops).
fn solve_portable<const R: usize, const S: usize, const EXACT: bool>(
    system: &System,
    cases: &[LaneCase],
    options: &SolveOptions,
    amounts: &mut [f64],
    extents: &mut [f64],
    out: &mut [(Status, u32)],
) {
    if cases.len() < NARROW_BELOW {
        solve_group::<R, S, EXACT, 1>(system, cases, options, amounts, extents, out)
    } else {
        solve_group::<R, S, EXACT, LANES>(system, cases, options, amounts, extents, out)
    }
}

/// Which vector instructions the lane kernels use on this processor
/// (`"avx512"`, `"avx2"` or `"portable"`), for benchmarks and reports.
pub fn vector_path() -> &'static str {
    #[cfg(target_arch = "x86_64")]
    {
        if x86::Avx512::detect().is_some() {
            return "avx512";
        }
        if x86::Avx2::detect().is_some() {
            return "avx2";
        }
    }
    "portable"
}

/// The only `unsafe` of the crate: entering the lane kernel compiled with
/// extra target features. Each feature set has a token type that only its
/// run-time detection can make, and the unsafe inner function takes the
/// token, so it cannot be reached on a processor without the features.
#[cfg(target_arch = "x86_64")]
mod x86 {
    use super::*;

    /// A safe entry point `$entry` to the lane kernel compiled with the
    /// target features `$features` (the unsafe inner function `$inner`),
    /// entered only with the token `$token` that proves them present.
    macro_rules! with_features {
        ($features:literal, $token:ident, $inner:ident, $entry:ident, [$($detect:tt),*]) => {
            /// Proof that the processor has the features of one lane kernel.
            #[derive(Clone, Copy)]
            pub(super) struct $token(());

            impl $token {
                /// The token, if the processor has every feature.
                pub(super) fn detect() -> Option<Self> {
                    (true $(&& std::arch::is_x86_feature_detected!($detect))*).then_some($token(()))
                }
            }

            #[target_feature(enable = $features)]
            unsafe fn $inner<const R: usize, const S: usize, const EXACT: bool>(
                _proof: $token,
                system: &System,
                cases: &[LaneCase],
                options: &SolveOptions,
                amounts: &mut [f64],
                extents: &mut [f64],
                out: &mut [(Status, u32)],
            ) {
                solve_group::<R, S, EXACT, LANES>(system, cases, options, amounts, extents, out)
            }

            pub(super) fn $entry<const R: usize, const S: usize, const EXACT: bool>(
                system: &System,
                cases: &[LaneCase],
                options: &SolveOptions,
                amounts: &mut [f64],
                extents: &mut [f64],
                out: &mut [(Status, u32)],
            ) {
                if cases.len() < NARROW_BELOW {
                    return solve_group::<R, S, EXACT, 1>(system, cases, options, amounts, extents, out);
                }
                match $token::detect() {
                    // SAFETY: the token exists only where run-time detection
                    // found every feature `$inner` is compiled for.
                    Some(proof) => unsafe {
                        $inner::<R, S, EXACT>(proof, system, cases, options, amounts, extents, out)
                    },
                    None => solve_portable::<R, S, EXACT>(system, cases, options, amounts, extents, out),
                }
            }
        };
    }

    with_features!(
        "avx512f,avx512dq,avx512vl,avx2,fma",
        Avx512,
        avx512,
        solve_avx512,
        ["avx512f", "avx512dq", "avx512vl", "avx2", "fma"]
    );
    with_features!("avx2,fma", Avx2, avx2, solve_avx2, ["avx2", "fma"]);
}

/// Where a lane stands.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Lane {
    Running,
    Converged,
    /// To the general solve.
    Handback,
    /// Not this kernel's case.
    Idle,
}

/// Smallest residual the lanes aim for on the reactions as given: below
/// it, rounding in `ln Q - ln K` (sums of logarithms of order 10-100) could
/// keep a lane from ever stopping.
const REACHABLE: f64 = 1e-13;

/// Where the lanes stop, and whether the general solve must then check the
/// point. The general solve's `tol` holds for its per-case basis; a point
/// whose given residuals are at most `tol / gain` meets it in any basis
/// ([`System::basis_gain`]). Where that target is out of reach (a large
/// gain, a tight `tol`) or the gain was not computed (too many candidate
/// bases), the lanes stop at `tol` on the reactions as given and hand the
/// point to the general solve, which accepts it after checking its own basis
/// (or takes the one more Newton step it needs).
pub(crate) fn lane_tolerance(system: &System, tol: f64) -> (f64, bool) {
    match system.basis_gain() {
        Some(gain) if tol / gain.max(1.0) >= REACHABLE => (tol / gain.max(1.0), false),
        _ => (tol, true),
    }
}

/// `ln Q - ln K` of every reaction in every lane. The same sum as
/// [`crate::newton::residuals`], written out here because the generic one
/// costs the lane kernel about 10 % more instructions on workload (a)
/// (callgrind, `examples/reforming_batch`).
#[inline(always)]
fn residuals<const R: usize, const S: usize, const L: usize>(
    (r, s): (usize, usize),
    nu: &[[f64; S]; R],
    moles: &[f64; R],
    constant: &[[f64; L]; R],
    ln_n: &[[f64; L]; S],
    ln_total: &[f64; L],
) -> [[f64; L]; R] {
    let mut out = [[0.0; L]; R];
    for j in 0..r {
        for l in 0..L {
            out[j][l] = constant[j][l] - moles[j] * ln_total[l];
        }
        for i in 0..s {
            let c = nu[j][i];
            for l in 0..L {
                out[j][l] += c * ln_n[i][l];
            }
        }
    }
    out
}

/// `min` and `max` as selects (the standard ones treat NaN specially,
/// which keeps them out of vector code); `clamp` keeps `ln_normal`'s
/// argument positive, normal and finite.
#[inline(always)]
fn min(a: f64, b: f64) -> f64 {
    if a < b {
        a
    } else {
        b
    }
}

#[inline(always)]
fn max(a: f64, b: f64) -> f64 {
    if a > b {
        a
    } else {
        b
    }
}

#[inline(always)]
fn clamp(v: f64) -> f64 {
    min(max(v, SMALLEST), f64::MAX)
}

/// `ln` of every lane (arguments clamped to the normal range).
#[inline(always)]
fn ln_lanes<const L: usize>(x: &[f64; L]) -> [f64; L] {
    let mut out = [0.0; L];
    for l in 0..L {
        out[l] = ln_normal(clamp(x[l]));
    }
    out
}

/// `h(n, d) = n phi(d / n)` ([`crate::newton::h`]) in every lane, in stages
/// that each vectorise; valid for `n + d > 0`. `inv_n` is `1 / n` and
/// `ln_ratio` is `ln(n + d) - ln(n)`, both already at hand in the line
/// search, so no logarithm is taken here: where `|d / n| >= 0.05` the
/// difference of the two logarithms is `ln(1 + d / n)` to a few units in
/// 1e-14 relative (each logarithm is within an ulp of `ln` and the
/// difference is at least 0.048 in size); below that the series is used,
/// which needs no logarithm at all.
#[inline(always)]
fn h_lanes<const L: usize>(
    n: &[f64; L],
    d: &[f64; L],
    inv_n: &[f64; L],
    ln_ratio: &[f64; L],
) -> [f64; L] {
    let mut x = [0.0; L];
    for l in 0..L {
        x[l] = d[l] * inv_n[l];
    }
    let mut series = [PHI_SERIES[PHI_SERIES.len() - 1]; L];
    for &c in PHI_SERIES.iter().rev().skip(1) {
        for l in 0..L {
            series[l] = series[l] * x[l] + c;
        }
    }
    let mut out = [0.0; L];
    for l in 0..L {
        let small = series[l] * x[l] * x[l];
        let direct = (1.0 + x[l]) * ln_ratio[l] - x[l];
        let phi = if x[l].abs() < 0.05 { small } else { direct };
        out[l] = clamp(n[l]) * phi;
    }
    out
}

#[inline(always)]
fn solve_group<const R: usize, const S: usize, const EXACT: bool, const L: usize>(
    system: &System,
    cases: &[LaneCase],
    options: &SolveOptions,
    amounts_out: &mut [f64],
    extents_out: &mut [f64],
    out: &mut [(Status, u32)],
) {
    let Some(case0) = cases.first() else {
        return;
    };
    // `R` and `S` are the sizes (EXACT: constants, so loops unroll) or
    // capacities (the system's own sizes are at most these).
    let (r, s) = if EXACT {
        (R, S)
    } else {
        (system.n_reactions(), system.n_species())
    };
    assert!(r <= R && s <= S, "system larger than the kernel's capacity");
    // Hand-backs: the specialised solve for this size if there is one, else
    // the general one in a workspace made on first use.
    let fixed = kernel_for(r, s, true);
    let mut workspace: Option<Workspace> = None;
    // Full faces share the reactions as given (identity basis).
    let mut nu = [[0.0; S]; R];
    let mut moles = [0.0; R];
    for j in 0..r {
        for i in 0..s {
            nu[j][i] = case0.face.stoich[j * s + i];
            moles[j] += nu[j][i];
        }
    }
    let mut reactive = [false; S];
    for i in 0..s {
        reactive[i] = system.is_reactive(i);
    }
    let limit = options.max_iter.min(STEPS);
    let (tol, verify) = lane_tolerance(system, options.tol);

    let mut state = [Lane::Idle; L];
    let mut slot = [0usize; L];
    let mut n = [[1.0; L]; S];
    let mut xi = [[0.0; L]; R];
    let mut constant = [[0.0; L]; R];
    let mut total = [1.0; L];
    let mut ln_n = [[0.0; L]; S];
    let mut inv_n = [[1.0; L]; S];
    let mut ln_total = [0.0; L];
    let mut residual = [[0.0_f64; L]; R];
    let mut iterations = [0u32; L];
    // Work arrays that live across iterations (with capacity sizes they are
    // too large to clear at every step): only their first `r` or `s` rows are
    // used, each written before it is read.
    let mut hess = [[[0.0; L]; R]; R];
    let mut change = [[0.0; L]; S];
    let mut trial = [[0.0; L]; S];
    let mut trial_ln = [[0.0; L]; S];
    let mut next = 0;

    loop {
        // Retire finished lanes and load the next cases into free ones.
        for l in 0..L {
            loop {
                if state[l] == Lane::Running {
                    let mut worst = 0.0_f64;
                    for j in 0..r {
                        worst = max(worst, residual[j][l].abs());
                    }
                    if worst <= tol {
                        // (`verify`: the general solve checks its own basis)
                        state[l] = if verify {
                            Lane::Handback
                        } else {
                            Lane::Converged
                        };
                    } else if !worst.is_finite() || iterations[l] >= limit {
                        state[l] = Lane::Handback;
                    }
                }
                match state[l] {
                    Lane::Running => break,
                    Lane::Converged => {
                        let case = &cases[slot[l]];
                        let amounts = &mut amounts_out[case.row * s..(case.row + 1) * s];
                        for i in 0..s {
                            amounts[i] = n[i][l];
                        }
                        let extents = &mut extents_out[case.row * r..(case.row + 1) * r];
                        for j in 0..r {
                            extents[j] = xi[j][l];
                        }
                        out[case.row] = (Status::Converged, iterations[l]);
                    }
                    Lane::Handback => {
                        #[cfg(test)]
                        HANDBACKS.with(|c| c.set(c.get() + 1));
                        // Continue from the lane's last point (strictly
                        // interior; the general solve uses its own start if
                        // round-off says otherwise) on the remaining budget.
                        let case = &cases[slot[l]];
                        let mut here = [0.0; R];
                        for j in 0..r {
                            here[j] = xi[j][l];
                        }
                        let used = iterations[l];
                        let rest = SolveOptions {
                            max_iter: options.max_iter - used,
                            ..*options
                        };
                        let amounts = &mut amounts_out[case.row * s..(case.row + 1) * s];
                        let extents = &mut extents_out[case.row * r..(case.row + 1) * r];
                        let (status, more) = solve_on_face(
                            system,
                            &case.scalar(Some(&here[..r])),
                            &rest,
                            fixed,
                            workspace.get_or_insert_with(|| Workspace::new(system)),
                            amounts,
                            extents,
                        );
                        out[case.row] = (status, used + more);
                    }
                    Lane::Idle => {}
                }
                state[l] = Lane::Idle;
                if next == cases.len() {
                    break;
                }
                // Load case `next`: its start (the caller's extents where they
                // are strictly feasible, else the interior start on its face).
                let case = &cases[next];
                slot[l] = next;
                next += 1;
                let (mut n0, mut xi0) = ([0.0; S], [0.0; R]);
                if !case.start.is_some_and(|x0| {
                    warm_start(system, case.face, case.feed, x0, &mut n0, &mut xi0, s, r)
                }) {
                    interior_start(case.face, case.feed, &mut n0, &mut xi0, s, r);
                }
                let mut sum = 0.0;
                for i in 0..s {
                    n[i][l] = n0[i];
                    sum += n0[i];
                }
                for j in 0..r {
                    xi[j][l] = xi0[j];
                }
                total[l] = sum;
                let mut inside = (SMALLEST..=f64::MAX).contains(&sum);
                for i in 0..s {
                    let v = n[i][l];
                    if reactive[i] {
                        inside &= v >= SHARE * sum && v >= SMALLEST;
                        ln_n[i][l] = ln_normal(clamp(v));
                        inv_n[i][l] = 1.0 / clamp(v);
                    }
                }
                ln_total[l] = ln_normal(clamp(sum));
                let ln_p = (case.pressure / system.p0()).ln();
                for j in 0..r {
                    constant[j][l] = moles[j] * ln_p - case.ln_k[j];
                    let mut v = constant[j][l] - moles[j] * ln_total[l];
                    for i in 0..s {
                        v += nu[j][i] * ln_n[i][l];
                    }
                    residual[j][l] = v;
                }
                iterations[l] = 0;
                state[l] = if inside {
                    Lane::Running
                } else {
                    Lane::Handback
                };
            }
        }
        let mut running = [false; L];
        for l in 0..L {
            running[l] = state[l] == Lane::Running;
        }
        if !running.iter().any(|&r| r) {
            break;
        }

        // Newton system per lane: H step = -residual, by L D L^T.
        let mut inv_total = [0.0; L];
        for l in 0..L {
            inv_total[l] = 1.0 / total[l];
        }
        let phase = [PhaseTerm {
            change: &moles[..r],
            inv_total,
        }];
        hessian(
            nu.as_flattened(),
            S,
            &inv_n[..s],
            None,
            &phase,
            r,
            hess.as_flattened_mut(),
            R,
        );
        let mut step = [[0.0; L]; R];
        for j in 0..r {
            for l in 0..L {
                step[j][l] = -residual[j][l];
            }
        }
        let mut diag = [[0.0; L]; R];
        let mut good = ldl_solve(
            hess.as_flattened_mut(),
            R,
            &mut step[..r],
            &mut diag[..r],
            r,
            [true; L],
        );
        let mut slope = [0.0; L];
        for j in 0..r {
            for l in 0..L {
                slope[l] += residual[j][l] * step[j][l];
            }
        }
        for l in 0..L {
            good[l] &= slope[l] < 0.0;
        }
        for row in &mut change[..s] {
            *row = [0.0; L];
        }
        let mut alpha = [1.0_f64; L];
        for i in 0..s {
            for j in 0..r {
                let c = nu[j][i];
                for l in 0..L {
                    change[i][l] += c * step[j][l];
                }
            }
            for l in 0..L {
                let d = change[i][l];
                // Divide in every lane, then select: a branch per lane would
                // keep this loop out of vector code.
                let q = TO_BOUNDARY * n[i][l] / -d;
                let bound = if d < 0.0 { q } else { f64::INFINITY };
                alpha[l] = min(alpha[l], bound);
            }
        }
        let mut pending = [false; L];
        for l in 0..L {
            pending[l] = running[l] && good[l];
            if running[l] && !good[l] {
                state[l] = Lane::Handback;
            }
        }

        // Backtracking, all pending lanes together; a lane that accepts
        // commits its trial point at once and drops out.
        for _ in 0..MAX_BACKTRACKS {
            if !pending.iter().any(|&p| p) {
                break;
            }
            let mut trial_total = [0.0; L];
            let mut lowest = [f64::INFINITY; L];
            let mut largest = [0.0_f64; L];
            trial_ln[..s].copy_from_slice(&ln_n[..s]);
            for i in 0..s {
                for l in 0..L {
                    let d = alpha[l] * change[i][l];
                    let v = n[i][l] + d;
                    trial[i][l] = v;
                    trial_total[l] += v;
                }
                if reactive[i] {
                    // Pure f64 loops (no flags), so that they vectorise.
                    for l in 0..L {
                        lowest[l] = min(lowest[l], trial[i][l]);
                        largest[l] = max(largest[l], (alpha[l] * change[i][l] * inv_n[i][l]).abs());
                    }
                    trial_ln[i] = ln_lanes(&trial[i]);
                }
            }
            let trial_ln_total = ln_lanes(&trial_total);
            let mut feasible = [false; L];
            for l in 0..L {
                feasible[l] = lowest[l] >= SMALLEST && trial_total[l] <= f64::MAX;
            }
            let trial_residual =
                residuals((r, s), &nu, &moles, &constant, &trial_ln, &trial_ln_total);
            let mut derivative = [0.0; L];
            for j in 0..r {
                for l in 0..L {
                    derivative[l] += trial_residual[j][l] * step[j][l];
                }
            }
            let mut accept = [false; L];
            let mut undecided = false;
            for l in 0..L {
                let quick = derivative[l] <= 0.0
                    || (largest[l] <= MODEL_TRUST && derivative[l] <= -0.5 * slope[l]);
                accept[l] = pending[l] && feasible[l] && quick;
                undecided |= pending[l] && feasible[l] && !quick;
            }
            if undecided {
                // The exact Gibbs change along the step (see `crate::newton::sufficient_decrease`).
                let mut second = [0.0; L];
                let mut total_change = [0.0; L];
                for i in 0..s {
                    let mut d = [0.0; L];
                    let mut ratio = [0.0; L];
                    for l in 0..L {
                        d[l] = alpha[l] * change[i][l];
                        total_change[l] += d[l];
                        ratio[l] = trial_ln[i][l] - ln_n[i][l];
                    }
                    // (inert species: d = 0, so the series gives 0)
                    let hi = h_lanes(&n[i], &d, &inv_n[i], &ratio);
                    for l in 0..L {
                        second[l] += hi[l];
                    }
                }
                let mut ratio = [0.0; L];
                for l in 0..L {
                    ratio[l] = trial_ln_total[l] - ln_total[l];
                }
                let ht = h_lanes(&total, &total_change, &inv_total, &ratio);
                for l in 0..L {
                    second[l] -= ht[l];
                    let exact =
                        sufficient_decrease(alpha[l] * slope[l], second[l], alpha[l], slope[l]);
                    accept[l] |= pending[l] && feasible[l] && exact;
                }
            }
            // Commit accepted lanes (selects, so the loops stay vector code).
            for i in 0..s {
                for l in 0..L {
                    n[i][l] = if accept[l] { trial[i][l] } else { n[i][l] };
                    ln_n[i][l] = if accept[l] {
                        trial_ln[i][l]
                    } else {
                        ln_n[i][l]
                    };
                }
            }
            for j in 0..r {
                for l in 0..L {
                    residual[j][l] = if accept[l] {
                        trial_residual[j][l]
                    } else {
                        residual[j][l]
                    };
                    xi[j][l] += if accept[l] {
                        alpha[l] * step[j][l]
                    } else {
                        0.0
                    };
                }
            }
            for l in 0..L {
                total[l] = if accept[l] { trial_total[l] } else { total[l] };
                ln_total[l] = if accept[l] {
                    trial_ln_total[l]
                } else {
                    ln_total[l]
                };
                iterations[l] += accept[l] as u32;
                pending[l] &= !accept[l];
            }
            for l in 0..L {
                alpha[l] = if pending[l] { 0.5 * alpha[l] } else { alpha[l] };
            }
        }
        for l in 0..L {
            if pending[l] {
                state[l] = Lane::Handback;
            }
        }

        // Reciprocals of the new amounts, and lanes that left the lane region.
        let mut outside = [false; L];
        for i in 0..s {
            if !reactive[i] {
                continue;
            }
            for l in 0..L {
                let v = n[i][l];
                outside[l] |= v < SHARE * total[l] || v.is_nan();
                inv_n[i][l] = 1.0 / clamp(v);
            }
        }
        for l in 0..L {
            if outside[l] && state[l] == Lane::Running {
                state[l] = Lane::Handback;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::face::analyse;
    use crate::fixtures::reforming;
    use crate::solver::solve_case;

    /// 29 cases (not a multiple of the lane count): the benchmark's ranges
    /// (Xu-Froment ln K, from memory) plus constants far enough out that
    /// species end below 1e-9 of the gas and lanes hand over.
    fn cases() -> Vec<([f64; 6], [f64; 2], f64)> {
        let mut out = Vec::new();
        for k in 0..25 {
            let u = |m: f64| ((k as f64 + 0.5) * m).fract();
            let t = 700.0 + 500.0 * u(0.618_033_988_7);
            let p = 1.0 + 39.0 * u(0.754_877_666_2);
            let s2c = 1.5 + 3.5 * u(0.569_840_290_9);
            let ln_k = [30.114 - 26830.0 / t, -4.036 + 4400.0 / t];
            out.push(([0.98, 0.98 * s2c, 0.0, 0.0, 0.0, 0.02], ln_k, p));
        }
        out.push(([1.0, 2.0, 0.0, 0.0, 0.0, 0.1], [-60.0, 5.0], 1.0));
        out.push(([1.0, 3.0, 0.0, 0.0, 0.0, 0.0], [60.0, -5.0], 1.0));
        // All species fed (another zero pattern, another interior start).
        out.push(([0.5, 1.0, 0.1, 0.2, 0.05, 0.0], [2.0, 1.0], 3.0));
        out.push(([0.5, 1.0, 0.1, 0.2, 0.05, 0.0], [-3.0, 0.5], 0.5));
        out
    }

    fn faces_of(sys: &System, data: &[([f64; 6], [f64; 2], f64)]) -> Vec<Face> {
        data.iter()
            .map(|(feed, _, _)| {
                let zero: Vec<bool> = feed.iter().map(|&v| v == 0.0).collect();
                analyse(sys, &zero).unwrap()
            })
            .collect()
    }

    /// One lane case per row of `data` (feed, ln K, pressure), starting
    /// from `start(row)` where that gives extents.
    fn lane_cases<'a, A: AsRef<[f64]>, B: AsRef<[f64]>>(
        data: &'a [(A, B, f64)],
        faces: &'a [Face],
        start: impl Fn(usize) -> Option<&'a [f64]>,
    ) -> Vec<LaneCase<'a>> {
        data.iter()
            .zip(faces)
            .enumerate()
            .map(|(row, ((feed, ln_k, p), face))| LaneCase {
                row,
                feed: feed.as_ref(),
                start: start(row),
                ln_k: ln_k.as_ref(),
                pressure: *p,
                face,
            })
            .collect()
    }

    /// Lanes against the general solve; with `warm`, every lane starts from
    /// the general solve's extents and must take at most a step or two.
    fn check(kernel: LaneKernel, warm: bool) {
        let sys = reforming();
        let options = SolveOptions::default();
        let data = cases();
        let faces = faces_of(&sys, &data);
        let general = kernel_for(2, 6, true).unwrap();
        let reference: Vec<([f64; 6], [f64; 2])> = data
            .iter()
            .zip(&faces)
            .map(|((feed, ln_k, p), face)| {
                let (mut a, mut e) = ([0.0; 6], [0.0; 2]);
                let case = Case {
                    face,
                    feed,
                    ln_k,
                    pressure: *p,
                    start: None,
                };
                let (st, _) = general(&sys, &case, &options, &mut a, &mut e);
                assert_eq!(st, Status::Converged);
                (a, e)
            })
            .collect();
        let list = lane_cases(&data, &faces, |k| warm.then_some(&reference[k].1[..]));
        let mut amounts = vec![f64::NAN; 6 * data.len()];
        let mut extents = vec![f64::NAN; 2 * data.len()];
        let mut out = vec![(Status::InvalidInput, 0); data.len()];
        kernel(&sys, &list, &options, &mut amounts, &mut extents, &mut out);
        let nu = sys.stoich();
        for (k, ((feed, _, _), (a, _))) in data.iter().zip(&reference).enumerate() {
            assert_eq!(out[k].0, Status::Converged, "case {k}");
            // (Cases 25 and 26 end with a species near 1e-26 of the gas: from
            // extents, n = feed + nu^T xi cancels to nothing for it, so no
            // start given as extents can hold it and the interior start is used.)
            if warm && k != 25 && k != 26 {
                assert!(
                    out[k].1 <= 2,
                    "case {k}: {} steps from the solution",
                    out[k].1
                );
            }
            for i in 0..6 {
                // The equilibrium is unique: every amount agrees relatively,
                // trace species included.
                let got = amounts[k * 6 + i];
                let scale = a[i].abs().max(1e-300);
                assert!(
                    ((got - a[i]) / scale).abs() < 1e-8,
                    "case {k} species {i}: {got} vs {}",
                    a[i]
                );
                // Element balance: n = feed + nu^T xi.
                let expect = feed[i] + nu[i] * extents[k * 2] + nu[6 + i] * extents[k * 2 + 1];
                assert!(
                    (got - expect).abs() < 1e-12 * feed.iter().sum::<f64>(),
                    "case {k}"
                );
            }
        }
    }

    #[test]
    fn lanes_agree_with_the_general_solve() {
        // Portable code, and the variant this processor dispatches to.
        check(solve_group::<2, 6, true, LANES>, false);
        check(solve_group::<2, 6, true, 1>, false);
        check(lane_kernel_for(2, 6).unwrap(), false);
    }

    /// Seven reactions among light hydrocarbons, with an inert (H2 CH4 C2H6
    /// C2H4 C2H2 C3H8 C3H6 C4H10 C4H8 N2): larger than any kernel with
    /// compile-time sizes, so the run-time-size kernel takes it. It must agree
    /// with the general solve, keep the cases without trace species on the
    /// lanes (hand-backs would agree too, being the general solve), and take
    /// warm starts.
    #[test]
    fn the_run_time_size_kernel_agrees_with_the_general_solve() {
        let nu = vec![
            1.0, -2.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, // 2 CH4 = C2H6 + H2
            1.0, 0.0, -1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, // C2H6 = C2H4 + H2
            1.0, 0.0, 0.0, -1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, // C2H4 = C2H2 + H2
            1.0, -1.0, -1.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, // CH4 + C2H6 = C3H8 + H2
            1.0, 0.0, 0.0, 0.0, 0.0, -1.0, 1.0, 0.0, 0.0, 0.0, // C3H8 = C3H6 + H2
            1.0, 0.0, -2.0, 0.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, // 2 C2H6 = C4H10 + H2
            1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, -1.0, 1.0, 0.0, // C4H10 = C4H8 + H2
        ];
        let (r, s) = (7, 10);
        let sys = System::new(nu.clone(), r, s, vec![crate::system::Phase::Gas; s], 1.0).unwrap();
        assert!(kernel_for(r, s, true).is_none());
        assert!(lane_kernel_for(MAX_LANE_REACTIONS + 1, MAX_LANE_SPECIES).is_none());
        let options = SolveOptions::default();
        // Constants of our own choosing (a consistency check of two code
        // paths, not of data): moderate ones, and far-out ones that leave
        // species below 1e-9 of the gas (those lanes hand over).
        let mut data = Vec::new();
        for k in 0..37 {
            let u = |m: f64| ((k as f64 + 0.5) * m).fract();
            let spread = if k % 5 == 4 { 40.0 } else { 6.0 };
            let ln_k: Vec<f64> = (0..r)
                .map(|j| spread * (u(0.618_033_988_7 + 0.1 * j as f64) - 0.5))
                .collect();
            let mut feed = vec![0.0; s];
            feed[1] = 1.0 + u(0.754_877_666_2);
            feed[0] = 0.1 * u(0.569_840_290_9);
            feed[9] = 0.3 * u(0.3);
            if k % 3 == 0 {
                feed.iter_mut().for_each(|v| *v += 0.05);
            }
            data.push((feed, ln_k, 0.5 + 10.0 * u(0.41)));
        }
        let n = data.len();
        let faces: Vec<Face> = data
            .iter()
            .map(|(feed, _, _)| {
                let zero: Vec<bool> = feed.iter().map(|&v| v == 0.0).collect();
                analyse(&sys, &zero).unwrap()
            })
            .collect();
        assert!(faces.iter().all(|f| f.dim == r));
        let mut ws = Workspace::new(&sys);
        let reference: Vec<(Vec<f64>, Vec<f64>)> = data
            .iter()
            .zip(&faces)
            .enumerate()
            .map(|(k, ((feed, ln_k, p), face))| {
                let (mut a, mut e) = (vec![0.0; s], vec![0.0; r]);
                let case = Case {
                    face,
                    feed,
                    ln_k,
                    pressure: *p,
                    start: None,
                };
                let (st, _) = solve_case(&sys, &case, &options, &mut ws, &mut a, &mut e);
                assert_eq!(st, Status::Converged, "case {k}");
                (a, e)
            })
            .collect();
        let trace: Vec<bool> = reference
            .iter()
            .map(|(a, _)| {
                let total: f64 = a.iter().sum();
                a[..9].iter().any(|&v| v < 1e-9 * total)
            })
            .collect();
        let n_trace = trace.iter().filter(|&&t| t).count();
        assert!((3..n / 2).contains(&n_trace), "{n_trace} trace cases");
        for warm in [false, true] {
            for kernel in [
                solve_group::<MAX_LANE_REACTIONS, MAX_LANE_SPECIES, false, LANES> as LaneKernel,
                lane_kernel_for(r, s).unwrap(),
            ] {
                let list = lane_cases(&data, &faces, |k| warm.then_some(&reference[k].1[..]));
                let (mut amounts, mut extents) = (vec![f64::NAN; s * n], vec![f64::NAN; r * n]);
                let mut out = vec![(Status::InvalidInput, 0); n];
                HANDBACKS.with(|c| c.set(0));
                kernel(&sys, &list, &options, &mut amounts, &mut extents, &mut out);
                // Only lanes that meet a trace species go to the general solve.
                assert!(HANDBACKS.with(|c| c.get()) <= n_trace, "warm {warm}");
                for (k, ((feed, _, _), (a, _))) in data.iter().zip(&reference).enumerate() {
                    assert_eq!(out[k].0, Status::Converged, "case {k}");
                    if warm && !trace[k] {
                        assert!(
                            out[k].1 <= 2,
                            "case {k}: {} steps from the solution",
                            out[k].1
                        );
                    }
                    for i in 0..s {
                        let got = amounts[k * s + i];
                        let scale = a[i].abs().max(1e-300);
                        assert!(
                            ((got - a[i]) / scale).abs() < 1e-8,
                            "case {k} species {i}: {got} vs {}",
                            a[i]
                        );
                        let expect: f64 = feed[i]
                            + (0..r)
                                .map(|j| nu[j * s + i] * extents[k * r + j])
                                .sum::<f64>();
                        assert!((got - expect).abs() < 1e-12 * feed.iter().sum::<f64>());
                    }
                }
            }
        }
    }

    #[test]
    fn lanes_of_a_system_without_a_gain_stop_at_tol_and_are_checked_by_the_general_solve() {
        // Ten isomerisations A_k = B_k: binomial(20, 10) = 184,756 candidate
        // bases, too many to compute the gain, so every lane that stops is
        // handed to the general solve for its basis check. Each reaction is
        // alone in its species, so B_k / A_k = K_k exactly (closed form).
        let (r, s) = (10, 20);
        let mut nu = vec![0.0; r * s];
        for k in 0..r {
            nu[k * s + 2 * k] = -1.0;
            nu[k * s + 2 * k + 1] = 1.0;
        }
        let sys = System::new(nu, r, s, vec![crate::system::Phase::Gas; s], 1.0).unwrap();
        assert_eq!(sys.basis_gain(), None);
        let options = SolveOptions::default();
        let data: Vec<(Vec<f64>, Vec<f64>, f64)> = (0..12)
            .map(|c| {
                let feed: Vec<f64> = (0..s).map(|i| 0.5 + 0.1 * ((i + c) % 3) as f64).collect();
                let ln_k: Vec<f64> = (0..r)
                    .map(|k| 0.3 * (k as f64 - 4.5) + 0.1 * c as f64)
                    .collect();
                (feed, ln_k, 1.0 + c as f64)
            })
            .collect();
        let faces: Vec<Face> = data
            .iter()
            .map(|_| analyse(&sys, &vec![false; s]).unwrap())
            .collect();
        let list = lane_cases(&data, &faces, |_| None);
        let n = data.len();
        let (mut amounts, mut extents) = (vec![f64::NAN; s * n], vec![f64::NAN; r * n]);
        let mut out = vec![(Status::InvalidInput, 0); n];
        HANDBACKS.with(|c| c.set(0));
        lane_kernel_for(r, s).unwrap()(&sys, &list, &options, &mut amounts, &mut extents, &mut out);
        assert_eq!(HANDBACKS.with(|c| c.get()), n);
        for (c, (feed, ln_k, _)) in data.iter().enumerate() {
            assert_eq!(out[c].0, Status::Converged, "case {c}");
            // Stopped by convergence, not by the lanes' step limit.
            assert!(out[c].1 < STEPS, "case {c}: {} steps", out[c].1);
            for k in 0..r {
                let pair = feed[2 * k] + feed[2 * k + 1];
                let b = pair * ln_k[k].exp() / (1.0 + ln_k[k].exp());
                let got = amounts[c * s + 2 * k + 1];
                assert!(
                    ((got - b) / b).abs() < 1e-9,
                    "case {c} reaction {k}: {got} vs {b}"
                );
            }
        }
    }

    #[test]
    fn lanes_take_a_warm_start() {
        check(lane_kernel_for(2, 6).unwrap(), true);
    }

    #[test]
    fn a_lane_result_does_not_depend_on_its_neighbours() {
        // Every case alone (fewer than NARROW_BELOW cases: the one-lane
        // instance) and among all the others (vector lanes, streaming
        // refill): the same bits, status and iteration count.
        let sys = reforming();
        let options = SolveOptions::default();
        let data = cases();
        let faces = faces_of(&sys, &data);
        let solve = |rows: &[usize]| {
            let list: Vec<LaneCase> = rows
                .iter()
                .enumerate()
                .map(|(row, &k)| LaneCase {
                    row,
                    start: None,
                    feed: &data[k].0,
                    ln_k: &data[k].1,
                    pressure: data[k].2,
                    face: &faces[k],
                })
                .collect();
            let mut amounts = vec![0.0; 6 * rows.len()];
            let mut extents = vec![0.0; 2 * rows.len()];
            let mut out = vec![(Status::InvalidInput, 0); rows.len()];
            let kernel = lane_kernel_for(2, 6).unwrap();
            kernel(&sys, &list, &options, &mut amounts, &mut extents, &mut out);
            (amounts, extents, out)
        };
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        // Shuffled, so that each case has other neighbours than in order.
        let order: Vec<usize> = (0..data.len()).map(|k| (k * 7 + 3) % data.len()).collect();
        assert!(order.len() >= 2 * NARROW_BELOW && order.len() > 2 * LANES);
        let (amounts, extents, out) = solve(&order);
        for (at, &k) in order.iter().enumerate() {
            let (a1, e1, o1) = solve(&[k]);
            assert_eq!(bits(&a1), bits(&amounts[at * 6..at * 6 + 6]), "case {k}");
            assert_eq!(bits(&e1), bits(&extents[at * 2..at * 2 + 2]), "case {k}");
            assert_eq!(o1[0], out[at], "case {k}");
        }
    }
}
