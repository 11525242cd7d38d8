//! `eqbatch._core`: the thin Python skin over `eqbatch-core`. It only
//! borrows numpy arrays, releases the interpreter lock, calls the core and
//! maps core errors to exceptions; all logic lives in the core.

mod error;
mod system;
mod thermo;

use pyo3::prelude::*;

#[pymodule]
fn _core(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<system::PySystem>()?;
    m.add_class::<thermo::PyThermoTable>()?;
    m.add(
        "StoichiometryError",
        m.py().get_type::<error::StoichiometryError>(),
    )?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add("FLOAT_FLOOR", eqbatch_core::FLOAT_FLOOR)?;
    // The one status table: (code, name, description) per status.
    let statuses: Vec<(u8, &str, &str)> = eqbatch_core::Status::ALL
        .iter()
        .map(|&st| (st as u8, st.name(), st.describe()))
        .collect();
    m.add("STATUS_TABLE", statuses)?;
    // Which vector instructions the lane kernels use on this processor.
    m.add("VECTOR_PATH", eqbatch_core::lanes::vector_path())?;
    Ok(())
}
