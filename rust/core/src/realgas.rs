//! Batches with a non-ideal gas or liquid: the equilibrium conditions
//! `sum_i nu_ji (ln y_i + ln phi_i + ln P/P0) = ln K_j` (gas; `ln x_i +
//! ln gamma_i` in a solution), with `phi` from a cubic equation of state
//! ([`crate::eos`]) and `gamma` from an activity model ([`crate::activity`])
//! at each case's composition, temperature and pressure. Below, `phi`
//! stands for both.
//!
//! Successive substitution on `phi`: with `phi` fixed the conditions are
//! those of an ideal gas with `ln K_j - sum_i nu_ji ln phi_i`, which the
//! batch solver answers exactly (convex, with its honest status); `phi` is
//! then evaluated at that answer and the case solved again from its
//! previous extents, until the shift of every reaction's `ln K` changes by
//! at most `tol`. The first pass is the ideal solution. Only the cases not
//! settled take part in the next pass. A case whose status is not
//! converged after a pass keeps that status; one where the equation has no
//! vapour-like root at its composition gets [`Status::NoVapourRoot`]; one
//! not settled after [`MAX_PASSES`] passes gets
//! [`Status::IterationLimit`].
//!
//! Why successive substitution rather than a Newton iteration on the full
//! Jacobian: at the pressures of ammonia and methanol converters `phi`
//! depends weakly on composition (each pass shrinks the error by a factor
//! of ten to a hundred), every pass is a convex problem the batch path
//! solves on the vector lanes, and a pass can never leave the feasible
//! region; a full Newton iteration would need the derivatives of `ln phi`
//! in every step and loses the convexity its safeguards rely on.

use rayon::prelude::*;

use crate::activity::{ActivityKind, Solution};
use crate::batch::{on_threads, solve_batch, BatchInputs, BatchOutputs, Rows};
use crate::eos::{Cubic, LnPhiError};
use crate::error::CoreError;
use crate::solver::SolveOptions;
use crate::status::Status;
use crate::system::System;

/// Most passes of successive substitution.
pub const MAX_PASSES: u32 = 100;

/// Most reactions of a system with a non-ideal phase (the per-case work
/// arrays live on the stack).
const MAX_R: usize = 64;

/// Largest multiple of the step the extrapolation adds (`rho / (1 - rho)`
/// at `rho = 0.9`).
const MAX_EXTRAPOLATION: f64 = 9.0;

/// What makes a system's phases non-ideal: the gas's equation of state
/// and the solutions' activity models (either may be absent).
#[derive(Clone, Copy)]
pub struct NonIdeal<'a> {
    pub eos: Option<&'a Cubic>,
    pub solutions: &'a [Solution],
}

impl NonIdeal<'_> {
    /// `ln phi` (gas) and `ln gamma` (modelled solutions) of amounts `a`
    /// at `t`, `p` into `coef` (entries of other species untouched; zero
    /// for the species of an empty phase). `gas` lists the gas species;
    /// `scratch` holds `4 S` values.
    fn evaluate(
        &self,
        gas: &[usize],
        a: &[f64],
        t: f64,
        p: f64,
        scratch: &mut [f64],
        coef: &mut [f64],
    ) -> Result<(), LnPhiError> {
        if let Some(eos) = self.eos {
            phase_values(gas, a, scratch, coef, |x, out, work| {
                eos.ln_phi(gas, x, t, p, out, work)
            })?;
        }
        for solution in self.solutions {
            phase_values(&solution.species, a, scratch, coef, |x, out, work| {
                solution.ln_gamma(x, t, out, work);
                Ok(())
            })?;
        }
        Ok(())
    }
}

/// The species of the gas (phase 0), in order.
fn gas_species(system: &System) -> Vec<usize> {
    (0..system.n_species())
        .filter(|&i| !system.is_pure(i) && system.phase_index(i) == 0)
        .collect()
}

/// Whether `t` is a temperature (K) the models can take.
fn usable_temperature(t: f64) -> bool {
    t > 0.0 && t.is_finite()
}

