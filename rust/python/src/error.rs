//! Core errors as Python exceptions. Structural problems of a system are
//! raised as `StoichiometryError(kind, reaction, indices, coefficients)` so
//! the Python layer can name reactions by their labels.

use eqbatch_core::CoreError;
use pyo3::create_exception;
use pyo3::exceptions::PyValueError;
use pyo3::PyErr;

create_exception!(_core, StoichiometryError, PyValueError);

pub fn to_py(err: CoreError) -> PyErr {
    match err {
        CoreError::DependentReaction {
            reaction,
            combination,
        } => {
            let (idx, coef): (Vec<usize>, Vec<f64>) = combination.into_iter().unzip();
            StoichiometryError::new_err(("dependent", reaction, idx, coef))
        }
        CoreError::UnboundedReactions { combination } => {
            let (idx, coef): (Vec<usize>, Vec<f64>) = combination.into_iter().unzip();
            StoichiometryError::new_err(("unbounded", usize::MAX, idx, coef))
        }
        CoreError::EmptyReaction { reaction } => {
            StoichiometryError::new_err(("empty", reaction, Vec::<usize>::new(), Vec::<f64>::new()))
        }
        CoreError::NonFiniteCoefficient { reaction, species } => {
            StoichiometryError::new_err(("non-finite", reaction, vec![species], Vec::<f64>::new()))
        }
        other => PyValueError::new_err(other.to_string()),
    }
}
