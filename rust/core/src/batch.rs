//! The batch driver: many cases, one system, all cores.
//!
//! Cases are split into fixed chunks and solved on rayon's work-stealing
//! threads. Each case's result depends only on its own inputs (the zero
//! pattern analysis is computed once per pattern before the parallel loop),
//! so results are bit-identical whatever the number of threads. Each thread
//! reuses one [`Workspace`]; nothing is allocated per case.

use std::collections::HashMap;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};

use rayon::prelude::*;
use smallvec::{smallvec, SmallVec};

use crate::condensed::ReducedRun;
use crate::error::CoreError;
use crate::face::{analyse, Face, FaceError, SharedFace};
use crate::lanes::{lane_kernel_for, LaneCase, LaneKernel};
use crate::presence;
use crate::solver::{kernel_for, solve_on_face, Case, FixedKernel, SolveOptions, Workspace};
use crate::status::Status;
use crate::system::{System, MAX_PHASES};

/// Mole fraction of each species within its own phase, from one case's
/// `amounts` (S): `n_i / N_phase`, 0 in an empty phase, NaN where the amounts
/// are NaN. The one definition the batch outputs and the Python results use.
pub fn mole_fractions(system: &System, amounts: &[f64], fractions: &mut [f64]) {
    let mut totals = [0.0; MAX_PHASES];
    let s = system.n_species();
    for i in 0..s {
        totals[system.phase_index(i)] += amounts[i];
    }
    for i in 0..s {
        let total = totals[system.phase_index(i)];
        fractions[i] = if total > 0.0 {
            amounts[i] / total
        } else if total.is_nan() {
            f64::NAN
        } else {
            0.0
        };
    }
}

/// Cases per parallel task: large enough to amortise scheduling, small
/// enough to balance cases of uneven cost.
const CHUNK: usize = 64;
/// Cases per parallel task on the lane path ([`crate::lanes`]): lanes that
/// finish take the next case of their task, so longer tasks leave fewer
/// lanes idle while a task drains.
const LANE_CHUNK: usize = 256;

/// Per-case inputs. Each array holds either one row (broadcast to every
/// case) or `n_cases` rows, row-major.
#[derive(Clone, Copy, Debug)]
pub struct BatchInputs<'a> {
    pub n_cases: usize,
    /// Feed amounts, mol: `1 x S` or `n_cases x S`.
    pub feed: &'a [f64],
    /// Natural logarithms of the equilibrium constants: `1 x R` or `n_cases x R`.
    pub ln_k: &'a [f64],
    /// Pressure, bar: length 1 or `n_cases`.
    pub pressure: &'a [f64],
    /// Optional starting extents (a warm start): `1 x R` or `n_cases x R`.
    /// A start that is not strictly feasible for a case is ignored there.
    pub start: Option<&'a [f64]>,
}

/// Per-case outputs, all `n_cases` rows, row-major.
#[derive(Debug)]
pub struct BatchOutputs<'a> {
    /// Equilibrium amounts, mol (`n_cases x S`).
    pub amounts: &'a mut [f64],
    /// Extents of the system's reactions, mol (`n_cases x R`).
    pub extents: &'a mut [f64],
    /// Mole fraction of each species within its own phase (`n_cases x S`),
    /// when wanted (callers that can compute them later save the memory).
    pub mole_fractions: Option<&'a mut [f64]>,
    /// [`Status`] codes (`n_cases`).
    pub status: &'a mut [u8],
    /// Newton iterations taken (`n_cases`).
    pub iterations: &'a mut [u32],
    /// Per case, the phases found absent and stable ([`crate::presence`]),
    /// one bit per phase index ([`crate::presence::phase_bit`]), when wanted.
    pub absent: Option<&'a mut [u64]>,
}

/// Where a broadcastable input's row for case `k` starts.
#[derive(Clone, Copy)]
pub(crate) struct Rows {
    width: usize,
    broadcast: bool,
}

impl Rows {
    pub(crate) fn check(
        name: &str,
        len: usize,
        width: usize,
        n_cases: usize,
    ) -> Result<Self, CoreError> {
        if len == width {
            Ok(Rows {
                width,
                broadcast: true,
            })
        } else if len == width * n_cases {
            Ok(Rows {
                width,
                broadcast: false,
            })
        } else {
            Err(CoreError::Shape(format!(
                "{name} has {len} values; expected {width} (one row) or {n_cases} x {width}"
            )))
        }
    }

    pub(crate) fn row<'a>(&self, data: &'a [f64], case: usize) -> &'a [f64] {
        let start = if self.broadcast { 0 } else { case * self.width };
        &data[start..start + self.width]
    }

    /// The rows of cases `lo..hi` (the one row, when it is broadcast).
    pub(crate) fn rows<'a>(&self, data: &'a [f64], lo: usize, hi: usize) -> &'a [f64] {
        if self.broadcast {
            data
        } else {
            &data[lo * self.width..hi * self.width]
        }
    }
}

fn pattern_words(n_species: usize) -> usize {
    n_species.div_ceil(64).max(1)
}

/// A feed's zero pattern, one bit per species: inline up to 128 species, so
/// a small call (an optimiser's single case) allocates no keys.
pub(crate) type PatternKey = SmallVec<[u64; 2]>;

fn pattern_key(n_species: usize) -> PatternKey {
    smallvec![0; pattern_words(n_species)]
}

/// Feeds below this are indistinguishable from zero in float64 (their
/// reciprocal overflows): they count as zero in the reachability analysis.
pub const TINY_FEED: f64 = 1e-300;

