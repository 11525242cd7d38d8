//! Which phases are present at equilibrium.
//!
//! A phase may hold no material at all at the minimum of the Gibbs
//! function: a condensate above its dew point, liquid products that cannot
//! coexist with their gas, carbon where the gas is not carburising enough,
//! a carbonate above its decomposition temperature. A pure condensed species
//! (a phase of one species, activity 1) is the common case: its Gibbs
//! function is linear in its amount, so nothing but the constraint
//! `n >= 0` decides whether it is there. The phase set is decided per case
//! by an active-set search over phases ([`decide_phases`]):
//!
//! 1. the phases held absent have their species' feed moved onto the
//!    others by the reactions (a linear programme, [`shift_out`];
//!    impossible if a phase holds something no reaction takes), the
//!    reactions are restricted to the face that keeps those species at zero
//!    ([`crate::face::analyse_with`], memoised per pattern) and the case is
//!    solved there (each attempt gets `max_iter`);
//! 2. a converged attempt is the equilibrium if every absent phase is
//!    stable empty: no composition of it that the reactions could form from
//!    the present species lowers the Gibbs function ([`implied_fraction_sum`]
//!    at most one: for a pure species, its activity in equilibrium with the
//!    mixture at most one), the tangent-plane condition for ideal phases
//!    (M. L. Michelsen, "The isothermal flash problem. Part I. Stability",
//!    Fluid Phase Equilibria 9, 1982) written in the reactions' terms;
//!    otherwise the least stable absent phase is introduced (a little of it,
//!    in its most favourable composition, added to the equilibrium found)
//!    and the case solved again;
//! 3. an attempt that stalls because a present phase is leaving (a pure
//!    species below a 1e-12 share of the feed and still shrinking, see
//!    [`SolveOptions::drop_vanishing`], or a mixture whose total fell below
//!    a 1e-6 share) is repeated with that phase absent.
//!
//! Phase sets already tried are not tried again, and the search ends after
//! `2 P + 2` attempts (P phases). Where it has not settled the case by
//! then, every phase set is tried in turn (up to 8 phases); where that
//! fails too, the barrier path ([`crate::barrier`]) names the phase set and
//! gives a start near the equilibrium, and the search runs again from
//! there. A case none of these settles ends with the last attempt's status:
//! it is never called converged with an absent phase that would form. Pure
//! species without feed start absent (the common case: carbon that does not
//! form costs one solve and one stability test); a system without pure
//! species first solves with every phase present and searches only when
//! that stalls ([`worth_retrying`]).

use crate::barrier::{BarrierPath, FIRST_STRETCH, SECOND_STRETCH};
use crate::face::{analyse_with, Face, SharedFace};
use crate::linalg::{null_space, particular_solution, solve_spd_scaled};
use crate::lp::{maximize, LpOutcome};
use crate::solver::{interior_start, Case, SolveOptions, Workspace, PURE_VANISHING};
use crate::status::Status;
use crate::system::System;

/// Feed entries below this (relative to the feed's total) are zero after a
/// shift by the linear programme (its own round-off).
const SHIFT_ROUND_OFF: f64 = 1e-13;
/// Slack of the stability test (sum of implied mole fractions).
const STABLE_SLACK: f64 = 1e-9;
/// A mixture phase whose total is below this share of the feed when a solve
/// stalls is taken to be leaving the equilibrium.
const MIXTURE_VANISHING: f64 = 1e-6;

/// The phase set a case was solved with and how it ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Decided {
    pub status: Status,
    /// Newton iterations of every attempt.
    pub iterations: u32,
    /// Bit `k` set: phase `k` ([`System::phase_index`]) is absent (and
    /// stable empty, when the status is a converged one).
    pub absent: u64,
}

/// Bit of phase `phase` in a mask of absent phases.
pub fn phase_bit(phase: usize) -> u64 {
    1 << phase
}

/// Per species, whether its phase is in the mask `absent`.
fn species_of(system: &System, absent: u64) -> Vec<bool> {
    (0..system.n_species())
        .map(|i| absent & phase_bit(system.phase_index(i)) != 0)
        .collect()
}

/// Whether a case of a system without pure species that ended `status`
/// with every phase present is worth a phase-set search (species in more
/// than one phase; the case stalled or ran out of iterations).
pub fn worth_retrying(system: &System, status: Status) -> bool {
    matches!(status, Status::Stalled | Status::IterationLimit)
        && (1..system.n_species()).any(|i| system.phase_index(i) != system.phase_index(0))
}

/// The phases a case starts the search with held absent: the pure species
/// that are not fed.
pub fn initially_absent(system: &System, feed: &[f64]) -> u64 {
    let mut mask = 0;
    for (i, &n) in feed.iter().enumerate() {
        if system.is_pure(i) && system.is_reactive(i) && n <= 0.0 {
            mask |= phase_bit(system.phase_index(i));
        }
    }
    mask
}

/// A case whose reduced answer (`start`, extents) showed its pure phases
/// forming, solved at once with every phase present: the start blended
/// with a little of the face's interior point, one solve on the case's own
/// face. `Some` when that converges with every phase holding material (a
/// stable point where no phase is absent is the equilibrium: the Gibbs
/// function is convex); `None` sends the case to [`decide_phases`] (the
/// outputs are then overwritten there).
pub(crate) fn solve_all_present(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    ws: &mut Workspace,
    amounts: &mut [f64],
    extents: &mut [f64],
    start: &[f64],
) -> Option<(Status, u32)> {
    let mut x = start.to_vec();
    blended(system, case.face, case.feed, &mut x, &[]);
    let again = Case {
        start: Some(&x),
        ..*case
    };
    let (status, iterations) = ws.solve(system, &again, options, amounts, extents);
    if !status.is_converged() {
        return None;
    }
    let mut totals = [0.0; crate::system::MAX_PHASES];
    for i in 0..system.n_species() {
        totals[system.phase_index(i)] += amounts[i];
    }
    (0..system.n_phases())
        .all(|phase| totals[phase] > 0.0)
        .then_some((status, iterations))
}

