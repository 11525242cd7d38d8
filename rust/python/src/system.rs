//! `eqbatch._core.System`: a validated reaction system and its batch solve.

use eqbatch_core::activity::{ActivityKind, Solution};
use eqbatch_core::adiabatic::{adiabatic_batch, AdiabaticInputs, AdiabaticOutputs, Enthalpy};
use eqbatch_core::eos::{Cubic, CubicKind};
use eqbatch_core::realgas::{compressibility, ln_coefficients, solve_batch_real, NonIdeal};
use eqbatch_core::{
    mole_fractions, sensitivities_batch, solve_batch, BatchInputs, BatchOutputs, Phase,
    SensitivityOutputs, SolveOptions, System,
};
use numpy::{
    PyArray1, PyArray2, PyArray3, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2,
    PyReadonlyArrayDyn, PyUntypedArrayMethods,
};
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;

use crate::error::to_py;

type Solved<'py> = (
    Bound<'py, PyArray2<f64>>,
    Bound<'py, PyArray2<f64>>,
    Bound<'py, PyArray1<u8>>,
    Bound<'py, PyArray1<u32>>,
    Bound<'py, PyArray1<u64>>,
);

/// Caller's (reused) outputs: amounts, extents, status, iterations.
type OutArrays<'py> = (
    Bound<'py, PyArray2<f64>>,
    Bound<'py, PyArray2<f64>>,
    Bound<'py, PyArray1<u8>>,
    Bound<'py, PyArray1<u32>>,
);

/// One solution phase's activity model as the binding takes it: (model 0
/// NRTL, 1 Wilson, 2 UNIQUAC; species, a, b, alpha, r, q).
type SolutionArgs = (
    u8,
    Vec<usize>,
    Vec<f64>,
    Vec<f64>,
    Vec<f64>,
    Vec<f64>,
    Vec<f64>,
);

type Adiabatic<'py> = (
    Bound<'py, PyArray2<f64>>,
    Bound<'py, PyArray2<f64>>,
    Bound<'py, PyArray1<f64>>,
    Bound<'py, PyArray1<u8>>,
    Bound<'py, PyArray1<u32>>,
    Bound<'py, PyArray2<f64>>,
);

type Sensitivities<'py> = (
    Bound<'py, PyArray3<f64>>,
    Bound<'py, PyArray2<f64>>,
    Bound<'py, PyArray3<f64>>,
);

/// The binding's arguments of non-ideal phases as the core's: the cubic
/// (`kind` 0 Peng-Robinson, 1 Soave, None ideal) and the solutions' models.
fn non_ideal_parts(
    kind: Option<u8>,
    tc: Vec<f64>,
    pc: Vec<f64>,
    omega: Vec<f64>,
    kij: Vec<f64>,
    solutions: Vec<SolutionArgs>,
) -> PyResult<(Option<Cubic>, Vec<Solution>)> {
    let eos = match kind {
        None => None,
        Some(code) => Some(Cubic::new(
            match code {
                0 => CubicKind::PengRobinson,
                1 => CubicKind::Soave,
                _ => {
                    return Err(PyValueError::new_err(
                        "kind is 0 (Peng-Robinson) or 1 (Soave)",
                    ))
                }
            },
            tc,
            pc,
            omega,
            kij,
        )),
    };
    let mut models = Vec::with_capacity(solutions.len());
    for (code, species, a, b, alpha, r, q) in solutions {
        let kind = match code {
            0 => ActivityKind::Nrtl,
            1 => ActivityKind::Wilson,
            2 => ActivityKind::Uniquac,
            _ => {
                return Err(PyValueError::new_err(
                    "a solution model is 0 (NRTL), 1 (Wilson) or 2 (UNIQUAC)",
                ))
            }
        };
        models.push(Solution {
            kind,
            species,
            a,
            b,
            alpha,
            r,
            q,
        });
    }
    Ok((eos, models))
}