fn zero_pattern(feed: &[f64], key: &mut [u64]) {
    key.fill(0);
    for (i, &v) in feed.iter().enumerate() {
        if v < TINY_FEED {
            key[i / 64] |= 1 << (i % 64);
        }
    }
}

pub(crate) fn feed_is_valid(feed: &[f64]) -> bool {
    let mut total = 0.0;
    let mut lowest = 0.0_f64;
    for &v in feed {
        total += v;
        lowest = lowest.min(v);
    }
    // `lowest` is NaN-propagating through `total`; a negative entry makes it < 0.
    lowest >= 0.0 && total > 0.0 && total < f64::INFINITY
}

fn case_is_valid(feed: &[f64], ln_k: &[f64], pressure: f64) -> bool {
    // One pass each, no early exit: these arrays are a few entries long.
    let mut ln_k_sum = 0.0;
    for &v in ln_k {
        ln_k_sum += v * 0.0; // NaN for any non-finite entry
    }
    feed_is_valid(feed) && ln_k_sum == 0.0 && pressure > 0.0 && pressure < f64::INFINITY
}

/// The faces of every distinct zero pattern of a batch. Few patterns
/// (the usual batch has one to a handful) are found by a scan of `keys`;
/// a hash index is built once there are more than [`FaceTable::SCAN`].
#[derive(Default)]
pub(crate) struct FaceTable {
    keys: SmallVec<[PatternKey; 2]>,
    index: HashMap<PatternKey, usize>,
    faces: SmallVec<[Arc<Result<Face, FaceError>>; 2]>,
}

impl FaceTable {
    const SCAN: usize = 16;

    /// Where pattern `key` is in `faces`.
    fn find(&self, key: &[u64]) -> Option<usize> {
        if self.keys.len() <= Self::SCAN {
            self.keys.iter().position(|k| k[..] == *key)
        } else {
            self.index.get(key).copied()
        }
    }

    fn insert(&mut self, key: PatternKey, face: Arc<Result<Face, FaceError>>) {
        let at = self.faces.len();
        self.faces.push(face);
        self.keys.push(key);
        if self.keys.len() == Self::SCAN + 1 {
            for (k, key) in self.keys.iter().enumerate() {
                self.index.insert(key.clone(), k);
            }
        } else if self.keys.len() > Self::SCAN + 1 {
            self.index.insert(self.keys[at].clone(), at);
        }
    }
}

/// A per-thread cursor into a [`FaceTable`]: the key buffer and the last
/// pattern looked up (sweeps usually share one pattern, so the hash lookup
/// is skipped and nothing is allocated per case).
pub(crate) struct FaceCursor {
    key: PatternKey,
    last_key: PatternKey,
    last: Option<usize>,
    /// [`FaceCursor::face_or_analyse`]'s last face and its pattern, and
    /// every face it analysed (a thread analyses a pattern at most once).
    held: Option<(PatternKey, SharedFace)>,
    seen: HashMap<PatternKey, SharedFace>,
}

impl FaceCursor {
    pub(crate) fn new(n_species: usize) -> Self {
        FaceCursor {
            key: pattern_key(n_species),
            last_key: pattern_key(n_species),
            last: None,
            held: None,
            seen: HashMap::new(),
        }
    }

    /// The face of `feed`'s zero pattern from `table`, or, for a pattern
    /// the table lacks (batches whose reduced run settles most cases leave
    /// it empty), from the system's memo, analysed on first need.
    pub(crate) fn face_or_analyse(
        &mut self,
        table: &FaceTable,
        system: &System,
        feed: &[f64],
    ) -> &Result<Face, FaceError> {
        zero_pattern(feed, &mut self.key);
        let same = matches!(&self.held, Some((key, _)) if *key == self.key);
        if !same {
            let face = match (table.find(&self.key), self.seen.get(&self.key)) {
                (Some(k), _) => table.faces[k].clone(),
                (None, Some(face)) => face.clone(),
                (None, None) => {
                    let face = system.face_memo().get_or_analyse(&self.key, || {
                        let zero: Vec<bool> = feed.iter().map(|&v| v < TINY_FEED).collect();
                        analyse(system, &zero)
                    });
                    self.seen.insert(self.key.clone(), face.clone());
                    face
                }
            };
            self.held = Some((self.key.clone(), face));
        }
        match &self.held {
            Some((_, face)) => face,
            None => unreachable!("held was just set"),
        }
    }

    /// The face of `feed`'s zero pattern; `None` if it was not analysed,
    /// `Some(Err)` if its analysis failed.
    pub(crate) fn face<'t>(
        &mut self,
        table: &'t FaceTable,
        feed: &[f64],
    ) -> Option<&'t Result<Face, FaceError>> {
        zero_pattern(feed, &mut self.key);
        // (word by word: a slice comparison would call memcmp per case)
        let same = self.key.iter().zip(&self.last_key).all(|(a, b)| a == b);
        if self.last.is_none() || !same {
            self.last = table.find(&self.key);
            self.last_key.copy_from_slice(&self.key);
        }
        self.last.map(|k| &*table.faces[k])
    }
}