/// `model`'s values for the `members` of one phase at amounts `a` (mole
/// fractions in, one value per member out) into `coef`; zeros for an empty
/// phase.
fn phase_values(
    members: &[usize],
    a: &[f64],
    scratch: &mut [f64],
    coef: &mut [f64],
    model: impl FnOnce(&[f64], &mut [f64], &mut [f64]) -> Result<(), LnPhiError>,
) -> Result<(), LnPhiError> {
    let g = members.len();
    let total: f64 = members.iter().map(|&i| a[i]).sum();
    if g == 0 || total.is_nan() || total <= 0.0 {
        for &i in members {
            coef[i] = 0.0;
        }
        return Ok(());
    }
    let (x, rest) = scratch.split_at_mut(g);
    let (out, work) = rest.split_at_mut(g);
    for (xk, &i) in x.iter_mut().zip(members) {
        *xk = a[i] / total;
    }
    model(x, out, work)?;
    for (&v, &i) in out.iter().zip(members) {
        coef[i] = v;
    }
    Ok(())
}

/// Move `shift` (`s`) to the next pass's: `F(s)` (`mapped`), plus, where the
/// ratio of this step to the last (`last`, updated here) along it, `rho`,
/// is below 0.9 in size, `rho / (1 - rho)` times this step (the limit of a
/// linear convergence at that rate, monotone or alternating: Aitken's
/// extrapolation along the steps). Only the stopping test, `|F(s) - s| <= tol`, decides
/// convergence; the extrapolation only saves passes.
fn next_shift(shift: &mut [f64], last: &mut [f64], mapped: &[f64], has_last: bool) {
    let r = shift.len();
    let (mut dot, mut norm) = (0.0, 0.0);
    for j in 0..r {
        let step = mapped[j] - shift[j];
        dot += step * last[j];
        norm += last[j] * last[j];
    }
    let rho = if has_last && norm > 0.0 {
        dot / norm
    } else {
        0.0
    };
    let factor = if rho.abs() < 0.9 {
        (rho / (1.0 - rho)).min(MAX_EXTRAPOLATION)
    } else {
        0.0
    };
    for j in 0..r {
        let step = mapped[j] - shift[j];
        last[j] = step;
        shift[j] = mapped[j] + factor * step;
    }
}

