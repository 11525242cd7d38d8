//! Exact derivatives of the equilibrium amounts, from the converged Newton
//! system (implicit function theorem, no finite differences).
//!
//! At equilibrium the basis residuals vanish, `F(xi; ln K, ln P, n0) = 0`, so
//! `H dxi = -dF/dtheta dtheta` with `H` the Hessian of the Gibbs function in
//! the extents. The system is written in the per-case stoichiometric basis of
//! the most abundant species ([`crate::basis`]) and solved with the same
//! scale-invariant factorisation as the Newton step, so the derivative of a
//! trace species keeps full relative precision (it is its own extent). Species
//! the feed cannot form are exactly zero and have zero derivatives; a feed
//! derivative with respect to such a species holds the zero pattern fixed
//! (the added amount only dilutes its phase).

use rayon::prelude::*;

use crate::basis::{choose_basis, sort_by_amount};
use crate::batch::{faces_for, on_threads, BatchInputs, FaceCursor, Rows, TINY_FEED};
use crate::error::CoreError;
use crate::face::{analyse_with, Face};
use crate::linalg::particular_solution;
use crate::linalg::solve_spd;
use crate::newton::{hessian, PhaseTerm};
use crate::status::Status;
use crate::system::{System, MAX_MIXTURES};

/// Derivative outputs, all `n_cases` rows, row-major.
#[derive(Debug)]
pub struct SensitivityOutputs<'a> {
    /// `d n_i / d ln K_k`: `n_cases x S x R`.
    pub d_ln_k: &'a mut [f64],
    /// `d n_i / d ln P`: `n_cases x S`.
    pub d_ln_p: &'a mut [f64],
    /// `d n_i / d n0_k`: `n_cases x S x S`, or empty to skip the feed
    /// derivatives (an adiabatic solve's temperature iterations need only
    /// `d n / d ln K`).
    pub d_feed: &'a mut [f64],
}

const CHUNK: usize = 64;