/// Analyse every distinct zero pattern among the valid feeds. The scan for
/// patterns runs in parallel blocks (it reads every feed once before the
/// solve); patterns are then analysed once each, in order of first
/// appearance, so the table does not depend on the number of threads.
/// With `parallel`, call it on the pool that is to do the work.
pub(crate) fn faces_for(
    system: &System,
    inputs: &BatchInputs,
    rows: Rows,
    parallel: bool,
) -> FaceTable {
    const BLOCK: usize = 16_384;
    let s = system.n_species();
    let n_rows = if rows.broadcast { 1 } else { inputs.n_cases };
    // Per block: its distinct patterns and a case that has each.
    type Found = SmallVec<[(PatternKey, usize); 2]>;
    let scan = |block: usize| -> Found {
        let mut found = Found::new();
        let mut key = pattern_key(s);
        for case in block * BLOCK..((block + 1) * BLOCK).min(n_rows) {
            let feed = rows.row(inputs.feed, case);
            if !feed_is_valid(feed) {
                continue;
            }
            zero_pattern(feed, &mut key);
            // (word by word: a slice comparison calls memcmp for every case)
            if !found
                .iter()
                .any(|(k, _)| k.iter().zip(&key).all(|(a, b)| a == b))
            {
                found.push((key.clone(), case));
            }
        }
        found
    };
    let mut table = FaceTable::default();
    let mut add = |found: Found| {
        for (key, case) in found {
            if table.find(&key).is_none() {
                let feed = rows.row(inputs.feed, case);
                let face = system.face_memo().get_or_analyse(&key, || {
                    let zero: Vec<bool> = feed.iter().map(|&v| v < TINY_FEED).collect();
                    analyse(system, &zero)
                });
                table.insert(key, face);
            }
        }
    };
    let blocks = n_rows.div_ceil(BLOCK);
    if parallel && blocks > 1 {
        let found: Vec<Found> = (0..blocks).into_par_iter().map(scan).collect();
        found.into_iter().for_each(&mut add);
    } else {
        (0..blocks).map(scan).for_each(&mut add);
    }
    table
}

/// Solve every case of a batch. Errors are only for inconsistent array sizes
/// or options; a bad case gets [`Status::InvalidInput`] and NaN outputs.
/// `threads`: `None` uses rayon's global pool (all cores), `Some(k)` a pool
/// of `k` threads.
pub fn solve_batch(
    system: &System,
    inputs: &BatchInputs,
    outputs: &mut BatchOutputs,
    options: &SolveOptions,
    threads: Option<usize>,
) -> Result<(), CoreError> {
    let n = inputs.n_cases;
    let rows = check_batch(system, inputs, outputs, options)?;
    if n == 0 {
        return Ok(());
    }
    if n > PURE_BLOCK && system.has_pure() && system.reduced().is_some() {
        return solve_in_blocks(system, inputs, rows, outputs, options, threads);
    }
    let serial = threads == Some(1) || n <= CHUNK;
    // One pool for the whole call (`None`: rayon's global pool).
    let pool = if serial { None } else { pool_for(threads)? };
    // (with a reduced run, the few cases it does not settle find their faces
    // as they need them: no scan of every feed)
    let lazy = system.has_pure() && system.reduced().is_some();
    let faces = match &pool {
        _ if lazy => FaceTable::default(),
        Some(pool) => pool.install(|| faces_for(system, inputs, rows.feed, true)),
        None => faces_for(system, inputs, rows.feed, !serial),
    };
    // Systems with pure species: every case on the system without them
    // first (crate::condensed), in the same pool.
    let reduced = match system.reduced() {
        Some(reduced) if system.has_pure() => {
            let run = || ReducedRun::new(reduced, system, inputs, options, threads);
            Some(match &pool {
                Some(pool) => pool.install(run)?,
                None => run()?,
            })
        }
        _ => None,
    };
    let mut plan = BatchPlan::new(system, inputs, rows, options, faces, threads);
    plan.reduced = reduced;
    let chunks = Chunk::split(outputs, plan.chunk_len, plan.s, plan.r);
    if serial {
        let mut state = ChunkState::new(system);
        for chunk in chunks {
            plan.run_chunk(&mut state, chunk);
        }
        return Ok(());
    }
    run_in_parallel(&plan, chunks, pool.as_deref());
    Ok(())
}

/// Cases per block of a batch with pure species: each block is solved on
/// the reduced system and then on the full one, so the reduced run's
/// buffers stay small and are reused from block to block (one buffer for
/// a million cases costs more in fresh pages than the blocks' extra
/// synchronisation).
const PURE_BLOCK: usize = 131_072;

/// [`solve_batch`] block by block ([`PURE_BLOCK`]); the results do not
/// depend on the blocks (every case is solved on its own inputs).
fn solve_in_blocks(
    system: &System,
    inputs: &BatchInputs,
    rows: InputRows,
    outputs: &mut BatchOutputs,
    options: &SolveOptions,
    threads: Option<usize>,
) -> Result<(), CoreError> {
    let (n, s, r) = (inputs.n_cases, system.n_species(), system.n_reactions());
    for lo in (0..n).step_by(PURE_BLOCK) {
        let hi = (lo + PURE_BLOCK).min(n);
        let block = BatchInputs {
            n_cases: hi - lo,
            feed: rows.feed.rows(inputs.feed, lo, hi),
            ln_k: rows.ln_k.rows(inputs.ln_k, lo, hi),
            pressure: rows.pressure.rows(inputs.pressure, lo, hi),
            start: match (inputs.start, rows.start) {
                (Some(x0), Some(layout)) => Some(layout.rows(x0, lo, hi)),
                _ => None,
            },
        };
        let mut out = BatchOutputs {
            amounts: &mut outputs.amounts[lo * s..hi * s],
            extents: &mut outputs.extents[lo * r..hi * r],
            mole_fractions: outputs
                .mole_fractions
                .as_deref_mut()
                .map(|y| &mut y[lo * s..hi * s]),
            status: &mut outputs.status[lo..hi],
            iterations: &mut outputs.iterations[lo..hi],
            absent: outputs.absent.as_deref_mut().map(|a| &mut a[lo..hi]),
        };
        solve_batch(system, &block, &mut out, options, threads)?;
    }
    Ok(())
}

