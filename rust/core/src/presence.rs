//! Phases that are absent at equilibrium.
//!
//! With a gas and a liquid solution, the minimum of the Gibbs function can
//! lie where one phase holds no material at all: a condensate above its dew
//! point, liquid products that cannot coexist with their gas. The Newton
//! iteration then drives that phase towards zero without meeting the
//! equilibrium conditions, and the case ends stalled or at the iteration
//! limit. For such a case each phase is tried absent in turn:
//!
//! 1. its species' feed is moved onto the others by the reactions (a linear
//!    programme; impossible if the phase holds something no reaction takes);
//! 2. the reactions are restricted to the face that keeps the phase's
//!    species at zero ([`crate::face::analyse_with`]) and the case is solved
//!    there with the caller's tolerance and iteration limit (each attempt
//!    gets `max_iter`);
//! 3. the absent phase is accepted only if it is stable: no composition of it
//!    that the reactions could form from the present species lowers the
//!    Gibbs function ([`implied_fraction_sum`] at most one), the
//!    tangent-plane condition for an ideal solution (M. L. Michelsen, "The
//!    isothermal flash problem. Part I. Stability", Fluid Phase Equilibria 9,
//!    1982) written in the reactions' terms.
//!
//! Otherwise the first status stands: a case is never called converged with
//! an absent phase that would form.

use crate::face::{analyse_with, Face};
use crate::linalg::{null_space, particular_solution, solve_spd_scaled};
use crate::lp::{maximize, LpOutcome};
use crate::solver::{solve_case, Case, SolveOptions, Workspace};
use crate::status::Status;
use crate::system::{Phase, System};

/// Feed entries below this (relative to the feed's total) are zero after a
/// shift by the linear programme (its own round-off).
const SHIFT_ROUND_OFF: f64 = 1e-13;
/// Slack of the stability test (sum of implied mole fractions).
const STABLE_SLACK: f64 = 1e-9;

/// Phases tried absent, in this order: a condensate that should not form is
/// the common case, a gas that should vanish the rarer one.
const ORDER: [Phase; 2] = [Phase::Liquid, Phase::Gas];

/// A case solved again after its first attempt stalled.
pub struct Repair {
    pub status: Status,
    /// Newton iterations of the second solve.
    pub iterations: u32,
    /// The phase found absent and stable; `None` where the phase turned out
    /// to belong at equilibrium and the case was solved with it formed.
    pub absent: Option<Phase>,
}

/// Bit of `phase` in the per-case mask of absent phases.
pub fn phase_bit(phase: Phase) -> u8 {
    1 << phase.index()
}

/// Whether a case that ended `status` on `system` is worth retrying with a
/// phase absent (a system with more than one phase, a case that stalled or
/// ran out of iterations).
pub fn worth_retrying(system: &System, status: Status) -> bool {
    matches!(status, Status::Stalled | Status::IterationLimit)
        && system.phases().iter().any(|&p| p != system.phases()[0])
}

/// Try each phase absent (see the module docs) for `case` (its face and
/// start are those of the first attempt, not used here); on success the
/// amounts and extents are written and the outcome returned, otherwise the
/// outputs are left as they were.
pub fn solve_with_a_phase_absent(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    ws: &mut Workspace,
    amounts: &mut [f64],
    extents: &mut [f64],
) -> Option<Repair> {
    let Case {
        feed,
        ln_k,
        pressure,
        ..
    } = *case;
    let (s, r) = (system.n_species(), system.n_reactions());
    // The caller's options for this attempt too (`max_iter` bounds each
    // attempt: a case that ran out of iterations because a phase was
    // vanishing slowly must still be able to find it absent).
    let budget = SolveOptions {
        chain: false,
        ..*options
    };
    let mut trial_amounts = vec![0.0; s];
    let mut trial_extents = vec![0.0; r];
    for phase in ORDER {
        let absent: Vec<bool> = system.phases().iter().map(|&p| p == phase).collect();
        if !absent.iter().any(|&a| a) || absent.iter().all(|&a| a) {
            continue;
        }
        let Some((shift, shifted)) = shift_out(system, feed, &absent) else {
            continue;
        };
        let zero: Vec<bool> = shifted.iter().map(|&v| v <= 0.0).collect();
        let Ok(face) = analyse_with(system, &zero, &absent) else {
            continue;
        };
        let (status, iterations) = if face.dim == 0 {
            trial_amounts.copy_from_slice(&shifted);
            trial_extents.fill(0.0);
            (Status::Converged, 0)
        } else {
            let case = Case {
                face: &face,
                feed: &shifted,
                ln_k,
                pressure,
                start: None,
            };
            solve_case(
                system,
                &case,
                &budget,
                ws,
                &mut trial_amounts,
                &mut trial_extents,
            )
        };
        if !status.is_converged() {
            continue;
        }
        for j in 0..r {
            trial_extents[j] += shift[j];
        }
        let implied = implied_phase(system, &face, &trial_amounts, ln_k, pressure, &absent);
        if implied.sum <= 1.0 + STABLE_SLACK {
            amounts.copy_from_slice(&trial_amounts);
            extents.copy_from_slice(&trial_extents);
            return Some(Repair {
                status,
                iterations,
                absent: Some(phase),
            });
        }
        // The phase would form: the first attempt lost it on the way (a whole
        // phase shrinking to the float floor is where Newton's steps on the
        // straight line stall). Start again from the equilibrium without it,
        // plus a little of it in the composition the stability test found
        // most favourable (as flash calculations introduce a new phase).
        if let Some(more) = introduce(
            system,
            case,
            &budget,
            ws,
            &trial_extents,
            &implied,
            (amounts, extents),
        ) {
            return Some(Repair {
                status: more.0,
                iterations: iterations + more.1,
                absent: None,
            });
        }
    }
    None
}