/// Solve every case with the non-ideal phases of `model`. `temperature`
/// (K) has one value or one per case. `ln_phi` (`n_cases x S`) receives
/// each species' `ln phi` or `ln gamma` at the answer (0 for species of
/// ideal phases, NaN where the case has no answer). `outputs.iterations`
/// counts the Newton iterations of every pass.
#[allow(clippy::too_many_arguments)]
pub fn solve_batch_real(
    system: &System,
    model: NonIdeal,
    inputs: &BatchInputs,
    temperature: &[f64],
    outputs: &mut BatchOutputs,
    ln_phi: &mut [f64],
    options: &SolveOptions,
    threads: Option<usize>,
) -> Result<(), CoreError> {
    let (n, s, r) = (inputs.n_cases, system.n_species(), system.n_reactions());
    let layout = (
        Rows::check("feed", inputs.feed.len(), s, n)?,
        Rows::check("ln_k", inputs.ln_k.len(), r, n)?,
        Rows::check("pressure", inputs.pressure.len(), 1, n)?,
        Rows::check("temperature", temperature.len(), 1, n)?,
    );
    let (feed_of, ln_k_of) = (
        |c| layout.0.row(inputs.feed, c),
        |c| layout.1.row(inputs.ln_k, c),
    );
    let pressure_of = |c| layout.2.row(inputs.pressure, c)[0];
    let temperature_of = |c| layout.3.row(temperature, c)[0];
    let start_of = match inputs.start {
        Some(x0) => Some((Rows::check("start", x0.len(), r, n)?, x0)),
        None => None,
    };
    if let Some(eos) = model.eos {
        for (name, values) in [("tc", &eos.tc), ("pc", &eos.pc), ("omega", &eos.omega)] {
            if values.len() != s {
                return Err(CoreError::Shape(format!(
                    "{name} needs one value per species"
                )));
            }
        }
        if eos.kij.len() != s * s {
            return Err(CoreError::Shape("kij needs S x S values".into()));
        }
    }
    for solution in model.solutions {
        let k = solution.species.len();
        let fits = solution
            .species
            .iter()
            .all(|&i| i < s && !system.is_pure(i))
            && [&solution.a, &solution.b, &solution.alpha]
                .iter()
                .all(|m| m.len() == k * k)
            && (solution.kind != ActivityKind::Uniquac
                || (solution.r.len() == k
                    && solution.q.len() == k
                    && solution.r.iter().chain(&solution.q).all(|v| *v > 0.0)));
        if !fits {
            return Err(CoreError::Shape(
                "a solution model needs its species, k x k a, b and alpha, and (UNIQUAC) positive r and q".into(),
            ));
        }
    }
    if ln_phi.len() != n * s {
        return Err(CoreError::Shape("ln_phi needs N x S values".into()));
    }
    let gas = gas_species(system);
    let nu = system.stoich();
    ln_phi.fill(0.0);
    outputs.iterations.fill(0);
    // The cases still iterating, and each one's ln K shift.
    let mut active: Vec<usize> = (0..n).collect();
    let mut shift = vec![0.0; n * r];
    // Each case's last step F(s) - s, for the extrapolation.
    let mut last_step = vec![0.0; n * r];
    if r > MAX_R {
        return Err(CoreError::Shape(format!(
            "a non-ideal system takes at most {MAX_R} reactions"
        )));
    }
    // The first pass takes phi at the feed's composition (nearer the
    // answer's than the ideal phi = 1; none where the feed's gas has no
    // vapour-like root).
    let first = || {
        shift.par_chunks_mut(r).enumerate().for_each_init(
            || (vec![0.0; 4 * s], vec![0.0; s]),
            |(scratch, phi), (case, shift_k)| {
                let (feed, t, p) = (feed_of(case), temperature_of(case), pressure_of(case));
                let usable = usable_temperature(t)
                    && p > 0.0
                    && p.is_finite()
                    && feed.iter().all(|&v| v >= 0.0 && v.is_finite());
                if usable && model.evaluate(&gas, feed, t, p, scratch, phi).is_ok() {
                    for j in 0..r {
                        shift_k[j] = (0..s).map(|i| nu[j * s + i] * phi[i]).sum();
                    }
                }
            },
        );
    };
    on_threads(threads, first)?;
    let (mut feed_buf, mut ln_k_buf, mut start_buf) =
        (vec![0.0; n * s], vec![0.0; n * r], vec![0.0; n * r]);
    let mut pressure_buf = vec![0.0; n];
    let (mut amounts_buf, mut extents_buf) = (vec![0.0; n * s], vec![0.0; n * r]);
    let (mut status_buf, mut iterations_buf, mut absent_buf) =
        (vec![0u8; n], vec![0u32; n], vec![0u64; n]);
    let (mut fresh_buf, mut moved_buf) = (vec![0.0; n * s], vec![0.0; n]);
    for pass in 0..MAX_PASSES {
        let m = active.len();
        if m == 0 {
            break;
        }
        // (the pass's arrays: the first m rows of buffers made once)
        let feed = &mut feed_buf[..m * s];
        let ln_k = &mut ln_k_buf[..m * r];
        let pressure = &mut pressure_buf[..m];
        let start = &mut start_buf[..m * r];
        for (k, &case) in active.iter().enumerate() {
            feed[k * s..(k + 1) * s].copy_from_slice(feed_of(case));
            // (a temperature that is no temperature makes the case invalid
            // input, as a bad ln K does)
            let valid = usable_temperature(temperature_of(case));
            for (j, &given) in ln_k_of(case).iter().enumerate() {
                ln_k[k * r + j] = if valid {
                    given - shift[case * r + j]
                } else {
                    f64::NAN
                };
            }
            pressure[k] = pressure_of(case);
            let from: &[f64] = if pass == 0 {
                match start_of {
                    Some((rows, x0)) => rows.row(x0, case),
                    None => &[],
                }
            } else {
                &outputs.extents[case * r..(case + 1) * r]
            };
            if from.len() == r {
                start[k * r..(k + 1) * r].copy_from_slice(from);
            } else {
                start[k * r..(k + 1) * r].fill(f64::NAN); // no start: the default one
            }
        }
        let (amounts, extents) = (&mut amounts_buf[..m * s], &mut extents_buf[..m * r]);
        let (status, iterations, absent) = (
            &mut status_buf[..m],
            &mut iterations_buf[..m],
            &mut absent_buf[..m],
        );
        let sub = BatchInputs {
            n_cases: m,
            feed,
            ln_k,
            pressure,
            start: Some(start),
        };
        let mut out = BatchOutputs {
            amounts,
            extents,
            mole_fractions: None,
            status,
            iterations,
            absent: Some(absent),
        };
        solve_batch(system, &sub, &mut out, options, threads)?;
        let (amounts, extents, status, iterations) =
            (&*out.amounts, &*out.extents, &*out.status, &*out.iterations);
        let absent = out.absent.as_deref().unwrap_or(&[]);
        let pressure = &*pressure;
        // ln phi at each answer, and how far each reaction's shift moves.
        let fresh = &mut fresh_buf[..m * s];
        let moved = &mut moved_buf[..m];
        let evaluate = || {
            fresh
                .par_chunks_mut(s)
                .zip(moved.par_iter_mut())
                .enumerate()
                .for_each_init(
                    || vec![0.0; 4 * s],
                    |scratch, (k, (phi_k, moved_k))| {
                        let case = active[k];
                        let converged =
                            Status::from_code(status[k]).is_some_and(|st| st.is_converged());
                        if !converged {
                            *moved_k = f64::NAN;
                            return;
                        }
                        let a = &amounts[k * s..(k + 1) * s];
                        if model
                            .evaluate(&gas, a, temperature_of(case), pressure[k], scratch, phi_k)
                            .is_err()
                        {
                            *moved_k = f64::INFINITY;
                            return;
                        }
                        let mut worst = 0.0_f64;
                        for j in 0..r {
                            let new: f64 = (0..s).map(|i| nu[j * s + i] * phi_k[i]).sum();
                            worst = worst.max((new - shift[case * r + j]).abs());
                        }
                        *moved_k = worst;
                    },
                );
        };
        on_threads(threads, evaluate)?;
        let mut still = Vec::with_capacity(m);
        for (k, &case) in active.iter().enumerate() {
            outputs.amounts[case * s..(case + 1) * s].copy_from_slice(&amounts[k * s..(k + 1) * s]);
            outputs.extents[case * r..(case + 1) * r].copy_from_slice(&extents[k * r..(k + 1) * r]);
            outputs.status[case] = status[k];
            outputs.iterations[case] += iterations[k];
            if let Some(mask) = outputs.absent.as_deref_mut() {
                mask[case] = absent[k];
            }
            let phi_k = &fresh[k * s..(k + 1) * s];
            if moved[k].is_nan() {
                ln_phi[case * s..(case + 1) * s].fill(f64::NAN);
                continue;
            }
            if moved[k] == f64::INFINITY {
                outputs.status[case] = Status::NoVapourRoot as u8;
                ln_phi[case * s..(case + 1) * s].fill(f64::NAN);
                continue;
            }
            ln_phi[case * s..(case + 1) * s].copy_from_slice(phi_k);
            if moved[k] <= options.tol {
                continue;
            }
            // The next shift: F(s) = the shift phi gives at this answer,
            // extrapolated along the last two passes' differences where they
            // shrink at a steady rate (see [`next_shift`]).
            let mut mapped = [0.0; MAX_R];
            for j in 0..r {
                mapped[j] = (0..s).map(|i| nu[j * s + i] * phi_k[i]).sum();
            }
            let (current, previous) = (
                &mut shift[case * r..(case + 1) * r],
                &mut last_step[case * r..(case + 1) * r],
            );
            next_shift(current, previous, &mapped[..r], pass > 0);
            still.push(case);
        }
        active = still;
    }
    for &case in &active {
        outputs.status[case] = Status::IterationLimit as u8;
    }
    if let Some(fractions) = outputs.mole_fractions.as_deref_mut() {
        for case in 0..n {
            crate::batch::mole_fractions(
                system,
                &outputs.amounts[case * s..(case + 1) * s],
                &mut fractions[case * s..(case + 1) * s],
            );
        }
    }
    Ok(())
}