/// For a case that stalled with every phase present: try each phase absent
/// first (solutions, then the gas: a condensate that should not form is the
/// common case) and search from there ([`decide_phases`]). `None` when no
/// attempt converged (the outputs are then left as they were).
pub fn retry_with_a_phase_absent(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    ws: &mut Workspace,
    amounts: &mut [f64],
    extents: &mut [f64],
) -> Option<Decided> {
    let (s, r) = (system.n_species(), system.n_reactions());
    let (mut n, mut xi) = (vec![0.0; s], vec![0.0; r]);
    let mut iterations = 0;
    let order = (1..system.n_phases()).chain(std::iter::once(0));
    for phase in order {
        let members = system.in_phase(phase);
        if !members.iter().any(|&m| m) || members.iter().all(|&m| m) {
            continue;
        }
        let found = decide_phases(
            system,
            case,
            options,
            ws,
            &mut n,
            &mut xi,
            (phase_bit(phase), None),
        );
        iterations += found.iterations;
        if found.status.is_converged() {
            amounts.copy_from_slice(&n);
            extents.copy_from_slice(&xi);
            return Some(Decided {
                iterations,
                ..found
            });
        }
    }
    None
}

/// The active-set search of the module docs for `case` (its face is that
/// of the feed's zero pattern; its start is not used), from the phases in
/// `absent` and, where given, from `start` (extents); where it fails, again
/// from the end of the barrier path ([`crate::barrier`]); where that fails
/// too, every phase set in turn (at most [`ENUMERATED_PHASES`] phases with
/// species). Always writes `amounts` and
/// `extents`: those of the converged attempt, else of the last one (NaN if
/// no attempt could be made).
#[allow(clippy::too_many_arguments)]
pub fn decide_phases(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    ws: &mut Workspace,
    amounts: &mut [f64],
    extents: &mut [f64],
    (mut absent, start): (u64, Option<&[f64]>),
) -> Decided {
    let budget = SolveOptions {
        chain: false,
        drop_vanishing: true,
        ..*options
    };
    let mut search = Search::default();
    // (a caller's start is blended with a little of the face's interior
    // point, so that the phases it holds nothing of are present)
    let start = start.map(|x| Start {
        extents: x.to_vec(),
        toward: Some(Vec::new()),
        amounts: None,
    });
    if let Some(found) = search.run(system, case, &budget, ws, (amounts, extents), absent, start) {
        return found;
    }
    let Search {
        tried,
        mut iterations,
        last,
        mut written,
    } = search;
    absent = tried.last().copied().unwrap_or(absent);
    let mut last = last.unwrap_or(Status::Stalled);
    // Every phase set not tried yet (or tried only with vanishing pure
    // species dropped), fewest absent phases first: the first
    // that converges with every absent phase stable is the equilibrium (the
    // Gibbs function is convex: a stable point is its minimum).
    let phases: Vec<usize> = (0..system.n_phases())
        .filter(|&phase| system.in_phase(phase).iter().any(|&m| m))
        .collect();
    if phases.len() <= ENUMERATED_PHASES {
        let mut sets: Vec<u64> = (0..1u64 << phases.len())
            .map(|bits| {
                (0..phases.len())
                    .filter(|&k| bits >> k & 1 != 0)
                    .fold(0, |mask, k| mask | phase_bit(phases[k]))
            })
            .collect();
        sets.sort_by_key(|set| set.count_ones());
        // (pure species are followed down to any amount here: one present
        // in a trace, made only with a trace product, is no vanishing one)
        let patient = SolveOptions {
            drop_vanishing: false,
            ..budget
        };
        for set in sets {
            let Some((status, its, face)) =
                solve_with_absent(system, case, &patient, ws, set, None, amounts, extents)
            else {
                continue;
            };
            written = true;
            iterations += its;
            last = status;
            absent = set;
            if status.is_converged()
                && instability(system, case, face_of(&face), amounts, set).is_none()
            {
                return Decided {
                    status,
                    iterations,
                    absent,
                };
            }
        }
    }
    // Every set failed (or there are too many to try): follow the barrier
    // path ([`crate::barrier`]) to the phase set and a start near the
    // equilibrium, and search from there; where that fails, on down the
    // path (pure phases present in traces).
    let mut search = Search {
        tried: Vec::new(),
        iterations,
        last: Some(last),
        written,
    };
    let mut path = BarrierPath::new(system, case);
    let patient = SolveOptions {
        drop_vanishing: false,
        ..budget
    };
    for levels in [FIRST_STRETCH, SECOND_STRETCH] {
        let Some(end) = path.descend(system, case, options, ws, levels) else {
            break;
        };
        search.iterations += end.iterations;
        // (not blended: the path's traces are the equilibrium's, and a
        // blend would put them back at 1e-9 of the feed)
        let start = Start {
            extents: end.extents,
            toward: None,
            amounts: Some(end.amounts),
        };
        let found = search.run(
            system,
            case,
            &patient,
            ws,
            (amounts, extents),
            end.absent,
            Some(start),
        );
        if let Some(found) = found {
            return found;
        }
    }
    let Search {
        tried,
        iterations,
        last,
        written,
    } = search;
    let absent = tried.last().copied().unwrap_or(absent);
    let last = last.unwrap_or(Status::Stalled);
    if !written {
        amounts.fill(f64::NAN);
        extents.fill(f64::NAN);
    }
    Decided {
        status: if last.is_converged() {
            Status::Stalled
        } else {
            last
        },
        iterations,
        absent,
    }
}

/// Phases with species beyond which a case whose active-set search failed
/// is not solved for every phase set (2^P solves).
const ENUMERATED_PHASES: usize = 8;

/// The state of one case's phase-set search: the sets tried, the Newton
/// iterations spent and how the last attempt ended.
#[derive(Default)]
struct Search {
    tried: Vec<u64>,
    iterations: u32,
    last: Option<Status>,
    /// Whether an attempt wrote the outputs.
    written: bool,
}