/// Extents that move everything of the `absent` species onto the others
/// (keeping every amount non-negative), and the feed they give: a linear
/// programme that maximises what is taken from the absent species, which
/// is all of it exactly when the phase can be emptied. `None` if it cannot.
fn shift_out(system: &System, feed: &[f64], absent: &[bool]) -> Option<(Vec<f64>, Vec<f64>)> {
    let (s, r) = (system.n_species(), system.n_reactions());
    let nu = system.stoich();
    let to_move: f64 = (0..s).filter(|&i| absent[i]).map(|i| feed[i]).sum();
    let total: f64 = feed.iter().sum();
    if to_move == 0.0 {
        return Some((vec![0.0; r], feed.to_vec()));
    }
    // Variables p, q >= 0 with d = p - q; rows -(nu^T d)_i <= n0_i (every
    // amount stays non-negative); maximise -sum over absent of (nu^T d)_a.
    let n_var = 2 * r;
    let mut a = vec![0.0; s * n_var];
    for i in 0..s {
        for j in 0..r {
            a[i * n_var + j] = -nu[j * s + i];
            a[i * n_var + r + j] = nu[j * s + i];
        }
    }
    let mut c = vec![0.0; n_var];
    for j in 0..r {
        let taken: f64 = (0..s).filter(|&i| absent[i]).map(|i| nu[j * s + i]).sum();
        c[j] = -taken;
        c[r + j] = taken;
    }
    let LpOutcome::Optimal { x, value } = maximize(&a, feed, &c, s, n_var) else {
        return None;
    };
    if value < to_move * (1.0 - 1e-9) {
        return None;
    }
    let shift: Vec<f64> = (0..r).map(|j| x[j] - x[r + j]).collect();
    let mut shifted = feed.to_vec();
    for i in 0..s {
        for j in 0..r {
            shifted[i] += nu[j * s + i] * shift[j];
        }
        if absent[i] || shifted[i].abs() <= SHIFT_ROUND_OFF * total {
            shifted[i] = 0.0;
        }
        if shifted[i] < 0.0 {
            return None;
        }
    }
    Some((shift, shifted))
}

/// The smallest sum of the mole fractions the species of an empty phase
/// (`absent`) would have in equilibrium with the present ones (`amounts`,
/// solved on `face`): the phase is stable empty exactly when this is at
/// most one.
///
/// At an equilibrium with the phase absent, every face reaction holds for
/// the present species, so the activities of the absent ones must satisfy
/// `W^T nu_abs ln a_abs = W^T (ln K - nu_pres ln a_pres)`, `W` the reaction
/// combinations that leave unreachable species untouched. Where that fixes
/// them all, the test is the classical one (the implied mole fractions sum
/// to at most one). Where it does not (`A = B + C` with B and C liquid fixes
/// only `ln a_B + ln a_C`), forming the phase lowers the Gibbs function if
/// *some* admissible composition does, so the smallest
/// `sum exp(ln x)` over the solutions decides: a convex problem on the null
/// space of `W^T nu_abs`, solved by Newton's method.
pub fn implied_fraction_sum(
    system: &System,
    face: &Face,
    amounts: &[f64],
    ln_k: &[f64],
    pressure: f64,
    absent: &[bool],
) -> f64 {
    implied_phase(system, face, amounts, ln_k, pressure, absent).sum
}