/// `ln phi` / `ln gamma` of every species of `amounts` (`N x S`) at each
/// row's temperature and pressure (one value or one per row), into `out`
/// (`N x S`; zero for species of ideal phases, NaN for a row whose gas has
/// no vapour-like root or whose amounts are not finite).
pub fn ln_coefficients(
    system: &System,
    model: NonIdeal,
    amounts: &[f64],
    temperature: &[f64],
    pressure: &[f64],
    out: &mut [f64],
    threads: Option<usize>,
) -> Result<(), CoreError> {
    let s = system.n_species();
    let n = amounts.len() / s.max(1);
    if amounts.len() != n * s || out.len() != n * s {
        return Err(CoreError::Shape("amounts and out need N x S values".into()));
    }
    let t_rows = Rows::check("temperature", temperature.len(), 1, n)?;
    let p_rows = Rows::check("pressure", pressure.len(), 1, n)?;
    let gas = gas_species(system);
    let work = || {
        out.par_chunks_mut(s).enumerate().for_each_init(
            || vec![0.0; 4 * s],
            |scratch, (k, row)| {
                row.fill(0.0);
                let a = &amounts[k * s..(k + 1) * s];
                let ok = a.iter().all(|v| v.is_finite())
                    && model
                        .evaluate(
                            &gas,
                            a,
                            t_rows.row(temperature, k)[0],
                            p_rows.row(pressure, k)[0],
                            scratch,
                            row,
                        )
                        .is_ok();
                if !ok {
                    row.fill(f64::NAN);
                }
            },
        );
    };
    on_threads(threads, work)
}