/// Derivatives of every converged case (an [`Status::Underflow`] case
/// included: a species held at the float floor has derivatives of its own
/// size, zero in float64); other cases get NaN. `absent` is the solve's
/// per-case mask of phases found absent ([`crate::presence`]): those
/// phases stay absent under small changes, and a fed species of one moves
/// onto the present species where the reactions can take it.
#[allow(clippy::too_many_arguments)]
pub fn sensitivities_batch(
    system: &System,
    inputs: &BatchInputs,
    amounts: &[f64],
    status: &[u8],
    absent: Option<&[u64]>,
    out: &mut SensitivityOutputs,
    threads: Option<usize>,
) -> Result<(), CoreError> {
    let n = inputs.n_cases;
    let (s, r) = (system.n_species(), system.n_reactions());
    let feed_rows = Rows::check("feed", inputs.feed.len(), s, n)?;
    Rows::check("pressure", inputs.pressure.len(), 1, n)?;
    let with_feed = !out.d_feed.is_empty();
    if amounts.len() != n * s
        || status.len() != n
        || absent.is_some_and(|a| a.len() != n)
        || out.d_ln_k.len() != n * s * r
        || out.d_ln_p.len() != n * s
        || (with_feed && out.d_feed.len() != n * s * s)
    {
        return Err(CoreError::Shape(
            "sensitivity arrays do not match the batch".into(),
        ));
    }
    if n == 0 {
        return Ok(());
    }
    // One chunk runs on the calling thread: handing it to the pool and
    // waiting costs more than the derivatives of a few cases.
    let serial = n <= CHUNK;
    let mut table = None;
    if serial {
        table = Some(faces_for(system, inputs, feed_rows, false));
    } else {
        on_threads(threads, || {
            table = Some(faces_for(system, inputs, feed_rows, true))
        })?;
    }
    let faces = table.unwrap_or_default();
    let work =
        |chunk: usize, dk: &mut [f64], dp: &mut [f64], df: &mut [f64], scratch: &mut Scratch| {
            let mut cursor = FaceCursor::new(s);
            let cases = dp.len() / s;
            for local in 0..cases {
                let case = chunk * CHUNK + local;
                let dk = &mut dk[local * s * r..(local + 1) * s * r];
                let dp = &mut dp[local * s..(local + 1) * s];
                let df = if with_feed {
                    &mut df[local * s * s..(local + 1) * s * s]
                } else {
                    &mut df[..0]
                };
                let feed = feed_rows.row(inputs.feed, case);
                let n_case = &amounts[case * s..(case + 1) * s];
                let converged = status[case] == Status::Converged as u8
                    || status[case] == Status::Underflow as u8;
                let mask = absent.map_or(0, |a| a[case]);
                let ok = converged
                    && if mask != 0 {
                        // The face of the equilibrium with the phase held absent.
                        let held: Vec<bool> = (0..s)
                            .map(|i| mask >> system.phase_index(i) & 1 != 0)
                            .collect();
                        let zero: Vec<bool> = n_case.iter().map(|&v| v <= 0.0).collect();
                        match analyse_with(system, &zero, &held) {
                            Ok(face) => case_sensitivities(
                                system,
                                &face,
                                Some(&held),
                                n_case,
                                scratch,
                                dk,
                                dp,
                                df,
                            ),
                            Err(_) => false,
                        }
                    } else {
                        match cursor.face(&faces, feed) {
                            Some(Ok(face)) => {
                                case_sensitivities(system, face, None, n_case, scratch, dk, dp, df)
                            }
                            _ => false,
                        }
                    };
                if !ok {
                    dk.fill(f64::NAN);
                    dp.fill(f64::NAN);
                    df.fill(f64::NAN);
                }
            }
        };
    let run = |out: &mut SensitivityOutputs| {
        if with_feed {
            out.d_ln_k
                .par_chunks_mut(CHUNK * s * r)
                .zip(out.d_ln_p.par_chunks_mut(CHUNK * s))
                .zip(out.d_feed.par_chunks_mut(CHUNK * s * s))
                .enumerate()
                .for_each(|(chunk, ((dk, dp), df))| {
                    work(chunk, dk, dp, df, &mut Scratch::new(s, r))
                });
        } else {
            out.d_ln_k
                .par_chunks_mut(CHUNK * s * r)
                .zip(out.d_ln_p.par_chunks_mut(CHUNK * s))
                .enumerate()
                .for_each(|(chunk, (dk, dp))| {
                    work(chunk, dk, dp, &mut [], &mut Scratch::new(s, r))
                });
        }
    };
    if serial {
        // (an optimiser's one-case calls reuse this thread's working memory:
        // a dozen allocations are a tenth of such a call)
        SERIAL_SCRATCH.with(|cell| {
            let mut kept = cell.borrow_mut();
            let scratch = match kept.as_mut() {
                Some((ks, kr, scratch)) if (*ks, *kr) == (s, r) => scratch,
                _ => &mut kept.insert((s, r, Scratch::new(s, r))).2,
            };
            work(
                0,
                &mut out.d_ln_k[..],
                &mut out.d_ln_p[..],
                &mut out.d_feed[..],
                scratch,
            );
        });
        return Ok(());
    }
    on_threads(threads, || run(out))
}

thread_local! {
    /// The last serial call's working memory on this thread, with its sizes.
    static SERIAL_SCRATCH: std::cell::RefCell<Option<(usize, usize, Scratch)>> =
        const { std::cell::RefCell::new(None) };
}

struct Scratch {
    order: Vec<usize>,
    pivot_of: Vec<usize>,
    pivots: Vec<usize>,
    basis_stoich: Vec<f64>,
    transform: Vec<f64>,
    hessian: Vec<f64>,
    work: Vec<f64>,
    rhs: Vec<f64>,
    scale: Vec<f64>,
    /// Per mixture phase `k` and basis reaction `j` (at `k * r + j`): the
    /// reaction's change of the phase's moles.
    phase_change: Vec<f64>,
    /// The feed change of one species, moved onto present species.
    moved: Vec<f64>,
    /// `1 / n` of every species (0 where it is absent).
    weight: Vec<f64>,
}