impl Search {
    /// The active-set search of the module docs from the phases in `absent`
    /// (and `start`, where given): the equilibrium where an attempt
    /// converges with every absent phase stable, else `None` (after at most
    /// `2 P + 2` attempts, or where every next set was tried before).
    #[allow(clippy::too_many_arguments)]
    fn run(
        &mut self,
        system: &System,
        case: &Case,
        budget: &SolveOptions,
        ws: &mut Workspace,
        (amounts, extents): (&mut [f64], &mut [f64]),
        mut absent: u64,
        mut start: Option<Start>,
    ) -> Option<Decided> {
        let feed_total: f64 = case.feed.iter().sum();
        for _ in 0..2 * system.n_phases() + 2 {
            if self.tried.contains(&absent) && start.is_none() {
                break;
            }
            self.tried.push(absent);
            let (status, its, face) = solve_with_absent(
                system,
                case,
                budget,
                ws,
                absent,
                start.as_ref(),
                amounts,
                extents,
            )?; // this set cannot be emptied: no candidate
            self.written = true;
            self.iterations += its;
            self.last = Some(status);
            start = None;
            if status.is_converged() {
                match instability(system, case, face_of(&face), amounts, absent) {
                    None => {
                        return Some(Decided {
                            status,
                            iterations: self.iterations,
                            absent,
                        })
                    }
                    Some((phase, implied)) => {
                        absent &= !phase_bit(phase);
                        start = Some(introduction(
                            system,
                            case.feed,
                            (amounts, extents),
                            implied.as_ref(),
                            &species_of(system, absent),
                        ));
                    }
                }
                continue;
            }
            // Stalled: a present phase is leaving. The smallest first (a phase
            // whose total fell below its vanishing share is certainly leaving;
            // a whole phase that the reactions empty, a gas of one species
            // turning into a solid, stalls while still large), skipping sets
            // already tried.
            let mut totals = vec![0.0; system.n_phases()];
            for i in 0..system.n_species() {
                totals[system.phase_index(i)] += amounts[i];
            }
            let mut candidates: Vec<(f64, usize)> = (0..system.n_phases())
                .filter(|&phase| {
                    absent & phase_bit(phase) == 0 && system.in_phase(phase).iter().any(|&m| m)
                })
                .map(|phase| {
                    let share = if phase < system.n_mixtures() {
                        MIXTURE_VANISHING
                    } else {
                        10.0 * PURE_VANISHING
                    };
                    // (vanishing ones sort first, by how far below their share)
                    (totals[phase] / (share * feed_total), phase)
                })
                .collect();
            candidates.sort_by(|a, b| a.0.total_cmp(&b.0));
            let Some(&(_, phase)) = candidates
                .iter()
                .find(|&&(_, phase)| !self.tried.contains(&(absent | phase_bit(phase))))
            else {
                break;
            };
            absent |= phase_bit(phase);
        }
        None
    }
}

/// Why the equilibrium found with the phases of `absent` held empty (on
/// `face`) is not the equilibrium: an absent phase that would form, and
/// what the stability test found for it (`None` for a phase needed because
/// a species the feed can make is starved without it); `None` if every
/// absent phase is stable empty.
fn instability(
    system: &System,
    case: &Case,
    face: &Face,
    amounts: &[f64],
    absent: u64,
) -> Option<(usize, Option<Implied>)> {
    // A species the feed can make that holding these phases absent keeps at
    // zero: a phase that forms with it must be present (its chemical
    // potential is -inf at zero, so making a little of both always lowers
    // the Gibbs function).
    if let Some(phase) = starving_phase(system, case.face, face, absent) {
        return Some((phase, None));
    }
    // The least stable absent phase, if any would form.
    let mut worst: Option<(usize, Implied)> = None;
    for phase in 0..system.n_phases() {
        if absent & phase_bit(phase) == 0 {
            continue;
        }
        let members = system.in_phase(phase);
        let implied = implied_phase(system, face, amounts, case.ln_k, case.pressure, &members);
        if implied.sum > 1.0 + STABLE_SLACK
            && worst.as_ref().is_none_or(|(_, w)| implied.sum > w.sum)
        {
            worst = Some((phase, implied));
        }
    }
    worst.map(|(phase, implied)| (phase, Some(implied)))
}

/// An absent phase (of mask `absent`) that a species reachable on the
/// feed's face `reachable` needs to form: the species is unreachable on
/// `face` (the face with `absent` held empty), belongs to no absent phase
/// and shares a reaction with one of the phase's species. `None` if no
/// species is starved so.
fn starving_phase(system: &System, reachable: &Face, face: &Face, absent: u64) -> Option<usize> {
    let (s, r) = (system.n_species(), system.n_reactions());
    let nu = system.stoich();
    let held = species_of(system, absent);
    for i in 0..s {
        if held[i] || !face.unreachable[i] || reachable.unreachable[i] {
            continue;
        }
        for j in (0..r).filter(|&j| nu[j * s + i] != 0.0) {
            if let Some(k) = (0..s).find(|&k| held[k] && nu[j * s + k] != 0.0) {
                return Some(system.phase_index(k));
            }
        }
    }
    None
}

/// Species below this share of the feed are left alone by the direction
/// that introduces a phase ([`introduction`]).
const TRACE_SHARE: f64 = 1e-6;

/// Share of the face's interior point blended into a start that would
/// leave species the face reaches at zero.
const BLEND: f64 = 1e-9;