/// What the stability test found for an absent phase.
struct Implied {
    /// Smallest sum of implied mole fractions (see [`implied_fraction_sum`]).
    sum: f64,
    /// Species of the phase (indices) and their mole fractions in the most
    /// favourable composition (empty when the present species are not at
    /// equilibrium).
    species: Vec<usize>,
    fractions: Vec<f64>,
}

/// [`implied_fraction_sum`] with the composition that attains it.
fn implied_phase(
    system: &System,
    face: &Face,
    amounts: &[f64],
    ln_k: &[f64],
    pressure: f64,
    absent: &[bool],
) -> Implied {
    let (s, r) = (system.n_species(), system.n_reactions());
    let nu = system.stoich();
    let phases = system.phases();
    let ln_p = (pressure / system.p0()).ln();
    // ln a of the present species.
    let mut totals = [0.0; 2];
    for i in 0..s {
        if !absent[i] && amounts[i] > 0.0 {
            totals[phases[i].index()] += amounts[i];
        }
    }
    let ln_a = |i: usize| {
        let own = amounts[i].ln() - totals[phases[i].index()].ln();
        if phases[i] == Phase::Gas {
            own + ln_p
        } else {
            own
        }
    };
    // W: combinations of the reactions that leave the species the face
    // holds at zero (other than the absent ones) untouched.
    let held: Vec<usize> = (0..s)
        .filter(|&i| face.unreachable[i] && !absent[i] && system.is_reactive(i))
        .collect();
    let (w, m) = if held.is_empty() {
        let mut eye = vec![0.0; r * r];
        for j in 0..r {
            eye[j * r + j] = 1.0;
        }
        (eye, r)
    } else {
        let mut rows = vec![0.0; held.len() * r];
        for (row, &i) in held.iter().enumerate() {
            for j in 0..r {
                rows[row * r + j] = nu[j * s + i];
            }
        }
        null_space(&rows, held.len(), r, 1e-12)
    };
    let cols: Vec<usize> = (0..s).filter(|&i| absent[i]).collect();
    let p = cols.len();
    // A = W^T nu_abs (m x p), rhs = W^T (ln K - nu_pres ln a_pres).
    let mut a = vec![0.0; m * p];
    let mut rhs = vec![0.0; m];
    for f in 0..m {
        for j in 0..r {
            let weight = w[j * m + f];
            if weight == 0.0 {
                continue;
            }
            let mut known = ln_k[j];
            for i in 0..s {
                let c = nu[j * s + i];
                if c != 0.0 && !absent[i] && amounts[i] > 0.0 {
                    known -= c * ln_a(i);
                }
            }
            rhs[f] += weight * known;
            for (col, &i) in cols.iter().enumerate() {
                a[f * p + col] += weight * nu[j * s + i];
            }
        }
    }
    let Some(particular) = particular_solution(&a, &rhs, m, p) else {
        // the present species are not at equilibrium
        return Implied {
            sum: f64::INFINITY,
            species: Vec::new(),
            fractions: Vec::new(),
        };
    };
    // Activities to mole fractions: a gas species' activity is y P / P0.
    let base: Vec<f64> = cols
        .iter()
        .enumerate()
        .map(|(col, &i)| {
            if phases[i] == Phase::Gas {
                particular[col] - ln_p
            } else {
                particular[col]
            }
        })
        .collect();
    let (free, k) = null_space(&a, m, p, 1e-12);
    let (value, fractions) = smallest_log_sum_exp(&base, &free, k);
    Implied {
        sum: value.exp(),
        species: cols,
        fractions,
    }
}

