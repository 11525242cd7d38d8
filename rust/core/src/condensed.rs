//! Batches of systems with pure condensed species: most cases first solved
//! without them, at the speed of the mixtures alone.
//!
//! In the common case a pure species is not fed and does not form (carbon
//! in a reformer run with steam enough). Such a case is the equilibrium of
//! the *reduced* system: the mixtures' species and the combinations of the
//! reactions that leave every pure species untouched ([`Reduced`]), which
//! for an all-gas remainder runs on the vector lanes. A batch solves every
//! case on the reduced system first ([`ReducedRun`]); then a case whose
//! reactive pure species are all unfed, whose reduced solve converged, and
//! whose pure species are each stable absent by the quick test
//! ([`quick_stability`]: the activity one reaction gives it, from present
//! species only, at most one) is done. Every other case takes the full
//! phase-set search ([`crate::presence::decide_phases`]).

use rayon::prelude::*;

use crate::batch::{solve_batch, BatchInputs, BatchOutputs};
use crate::error::CoreError;
use crate::face::analyse_with;
use crate::presence::phase_bit;
use crate::solver::SolveOptions;
use crate::status::Status;
use crate::system::System;

/// `ln(1 + 1e-9)`: the quick test's slack, that of the full stability test.
const LN_STABLE_SLACK: f64 = 1e-9;

/// A system without its pure species: the mixtures' species and the
/// reaction combinations that leave every reactive pure species untouched.
#[derive(Clone, Debug)]
pub struct Reduced {
    pub system: System,
    /// The species kept (those of mixtures), in order.
    pub kept: Vec<usize>,
    /// `R x dim`, row-major: the original extents are `w` times the
    /// reduced ones.
    pub w: Vec<f64>,
    pub dim: usize,
}

/// The reduced system of `system` (see the module docs), or `None` if it
/// has no pure species, no reaction leaves them all untouched, or the
/// remainder is not a valid system.
pub fn reduce(system: &System) -> Option<Reduced> {
    let s = system.n_species();
    let pure: Vec<bool> = (0..s).map(|i| system.is_pure(i)).collect();
    if !(0..s).any(|i| pure[i] && system.is_reactive(i)) {
        return None;
    }
    // The face that holds every pure species at zero: its basis is `w`,
    // its reactions (pure columns zero) the reduced system's.
    let face = analyse_with(system, &pure, &pure).ok()?;
    if face.dim == 0 {
        return None;
    }
    let kept: Vec<usize> = (0..s).filter(|&i| !pure[i]).collect();
    let stoich = (0..face.dim)
        .flat_map(|f| kept.iter().map(move |&i| (f, i)))
        .map(|(f, i)| face.stoich[f * s + i])
        .collect();
    let phases = kept.iter().map(|&i| system.phases()[i]).collect();
    let reduced = System::new(stoich, face.dim, kept.len(), phases, system.p0()).ok()?;
    Some(Reduced {
        system: reduced,
        kept,
        w: face.basis,
        dim: face.dim,
    })
}

/// `fill(row_index, row)` over the rows of `out` (`width` values each), in
/// parallel blocks when `parallel` (each row written by its own call, so
/// the result does not depend on it).
fn fill_rows(
    out: &mut [f64],
    width: usize,
    parallel: bool,
    fill: impl Fn(usize, &mut [f64]) + Sync,
) {
    if width == 0 {
        return;
    }
    if parallel {
        out.par_chunks_mut(width)
            .enumerate()
            .with_min_len(4096)
            .for_each(|(c, row)| fill(c, row));
    } else {
        out.chunks_mut(width)
            .enumerate()
            .for_each(|(c, row)| fill(c, row));
    }
}

/// Every case of a batch solved on the reduced system.
pub(crate) struct ReducedRun<'a> {
    reduced: &'a Reduced,
    amounts: Vec<f64>,
    extents: Vec<f64>,
    status: Vec<u8>,
    iterations: Vec<u32>,
    absent: Vec<u64>,
}

impl<'a> ReducedRun<'a> {
    /// Solve the batch's cases on `reduced` (the feed of the kept species,
    /// `w^T ln K`; no starts: they are extents of the full system). The
    /// inputs' row layouts (one row, or one per case) are checked already.
    pub(crate) fn new(
        reduced: &'a Reduced,
        system: &System,
        inputs: &BatchInputs,
        options: &SolveOptions,
        threads: Option<usize>,
    ) -> Result<Self, CoreError> {
        let (s, r, n) = (system.n_species(), system.n_reactions(), inputs.n_cases);
        let (k, d) = (reduced.kept.len(), reduced.dim);
        // (in parallel on the batch's pool, except for a one-thread batch)
        let parallel = threads != Some(1);
        let mut feed = vec![0.0; (inputs.feed.len() / s) * k];
        fill_rows(&mut feed, k, parallel, |c, row| {
            for (col, &i) in reduced.kept.iter().enumerate() {
                row[col] = inputs.feed[c * s + i];
            }
        });
        let mut ln_k = vec![0.0; (inputs.ln_k.len() / r) * d];
        fill_rows(&mut ln_k, d, parallel, |c, row| {
            for (f, v) in row.iter_mut().enumerate() {
                *v = (0..r)
                    .map(|j| reduced.w[j * d + f] * inputs.ln_k[c * r + j])
                    .sum();
            }
        });
        let mut run = ReducedRun {
            reduced,
            amounts: vec![0.0; n * k],
            extents: vec![0.0; n * d],
            status: vec![0; n],
            iterations: vec![0; n],
            absent: vec![0; n],
        };
        let sub_inputs = BatchInputs {
            n_cases: n,
            feed: &feed,
            ln_k: &ln_k,
            pressure: inputs.pressure,
            start: None,
        };
        let mut outputs = BatchOutputs {
            amounts: &mut run.amounts,
            extents: &mut run.extents,
            mole_fractions: None,
            status: &mut run.status,
            iterations: &mut run.iterations,
            absent: Some(&mut run.absent),
        };
        solve_batch(&reduced.system, &sub_inputs, &mut outputs, options, threads)?;
        Ok(run)
    }