impl Scratch {
    fn new(s: usize, r: usize) -> Self {
        Scratch {
            order: (0..s).collect(),
            pivot_of: vec![usize::MAX; s],
            pivots: vec![0; r],
            basis_stoich: vec![0.0; r * s],
            transform: vec![0.0; r * r],
            hessian: vec![0.0; r * r],
            work: vec![0.0; r * r],
            rhs: vec![0.0; r],
            scale: vec![0.0; r],
            phase_change: vec![0.0; MAX_MIXTURES * r],
            moved: vec![0.0; s],
            weight: vec![0.0; s],
        }
    }
}

/// Derivatives of one converged case. Returns `false` if the Newton system
/// is singular.
#[allow(clippy::too_many_arguments)]
fn case_sensitivities(
    system: &System,
    face: &Face,
    absent: Option<&[bool]>,
    amounts: &[f64],
    sc: &mut Scratch,
    d_ln_k: &mut [f64],
    d_ln_p: &mut [f64],
    d_feed: &mut [f64],
) -> bool {
    let (s, r, dim) = (system.n_species(), system.n_reactions(), face.dim);
    let n_mix = system.n_mixtures();
    // The mixture phase of species `i`, `None` for a pure species (activity
    // 1 whatever its amount: no term of its own).
    let mixture = |i: usize| Some(system.phase_index(i)).filter(|&k| k < n_mix);
    let with_feed = !d_feed.is_empty();
    d_ln_k.fill(0.0);
    d_ln_p.fill(0.0);
    d_feed.fill(0.0);
    for k in 0..s * usize::from(with_feed) {
        d_feed[k * s + k] = 1.0;
    }
    if dim == 0 {
        return true;
    }
    for (k, slot) in sc.order.iter_mut().enumerate() {
        *slot = k;
    }
    sort_by_amount(amounts, &mut sc.order);
    if choose_basis(
        &face.stoich,
        dim,
        s,
        &sc.order,
        &mut sc.basis_stoich,
        &mut sc.transform,
        &mut sc.pivots[..dim],
        &mut sc.pivot_of,
    )
    .is_none()
    {
        return false;
    }
    let mut totals = [0.0; MAX_MIXTURES];
    for i in 0..s {
        if let Some(k) = mixture(i) {
            totals[k] += amounts[i];
        }
    }
    for j in 0..dim {
        let nu = &sc.basis_stoich[..dim * s];
        let mut change = [0.0; MAX_MIXTURES];
        for i in 0..s {
            if let Some(k) = mixture(i) {
                change[k] += nu[j * s + i];
            }
        }
        for k in 0..n_mix {
            sc.phase_change[k * r + j] = change[k];
        }
    }
    let inv_total = totals.map(|n| if n > 0.0 { 1.0 / n } else { 0.0 });
    // The Newton system's Hessian (the shared assembly of crate::newton), in
    // this basis over every species; species at zero and pure species carry
    // no weight.
    for i in 0..s {
        sc.weight[i] = if amounts[i] > 0.0 && mixture(i).is_some() {
            1.0 / amounts[i]
        } else {
            0.0
        };
    }
    let phase_change = &sc.phase_change;
    let phase_terms: [PhaseTerm<f64>; MAX_MIXTURES] = std::array::from_fn(|k| PhaseTerm {
        change: &phase_change[k * r..k * r + dim],
        inv_total: inv_total[k],
    });
    hessian(
        &sc.basis_stoich[..dim * s],
        s,
        &sc.weight[..s],
        None,
        &phase_terms[..n_mix],
        dim,
        &mut sc.hessian[..dim * dim],
        dim,
    );
    // Solve H x = rhs and spread x over the species: pivots move by their own
    // extent, components through the stoichiometry.
    let solve_into = |sc: &mut Scratch, column: &mut dyn FnMut(usize, f64)| -> bool {
        sc.work[..dim * dim].copy_from_slice(&sc.hessian[..dim * dim]);
        if !solve_spd(
            &mut sc.work[..dim * dim],
            &mut sc.rhs[..dim],
            &mut sc.scale[..dim],
            dim,
        ) {
            return false;
        }
        for i in 0..s {
            let row = sc.pivot_of[i];
            let v = if row != usize::MAX {
                sc.rhs[row]
            } else {
                (0..dim)
                    .map(|j| sc.basis_stoich[j * s + i] * sc.rhs[j])
                    .sum()
            };
            column(i, v);
        }
        true
    };
    // ln K: dF_b/d ln K_k = -(T W^T)[:, k], so H dxi = (T W^T) e_k.
    for k in 0..r {
        for j in 0..dim {
            sc.rhs[j] = (0..dim)
                .map(|f| sc.transform[j * dim + f] * face.basis[k * dim + f])
                .sum();
        }
        if !solve_into(sc, &mut |i, v| d_ln_k[i * r + k] = v) {
            return false;
        }
    }
    // ln P: dF_b/d ln P = gas change.
    for j in 0..dim {
        sc.rhs[j] = -sc.phase_change[j];
    }
    if !solve_into(sc, &mut |i, v| d_ln_p[i] = v) {
        return false;
    }
    // Feed of species k: the added amount `m` (e_k, or for a species of an
    // absent phase e_k moved onto the present species by the reactions where
    // they can take it) changes the residuals by
    // dF_b = sum_i m_i (nu_b[:, i] / n_i - d_phase(i) / N_phase(i)).
    if !with_feed {
        return true;
    }
    let mut moved = std::mem::take(&mut sc.moved);
    for k in 0..s {
        moved.fill(0.0);
        moved[k] = 1.0;
        if absent.is_some_and(|a| a[k]) && !move_onto_present(system, face, &mut moved) {
            continue; // no reaction takes it: it stays where it is added
        }
        for j in 0..dim {
            let mut v = 0.0;
            for i in 0..s {
                let m = moved[i];
                if m == 0.0 {
                    continue;
                }
                let Some(phase) = mixture(i) else {
                    continue; // a pure species' activity stays 1
                };
                let unreachable = face.unreachable[i] || amounts[i] < TINY_FEED;
                let own = if unreachable {
                    0.0
                } else {
                    sc.basis_stoich[j * s + i] / amounts[i]
                };
                let dilution = sc.phase_change[phase * r + j] * inv_total[phase];
                v += m * (own - dilution);
            }
            sc.rhs[j] = -v;
        }
        for i in 0..s {
            d_feed[i * s + k] = moved[i];
        }
        if !solve_into(sc, &mut |i, v| d_feed[i * s + k] += v) {
            sc.moved = moved;
            return false;
        }
    }
    sc.moved = moved;
    true
}