/// A caller-given output array must have the batch's shape, be C-contiguous
/// and writeable (its dtype is checked by the conversion).
fn check_output<T: numpy::Element, D: numpy::ndarray::Dimension>(
    array: &Bound<'_, numpy::PyArray<T, D>>,
    shape: &[usize],
    name: &str,
) -> PyResult<()> {
    if array.shape() != shape {
        return Err(PyValueError::new_err(format!(
            "out: {name} has shape {:?}, expected {shape:?}",
            array.shape()
        )));
    }
    if !array.is_c_contiguous() {
        return Err(PyValueError::new_err(format!(
            "out: {name} is not C-contiguous"
        )));
    }
    Ok(())
}

/// The caller's amounts, extents, status and iterations for `n` cases of
/// `s` species and `r` reactions (shapes and layout checked; every value
/// is overwritten), or new ones.
fn outputs_or_new<'py>(
    py: Python<'py>,
    out: Option<OutArrays<'py>>,
    n: usize,
    s: usize,
    r: usize,
) -> PyResult<OutArrays<'py>> {
    Ok(match out {
        Some(arrays) => {
            check_output(&arrays.0, &[n, s], "amounts")?;
            check_output(&arrays.1, &[n, r], "extents")?;
            check_output(&arrays.2, &[n], "status")?;
            check_output(&arrays.3, &[n], "iterations")?;
            arrays
        }
        None => (
            PyArray2::zeros(py, [n, s], false),
            PyArray2::zeros(py, [n, r], false),
            PyArray1::zeros(py, n, false),
            PyArray1::zeros(py, n, false),
        ),
    })
}

/// `solve_batch` into `outputs`: holding the interpreter lock for calls
/// under [`HOLD_LOCK_BELOW`] cases (an optimiser's few cases take about a
/// microsecond; releasing and re-taking the lock would be a tenth of that),
/// else with it released.
fn solve_in(
    py: Python<'_>,
    system: &System,
    inputs: &BatchInputs,
    mut outputs: BatchOutputs,
    options: &SolveOptions,
    threads: Option<usize>,
) -> PyResult<()> {
    let small = inputs.n_cases < HOLD_LOCK_BELOW;
    let mut run = move || solve_batch(system, inputs, &mut outputs, options, threads);
    let solved = if small { run() } else { py.detach(run) };
    solved.map_err(to_py)
}

/// A per-case input of `width` columns: `(N, width)`, or `(width,)` for one
/// row (what an optimiser passes, without a reshape in Python).
fn rows_of<'a>(
    array: &'a PyReadonlyArrayDyn<'_, f64>,
    width: usize,
    name: &str,
) -> PyResult<&'a [f64]> {
    let shape = array.shape();
    let fits = match shape {
        [w] => *w == width,
        [_, w] => *w == width,
        _ => false,
    };
    if !fits {
        return Err(PyValueError::new_err(format!(
            "{name} has shape {shape:?}; expected (N, {width}) or ({width},)"
        )));
    }
    Ok(array.as_slice()?)
}

/// Borrow an output array for writing (an error, not a panic, if it is
/// read-only or already borrowed).
fn writable<'py, T: numpy::Element, D: numpy::ndarray::Dimension>(
    array: &Bound<'py, numpy::PyArray<T, D>>,
) -> PyResult<numpy::PyReadwriteArray<'py, T, D>> {
    array
        .try_readwrite()
        .map_err(|e| PyValueError::new_err(format!("out: {e}")))
}

/// Calls of fewer cases than this run without releasing the interpreter
/// lock (a few microseconds of work at most).
const HOLD_LOCK_BELOW: usize = 8;

#[pyclass(name = "System", module = "eqbatch._core", frozen)]
pub struct PySystem {
    inner: System,
}