/// The row layout of every input array of a batch.
#[derive(Clone, Copy)]
struct InputRows {
    feed: Rows,
    ln_k: Rows,
    pressure: Rows,
    start: Option<Rows>,
}

/// Check the options and the size of every input and output array of a
/// batch; returns the inputs' row layout.
fn check_batch(
    system: &System,
    inputs: &BatchInputs,
    outputs: &BatchOutputs,
    options: &SolveOptions,
) -> Result<InputRows, CoreError> {
    let n = inputs.n_cases;
    let s = system.n_species();
    let r = system.n_reactions();
    if !(options.tol > 0.0 && options.tol.is_finite()) {
        return Err(CoreError::BadOption(format!(
            "tol must be positive, got {}",
            options.tol
        )));
    }
    let rows = InputRows {
        feed: Rows::check("feed", inputs.feed.len(), s, n)?,
        ln_k: Rows::check("ln_k", inputs.ln_k.len(), r, n)?,
        pressure: Rows::check("pressure", inputs.pressure.len(), 1, n)?,
        start: match inputs.start {
            Some(x0) => Some(Rows::check("start", x0.len(), r, n)?),
            None => None,
        },
    };
    for (name, len, width) in [
        ("amounts", outputs.amounts.len(), s),
        ("extents", outputs.extents.len(), r),
        (
            "mole_fractions",
            outputs.mole_fractions.as_ref().map_or(n * s, |y| y.len()),
            s,
        ),
        ("status", outputs.status.len(), 1),
    ] {
        if len != n * width {
            return Err(CoreError::Shape(format!(
                "{name} output has {len} values, expected {}",
                n * width
            )));
        }
    }
    if outputs.iterations.len() != n {
        return Err(CoreError::Shape(
            "iterations output has the wrong length".into(),
        ));
    }
    Ok(rows)
}

/// One case's inputs, broadcast rows included: feed, ln K, pressure and the
/// optional start.
type CaseInputs<'a> = (&'a [f64], &'a [f64], f64, Option<&'a [f64]>);

/// Everything fixed for one batch that the threads share: the system, the
/// inputs and their layout, the faces of the batch's zero patterns, the
/// kernels and the chunk length.
struct BatchPlan<'a> {
    system: &'a System,
    inputs: &'a BatchInputs<'a>,
    rows: InputRows,
    options: &'a SolveOptions,
    faces: FaceTable,
    /// The specialised scalar kernel ([`kernel_for`]), if any.
    kernel: Option<FixedKernel>,
    /// The lane kernel ([`lane_kernel_for`]), where the batch may use it.
    lane_kernel: Option<LaneKernel>,
    /// Cases per chunk.
    chunk_len: usize,
    s: usize,
    r: usize,
    /// With pure species: every case solved without them first.
    reduced: Option<ReducedRun<'a>>,
}

impl<'a> BatchPlan<'a> {
    /// The plan of a checked, non-empty batch on `threads`.
    fn new(
        system: &'a System,
        inputs: &'a BatchInputs<'a>,
        rows: InputRows,
        options: &'a SolveOptions,
        faces: FaceTable,
        threads: Option<usize>,
    ) -> Self {
        let (n, s, r) = (inputs.n_cases, system.n_species(), system.n_reactions());
        let gas_only = system.gas_only();
        let kernel = kernel_for(r, s, gas_only);
        // All-gas small systems solve their eligible cases in vector lanes
        // (chained starts, which need the case before, go one at a time).
        let lane_kernel = if gas_only && !options.chain {
            lane_kernel_for(r, s)
        } else {
            None
        };
        // Lane tasks: long, but at least eight per thread so that small batches
        // still spread over every core (lane results do not depend on chunking).
        let chunk_len = if lane_kernel.is_some() {
            let workers = threads.unwrap_or_else(rayon::current_num_threads).max(1);
            (n / (8 * workers)).clamp(CHUNK, LANE_CHUNK)
        } else {
            CHUNK
        };
        BatchPlan {
            system,
            inputs,
            rows,
            options,
            faces,
            kernel,
            lane_kernel,
            chunk_len,
            s,
            r,
            reduced: None,
        }
    }

