//! `eqbatch._core.ThermoTable`: reactions' ln K and dH from species data,
//! evaluated per temperature in the core.

use eqbatch_core::{Segment, SpeciesThermo, ThermoOutputs, ThermoTable};
use numpy::{PyArray2, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;

use crate::error::to_py;

/// One segment as Python gives it: `(upto, closed, scale, a0, a1, a2, a3,
/// a4, e, h, s)`.
type SegmentTuple = (f64, bool, f64, f64, f64, f64, f64, f64, f64, f64, f64);

#[pyclass(name = "ThermoTable", module = "eqbatch._core", frozen)]
pub struct PyThermoTable {
    pub(crate) inner: ThermoTable,
}

#[pymethods]
impl PyThermoTable {
    /// `data`: per data set its segments in increasing temperature;
    /// `coef` (R, D): each reaction's coefficient of each data set; `shift`
    /// (R,): added to ln K (the change of standard pressure).
    #[new]
    fn new(
        data: Vec<Vec<SegmentTuple>>,
        coef: PyReadonlyArray2<'_, f64>,
        shift: PyReadonlyArray1<'_, f64>,
    ) -> PyResult<Self> {
        let data = data
            .into_iter()
            .map(|segments| {
                SpeciesThermo::new(
                    segments
                        .into_iter()
                        .map(
                            |(upto, closed, scale, a0, a1, a2, a3, a4, e, h, s)| Segment {
                                upto,
                                closed,
                                scale,
                                a: [a0, a1, a2, a3, a4],
                                e,
                                h,
                                s,
                            },
                        )
                        .collect(),
                )
            })
            .collect::<Result<Vec<_>, _>>()
            .map_err(to_py)?;
        let inner = ThermoTable::new(data, coef.as_slice()?.to_vec(), shift.as_slice()?.to_vec())
            .map_err(to_py)?;
        Ok(PyThermoTable { inner })
    }

    /// `(ln_k, dh)`, each (N, R): ln K on the system's standard pressure and
    /// the standard reaction enthalpy (J/mol) at every temperature of `T`
    /// (N,), K; NaN rows where a temperature is not positive and finite.
    fn evaluate<'py>(
        &self,
        py: Python<'py>,
        temperature: PyReadonlyArray1<'py, f64>,
    ) -> PyResult<Pair<'py>> {
        let table = &self.inner;
        two_per_temperature(py, &temperature, table.n_reactions(), |temps, ln_k, dh| {
            table.evaluate(temps, ThermoOutputs { ln_k, dh })
        })
    }

    /// `(h, cp)`, each (N, D): every data set's molar enthalpy (J/mol, on
    /// the formation scale) and heat capacity (J/(mol K)) at every
    /// temperature of `T` (N,), K; NaN rows where a temperature is not
    /// positive and finite.
    fn species<'py>(
        &self,
        py: Python<'py>,
        temperature: PyReadonlyArray1<'py, f64>,
    ) -> PyResult<Pair<'py>> {
        let table = &self.inner;
        two_per_temperature(py, &temperature, table.n_data(), |temps, h, cp| {
            table.species(temps, h, cp)
        })
    }
}

/// Two (N, width) float64 arrays.
type Pair<'py> = (Bound<'py, PyArray2<f64>>, Bound<'py, PyArray2<f64>>);

/// Two new (N, `width`) arrays filled by `fill(temperatures, a, b)` with the
/// GIL released.
fn two_per_temperature<'py>(
    py: Python<'py>,
    temperature: &PyReadonlyArray1<'py, f64>,
    width: usize,
    fill: impl FnOnce(&[f64], &mut [f64], &mut [f64]) -> Result<(), eqbatch_core::CoreError> + Send,
) -> PyResult<Pair<'py>> {
    let n = temperature.len()?;
    let first = PyArray2::zeros(py, [n, width], false);
    let second = PyArray2::zeros(py, [n, width], false);
    {
        let temps = temperature.as_slice()?;
        let (mut a, mut b) = (first.try_readwrite()?, second.try_readwrite()?);
        let (a, b) = (a.as_slice_mut()?, b.as_slice_mut()?);
        py.detach(move || fill(temps, a, b)).map_err(to_py)?;
    }
    Ok((first, second))
}