#[pymethods]
impl PySystem {
    /// `stoich`: (R, S) coefficients, products positive; `phases`: one code
    /// per species (0 gas, `1 + k` ideal solution `k` (1 the liquid), 255 a
    /// pure condensed species); `p0`: standard pressure, bar.
    #[new]
    fn new(stoich: PyReadonlyArray2<'_, f64>, phases: Vec<u8>, p0: f64) -> PyResult<Self> {
        let shape = stoich.shape();
        let (r, s) = (shape[0], shape[1]);
        let phases = phases
            .into_iter()
            .map(|code| match code {
                0 => Ok(Phase::Gas),
                255 => Ok(Phase::Pure),
                k => Ok(Phase::Solution(k - 1)),
            })
            .collect::<PyResult<Vec<_>>>()?;
        let inner = System::new(
            stoich.as_array().iter().copied().collect(),
            r,
            s,
            phases,
            p0,
        )
        .map_err(to_py)?;
        Ok(PySystem { inner })
    }

    #[getter]
    fn n_species(&self) -> usize {
        self.inner.n_species()
    }

    #[getter]
    fn n_reactions(&self) -> usize {
        self.inner.n_reactions()
    }

    /// Per species, the index of its phase: 0 the gas, then the solutions
    /// in order of their codes, then one per pure species (bit `k` of a
    /// solve's `absent` mask is phase `k`).
    #[getter]
    fn phase_index(&self) -> Vec<usize> {
        (0..self.inner.n_species())
            .map(|i| self.inner.phase_index(i))
            .collect()
    }

    /// Number of phases (mixtures and pure species).
    #[getter]
    fn n_phases(&self) -> usize {
        self.inner.n_phases()
    }