    /// The inputs of case `case`, broadcast rows included.
    #[inline(always)]
    fn case_inputs(&self, case: usize) -> CaseInputs<'a> {
        let (inputs, rows) = (self.inputs, self.rows);
        (
            rows.feed.row(inputs.feed, case),
            rows.ln_k.row(inputs.ln_k, case),
            rows.pressure.row(inputs.pressure, case)[0],
            inputs
                .start
                .zip(rows.start)
                .map(|(x0, rows)| rows.row(x0, case)),
        )
    }

    /// The rest of a solved case's outputs: NaN amounts and extents for a
    /// bad case, the absent-phase mask and the mole fractions (when wanted).
    #[inline(always)]
    fn finish(&self, out: CaseOut, st: Status, absent: u64) {
        let bad = st == Status::InvalidInput || st == Status::Infeasible;
        if bad {
            out.amounts.fill(f64::NAN);
            out.extents.fill(f64::NAN);
        }
        if let Some(mask) = out.absent {
            *mask = absent;
        }
        if let Some(fractions) = out.fractions {
            mole_fractions(self.system, out.amounts, fractions);
        }
    }

    /// Solve every case of `chunk`, with `ws` the thread's state.
    fn run_chunk(&self, ws: &mut ChunkState, chunk: Chunk) {
        let Chunk { index, out } = chunk;
        match self.lane_kernel {
            Some(lane_kernel) => self.run_lanes(lane_kernel, ws, index, out),
            None => self.run_in_order(ws, index, out),
        }
    }

    /// Solve chunk `index` with the lane kernel: the eligible cases (valid,
    /// on a full face) in the lanes, the rest one at a time. Which path a
    /// case takes depends on its own inputs only.
    fn run_lanes(
        &self,
        lane_kernel: LaneKernel,
        ws: &mut ChunkState,
        index: usize,
        mut out: ChunkOut,
    ) {
        let (s, r) = (self.s, self.r);
        let n_local = out.status.len();
        let mut eligible = [false; LANE_CHUNK];
        let cases = self.lane_cases(ws, index, n_local, &mut eligible);
        let mut outcome = [(Status::InvalidInput, 0); LANE_CHUNK];
        lane_kernel(
            self.system,
            &cases,
            self.options,
            out.amounts,
            out.extents,
            &mut outcome,
        );
        for local in 0..n_local {
            let case = out.case(local, s, r);
            let mut absent = 0;
            if !eligible[local] {
                let (feed, ln_k, pressure, start) =
                    self.case_inputs(index * self.chunk_len + local);
                let (st, it, mask) = ws.solve(
                    self.system,
                    &self.faces,
                    feed,
                    ln_k,
                    pressure,
                    start,
                    self.options,
                    (self.kernel, None),
                    case.amounts,
                    case.extents,
                );
                outcome[local] = (st, it);
                absent = mask;
            }
            let (st, it) = outcome[local];
            *case.status = st as u8;
            *case.iterations = it;
            self.finish(case, st, absent);
        }
    }

    /// The cases of chunk `index` (`n_local` of them) that the lanes take,
    /// each marked in `eligible`: valid, and on a full face.
    fn lane_cases<'t>(
        &'t self,
        ws: &mut ChunkState,
        index: usize,
        n_local: usize,
        eligible: &mut [bool; LANE_CHUNK],
    ) -> SmallVec<[LaneCase<'t>; 4]> {
        // (inline for the optimiser's small calls)
        let mut cases = SmallVec::with_capacity(n_local);
        for local in 0..n_local {
            let (feed, ln_k, pressure, start) = self.case_inputs(index * self.chunk_len + local);
            if !case_is_valid(feed, ln_k, pressure) {
                continue;
            }
            if let Some(Ok(face)) = ws.faces.face(&self.faces, feed) {
                if face.dim == self.r {
                    eligible[local] = true;
                    cases.push(LaneCase {
                        row: local,
                        feed,
                        start,
                        ln_k,
                        pressure,
                        face,
                    });
                }
            }
        }
        cases
    }

    /// Solve the cases of chunk `index` one at a time, in order; with
    /// chained starts each case without a start of its own starts from the
    /// case before it when that one converged.
    fn run_in_order(&self, ws: &mut ChunkState, index: usize, mut out: ChunkOut) {
        let (s, r) = (self.s, self.r);
        let n_local = out.status.len();
        let mut previous_converged = false;
        for local in 0..n_local {
            let (feed, ln_k, pressure, start) = self.case_inputs(index * self.chunk_len + local);
            let chained = self.options.chain && start.is_none() && previous_converged;
            // The cases before this one in the chunk are finished: a chained
            // start reads the previous case's extents from the output.
            let (case, before) = out.case_after(local, s, r);
            let start = if chained {
                Some(&before[(local - 1) * r..])
            } else {
                start
            };
            let reduced = self
                .reduced
                .as_ref()
                .map(|run| (run, index * self.chunk_len + local));
            let (st, it, absent) = ws.solve(
                self.system,
                &self.faces,
                feed,
                ln_k,
                pressure,
                start,
                self.options,
                (self.kernel, reduced),
                case.amounts,
                case.extents,
            );
            *case.status = st as u8;
            *case.iterations = it;
            previous_converged = st.is_converged();
            self.finish(case, st, absent);
        }
    }
}

/// Solve `chunks` on `pool` (`None`: rayon's global pool). The calling
/// thread works too: it starts on the first chunk at once while pool threads
/// wake up and join in (waking a sleeping pool costs tens of microseconds,
/// as much as a thousand cases on the lane path). Chunks are handed out in
/// order from a shared counter; which thread solves a chunk does not change
/// its results.
fn run_in_parallel<'w>(
    plan: &BatchPlan,
    chunks: impl Iterator<Item = Chunk<'w>>,
    pool: Option<&rayon::ThreadPool>,
) {
    let work: Vec<Mutex<Option<Chunk>>> = chunks.map(|c| Mutex::new(Some(c))).collect();
    let next = AtomicUsize::new(0);
    let drain = || {
        let mut state = ChunkState::new(plan.system);
        loop {
            let k = next.fetch_add(1, Ordering::Relaxed);
            let Some(slot) = work.get(k) else {
                break;
            };
            let item = slot.lock().ok().and_then(|mut taken| taken.take());
            if let Some(chunk) = item {
                plan.run_chunk(&mut state, chunk);
            }
        }
    };
    // The caller and up to `workers - 1` pool threads drain the chunks.
    let workers = pool
        .map_or_else(rayon::current_num_threads, |p| p.current_num_threads())
        .min(work.len())
        .max(1);
    match pool {
        Some(pool) => pool.in_place_scope(|scope| spread(scope, workers, &drain)),
        None => rayon::in_place_scope(|scope| spread(scope, workers, &drain)),
    }
}