/// The compressibility factor of the gas of each row of `amounts` (`N x
/// S`) at its temperature and pressure (one value or one per row), into
/// `out` (`N`; NaN where the gas is empty or has no vapour-like root).
pub fn compressibility(
    system: &System,
    eos: &Cubic,
    amounts: &[f64],
    temperature: &[f64],
    pressure: &[f64],
    out: &mut [f64],
    threads: Option<usize>,
) -> Result<(), CoreError> {
    let s = system.n_species();
    let n = out.len();
    if amounts.len() != n * s {
        return Err(CoreError::Shape("amounts need N x S values".into()));
    }
    let t_rows = Rows::check("temperature", temperature.len(), 1, n)?;
    let p_rows = Rows::check("pressure", pressure.len(), 1, n)?;
    let gas = gas_species(system);
    let work = || {
        out.par_iter_mut().enumerate().for_each_init(
            || vec![0.0; 3 * s],
            |scratch, (k, z)| {
                let a = &amounts[k * s..(k + 1) * s];
                let total: f64 = gas.iter().map(|&i| a[i]).sum();
                *z = f64::NAN;
                if !(total > 0.0 && total.is_finite()) {
                    return;
                }
                let (y, work) = scratch.split_at_mut(gas.len());
                for (yk, &i) in y.iter_mut().zip(&gas) {
                    *yk = a[i] / total;
                }
                let (t, p) = (t_rows.row(temperature, k)[0], p_rows.row(pressure, k)[0]);
                if let Ok(value) = eos.compressibility(&gas, y, t, p, work) {
                    *z = value;
                }
            },
        );
    };
    on_threads(threads, work)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::eos::CubicKind;
    use crate::system::Phase;

    #[test]
    fn a_case_without_a_temperature_is_invalid_input_not_converged() {
        // N2 + 3 H2 = 2 NH3 with Peng-Robinson; the second case's T is NaN
        let sys = System::new(vec![-1.0, -3.0, 2.0], 1, 3, vec![Phase::Gas; 3], 1.0).unwrap();
        let eos = Cubic::new(
            CubicKind::PengRobinson,
            vec![126.2, 33.19, 405.4],
            vec![33.98, 13.13, 113.53],
            vec![0.0372, -0.216, 0.256],
            vec![0.0; 9],
        );
        let model = NonIdeal {
            eos: Some(&eos),
            solutions: &[],
        };
        let inputs = BatchInputs {
            n_cases: 2,
            feed: &[1.0, 3.0, 0.0],
            ln_k: &[-10.0],
            pressure: &[200.0],
            start: None,
        };
        let (mut amounts, mut extents) = (vec![0.0; 6], vec![0.0; 2]);
        let (mut status, mut iterations, mut ln_phi) = (vec![0u8; 2], vec![0u32; 2], vec![0.0; 6]);
        let mut outputs = BatchOutputs {
            amounts: &mut amounts,
            extents: &mut extents,
            mole_fractions: None,
            status: &mut status,
            iterations: &mut iterations,
            absent: None,
        };
        let options = SolveOptions::default();
        solve_batch_real(
            &sys,
            model,
            &inputs,
            &[700.0, f64::NAN],
            &mut outputs,
            &mut ln_phi,
            &options,
            Some(1),
        )
        .unwrap();
        assert_eq!(
            status,
            vec![Status::Converged as u8, Status::InvalidInput as u8]
        );
        assert!(ln_phi[3..].iter().all(|v| v.is_nan()));
        assert!(ln_phi[..3].iter().all(|v| v.is_finite() && *v != 0.0));
    }
}