/// Solve the case from the equilibrium found without the phase
/// (`extents`), plus a small amount of the phase in the composition
/// `implied` found, on the case's own face; `Some((status, iterations))`
/// if that converges (outputs written), else `None` (outputs untouched).
#[allow(clippy::too_many_arguments)]
fn introduce(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    ws: &mut Workspace,
    extents: &[f64],
    implied: &Implied,
    (amounts_out, extents_out): (&mut [f64], &mut [f64]),
) -> Option<(Status, u32)> {
    let (s, r) = (system.n_species(), system.n_reactions());
    let nu = system.stoich();
    if implied.species.is_empty() {
        return None;
    }
    // Extents that make one mole of the phase in that composition:
    // (nu^T d)_i = x_i for its species.
    let p = implied.species.len();
    let mut a = vec![0.0; p * r];
    let mut b = vec![0.0; p];
    for (row, &i) in implied.species.iter().enumerate() {
        for j in 0..r {
            a[row * r + j] = nu[j * s + i];
        }
        b[row] = if case.face.unreachable[i] {
            0.0
        } else {
            implied.fractions[row]
        };
    }
    let unit = particular_solution(&a, &b, p, r)?;
    let total: f64 = case.feed.iter().sum();
    let mut start = vec![0.0; r];
    let mut amounts = vec![0.0; s];
    let mut extents_found = vec![0.0; r];
    for eps in [1e-3, 1e-6, 1e-9] {
        for j in 0..r {
            start[j] = extents[j] + eps * total * unit[j];
        }
        // Strictly inside: every species the face lets be present is.
        let inside = (0..s).all(|i| {
            let v = case.feed[i] + (0..r).map(|j| nu[j * s + i] * start[j]).sum::<f64>();
            case.face.unreachable[i] || !system.is_reactive(i) || v > 0.0
        });
        if !inside {
            continue;
        }
        let again = Case {
            start: Some(&start),
            ..*case
        };
        let (status, iterations) = solve_case(
            system,
            &again,
            options,
            ws,
            &mut amounts,
            &mut extents_found,
        );
        if status.is_converged() {
            amounts_out.copy_from_slice(&amounts);
            extents_out.copy_from_slice(&extents_found);
            return Some((status, iterations));
        }
        return None;
    }
    None
}