/// Run `drain` on `workers - 1` threads of `scope`'s pool and on the caller.
fn spread<'scope>(scope: &rayon::Scope<'scope>, workers: usize, drain: &'scope (impl Fn() + Sync)) {
    for _ in 1..workers {
        scope.spawn(move |_| drain());
    }
    drain();
}

/// Pools of a given size, built once per process and kept: building a pool
/// starts its threads (tens of microseconds each), more than a small batch
/// takes to solve. A handful of sizes at most are ever asked for.
static POOLS: Mutex<Vec<(usize, Arc<rayon::ThreadPool>)>> = Mutex::new(Vec::new());

/// A pool of `k` threads for `Some(k)` (built on first use, then reused);
/// `None` for rayon's global pool.
fn pool_for(threads: Option<usize>) -> Result<Option<Arc<rayon::ThreadPool>>, CoreError> {
    let k = match threads {
        Some(0) => return Err(CoreError::BadOption("threads must be at least 1".into())),
        Some(k) => k,
        None => return Ok(None),
    };
    let mut pools = POOLS
        .lock()
        .unwrap_or_else(|poisoned| poisoned.into_inner());
    if let Some((_, pool)) = pools.iter().find(|(size, _)| *size == k) {
        return Ok(Some(Arc::clone(pool)));
    }
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(k)
        .build()
        .map_err(|e| CoreError::BadOption(format!("cannot start {k} threads: {e}")))?;
    let pool = Arc::new(pool);
    pools.push((k, Arc::clone(&pool)));
    Ok(Some(pool))
}

/// Run `work` on rayon's global pool (`None`: all cores) or on a pool of
/// `k` threads.
pub(crate) fn on_threads(
    threads: Option<usize>,
    work: impl FnOnce() + Send,
) -> Result<(), CoreError> {
    match pool_for(threads)? {
        Some(pool) => pool.install(work),
        None => work(),
    }
    Ok(())
}

/// The outputs of one chunk of consecutive cases (its rows of every output
/// array), and which chunk it is.
struct Chunk<'w> {
    index: usize,
    out: ChunkOut<'w>,
}

struct ChunkOut<'w> {
    amounts: &'w mut [f64],
    extents: &'w mut [f64],
    fractions: Option<&'w mut [f64]>,
    absent: Option<&'w mut [u64]>,
    status: &'w mut [u8],
    iterations: &'w mut [u32],
}

/// The outputs of one case.
struct CaseOut<'c> {
    amounts: &'c mut [f64],
    extents: &'c mut [f64],
    fractions: Option<&'c mut [f64]>,
    absent: Option<&'c mut u64>,
    status: &'c mut u8,
    iterations: &'c mut u32,
}

impl<'w> Chunk<'w> {
    /// Cut every output into chunks of `len` cases (lazily: a serial call
    /// allocates nothing for them).
    fn split(
        outputs: &'w mut BatchOutputs,
        len: usize,
        s: usize,
        r: usize,
    ) -> impl Iterator<Item = Chunk<'w>> {
        let mut fractions = outputs
            .mole_fractions
            .as_deref_mut()
            .map(|y| y.chunks_mut(len * s));
        let mut absent = outputs.absent.as_deref_mut().map(|a| a.chunks_mut(len));
        outputs
            .amounts
            .chunks_mut(len * s)
            .zip(outputs.extents.chunks_mut(len * r))
            .zip(outputs.status.chunks_mut(len))
            .zip(outputs.iterations.chunks_mut(len))
            .enumerate()
            .map(
                move |(index, (((amounts, extents), status), iterations))| Chunk {
                    index,
                    out: ChunkOut {
                        amounts,
                        extents,
                        fractions: fractions.as_mut().and_then(Iterator::next),
                        absent: absent.as_mut().and_then(Iterator::next),
                        status,
                        iterations,
                    },
                },
            )
    }
}

impl ChunkOut<'_> {
    /// The outputs of the chunk's case `local`.
    fn case(&mut self, local: usize, s: usize, r: usize) -> CaseOut<'_> {
        self.case_after(local, s, r).0
    }

    /// The outputs of case `local`, and the extents of the cases before it
    /// (finished: a chained start reads them).
    fn case_after(&mut self, local: usize, s: usize, r: usize) -> (CaseOut<'_>, &[f64]) {
        let (before, current) = self.extents.split_at_mut(local * r);
        let case = CaseOut {
            amounts: &mut self.amounts[local * s..(local + 1) * s],
            extents: &mut current[..r],
            fractions: self
                .fractions
                .as_deref_mut()
                .map(|y| &mut y[local * s..(local + 1) * s]),
            absent: self.absent.as_deref_mut().map(|m| &mut m[local]),
            status: &mut self.status[local],
            iterations: &mut self.iterations[local],
        };
        (case, before)
    }
}