/// Move one mole of a species of an absent phase onto the species present
/// (`moved` holds `e_k` and receives `e_k + nu^T d` with every species the
/// face holds at zero back at zero), by extents `d` that exist when the
/// reactions can take it; `false` if they cannot.
fn move_onto_present(system: &System, face: &Face, moved: &mut [f64]) -> bool {
    let (s, r) = (system.n_species(), system.n_reactions());
    let nu = system.stoich();
    let held: Vec<usize> = (0..s).filter(|&i| face.unreachable[i]).collect();
    let mut a = vec![0.0; held.len() * r];
    let mut b = vec![0.0; held.len()];
    for (row, &i) in held.iter().enumerate() {
        for j in 0..r {
            a[row * r + j] = nu[j * s + i];
        }
        b[row] = -moved[i];
    }
    let Some(d) = particular_solution(&a, &b, held.len(), r) else {
        return false;
    };
    for i in 0..s {
        for j in 0..r {
            moved[i] += nu[j * s + i] * d[j];
        }
        if face.unreachable[i] || moved[i].abs() < 1e-14 {
            moved[i] = 0.0;
        }
    }
    true
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::batch::{solve_batch, BatchOutputs};
    use crate::fixtures::reforming;
    use crate::solver::SolveOptions;
    use crate::system::Phase;

    /// Amounts of one case, solved tightly (for finite differences).
    fn amounts(system: &System, feed: &[f64], ln_k: &[f64], pressure: f64) -> (Vec<f64>, Vec<u64>) {
        let (s, r) = (system.n_species(), system.n_reactions());
        let (mut n, mut xi, mut st, mut it, mut ab) = (
            vec![0.0; s],
            vec![0.0; r],
            vec![0u8],
            vec![0u32],
            vec![0u64],
        );
        let inputs = BatchInputs {
            n_cases: 1,
            feed,
            ln_k,
            pressure: &[pressure],
            start: None,
        };
        let mut out = BatchOutputs {
            amounts: &mut n,
            extents: &mut xi,
            mole_fractions: None,
            status: &mut st,
            iterations: &mut it,
            absent: Some(&mut ab),
        };
        let options = SolveOptions {
            tol: 1e-14,
            ..SolveOptions::default()
        };
        solve_batch(system, &inputs, &mut out, &options, Some(1)).unwrap();
        assert!(Status::Converged as u8 == st[0] || Status::Underflow as u8 == st[0]);
        (n, ab)
    }

    /// Analytic derivatives of one case against central differences of the
    /// solve itself (an independent computation: no derivative code).
    fn check(system: &System, feed: &[f64], ln_k: &[f64], pressure: f64, rtol: f64) {
        let (s, r) = (system.n_species(), system.n_reactions());
        let (n, absent) = amounts(system, feed, ln_k, pressure);
        let (mut dk, mut dp, mut df) = (vec![0.0; s * r], vec![0.0; s], vec![0.0; s * s]);
        let inputs = BatchInputs {
            n_cases: 1,
            feed,
            ln_k,
            pressure: &[pressure],
            start: None,
        };
        let mut out = SensitivityOutputs {
            d_ln_k: &mut dk,
            d_ln_p: &mut dp,
            d_feed: &mut df,
        };
        let status = [Status::Converged as u8];
        sensitivities_batch(
            system,
            &inputs,
            &n,
            &status,
            Some(&absent),
            &mut out,
            Some(1),
        )
        .unwrap();
        // Finite differences of a solve to 1e-14 relative carry noise of
        // about 1e-9 of each amount: the absolute slack is per species, so a
        // trace species' derivative is still checked against its own size.
        let close = |i: usize, analytic: f64, numeric: f64, what: &str| {
            let slack = 1e-7 * n[i].abs();
            assert!(
                (analytic - numeric).abs() <= rtol * analytic.abs() + slack,
                "{what}, species {i}: analytic {analytic:e}, numeric {numeric:e}"
            );
        };
        let h = 1e-5;
        for k in 0..r {
            let (mut up, mut down) = (ln_k.to_vec(), ln_k.to_vec());
            up[k] += h;
            down[k] -= h;
            let (a, b) = (
                amounts(system, feed, &up, pressure).0,
                amounts(system, feed, &down, pressure).0,
            );
            for i in 0..s {
                close(i, dk[i * r + k], (a[i] - b[i]) / (2.0 * h), "d n / d ln K");
            }
        }
        let (a, b) = (
            amounts(system, feed, ln_k, pressure * h.exp()).0,
            amounts(system, feed, ln_k, pressure * (-h).exp()).0,
        );
        for i in 0..s {
            close(i, dp[i], (a[i] - b[i]) / (2.0 * h), "d n / d ln P");
        }
        for k in 0..s {
            if feed[k] < 10.0 * h {
                continue; // a one-sided change of the zero pattern
            }
            let (mut up, mut down) = (feed.to_vec(), feed.to_vec());
            up[k] += h;
            down[k] -= h;
            let (a, b) = (
                amounts(system, &up, ln_k, pressure).0,
                amounts(system, &down, ln_k, pressure).0,
            );
            for i in 0..s {
                close(i, df[i * s + k], (a[i] - b[i]) / (2.0 * h), "d n / d n0");
            }
        }
        // Without the feed derivatives (an empty d_feed) the others are the
        // same bits, serially and on the pool (more than one chunk).
        let m = 2 * CHUNK + 3;
        let feeds: Vec<f64> = (0..m).flat_map(|_| feed.iter().copied()).collect();
        let ln_ks: Vec<f64> = (0..m).flat_map(|_| ln_k.iter().copied()).collect();
        let amounts_m: Vec<f64> = (0..m).flat_map(|_| n.iter().copied()).collect();
        let inputs = BatchInputs {
            n_cases: m,
            feed: &feeds,
            ln_k: &ln_ks,
            pressure: &vec![pressure; m],
            start: None,
        };
        let (mut dk2, mut dp2) = (vec![0.0; m * s * r], vec![0.0; m * s]);
        let mut out = SensitivityOutputs {
            d_ln_k: &mut dk2,
            d_ln_p: &mut dp2,
            d_feed: &mut [],
        };
        sensitivities_batch(
            system,
            &inputs,
            &amounts_m,
            &vec![Status::Converged as u8; m],
            Some(&vec![absent[0]; m]),
            &mut out,
            Some(2),
        )
        .unwrap();
        for c in [0, CHUNK + 1, m - 1] {
            assert_eq!(&dk2[c * s * r..(c + 1) * s * r], &dk[..]);
            assert_eq!(&dp2[c * s..(c + 1) * s], &dp[..]);
        }
    }

    #[test]
    fn reforming_derivatives_match_finite_differences() {
        // CH4 H2O CO H2 CO2 N2 at 10 bar; every species fed.
        check(
            &reforming(),
            &[1.0, 3.0, 0.1, 0.2, 0.05, 0.3],
            &[2.0, 0.5],
            10.0,
            1e-6,
        );
    }

    #[test]
    fn trace_species_derivatives_keep_relative_precision() {
        // ln K of reforming -40: CO and H2 are traces of 1e-8 and below; their
        // derivatives are of their own size and must still match.
        check(
            &reforming(),
            &[1.0, 3.0, 0.0, 0.0, 0.0, 0.1],
            &[-40.0, 1.0],
            2.0,
            1e-5,
        );
    }

    #[test]
    fn two_phase_derivatives_match_finite_differences() {
        // V = L condensing beside an inert gas with K = 3 (liquid present),
        // and A = B in the gas.
        let nu = vec![-1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, -1.0, 1.0, 0.0];
        let phases = vec![
            Phase::Gas,
            Phase::Solution(0),
            Phase::Gas,
            Phase::Gas,
            Phase::Gas,
        ];
        let sys = System::new(nu, 2, 5, phases, 1.0).unwrap();
        check(
            &sys,
            &[1.0, 0.2, 1.0, 0.5, 0.1],
            &[3.0_f64.ln(), 0.3],
            1.0,
            1e-6,
        );
    }

    #[test]
    fn absent_phase_derivatives_match_finite_differences() {
        // The same with K = 0.2: the liquid L would need y_V = 1/(K P) > 1, so
        // it is absent, and the fed L evaporates (its feed derivative moves it
        // onto V through the reaction).
        let nu = vec![-1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, -1.0, 1.0, 0.0];
        let phases = vec![
            Phase::Gas,
            Phase::Solution(0),
            Phase::Gas,
            Phase::Gas,
            Phase::Gas,
        ];
        let sys = System::new(nu, 2, 5, phases, 1.0).unwrap();
        let (n, absent) = amounts(&sys, &[1.0, 0.2, 1.0, 0.5, 0.1], &[0.2_f64.ln(), 0.3], 1.0);
        assert_eq!(n[1], 0.0);
        assert_eq!(absent[0], crate::presence::phase_bit(1));
        check(
            &sys,
            &[1.0, 0.2, 1.0, 0.5, 0.1],
            &[0.2_f64.ln(), 0.3],
            1.0,
            1e-6,
        );
    }
}