/// `x` (extents from the `feed` the face was found for) moved to
/// `(1 - BLEND) (x + eps toward) + BLEND x_in`, `x_in` the face's interior
/// start: every species the face reaches is then present, and `eps` (at
/// most 1e-3 of the feed) is as large as keeps each at half or more of its
/// blended amount.
fn blended(system: &System, face: &Face, feed: &[f64], x: &mut [f64], toward: &[f64]) {
    let (s, r) = (system.n_species(), system.n_reactions());
    let nu = system.stoich();
    let (mut n_in, mut x_in) = (vec![0.0; s], vec![0.0; r]);
    interior_start(face, feed, &mut n_in, &mut x_in, s, r);
    let change = |d: &[f64], i: usize| (0..r).map(|j| nu[j * s + i] * d[j]).sum::<f64>();
    let mut eps = 1e-3 * feed.iter().sum::<f64>();
    if !toward.is_empty() {
        for i in (0..s).filter(|&i| !face.unreachable[i]) {
            let base = (1.0 - BLEND) * (feed[i] + change(x, i)) + BLEND * n_in[i];
            let dn = (1.0 - BLEND) * change(toward, i);
            if dn < 0.0 {
                eps = eps.min(0.5 * base / -dn);
            }
        }
    }
    for j in 0..r {
        let along = if toward.is_empty() {
            0.0
        } else {
            eps * toward[j]
        };
        x[j] = (1.0 - BLEND) * (x[j] + along) + BLEND * x_in[j];
    }
}

/// Solve `case` with the phases of `absent` held empty, from `start`
/// (extents of the user's reactions; with `true`, blended with a little of
/// the face's interior point) where it is strictly inside the face:
/// the status, the iterations and the face solved on, with the amounts and
/// extents written; `None` if the phases cannot be emptied (outputs left as
/// they were).
#[allow(clippy::too_many_arguments)]
fn solve_with_absent(
    system: &System,
    case: &Case,
    options: &SolveOptions,
    ws: &mut Workspace,
    absent: u64,
    start: Option<&Start>,
    amounts: &mut [f64],
    extents: &mut [f64],
) -> Option<(Status, u32, SharedFace)> {
    let r = system.n_reactions();
    let held = species_of(system, absent);
    let (shift, shifted) = shift_out(system, case.feed, &held)?;
    let zero: Vec<bool> = shifted.iter().map(|&v| v <= 0.0).collect();
    let shared = face_with(system, &zero, &held)?;
    let face = face_of(&shared);
    // A start with amounts of its own is solved from them as the feed (and
    // its extents added after), where they keep the species this face
    // cannot reach at zero, as the feed does.
    let point = start.and_then(|start| {
        let on_face = point_on_face(face, start.amounts.as_deref()?, case.feed)?;
        Some((start.extents.clone(), on_face))
    });
    let from_point = point.is_some();
    let (shift, shifted) = point.unwrap_or((shift, shifted));
    let (status, iterations) = if face.dim == 0 {
        amounts.copy_from_slice(&shifted);
        extents.fill(0.0);
        (Status::Converged, 0)
    } else {
        let start: Option<Vec<f64>> = if from_point {
            Some(vec![0.0; r])
        } else {
            start.map(|start| {
                let mut x: Vec<f64> = (0..r).map(|j| start.extents[j] - shift[j]).collect();
                if let Some(toward) = &start.toward {
                    blended(system, face, &shifted, &mut x, toward);
                }
                x
            })
        };
        let again = Case {
            face,
            feed: &shifted,
            start: start.as_deref(),
            ..*case
        };
        ws.solve(system, &again, options, amounts, extents)
    };
    for j in 0..r {
        extents[j] += shift[j];
    }
    Some((status, iterations, shared))
}

/// `amounts` with the species `face` cannot reach set to zero, where each
/// is within round-off of it (1e-12 of the feed's total); `None` where one
/// is not (the point does not belong to the face).
fn point_on_face(face: &Face, amounts: &[f64], feed: &[f64]) -> Option<Vec<f64>> {
    let total: f64 = feed.iter().sum();
    let mut on_face = amounts.to_vec();
    for (n, &unreachable) in on_face.iter_mut().zip(&face.unreachable) {
        if unreachable {
            if n.abs() > 1e-12 * total {
                return None;
            }
            *n = 0.0;
        }
    }
    Some(on_face)
}

/// The face of a memo entry [`face_with`] returned (always an analysed one).
fn face_of(shared: &SharedFace) -> &Face {
    match shared.as_ref() {
        Ok(face) => face,
        Err(_) => unreachable!("face_with returns analysed faces only"),
    }
}

