//! eqbatch-core: the batch chemical-equilibrium engine.
//!
//! A pure Rust crate with no Python in it. It takes a stoichiometric matrix,
//! the phase of every species and, per case, the feed, the equilibrium
//! constants and the pressure, and returns the equilibrium amounts and
//! extents with an honest per-case [`Status`].
//!
//! * [`system`]: the validated reaction system and its structural checks;
//! * [`face`]: which species a feed can reach (the zero-pattern analysis);
//! * [`basis`]: the per-case stoichiometric basis that keeps trace species precise;
//! * [`presence`]: phases that are absent at equilibrium (tried absent, kept if stable), with
//!   [`barrier`] as its fallback;
//! * [`newton`]: the iteration's pieces written once (rules, merit, Hessian, `L D L^T`, residuals)
//!   over one case or a lane group ([`num`]);
//! * [`solver`]: the damped Newton solve of one case;
//! * [`lanes`]: the batch path for all-gas systems, eight cases per vector group;
//! * [`batch`]: the parallel batch driver;
//! * [`eos`], [`activity`], [`realgas`]: fugacity coefficients of a cubic equation of state, activity
//!   coefficients of solutions, and batches with them;
//! * [`sensitivity`]: exact derivatives of converged cases;
//! * [`lp`], [`linalg`]: the small numerical kernels they share.

// Numerical kernels index several parallel arrays by the same species or
// reaction number; iterator chains would hide that correspondence.
#![allow(clippy::needless_range_loop)]

pub mod activity;
pub mod adiabatic;
pub mod barrier;
pub mod basis;
pub mod batch;
pub mod condensed;
pub mod eos;
pub mod error;
pub mod face;
pub mod lanes;
pub mod linalg;
mod ln;
pub mod lp;
pub mod newton;
pub mod num;
pub mod presence;
pub mod realgas;
pub mod sensitivity;
pub mod solver;
pub mod status;
pub mod system;
pub mod thermo;

pub use batch::{mole_fractions, solve_batch, BatchInputs, BatchOutputs};
pub use error::CoreError;
pub use sensitivity::{sensitivities_batch, SensitivityOutputs};
pub use solver::{SolveOptions, FLOAT_FLOOR};
pub use status::Status;
pub use system::{Phase, System};
pub use thermo::{Segment, SpeciesThermo, ThermoOutputs, ThermoTable};

#[cfg(test)]
pub(crate) mod fixtures {
    //! Systems shared by the unit tests.
    use crate::system::{Phase, System};

    /// Steam reforming + water-gas shift with a nitrogen inert:
    /// CH4 H2O CO H2 CO2 N2, P0 = 1 bar.
    pub(crate) fn reforming() -> System {
        let nu = vec![
            -1.0, -1.0, 1.0, 3.0, 0.0, 0.0, //
            0.0, -1.0, -1.0, 1.0, 1.0, 0.0,
        ];
        System::new(nu, 2, 6, vec![Phase::Gas; 6], 1.0).unwrap()
    }
}