/// `min over v of ln sum_i exp(base_i + (Z v)_i)` for `Z` (`p x k`,
/// row-major), by Newton's method with backtracking, and the weights
/// `exp(...) / sum` there; stops as soon as the value is below zero (the
/// caller only asks whether it exceeds zero), and returns `-inf` where the
/// infimum is unbounded.
fn smallest_log_sum_exp(base: &[f64], z: &[f64], k: usize) -> (f64, Vec<f64>) {
    let p = base.len();
    let value = |v: &[f64], weights: &mut [f64]| -> f64 {
        let mut top = f64::NEG_INFINITY;
        for i in 0..p {
            let mut e = base[i];
            for c in 0..k {
                e += z[i * k + c] * v[c];
            }
            weights[i] = e;
            top = top.max(e);
        }
        let mut sum = 0.0;
        for w in weights.iter_mut() {
            *w = (*w - top).exp();
            sum += *w;
        }
        for w in weights.iter_mut() {
            *w /= sum;
        }
        top + sum.ln()
    };
    let mut v = vec![0.0; k];
    let mut weights = vec![0.0; p];
    let mut trial_weights = vec![0.0; p];
    let mut current = value(&v, &mut weights);
    if k == 0 {
        return (current, weights);
    }
    let (mut grad, mut hess, mut scale) = (vec![0.0; k], vec![0.0; k * k], vec![0.0; k]);
    for _ in 0..200 {
        if current < -STABLE_SLACK {
            return (current, weights);
        }
        // gradient Z^T w, Hessian Z^T (diag w - w w^T) Z
        let mut zw = vec![0.0; k];
        for c in 0..k {
            zw[c] = (0..p).map(|i| z[i * k + c] * weights[i]).sum();
            grad[c] = zw[c];
        }
        for a in 0..k {
            for b in 0..k {
                let second: f64 = (0..p)
                    .map(|i| z[i * k + a] * z[i * k + b] * weights[i])
                    .sum();
                hess[a * k + b] = second - zw[a] * zw[b] + if a == b { 1e-14 } else { 0.0 };
            }
        }
        let size: f64 = grad.iter().map(|g| g.abs()).fold(0.0, f64::max);
        if size < 1e-12 {
            return (current, weights);
        }
        let mut step: Vec<f64> = grad.iter().map(|g| -g).collect();
        if !solve_spd_scaled(&mut hess, &mut step, &mut scale, k) {
            step = grad.iter().map(|g| -g).collect();
        }
        let slope: f64 = (0..k).map(|c| grad[c] * step[c]).sum();
        let mut alpha = 1.0;
        let mut moved = false;
        for _ in 0..60 {
            let trial: Vec<f64> = (0..k).map(|c| v[c] + alpha * step[c]).collect();
            let next = value(&trial, &mut trial_weights);
            if next <= current + 1e-4 * alpha * slope {
                v = trial;
                current = next;
                weights.copy_from_slice(&trial_weights);
                moved = true;
                break;
            }
            alpha *= 0.5;
        }
        if !moved {
            return (current, weights);
        }
        if current < -700.0 {
            return (f64::NEG_INFINITY, weights); // unbounded below: the phase cannot form
        }
    }
    (current, weights)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::face::analyse;

    fn solve(
        nu: Vec<f64>,
        r: usize,
        phases: Vec<Phase>,
        feed: &[f64],
        ln_k: &[f64],
        pressure: f64,
    ) -> (Option<Repair>, Vec<f64>) {
        let s = feed.len();
        let sys = System::new(nu, r, s, phases, 1.0).unwrap();
        let mut ws = Workspace::new(&sys);
        let (mut n, mut xi) = (vec![f64::NAN; s], vec![0.0; r]);
        let face = analyse(&sys, &vec![false; s]).unwrap();
        let case = Case {
            face: &face,
            feed,
            ln_k,
            pressure,
            start: None,
        };
        let out = solve_with_a_phase_absent(
            &sys,
            &case,
            &SolveOptions::default(),
            &mut ws,
            &mut n,
            &mut xi,
        );
        (out, n)
    }

    #[test]
    fn liquid_products_that_cannot_coexist_with_their_gas_form_completely() {
        // A = B + C with B, C the only liquid species and ln K = 5: made from A
        // they are always x_B = x_C = 1/2, so a_B a_C / a_A = 1/4 < e^5 while
        // any A is left (a_A = 1): the gas vanishes (closed form).
        let (out, n) = solve(
            vec![-1.0, 1.0, 1.0],
            1,
            vec![Phase::Gas, Phase::Liquid, Phase::Liquid],
            &[1.0, 0.0, 0.0],
            &[5.0],
            1.0,
        );
        let out = out.expect("the gas can be absent");
        assert_eq!(out.absent, Some(Phase::Gas));
        assert_eq!(out.status, Status::Converged);
        assert_eq!(n, vec![0.0, 1.0, 1.0]);
    }

    #[test]
    fn a_liquid_that_would_form_is_not_declared_absent() {
        // V = L with K = 3 at P/P0 = 1 and an inert: coexistence needs
        // y_V = 1/3, which the feed (V : I = 1 : 1) allows, so the liquid forms
        // and may not be held absent (x_L = 1, a_L / a_V = K).
        let s = System::new(
            vec![-1.0, 1.0, 0.0],
            1,
            3,
            vec![Phase::Gas, Phase::Liquid, Phase::Gas],
            1.0,
        )
        .unwrap();
        let face = analyse(&s, &[false, false, false]).unwrap();
        let absent = [false, true, false];
        // all vapour: y_V = 1/2, implied x_L = K y_V = 1.5 > 1
        let sum = implied_fraction_sum(&s, &face, &[1.0, 0.0, 1.0], &[3.0_f64.ln()], 1.0, &absent);
        assert!((sum - 1.5).abs() < 1e-12, "{sum}");
    }

    #[test]
    fn free_composition_of_the_absent_phase_is_minimised() {
        // A = B + C with B and C liquid fixes only a_B a_C = K a_A; the most
        // favourable composition has x_B = x_C, so the smallest sum is
        // 2 sqrt(K a_A) (closed form): 2 for K = 1 (the liquid would form),
        // 1/2 for K = 1/16 (stable empty; the search may stop anywhere below 1).
        let s = System::new(
            vec![-1.0, 1.0, 1.0],
            1,
            3,
            vec![Phase::Gas, Phase::Liquid, Phase::Liquid],
            1.0,
        )
        .unwrap();
        let face = analyse(&s, &[false, true, true]).unwrap();
        let sum = |ln_k: f64| {
            implied_fraction_sum(
                &s,
                &face,
                &[1.0, 0.0, 0.0],
                &[ln_k],
                1.0,
                &[false, true, true],
            )
        };
        assert!((sum(0.0) - 2.0).abs() < 1e-9, "{}", sum(0.0));
        let stable = sum((1.0_f64 / 16.0).ln());
        assert!((0.5 - 1e-9..=1.0).contains(&stable), "{stable}");
    }
}