    /// Case `case` as the reduced solve left it, if that is the
    /// equilibrium of the full system (see the module docs): its amounts
    /// and extents are written and the status, iterations and mask of
    /// absent phases returned. Otherwise, where the reduced solve converged
    /// and the quick test found pure phases that would form, their mask
    /// (the full search starts from the reduced equilibrium, whose extents
    /// are then in `extents`, with those phases present).
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn take(
        &self,
        system: &System,
        case: usize,
        feed: &[f64],
        ln_k: &[f64],
        pressure: f64,
        amounts: &mut [f64],
        extents: &mut [f64],
    ) -> Result<(Status, u32, u64), Option<u64>> {
        let status = Status::from_code(self.status[case]).ok_or(None)?;
        if !status.is_converged() {
            return Err(None);
        }
        let s = system.n_species();
        let (k, d) = (self.reduced.kept.len(), self.reduced.dim);
        let mut absent = self.absent[case];
        for i in 0..s {
            if system.is_pure(i) {
                if system.is_reactive(i) && feed[i] != 0.0 {
                    return Err(None);
                }
                amounts[i] = feed[i];
                if feed[i] == 0.0 {
                    absent |= phase_bit(system.phase_index(i));
                }
            }
        }
        for (col, &i) in self.reduced.kept.iter().enumerate() {
            amounts[i] = self.amounts[case * k + col];
        }
        let verdict = quick_stability(system, amounts, ln_k, pressure);
        if verdict.is_some() {
            for (j, e) in extents.iter_mut().enumerate() {
                *e = (0..d)
                    .map(|f| self.reduced.w[j * d + f] * self.extents[case * d + f])
                    .sum();
            }
        }
        match verdict {
            Some(0) => Ok((status, self.iterations[case], absent)),
            Some(forming) => Err(Some(forming)),
            None => Err(None),
        }
    }
}

/// The reactive pure species at zero in `amounts` (a converged equilibrium
/// of the other species) that would form, by one reaction each: one whose
/// other species are all present and not pure-and-absent gives the
/// species' activity, `ln a_k = (ln K_j - sum_i nu_ji ln a_i) / nu_jk` (any
/// such reaction gives the same: the others are at equilibrium), which is
/// at most one for a stable absent species. Returns the mask of their
/// phases (0: every one is stable), or `None` where some such species has
/// no such reaction (the full test decides).
pub(crate) fn quick_stability(
    system: &System,
    amounts: &[f64],
    ln_k: &[f64],
    pressure: f64,
) -> Option<u64> {
    let (s, r) = (system.n_species(), system.n_reactions());
    let nu = system.stoich();
    let ln_p = (pressure / system.p0()).ln();
    let mut totals = [0.0; crate::system::MAX_MIXTURES];
    for i in 0..s {
        if !system.is_pure(i) {
            totals[system.phase_index(i)] += amounts[i];
        }
    }
    let mut ln_totals = [0.0; crate::system::MAX_MIXTURES];
    for k in 0..system.n_mixtures() {
        ln_totals[k] = totals[k].ln();
    }
    let mut forming = 0;
    for k in 0..s {
        if !(system.is_pure(k) && system.is_reactive(k) && amounts[k] == 0.0) {
            continue;
        }
        let mut decided = false;
        for j in 0..r {
            let c = nu[j * s + k];
            if c == 0.0 {
                continue;
            }
            let mut rest = 0.0;
            let mut usable = true;
            for i in (0..s).filter(|&i| i != k && nu[j * s + i] != 0.0) {
                if amounts[i] <= 0.0 {
                    usable = false;
                    break;
                }
                if !system.is_pure(i) {
                    let phase = system.phase_index(i);
                    let mut ln_a = amounts[i].ln() - ln_totals[phase];
                    if phase == 0 {
                        ln_a += ln_p;
                    }
                    rest += nu[j * s + i] * ln_a;
                }
            }
            if !usable {
                continue;
            }
            if (ln_k[j] - rest) / c > LN_STABLE_SLACK {
                forming |= phase_bit(system.phase_index(k));
            }
            decided = true;
            break;
        }
        if !decided {
            return None;
        }
    }
    Some(forming)
}