    /// Solve `n_cases` cases. `feed` (1 or N, S) or (S,), `ln_k` (1 or N, R)
    /// or (R,) and `pressure` (1 or N) must be C-contiguous float64. Returns
    /// `(amounts, extents, status, iterations, absent)`, `absent` the
    /// per-case mask of phases found absent (bit 0 gas, bit 1 liquid);
    /// mole fractions are left to the caller (computed on demand, which
    /// saves their memory in batches).
    #[pyo3(signature = (feed, ln_k, pressure, n_cases, tol, max_iter, threads=None, start=None, chain=false, out=None))]
    #[allow(clippy::too_many_arguments)]
    fn solve<'py>(
        &self,
        py: Python<'py>,
        feed: PyReadonlyArrayDyn<'py, f64>,
        ln_k: PyReadonlyArrayDyn<'py, f64>,
        pressure: PyReadonlyArray1<'py, f64>,
        n_cases: usize,
        tol: f64,
        max_iter: u32,
        threads: Option<usize>,
        start: Option<PyReadonlyArray2<'py, f64>>,
        chain: bool,
        out: Option<Solved<'py>>,
    ) -> PyResult<Solved<'py>> {
        let s = self.inner.n_species();
        let r = self.inner.n_reactions();
        // The caller's arrays (every value is overwritten), or new ones.
        let (four, absent) = match out {
            Some((a, e, st, it, ab)) => {
                check_output(&ab, &[n_cases], "absent")?;
                (Some((a, e, st, it)), ab)
            }
            None => (None, PyArray1::zeros(py, n_cases, false)),
        };
        let (amounts, extents, status, iterations) = outputs_or_new(py, four, n_cases, s, r)?;
        {
            let feed = rows_of(&feed, s, "feed")?;
            let ln_k = rows_of(&ln_k, r, "ln_k")?;
            let pressure = pressure.as_slice()?;
            let start = match &start {
                Some(x0) => Some(x0.as_slice()?),
                None => None,
            };
            let (mut a, mut e) = (writable(&amounts)?, writable(&extents)?);
            let (mut st, mut it, mut ab) = (
                writable(&status)?,
                writable(&iterations)?,
                writable(&absent)?,
            );
            let (a, e) = (a.as_slice_mut()?, e.as_slice_mut()?);
            let (st, it, ab) = (st.as_slice_mut()?, it.as_slice_mut()?, ab.as_slice_mut()?);
            let inputs = BatchInputs {
                n_cases,
                feed,
                ln_k,
                pressure,
                start,
            };
            let options = SolveOptions {
                tol,
                max_iter,
                chain,
                ..SolveOptions::default()
            };
            let outputs = BatchOutputs {
                amounts: a,
                extents: e,
                mole_fractions: None,
                status: st,
                iterations: it,
                absent: Some(ab),
            };
            solve_in(py, &self.inner, &inputs, outputs, &options, threads)?;
        }
        Ok((amounts, extents, status, iterations, absent))
    }

    /// `solve` for a prepared solve's repeated calls: one pressure for every
    /// case (`pressure`), and the outputs in two buffers the caller made
    /// once, `floats` (amounts, then extents: `N * (S + R)`) and `words`
    /// (absent masks, then iterations as `u32`, then statuses as bytes:
    /// `N + ceil(N / 2) + ceil(N / 8)`), whose views are the result's
    /// arrays. Two output borrows instead of five: an optimiser's call is
    /// about two microseconds, and each borrow of an array costs a few
    /// per cent of it.
    #[allow(clippy::too_many_arguments)]
    fn solve_prepared<'py>(
        &self,
        py: Python<'py>,
        feed: PyReadonlyArrayDyn<'py, f64>,
        ln_k: PyReadonlyArrayDyn<'py, f64>,
        pressure: f64,
        n_cases: usize,
        tol: f64,
        max_iter: u32,
        threads: Option<usize>,
        floats: Bound<'py, PyArray1<f64>>,
        words: Bound<'py, PyArray1<u64>>,
    ) -> PyResult<()> {
        let (s, r, n) = (self.inner.n_species(), self.inner.n_reactions(), n_cases);
        let (iteration_words, status_words) = (n.div_ceil(2), n.div_ceil(8));
        check_output(&floats, &[n * (s + r)], "floats")?;
        check_output(&words, &[n + iteration_words + status_words], "words")?;
        let feed = rows_of(&feed, s, "feed")?;
        let ln_k = rows_of(&ln_k, r, "ln_k")?;
        let (mut floats, mut words) = (writable(&floats)?, writable(&words)?);
        let (amounts, extents) = floats.as_slice_mut()?.split_at_mut(n * s);
        let (absent, rest) = words.as_slice_mut()?.split_at_mut(n);
        let (iterations, status) = rest.split_at_mut(iteration_words);
        let iterations = &mut bytemuck::cast_slice_mut::<u64, u32>(iterations)[..n];
        let status = &mut bytemuck::cast_slice_mut::<u64, u8>(status)[..n];
        let pressure = [pressure];
        let inputs = BatchInputs {
            n_cases,
            feed,
            ln_k,
            pressure: &pressure,
            start: None,
        };
        let options = SolveOptions {
            tol,
            max_iter,
            chain: false,
            ..SolveOptions::default()
        };
        let outputs = BatchOutputs {
            amounts,
            extents,
            mole_fractions: None,
            status,
            iterations,
            absent: Some(absent),
        };
        solve_in(py, &self.inner, &inputs, outputs, &options, threads)
    }

    /// Solve with non-ideal phases: a gas from a cubic equation of state
    /// (`kind` 0: Peng-Robinson, 1: Soave-Redlich-Kwong, None: ideal;
    /// critical constants per species, K and bar; `kij` S x S) and
    /// solutions with activity models (`solutions`: (model 0 NRTL / 1
    /// Wilson, species, a, b, alpha), each k x k): the outputs of `solve`
    /// and `ln phi` / `ln gamma` (N, S). `chain`: the first pass starts each
    /// case without a start from the case before it in its chunk.
    #[allow(clippy::too_many_arguments)]
    #[pyo3(signature = (feed, ln_k, pressure, temperature, n_cases, tol, max_iter, threads, start, kind, tc, pc, omega, kij, solutions, chain=false))]
    fn solve_real<'py>(
        &self,
        py: Python<'py>,
        feed: PyReadonlyArrayDyn<'py, f64>,
        ln_k: PyReadonlyArrayDyn<'py, f64>,
        pressure: PyReadonlyArray1<'py, f64>,
        temperature: PyReadonlyArray1<'py, f64>,
        n_cases: usize,
        tol: f64,
        max_iter: u32,
        threads: Option<usize>,
        start: Option<PyReadonlyArray2<'py, f64>>,
        kind: Option<u8>,
        tc: Vec<f64>,
        pc: Vec<f64>,
        omega: Vec<f64>,
        kij: Vec<f64>,
        solutions: Vec<SolutionArgs>,
        chain: bool,
    ) -> PyResult<(Solved<'py>, Bound<'py, PyArray2<f64>>)> {
        let s = self.inner.n_species();
        let r = self.inner.n_reactions();
        let (eos, models) = non_ideal_parts(kind, tc, pc, omega, kij, solutions)?;
        let amounts = PyArray2::zeros(py, [n_cases, s], false);
        let extents = PyArray2::zeros(py, [n_cases, r], false);
        let status = PyArray1::zeros(py, n_cases, false);
        let iterations = PyArray1::zeros(py, n_cases, false);
        let absent = PyArray1::zeros(py, n_cases, false);
        let ln_phi = PyArray2::zeros(py, [n_cases, s], false);
        {
            let feed = rows_of(&feed, s, "feed")?;
            let ln_k = rows_of(&ln_k, r, "ln_k")?;
            let pressure = pressure.as_slice()?;
            let temperature = temperature.as_slice()?;
            let start = match &start {
                Some(x0) => Some(x0.as_slice()?),
                None => None,
            };
            let (mut a, mut e) = (writable(&amounts)?, writable(&extents)?);
            let (mut st, mut it, mut ab) = (
                writable(&status)?,
                writable(&iterations)?,
                writable(&absent)?,
            );
            let mut phi = writable(&ln_phi)?;
            let (a, e) = (a.as_slice_mut()?, e.as_slice_mut()?);
            let (st, it, ab) = (st.as_slice_mut()?, it.as_slice_mut()?, ab.as_slice_mut()?);
            let phi = phi.as_slice_mut()?;
            let inputs = BatchInputs {
                n_cases,
                feed,
                ln_k,
                pressure,
                start,
            };
            let options = SolveOptions {
                tol,
                max_iter,
                chain,
                ..SolveOptions::default()
            };
            let system = &self.inner;
            py.detach(move || {
                let mut outputs = BatchOutputs {
                    amounts: a,
                    extents: e,
                    mole_fractions: None,
                    status: st,
                    iterations: it,
                    absent: Some(ab),
                };
                let model = NonIdeal {
                    eos: eos.as_ref(),
                    solutions: &models,
                };
                solve_batch_real(
                    system,
                    model,
                    &inputs,
                    temperature,
                    &mut outputs,
                    phi,
                    &options,
                    threads,
                )
            })
            .map_err(to_py)?;
        }
        Ok(((amounts, extents, status, iterations, absent), ln_phi))
    }

    /// Adiabatic (or given-duty) outlets of all-gas cases by the core's
    /// one Newton iteration (`eqbatch_core::adiabatic`): `table` holds
    /// every species' data with the reactions as rows, `lo`, `hi` (K) the
    /// data's range; per case (no broadcasting) the feed (N, S), the
    /// outlet's enthalpy `enthalpy` (J; `None`: the feed's at `t_start`
    /// plus `heat`, J, computed in the core), the first temperature
    /// `t_start` (K, the inlet's), the pressure, an optional ln K shift
    /// (N, R) and optional starting extents (N, R); `out`: amounts, extents,
    /// status and iterations to write into (a reused output set). Returns
    /// amounts, extents, temperature, status, iterations and ln K at the
    /// outlet (with the shift; NaN unless converged); a case not settled
    /// there is `Stalled`, for the caller's nested solve.
    #[allow(clippy::too_many_arguments)]
    #[pyo3(signature = (table, lo, hi, feed, enthalpy, heat, t_start, pressure, shift, start, tol, max_iter, threads, out=None))]
    fn adiabatic<'py>(
        &self,
        py: Python<'py>,
        table: &crate::thermo::PyThermoTable,
        lo: f64,
        hi: f64,
        feed: PyReadonlyArray2<'py, f64>,
        enthalpy: Option<PyReadonlyArray1<'py, f64>>,
        heat: PyReadonlyArray1<'py, f64>,
        t_start: PyReadonlyArray1<'py, f64>,
        pressure: PyReadonlyArray1<'py, f64>,
        shift: Option<PyReadonlyArray2<'py, f64>>,
        start: Option<PyReadonlyArray2<'py, f64>>,
        tol: f64,
        max_iter: u32,
        threads: Option<usize>,
        out: Option<OutArrays<'py>>,
    ) -> PyResult<Adiabatic<'py>> {
        let (s, r) = (self.inner.n_species(), self.inner.n_reactions());
        let n = t_start.len();
        let (amounts, extents, status, iterations) = outputs_or_new(py, out, n, s, r)?;
        let temperature = PyArray1::zeros(py, n, false);
        let ln_k = PyArray2::zeros(py, [n, r], false);
        {
            let shift = match &shift {
                Some(v) => Some(v.as_slice()?),
                None => None,
            };
            let start = match &start {
                Some(v) => Some(v.as_slice()?),
                None => None,
            };
            let enthalpy = match &enthalpy {
                Some(v) => Enthalpy::Given(v.as_slice()?),
                None => Enthalpy::FeedAtStart {
                    heat: heat.as_slice()?,
                },
            };
            let inputs = AdiabaticInputs {
                feed: feed.as_slice()?,
                enthalpy,
                t_start: t_start.as_slice()?,
                pressure: pressure.as_slice()?,
                ln_k_shift: shift,
                start,
            };
            let (mut a, mut e, mut t) = (
                writable(&amounts)?,
                writable(&extents)?,
                writable(&temperature)?,
            );
            let (mut st, mut it) = (writable(&status)?, writable(&iterations)?);
            let mut k = writable(&ln_k)?;
            let outputs = AdiabaticOutputs {
                amounts: a.as_slice_mut()?,
                extents: e.as_slice_mut()?,
                temperature: t.as_slice_mut()?,
                status: st.as_slice_mut()?,
                iterations: it.as_slice_mut()?,
                ln_k: k.as_slice_mut()?,
            };
            let options = SolveOptions {
                tol,
                max_iter,
                chain: false,
                ..SolveOptions::default()
            };
            let (system, table) = (&self.inner, &table.inner);
            py.detach(move || {
                adiabatic_batch(system, table, (lo, hi), &inputs, &options, threads, outputs)
            })
            .map_err(to_py)?;
        }
        Ok((amounts, extents, temperature, status, iterations, ln_k))
    }

    /// `ln phi` / `ln gamma` (N, S) of `amounts` (N, S) at `temperature`
    /// and `pressure` (1 or N each), for the non-ideal phases given as to
    /// `solve_real`; NaN rows where the gas has no vapour-like root.
    #[allow(clippy::too_many_arguments)]
    #[pyo3(signature = (amounts, temperature, pressure, threads, kind, tc, pc, omega, kij, solutions))]
    fn ln_coefficients<'py>(
        &self,
        py: Python<'py>,
        amounts: PyReadonlyArray2<'py, f64>,
        temperature: PyReadonlyArray1<'py, f64>,
        pressure: PyReadonlyArray1<'py, f64>,
        threads: Option<usize>,
        kind: Option<u8>,
        tc: Vec<f64>,
        pc: Vec<f64>,
        omega: Vec<f64>,
        kij: Vec<f64>,
        solutions: Vec<SolutionArgs>,
    ) -> PyResult<Bound<'py, PyArray2<f64>>> {
        let (eos, models) = non_ideal_parts(kind, tc, pc, omega, kij, solutions)?;
        let shape = amounts.shape();
        let out = PyArray2::zeros(py, [shape[0], shape[1]], false);
        {
            let amounts = amounts.as_slice()?;
            let (temperature, pressure) = (temperature.as_slice()?, pressure.as_slice()?);
            let mut o = writable(&out)?;
            let o = o.as_slice_mut()?;
            let system = &self.inner;
            py.detach(move || {
                let model = NonIdeal {
                    eos: eos.as_ref(),
                    solutions: &models,
                };
                ln_coefficients(system, model, amounts, temperature, pressure, o, threads)
            })
            .map_err(to_py)?;
        }
        Ok(out)
    }

    /// Peng-Robinson compressibility factor (N,) of the gas of `amounts`
    /// (N, S) at `temperature` and `pressure` (1 or N each), from critical
    /// constants per species (K, bar) and `kij` (S x S); NaN where the gas
    /// is empty or has no vapour-like root.
    #[allow(clippy::too_many_arguments)]
    #[pyo3(signature = (amounts, temperature, pressure, threads, tc, pc, omega, kij))]
    fn compressibility<'py>(
        &self,
        py: Python<'py>,
        amounts: PyReadonlyArray2<'py, f64>,
        temperature: PyReadonlyArray1<'py, f64>,
        pressure: PyReadonlyArray1<'py, f64>,
        threads: Option<usize>,
        tc: Vec<f64>,
        pc: Vec<f64>,
        omega: Vec<f64>,
        kij: Vec<f64>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let (eos, _) = non_ideal_parts(Some(0), tc, pc, omega, kij, Vec::new())?;
        let Some(eos) = eos else {
            unreachable!("kind 0 is Peng-Robinson")
        };
        let out = PyArray1::zeros(py, amounts.shape()[0], false);
        {
            let amounts = amounts.as_slice()?;
            let (temperature, pressure) = (temperature.as_slice()?, pressure.as_slice()?);
            let mut o = writable(&out)?;
            let o = o.as_slice_mut()?;
            let system = &self.inner;
            py.detach(move || {
                compressibility(system, &eos, amounts, temperature, pressure, o, threads)
            })
            .map_err(to_py)?;
        }
        Ok(out)
    }

    /// Mole fractions of `amounts` (N, S) within each species' phase (0 in
    /// an empty phase, NaN where the amounts are NaN).
    fn mole_fractions<'py>(
        &self,
        py: Python<'py>,
        amounts: PyReadonlyArray2<'py, f64>,
    ) -> PyResult<Bound<'py, PyArray2<f64>>> {
        let s = self.inner.n_species();
        let shape = amounts.shape();
        if shape[1] != s {
            return Err(PyValueError::new_err(format!(
                "amounts have {} columns, the system {s} species",
                shape[1]
            )));
        }
        let fractions = PyArray2::<f64>::zeros(py, [shape[0], s], false);
        {
            let amounts = amounts.as_slice()?;
            let mut out = writable(&fractions)?;
            let out = out.as_slice_mut()?;
            let system = &self.inner;
            py.detach(move || {
                for (row, y) in amounts.chunks(s).zip(out.chunks_mut(s)) {
                    mole_fractions(system, row, y);
                }
            });
        }
        Ok(fractions)
    }

    /// `sensitivities` of a prepared solve's last call: the solve's outputs
    /// from its two buffers (see `solve_prepared`), one pressure for every
    /// case, and the derivatives into `derivs` (`N S R` by ln K, then `N S`
    /// by ln P, then `N S S` by the feed), whose views the result holds.
    /// Four borrows and no new arrays: a prepared call with derivatives
    /// costs little more than one without.
    #[allow(clippy::too_many_arguments)]
    fn sensitivities_prepared<'py>(
        &self,
        py: Python<'py>,
        feed: PyReadonlyArrayDyn<'py, f64>,
        pressure: f64,
        n_cases: usize,
        floats: PyReadonlyArray1<'py, f64>,
        words: PyReadonlyArray1<'py, u64>,
        threads: Option<usize>,
        derivs: Bound<'py, PyArray1<f64>>,
    ) -> PyResult<()> {
        let (s, r, n) = (self.inner.n_species(), self.inner.n_reactions(), n_cases);
        let (iteration_words, status_words) = (n.div_ceil(2), n.div_ceil(8));
        if floats.len() != n * (s + r) || words.len() != n + iteration_words + status_words {
            return Err(PyValueError::new_err(
                "the prepared buffers do not match n_cases",
            ));
        }
        check_output(&derivs, &[n * (s * r + s + s * s)], "derivs")?;
        let feed = rows_of(&feed, s, "feed")?;
        let amounts = &floats.as_slice()?[..n * s];
        let words = words.as_slice()?;
        let absent = &words[..n];
        let status = &bytemuck::cast_slice::<u64, u8>(&words[n + iteration_words..])[..n];
        let mut derivs = writable(&derivs)?;
        let (d_ln_k, rest) = derivs.as_slice_mut()?.split_at_mut(n * s * r);
        let (d_ln_p, d_feed) = rest.split_at_mut(n * s);
        let pressure = [pressure];
        let system = &self.inner;
        let mut run = move || {
            let inputs = BatchInputs {
                n_cases,
                feed,
                ln_k: &[],
                pressure: &pressure,
                start: None,
            };
            let mut out = SensitivityOutputs {
                d_ln_k,
                d_ln_p,
                d_feed,
            };
            sensitivities_batch(
                system,
                &inputs,
                amounts,
                status,
                Some(absent),
                &mut out,
                threads,
            )
        };
        let done = if n_cases < HOLD_LOCK_BELOW {
            run()
        } else {
            py.detach(run)
        };
        done.map_err(to_py)
    }

    /// Exact derivatives of converged cases: returns `(d n / d ln K (N, S, R),
    /// d n / d ln P (N, S), d n / d n0 (N, S, S))`; other cases are NaN.
    /// `absent` is the solve's mask of absent phases; `with_feed=False`
    /// skips the feed derivatives (returned as an (N, 0, 0) array).
    #[pyo3(signature = (feed, pressure, amounts, status, absent=None, threads=None, with_feed=true))]
    #[allow(clippy::too_many_arguments)]
    fn sensitivities<'py>(
        &self,
        py: Python<'py>,
        feed: PyReadonlyArray2<'py, f64>,
        pressure: PyReadonlyArray1<'py, f64>,
        amounts: PyReadonlyArray2<'py, f64>,
        status: PyReadonlyArray1<'py, u8>,
        absent: Option<PyReadonlyArray1<'py, u64>>,
        threads: Option<usize>,
        with_feed: bool,
    ) -> PyResult<Sensitivities<'py>> {
        let s = self.inner.n_species();
        let r = self.inner.n_reactions();
        let n_cases = amounts.shape()[0];
        let d_ln_k = PyArray3::<f64>::zeros(py, [n_cases, s, r], false);
        let d_ln_p = PyArray2::<f64>::zeros(py, [n_cases, s], false);
        let sf = if with_feed { s } else { 0 };
        let d_feed = PyArray3::<f64>::zeros(py, [n_cases, sf, sf], false);
        {
            let feed = feed.as_slice()?;
            let pressure = pressure.as_slice()?;
            let amounts = amounts.as_slice()?;
            let status = status.as_slice()?;
            let absent = match &absent {
                Some(mask) => Some(mask.as_slice()?),
                None => None,
            };
            let (mut dk, mut dp, mut df) =
                (d_ln_k.readwrite(), d_ln_p.readwrite(), d_feed.readwrite());
            let (dk, dp, df) = (dk.as_slice_mut()?, dp.as_slice_mut()?, df.as_slice_mut()?);
            let system = &self.inner;
            py.detach(move || {
                let inputs = BatchInputs {
                    n_cases,
                    feed,
                    ln_k: &[],
                    pressure,
                    start: None,
                };
                let mut out = SensitivityOutputs {
                    d_ln_k: dk,
                    d_ln_p: dp,
                    d_feed: df,
                };
                sensitivities_batch(system, &inputs, amounts, status, absent, &mut out, threads)
            })
            .map_err(to_py)?;
        }
        Ok((d_ln_k, d_ln_p, d_feed))
    }
}