/// The face of zero pattern `zero` with the species `held` forbidden to
/// form, from the system's memo where it was analysed before.
fn face_with(system: &System, zero: &[bool], held: &[bool]) -> Option<SharedFace> {
    let words = zero.len().div_ceil(64);
    // (two bit sets and a marker word: never the key of a plain pattern)
    let mut key = vec![0u64; 2 * words + 1];
    for (i, (&z, &h)) in zero.iter().zip(held).enumerate() {
        key[i / 64] |= u64::from(z) << (i % 64);
        key[words + i / 64] |= u64::from(h) << (i % 64);
    }
    key[2 * words] = u64::MAX;
    let face = system
        .face_memo()
        .get_or_analyse(&key, || analyse_with(system, zero, held));
    face.as_ref().is_ok().then_some(face)
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
    let ln_p = (pressure / system.p0()).ln();
    // ln a of the present species (0 for a pure one).
    let mut totals = vec![0.0; system.n_phases()];
    for i in 0..s {
        if !absent[i] && amounts[i] > 0.0 {
            totals[system.phase_index(i)] += amounts[i];
        }
    }
    let ln_a = |i: usize| {
        if system.is_pure(i) {
            0.0
        } else if system.phase_index(i) == 0 {
            amounts[i].ln() - totals[0].ln() + ln_p
        } else {
            amounts[i].ln() - totals[system.phase_index(i)].ln()
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
            if system.phase_index(i) == 0 {
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

/// Where the next attempt starts: extents of the user's reactions and, with
/// `toward`, a blend ([`solve_with_absent`]): a little of the new face's
/// interior point, and as much as stays feasible of the direction that makes
/// the phase introduced in its most favourable composition (`toward` is
/// empty where there is none).
struct Start {
    extents: Vec<f64>,
    toward: Option<Vec<f64>>,
    /// The amounts at `extents`, where they are more precise than
    /// `feed + nu^T extents` (the traces of the barrier path, 1e-30 of the
    /// feed, which that sum would round away), with the species the attempt
    /// holds absent at zero: the attempt then solves from them as its feed.
    amounts: Option<Vec<f64>>,
}

/// A start for the case with the phase `implied` found unstable now
/// present: the equilibrium found without it (`extents`) plus a little of
/// it (1e-3 of the feed, else 1e-6, else 1e-9) in the composition the
/// stability test found most favourable, where that keeps every species
/// the phase does not hold (the species still `held` absent at zero) as it
/// was or above; else a blend (see [`Start`]).
fn introduction(
    system: &System,
    feed: &[f64],
    (amounts, extents): (&[f64], &[f64]),
    implied: Option<&Implied>,
    held: &[bool],
) -> Start {
    let (s, r) = (system.n_species(), system.n_reactions());
    let nu = system.stoich();
    let blend = |toward: Vec<f64>| Start {
        extents: extents.to_vec(),
        toward: Some(toward),
        amounts: None,
    };
    let Some(implied) = implied.filter(|i| !i.species.is_empty()) else {
        return blend(Vec::new());
    };
    // Extents that make one mole of the phase in that composition,
    // (nu^T d)_i = x_i for its species, and leave the held species and the
    // traces alone (a step that takes from a trace is cut to nothing).
    let total: f64 = feed.iter().sum();
    let untouched = |i: usize| {
        system.is_reactive(i)
            && !implied.species.contains(&i)
            && (held[i] || amounts[i] <= TRACE_SHARE * total)
    };
    let rows: Vec<usize> = implied
        .species
        .iter()
        .copied()
        .chain((0..s).filter(|&i| untouched(i)))
        .collect();
    let mut a = vec![0.0; rows.len() * r];
    let mut b = vec![0.0; rows.len()];
    for (row, &i) in rows.iter().enumerate() {
        for j in 0..r {
            a[row * r + j] = nu[j * s + i];
        }
        if row < implied.species.len() {
            b[row] = implied.fractions[row];
        }
    }
    let Some(unit) = particular_solution(&a, &b, rows.len(), r) else {
        return blend(Vec::new());
    };
    for eps in [1e-3, 1e-6, 1e-9] {
        let start: Vec<f64> = (0..r).map(|j| extents[j] + eps * total * unit[j]).collect();
        // Feasible, with the phase formed (whether every species the new
        // face reaches is present is the solve's own test of a start).
        let amount = |i: usize| feed[i] + (0..r).map(|j| nu[j * s + i] * start[j]).sum::<f64>();
        let free = |i: usize| !held[i] && system.is_reactive(i);
        let inside = (0..s).all(|i| {
            let v = amount(i);
            !free(i) || v > 0.0 || (v == 0.0 && !implied.species.contains(&i))
        });
        if inside {
            // A trace that the extents round to exactly zero (a species
            // at 1e-24 of a feed of one mole) would make the solve refuse
            // the start: blend those back in from the interior point.
            let rounded_away = (0..s).any(|i| free(i) && amount(i) == 0.0);
            return Start {
                extents: start,
                toward: rounded_away.then(Vec::new),
                amounts: None,
            };
        }
    }
    blend(unit)
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
    use crate::solver::solve_case;

    use crate::system::Phase;

    /// Solve one case as the batch driver does: every phase present first,
    /// a phase-set search where that stalls; pure species decided at once.
    fn solve(
        nu: Vec<f64>,
        r: usize,
        phases: Vec<Phase>,
        feed: &[f64],
        ln_k: &[f64],
        pressure: f64,
    ) -> (Decided, Vec<f64>) {
        let s = feed.len();
        let sys = System::new(nu, r, s, phases, 1.0).unwrap();
        let mut ws = Workspace::new(&sys);
        let (mut n, mut xi) = (vec![f64::NAN; s], vec![0.0; r]);
        let zero: Vec<bool> = feed.iter().map(|&v| v <= 0.0).collect();
        let face = analyse(&sys, &zero).unwrap();
        let case = Case {
            face: &face,
            feed,
            ln_k,
            pressure,
            start: None,
        };
        let options = SolveOptions::default();
        if sys.has_pure() {
            let absent = initially_absent(&sys, feed);
            let out = decide_phases(
                &sys,
                &case,
                &options,
                &mut ws,
                &mut n,
                &mut xi,
                (absent, None),
            );
            return (out, n);
        }
        let (status, iterations) = solve_case(&sys, &case, &options, &mut ws, &mut n, &mut xi);
        let out = if worth_retrying(&sys, status) {
            retry_with_a_phase_absent(&sys, &case, &options, &mut ws, &mut n, &mut xi)
                .expect("a phase set converges")
        } else {
            Decided {
                status,
                iterations,
                absent: 0,
            }
        };
        (out, n)
    }

    #[test]
    fn a_gas_of_one_species_that_turns_into_a_solid_leaves_no_gas() {
        // 3 X0 = X4(s) with ln K = 25 from X0 alone: a_X4 / a_X0^3 = 1 / (P/P0)^3
        // at any gas left, far below K, so every X0 goes (X4 = n0 / 3); the
        // other reactions need X1 or X6, which nothing makes. Once stalled
        // (a one-species gas has no curvature), the gas must be tried absent.
        let nu = vec![
            -3.0, -1.0, 2.0, 0.0, 0.0, 0.0, 0.0, -1.0, -1.0, 0.0, 2.0, 0.0, 0.0, 0.0, -3.0, 0.0,
            0.0, 0.0, 1.0, 0.0, 0.0, -1.0, -1.0, 0.0, 0.0, 0.0, 2.0, 0.0, 3.0, -1.0, 0.0, 0.0, 0.0,
            0.0, 1.0,
        ];
        let g = Phase::Gas;
        let (out, n) = solve(
            nu,
            5,
            vec![g, g, g, g, Phase::Pure, g, Phase::Pure],
            &[1.4153557958007406, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0],
            &[
                -14.016171148883627,
                5.867770456408326,
                25.178941554338564,
                3.0620252078618915,
                7.701320445954691,
            ],
            0.14764071097509157,
        );
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, phase_bit(0) | phase_bit(2)); // the gas and X6
        assert_eq!(n[0], 0.0);
        assert!((n[4] - 1.4153557958007406 / 3.0).abs() < 1e-15);
    }

    /// `ln a` of each species at `n`: 0 for a pure one, `ln(y P / P0)` in
    /// the gas (P0 = 1 bar); the test's own arithmetic, not the solver's.
    fn ln_activities(phases: &[Phase], n: &[f64], pressure: f64) -> Vec<f64> {
        let gas: f64 = (0..n.len())
            .filter(|&i| phases[i] == Phase::Gas)
            .map(|i| n[i])
            .sum();
        (0..n.len())
            .map(|i| match phases[i] {
                Phase::Gas => (n[i] / gas * pressure).ln(),
                _ => 0.0,
            })
            .collect()
    }

    #[test]
    fn a_case_every_phase_set_stalls_on_is_settled_from_the_barrier_path() {
        // A random network of the benchmark (pure liquid X0, solids X1 and
        // X6) on which the search and every phase set stalled: the Newton
        // iteration drove X0 to 1e-305 wherever it was present, although the
        // minimum of G holds 1.48 mol of it (scipy's SLSQP, and a numpy
        // barrier method, both outside eqbatch). The answer must satisfy
        // the conditions of the module docs, checked here by hand: every
        // reaction without X6 at equilibrium, X6 absent with activity <= 1.
        let g = Phase::Gas;
        let phases = vec![Phase::Pure, Phase::Pure, g, g, g, g, Phase::Pure, g];
        let nu = vec![
            -1.0, -2.0, -4.0, -6.0, 2.0, 0.0, 0.0, 0.0, //
            -3.0, -2.0, -4.0, 0.0, 0.0, 2.0, 0.0, 0.0, //
            -3.0, -1.0, -6.0, -2.0, 0.0, 0.0, 2.0, 0.0, //
            0.0, -3.0, -6.0, 0.0, 0.0, 0.0, 0.0, 2.0,
        ];
        let ln_k = [
            -22.057611853687792,
            -17.58549885965045,
            -12.365582666861066,
            -52.11540497405277,
        ];
        let feed = [
            0.0,
            0.0,
            0.0,
            0.6916324753562797,
            0.2222829102004522,
            0.9122782606108644,
            0.0,
            0.7612313756223977,
        ];
        let pressure = 4.6517326255052485;
        let (out, n) = solve(nu.clone(), 4, phases.clone(), &feed, &ln_k, pressure);
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, phase_bit(3)); // X6's phase only
        assert!(n[0] > 1.0 && n[1] > 1.0, "{n:?}");
        let ln_a = ln_activities(&phases, &n, pressure);
        let affinity = |j: usize| (0..8).map(|i| nu[j * 8 + i] * ln_a[i]).sum::<f64>() - ln_k[j];
        for j in [0, 1, 3] {
            assert!(affinity(j).abs() < 1e-8, "reaction {j}: {}", affinity(j));
        }
        // 2 ln a_X6 = ln K_2 + 3 ln a_X0 + ln a_X1 + 6 ln a_X2 + 2 ln a_X3
        let ln_a6 = 0.5 * (ln_k[2] + 3.0 * ln_a[0] + ln_a[1] + 6.0 * ln_a[2] + 2.0 * ln_a[3]);
        assert!(ln_a6 <= 1e-9, "{ln_a6}");
    }

    #[test]
    fn a_case_whose_gas_every_attempt_emptied_is_settled_by_a_barrier_on_the_totals() {
        // Another random network of the benchmark: every phase set stalled
        // or emptied the gas (to 1e-78 mol, where its Newton iteration has
        // no curvature left); the barrier on the phase totals keeps the gas
        // in along the path, and the equilibrium holds 3.1 mol of it. Checked
        // by hand: both reactions without X6 at equilibrium, X6 absent with
        // activity <= 1.
        let g = Phase::Gas;
        let phases = vec![g, g, Phase::Pure, g, Phase::Pure, g, Phase::Pure];
        let nu = vec![
            -3.0, 0.0, -2.0, 0.0, 2.0, 0.0, 0.0, //
            -2.0, -6.0, -3.0, -3.0, 0.0, 2.0, 0.0, //
            -3.0, -6.0, -2.0, -3.0, 0.0, 0.0, 2.0,
        ];
        let ln_k = [41.853446338409455, -51.98258391152752, -16.785832101988447];
        let feed = [
            0.940317225150025,
            0.0,
            0.23759906674112696,
            0.0,
            0.8962558312081115,
            0.5515979540121999,
            0.13200033624286267,
        ];
        let pressure = 0.6223512420176428;
        let (out, n) = solve(nu.clone(), 3, phases.clone(), &feed, &ln_k, pressure);
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, phase_bit(3)); // X6's phase only
        let gas: f64 = [0, 1, 3, 5].iter().map(|&i| n[i]).sum();
        assert!(gas > 1.0, "{n:?}");
        let ln_a = ln_activities(&phases, &n, pressure);
        let affinity = |j: usize| (0..7).map(|i| nu[j * 7 + i] * ln_a[i]).sum::<f64>() - ln_k[j];
        for j in [0, 1] {
            assert!(affinity(j).abs() < 1e-8, "reaction {j}: {}", affinity(j));
        }
        // 2 ln a_X6 = ln K_2 + 3 ln a_X0 + 6 ln a_X1 + 2 ln a_X2 + 3 ln a_X3
        let ln_a6 = 0.5 * (ln_k[2] + 3.0 * ln_a[0] + 6.0 * ln_a[1] + 3.0 * ln_a[3]);
        assert!(ln_a6 <= 1e-9, "{ln_a6}");
    }

    #[test]
    fn a_pure_phase_tied_to_a_trace_gas_is_present_in_a_trace() {
        // X0 (gas) and the solid X1 are made only together, 1 : 6, so
        // X1 = 6 X0 at any extent; with ln K 80 for X0 + 6 X1 + X2 + 2 X3 =
        // 2 X4(s), X0 ends near 1e-31 mol and X1 with it: a solid present
        // in a trace. Every phase set stalled here (the blend that starts an
        // attempt put the pair back at 1e-10); the barrier path, followed
        // down to 1e-41, holds them at their amounts.
        let g = Phase::Gas;
        let phases = vec![g, Phase::Pure, g, g, Phase::Pure, Phase::Pure];
        let nu = vec![
            -1.0, -6.0, -1.0, -2.0, 2.0, 0.0, //
            -1.0, -6.0, -3.0, 0.0, 0.0, 2.0,
        ];
        let ln_k = [80.2013703519585, 68.92309892371964];
        let feed = [
            0.0,
            0.0,
            0.4545465506820648,
            0.9542691770844235,
            0.0,
            0.10642280265468328,
        ];
        let pressure = 0.12547547426219138;
        let (out, n) = solve(nu, 2, phases.clone(), &feed, &ln_k, pressure);
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, phase_bit(3)); // X5's phase only
        assert!(
            n[1] > 0.0 && (n[1] - 6.0 * n[0]).abs() <= 1e-12 * n[1],
            "{n:?}"
        );
        // with X1 and X4 present: ln a_X0 = -ln K_0 - ln a_X2 - 2 ln a_X3
        let ln_a = ln_activities(&phases, &n, pressure);
        let closed_form = -ln_k[0] - ln_a[2] - 2.0 * ln_a[3];
        assert!(
            (ln_a[0] - closed_form).abs() < 1e-8,
            "{} against {closed_form}",
            ln_a[0]
        );
        // 2 ln a_X5 = ln K_1 + ln a_X0 + 3 ln a_X2 <= 0: X5 stays absent
        assert!(ln_k[1] + ln_a[0] + 3.0 * ln_a[2] <= 1e-9);
    }

    #[test]
    fn a_solid_that_the_gas_composition_cannot_coexist_with_is_found_absent() {
        // X0(l) = 3 X1, 2 X0 = 3 X2(s), X0 = X3 (ln K 37, 29, -19): X2 = 2 X1 has
        // ln K = 44.5 / 6 = 7.4, so X2 would need y_X1 P = e^7.4 to coexist: it
        // goes, and X3 = 3 X1 (ln K 56) leaves a trace of X3. With X2 present
        // the gas composition is fixed and the Gibbs function linear along
        // gas <-> X2 (a singular Hessian; its Newton steps wander), so the
        // search must reach the set {X0, X2} absent. Conserved: X1 + 2 X2 + 3 X3.
        let nu = vec![
            -1.0, 3.0, 0.0, 0.0, -2.0, 0.0, 3.0, 0.0, -1.0, 0.0, 0.0, 1.0,
        ];
        let g = Phase::Gas;
        let (out, n) = solve(
            nu,
            3,
            vec![Phase::Pure, g, Phase::Pure, g],
            &[
                0.0,
                1.9164726416626026,
                1.7312160401194956,
                1.8933158142394317,
            ],
            &[36.95178615516027, 29.36358667852172, -19.25824509935729],
            1.4903608762167695,
        );
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, phase_bit(1) | phase_bit(2));
        let conserved = 1.9164726416626026 + 2.0 * 1.7312160401194956 + 3.0 * 1.8933158142394317;
        assert!((n[1] + 3.0 * n[3] - conserved).abs() < 1e-12 * conserved);
        // y3 P / (y1 P)^3 = e^-56.2 (closed form for the trace)
        let p = 1.4903608762167695;
        let ln_k = 36.95178615516027 + 19.25824509935729;
        let y3 = n[3] / (n[1] + n[3]);
        let y1 = n[1] / (n[1] + n[3]);
        assert!(((y3 * p).ln() - 3.0 * (y1 * p).ln() + ln_k).abs() < 1e-9);
    }

    #[test]
    fn a_small_gas_phase_is_introduced_in_its_favourable_composition() {
        // A random gas + liquid network (13 species, 9 reactions, ln K within
        // +-60) where every phase present stalls (the gas collapses from a
        // generic start) and the gas held absent is unstable: the gas must be
        // introduced in the composition the stability test found, without
        // touching the liquid's traces. The same case in tests/test_phases.py
        // is checked against an independent minimisation (scipy SLSQP), which
        // finds 0.00592 mol X3 and 0.01991 mol X4 in the gas.
        let (g, l) = (Phase::Gas, Phase::Solution(0));
        let nu = vec![
            0.0, 0.0, -1.0, -3.0, 2.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, -2.0, -3.0, -3.0,
            -3.0, 0.0, 2.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, -2.0, -1.0, -3.0, -3.0, 0.0, 0.0,
            2.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, -3.0, -2.0, -1.0, 0.0, 0.0, 0.0, 0.0, 2.0, 0.0, 0.0,
            0.0, 0.0, 0.0, -2.0, -1.0, -3.0, -3.0, 0.0, 0.0, 0.0, 0.0, 2.0, 0.0, 0.0, 0.0, 0.0,
            -2.0, -3.0, -2.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 2.0, 0.0, 0.0, 0.0, -3.0, 0.0, -3.0,
            -3.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 2.0, 0.0, 0.0, -3.0, -2.0, -1.0, -3.0, 0.0, 0.0,
            0.0, 0.0, 0.0, 0.0, 0.0, 2.0, 0.0, -3.0, 0.0, -2.0, -3.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0,
            0.0, 0.0, 2.0,
        ];
        let (out, n) = solve(
            nu,
            9,
            vec![l, l, g, g, g, l, l, g, g, l, g, l, l],
            &[
                0.29417420030962316,
                0.2681654925941327,
                0.906327824670275,
                0.4827348614131633,
                0.7074548031518766,
                0.5597317004715281,
                0.8264045366289907,
                0.2987268730634432,
                0.8308034538263424,
                0.7793723969112725,
                0.36255142922849604,
                0.5341632308493014,
                0.27308202565463324,
            ],
            &[
                20.120699170752914,
                -61.25361477499236,
                57.27935048179829,
                0.32755275710431064,
                -28.11652485056522,
                -57.584511344121154,
                2.9087431875822176,
                -18.74215293715118,
                0.18782644740732835,
            ],
            5.559400675090287,
        );
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, 0);
        assert!(
            (n[3] - 0.005922).abs() < 2e-6 && (n[4] - 0.019907).abs() < 2e-6,
            "{n:?}"
        );
    }

    #[test]
    fn liquid_products_that_cannot_coexist_with_their_gas_form_completely() {
        // A = B + C with B, C the only liquid species and ln K = 5: made from A
        // they are always x_B = x_C = 1/2, so a_B a_C / a_A = 1/4 < e^5 while
        // any A is left (a_A = 1): the gas vanishes (closed form).
        let (out, n) = solve(
            vec![-1.0, 1.0, 1.0],
            1,
            vec![Phase::Gas, Phase::Solution(0), Phase::Solution(0)],
            &[1.0, 0.0, 0.0],
            &[5.0],
            1.0,
        );
        assert_eq!(out.absent, phase_bit(0));
        assert_eq!(out.status, Status::Converged);
        assert_eq!(n, vec![0.0, 1.0, 1.0]);
    }

    /// Boudouard: C(s) + CO2 = 2 CO, species C, CO2, CO.
    fn boudouard(feed: &[f64], k: f64, p: f64) -> (Decided, Vec<f64>) {
        solve(
            vec![-1.0, -1.0, 2.0],
            1,
            vec![Phase::Pure, Phase::Gas, Phase::Gas],
            feed,
            &[k.ln()],
            p,
        )
    }

    #[test]
    fn boudouard_with_graphite_left_over_meets_the_closed_form() {
        // Carbon present: y_CO^2 / y_CO2 = K P0 / P, so with r = K / P,
        // y_CO = (-r + sqrt(r^2 + 4 r)) / 2 (closed form). From 1 mol CO2 and
        // 5 mol C: y_CO = 2 xi / (1 + xi).
        let (k, p) = (2.0_f64, 3.0);
        let ratio = k / p;
        let y = (-ratio + (ratio * ratio + 4.0 * ratio).sqrt()) / 2.0;
        let xi = y / (2.0 - y);
        let (out, n) = boudouard(&[5.0, 1.0, 0.0], k, p);
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, 0);
        assert!((n[2] - 2.0 * xi).abs() < 1e-9 * xi, "{n:?}");
        assert!((n[0] - (5.0 - xi)).abs() < 1e-9);
    }

    #[test]
    fn boudouard_uses_up_scarce_graphite_and_says_it_is_absent() {
        // With 0.1 mol C and the same K, P the closed-form extent (0.28) is
        // more than the carbon: all of it reacts (xi = 0.1), carbon is absent
        // and the gas is short of equilibrium: y_CO^2 P / y_CO2 < K.
        let (out, n) = boudouard(&[0.1, 1.0, 0.0], 2.0, 3.0);
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, phase_bit(1)); // the gas is 0, C is phase 1
        assert_eq!(n[0], 0.0);
        assert!((n[2] - 0.2).abs() < 1e-12 && (n[1] - 0.9).abs() < 1e-12);
    }

    #[test]
    fn carbon_forms_from_co_exactly_where_the_closed_form_says() {
        // 2 CO = C + CO2 from a CO + CO2 gas: carbon forms iff
        // y_CO^2 P / y_CO2 > K (the Boudouard K). Feed 1 CO + 1 CO2 at P = 1:
        // Q = 0.5, so carbon forms for K < 0.5 and not for K > 0.5.
        let (out, n) = boudouard(&[0.0, 1.0, 1.0], 0.45, 1.0);
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, 0);
        assert!(n[0] > 0.0);
        let y_co = n[2] / (n[1] + n[2]);
        let q = y_co * y_co / (1.0 - y_co);
        assert!((q / 0.45 - 1.0).abs() < 1e-9, "{q}");
        let (out, n) = boudouard(&[0.0, 1.0, 1.0], 0.55, 1.0);
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, phase_bit(1));
        assert_eq!(n, vec![0.0, 1.0, 1.0]);
    }

    #[test]
    fn calcite_decomposes_until_the_co2_pressure_is_k_p0() {
        // CaCO3(s) = CaO(s) + CO2 with N2: both solids present while
        // y_CO2 = K / P; xi = N y / (1 - y) (closed form). With too little
        // CaCO3 for that, all of it decomposes and CaCO3 is absent.
        let sys = |feed: &[f64]| {
            solve(
                vec![-1.0, 1.0, 1.0, 0.0],
                1,
                vec![Phase::Pure, Phase::Pure, Phase::Gas, Phase::Gas],
                feed,
                &[0.2_f64.ln()],
                1.0,
            )
        };
        let (out, n) = sys(&[1.0, 0.0, 0.0, 1.0]);
        assert_eq!((out.status, out.absent), (Status::Converged, 0));
        let xi = 1.0 * 0.2 / 0.8;
        assert!(
            (n[2] - xi).abs() < 1e-9 * xi && (n[0] - (1.0 - xi)).abs() < 1e-9,
            "{n:?}"
        );
        let (out, n) = sys(&[0.1, 0.0, 0.0, 1.0]);
        assert_eq!(out.status, Status::Converged);
        assert_eq!(out.absent, phase_bit(1)); // CaCO3 is phase 1, CaO phase 2
        assert_eq!(n[0], 0.0);
        assert!((n[1] - 0.1).abs() < 1e-15 && (n[2] - 0.1).abs() < 1e-15);
        // and a CaO + CO2 feed at a CO2 pressure above K P0 carbonates
        let (out, n) = sys(&[0.0, 1.0, 1.0, 1.0]);
        assert_eq!((out.status, out.absent), (Status::Converged, 0));
        assert!((n[2] / (n[2] + n[3]) - 0.2).abs() < 1e-10, "{n:?}");
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
            vec![Phase::Gas, Phase::Solution(0), Phase::Gas],
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
            vec![Phase::Gas, Phase::Solution(0), Phase::Solution(0)],
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