/// One thread's state: its workspace and its place in the face table.
struct ChunkState {
    /// The general solve's scratch, made when a case first needs it (lane
    /// cases do not; a one-case call saves its allocation).
    workspace: Option<Workspace>,
    faces: FaceCursor,
}

impl ChunkState {
    fn new(system: &System) -> Self {
        ChunkState {
            workspace: None,
            faces: FaceCursor::new(system.n_species()),
        }
    }

    #[allow(clippy::too_many_arguments)]
    fn solve(
        &mut self,
        system: &System,
        faces: &FaceTable,
        feed: &[f64],
        ln_k: &[f64],
        pressure: f64,
        start: Option<&[f64]>,
        options: &SolveOptions,
        (kernel, reduced): (Option<FixedKernel>, Option<(&ReducedRun, usize)>),
        amounts: &mut [f64],
        extents: &mut [f64],
    ) -> (Status, u32, u64) {
        if !case_is_valid(feed, ln_k, pressure) {
            return (Status::InvalidInput, 0, 0);
        }
        // (a case the system without its pure species settles needs no face;
        // one where it finds pure phases that form starts from its answer)
        let mut forming = None;
        if let Some((run, index)) = reduced {
            match run.take(system, index, feed, ln_k, pressure, amounts, extents) {
                Ok(outcome) => return outcome,
                Err(found) => forming = found,
            }
        }
        let Ok(face) = self.faces.face_or_analyse(faces, system, feed) else {
            return (Status::Infeasible, 0, 0);
        };
        let case = Case {
            face,
            feed,
            ln_k,
            pressure,
            start,
        };
        let workspace = self.workspace.get_or_insert_with(|| Workspace::new(system));
        if system.has_pure() {
            let mut absent = presence::initially_absent(system, feed);
            let start = forming.map(|mask| {
                absent &= !mask;
                extents.to_vec()
            });
            // (every phase present once the forming ones are: one solve first)
            if let (Some(x0), 0) = (start.as_deref(), absent) {
                if let Some((status, iterations)) = presence::solve_all_present(
                    system, &case, options, workspace, amounts, extents, x0,
                ) {
                    return (status, iterations, 0);
                }
            }
            let from = (absent, start.as_deref());
            let found =
                presence::decide_phases(system, &case, options, workspace, amounts, extents, from);
            return (found.status, found.iterations, found.absent);
        }
        let (status, iterations) =
            solve_on_face(system, &case, options, kernel, workspace, amounts, extents);
        if !presence::worth_retrying(system, status) {
            return (status, iterations, 0);
        }
        match presence::retry_with_a_phase_absent(
            system, &case, options, workspace, amounts, extents,
        ) {
            Some(found) => (found.status, iterations + found.iterations, found.absent),
            None => (status, iterations, 0),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fixtures::reforming;

    #[test]
    fn the_face_table_finds_every_pattern_by_scan_and_by_index() {
        // Keys past FaceTable::SCAN move the lookup to the hash index; every
        // key must still lead to its own face, and an unknown key to none.
        let mut table = FaceTable::default();
        let keys: Vec<Vec<u64>> = (0..40u64).map(|k| vec![k * 3 + 1, k]).collect();
        for (k, key) in keys.iter().enumerate() {
            table.insert(
                key.as_slice().into(),
                Arc::new(Err(FaceError::LinearProgramme)),
            );
            for (j, earlier) in keys[..=k].iter().enumerate() {
                assert_eq!(table.find(earlier), Some(j), "after {} keys", k + 1);
            }
            assert_eq!(table.find(&[0, 0]), None);
        }
    }

    fn run(
        sys: &System,
        n: usize,
        feed: &[f64],
        ln_k: &[f64],
        p: &[f64],
        threads: Option<usize>,
    ) -> (Vec<f64>, Vec<u8>) {
        let (s, r) = (sys.n_species(), sys.n_reactions());
        let mut amounts = vec![0.0; n * s];
        let mut extents = vec![0.0; n * r];
        let mut y = vec![0.0; n * s];
        let mut st = vec![0u8; n];
        let mut it = vec![0u32; n];
        let inputs = BatchInputs {
            n_cases: n,
            feed,
            ln_k,
            pressure: p,
            start: None,
        };
        let mut out = BatchOutputs {
            amounts: &mut amounts,
            extents: &mut extents,
            mole_fractions: Some(&mut y),
            status: &mut st,
            iterations: &mut it,
            absent: None,
        };
        solve_batch(sys, &inputs, &mut out, &SolveOptions::default(), threads).unwrap();
        (amounts, st)
    }

    #[test]
    fn bad_cases_are_marked_and_the_rest_solved() {
        let sys = reforming();
        let n = 200;
        let mut feed = Vec::new();
        for k in 0..n {
            let mut row = vec![1.0, 3.0, 0.0, 0.0, 0.0, 0.1];
            if k == 7 {
                row[0] = -1.0;
            }
            if k == 9 {
                row[1] = f64::NAN;
            }
            if k == 11 {
                row = vec![0.0; 6];
            }
            feed.extend(row);
        }
        let mut p = vec![5.0; n];
        p[13] = 0.0;
        let (amounts, st) = run(&sys, n, &feed, &[2.0, 0.5], &p, None);
        for k in 0..n {
            let bad = [7, 9, 11, 13].contains(&k);
            assert_eq!(st[k] == Status::InvalidInput as u8, bad, "case {k}");
            assert_eq!(amounts[k * 6].is_nan(), bad);
            if !bad {
                assert_eq!(st[k], Status::Converged as u8);
            }
        }
    }

    #[test]
    fn results_do_not_depend_on_thread_count() {
        let sys = reforming();
        let n = 1000;
        let mut feed = Vec::new();
        let mut ln_k = Vec::new();
        let mut p = Vec::new();
        for k in 0..n {
            let x = k as f64 / n as f64;
            feed.extend([1.0, 1.5 + 3.0 * x, 0.0, 0.0, 0.0, 0.2]);
            ln_k.extend([-10.0 + 20.0 * x, 3.0 - 4.0 * x]);
            p.push(1.0 + 39.0 * x);
        }
        let one = run(&sys, n, &feed, &ln_k, &p, Some(1));
        let two = run(&sys, n, &feed, &ln_k, &p, Some(2));
        let all = run(&sys, n, &feed, &ln_k, &p, None);
        assert!(one.1.iter().all(|&s| s == 0));
        assert_eq!(
            one.0.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            two.0.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
        );
        assert_eq!(
            one.0.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            all.0.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
        );
    }

    /// The contract the Python layer's reused output memory relies on: every
    /// value of every case is written, whatever the path and the outcome.
    /// (Infeasible cases share the invalid cases' NaN fill in `finish`.)
    #[test]
    fn every_output_value_is_written() {
        const POISON: u64 = 0x7ff8_dead_beef_0001; // a NaN no solve produces
        let gas = reforming();
        let nu = vec![-1.0, 1.0]; // A(g) = B(l)
        let two_phase = System::new(
            nu,
            1,
            2,
            vec![crate::system::Phase::Gas, crate::system::Phase::Solution(0)],
            1.0,
        )
        .unwrap();
        for sys in [&gas, &two_phase] {
            let (s, r) = (sys.n_species(), sys.n_reactions());
            let n = 1000;
            let mut feed = Vec::new();
            let mut ln_k = Vec::new();
            for k in 0..n {
                let x = k as f64 / n as f64;
                let mut row: Vec<f64> = (0..s).map(|i| 0.5 + x + i as f64).collect();
                match k % 7 {
                    1 => row[0] = -1.0,      // invalid input
                    2 => row[s - 1] = 0.0,   // a zero pattern
                    3 => row[1..].fill(0.0), // another one
                    4 => row.fill(0.0),      // no feed at all: invalid
                    _ => {}
                }
                feed.extend(row);
                ln_k.extend((0..r).map(|j| -8.0 + 16.0 * x + j as f64));
            }
            let p = vec![3.0; n];
            let x0 = vec![0.0; n * r];
            let x0_one = vec![0.0; r]; // one start for every case
            for (max_iter, chain, start, threads, with_fractions) in [
                (200, false, None, None, false),
                (200, false, None, Some(1), true),
                (1, false, None, None, false),
                (0, false, None, None, true),
                (200, true, None, None, false),
                (200, false, Some(&x0[..]), None, false),
                (200, false, Some(&x0_one[..]), Some(1), false),
            ] {
                let mut amounts = vec![f64::from_bits(POISON); n * s];
                let mut extents = vec![f64::from_bits(POISON); n * r];
                let mut fractions = vec![f64::from_bits(POISON); n * s];
                let mut st = vec![0xab_u8; n];
                let mut it = vec![u32::MAX - 7; n];
                let inputs = BatchInputs {
                    n_cases: n,
                    feed: &feed,
                    ln_k: &ln_k,
                    pressure: &p,
                    start,
                };
                let mut out = BatchOutputs {
                    amounts: &mut amounts,
                    extents: &mut extents,
                    mole_fractions: with_fractions.then_some(&mut fractions[..]),
                    status: &mut st,
                    iterations: &mut it,
                    absent: None,
                };
                let options = SolveOptions {
                    max_iter,
                    chain,
                    ..SolveOptions::default()
                };
                solve_batch(sys, &inputs, &mut out, &options, threads).unwrap();
                let what = format!(
                    "S={s} max_iter={max_iter} chain={chain} x0={}",
                    start.is_some()
                );
                assert!(amounts.iter().all(|v| v.to_bits() != POISON), "{what}");
                assert!(extents.iter().all(|v| v.to_bits() != POISON), "{what}");
                if with_fractions {
                    assert!(fractions.iter().all(|v| v.to_bits() != POISON), "{what}");
                }
                assert!(st.iter().all(|&v| v <= Status::Stalled as u8), "{what}");
                assert!(it.iter().all(|&v| v <= max_iter), "{what}");
                assert!(st.contains(&(Status::InvalidInput as u8)), "{what}");
            }
        }
    }

    #[test]
    fn shape_errors_are_reported_not_panicked() {
        let sys = reforming();
        let mut a = vec![0.0; 6];
        let mut e = vec![0.0; 2];
        let mut y = vec![0.0; 6];
        let mut st = vec![0u8; 1];
        let mut it = vec![0u32; 1];
        let inputs = BatchInputs {
            n_cases: 1,
            feed: &[1.0; 5],
            ln_k: &[0.0; 2],
            pressure: &[1.0],
            start: None,
        };
        let mut out = BatchOutputs {
            amounts: &mut a,
            extents: &mut e,
            mole_fractions: Some(&mut y),
            status: &mut st,
            iterations: &mut it,
            absent: None,
        };
        assert!(matches!(
            solve_batch(&sys, &inputs, &mut out, &SolveOptions::default(), None),
            Err(CoreError::Shape(_))
        ));
    }
}
