//! The per-case outcome of a solve.

/// What happened to one case. The numeric values are part of the public
/// contract (they are stored in result tables), so never renumber them.
#[repr(u8)]
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Status {
    /// Every reaction satisfies its equilibrium condition within the tolerance.
    Converged = 0,
    /// The iteration limit was reached first; the amounts are the last
    /// iterate (feasible and conserving, but not at equilibrium).
    IterationLimit = 1,
    /// The case's inputs are unusable: a negative or non-finite feed, a zero
    /// total feed, a non-finite ln K, or a non-positive or non-finite pressure.
    /// Every output of the case is NaN.
    InvalidInput = 2,
    /// No equilibrium exists for this feed: some combination of reactions can
    /// run without consuming anything, so the extents are unbounded.
    Infeasible = 3,
    /// The line search could not lower the Gibbs function any further before
    /// the tolerance was met (the limit of float64 for this case); the amounts
    /// are the last iterate.
    Stalled = 4,
    /// Adiabatic solve: no outlet temperature within the species data's
    /// range balances the enthalpy (set by the Python layer, which runs the
    /// energy balance; listed here so that every code has one home).
    OutOfRange = 5,
    /// At equilibrium except that some species would lie below the smallest
    /// amount float64 can follow (about 1e-305): they are held there, so
    /// their amounts are upper bounds, and the reactions that would push
    /// them lower are not met. Every other species and reaction is converged.
    Underflow = 6,
    /// Phase-boundary search: the phase does not just appear anywhere in the
    /// bracket (present at both ends, or absent at both); set by the Python
    /// layer, which runs the search. Outputs are NaN.
    NoBoundary = 7,
    /// Non-ideal gas: the equation of state has no vapour-like root at the
    /// case's composition, temperature and pressure (the mixture there
    /// would be a liquid); no gas answer is given. Outputs are the last
    /// pass's (see [`crate::realgas`]).
    NoVapourRoot = 8,
}

impl Status {
    /// Every status, in code order: the table the Python package, the
    /// command line and result files read.
    pub const ALL: [Status; 9] = [
        Status::Converged,
        Status::IterationLimit,
        Status::InvalidInput,
        Status::Infeasible,
        Status::Stalled,
        Status::OutOfRange,
        Status::Underflow,
        Status::NoBoundary,
        Status::NoVapourRoot,
    ];

    /// The status of code `code`, if there is one.
    pub fn from_code(code: u8) -> Option<Status> {
        Status::ALL.get(usize::from(code)).copied()
    }

    /// Whether the case reached equilibrium (as far as float64 can hold it).
    pub fn is_converged(self) -> bool {
        matches!(self, Status::Converged | Status::Underflow)
    }

    /// The name users see (Python's `eqbatch.Status` members, result files).
    pub fn name(self) -> &'static str {
        match self {
            Status::Converged => "CONVERGED",
            Status::IterationLimit => "ITERATION_LIMIT",
            Status::InvalidInput => "INVALID_INPUT",
            Status::Infeasible => "INFEASIBLE",
            Status::Stalled => "STALLED",
            Status::OutOfRange => "OUT_OF_RANGE",
            Status::Underflow => "UNDERFLOW",
            Status::NoBoundary => "NO_BOUNDARY",
            Status::NoVapourRoot => "NO_VAPOUR_ROOT",
        }
    }

    /// A short human-readable description.
    pub fn describe(self) -> &'static str {
        match self {
            Status::Converged => "converged",
            Status::IterationLimit => "iteration limit reached before convergence",
            Status::InvalidInput => {
                "invalid input (negative/NaN feed, zero total, bad ln K, pressure, temperature or heat)"
            }
            Status::Infeasible => "infeasible: the extents are unbounded for this feed",
            Status::Stalled => "stalled: no further decrease of the Gibbs function",
            Status::OutOfRange => {
                "no outlet temperature within the data's temperature range balances the enthalpy"
            }
            Status::Underflow => {
                "converged, with species below float64's range held at about 1e-305 mol (upper bounds)"
            }
            Status::NoBoundary => {
                "no phase boundary in the bracket: the phase is present at both ends or at neither"
            }
            Status::NoVapourRoot => {
                "the equation of state has no vapour-like root here: the mixture would be a liquid"
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_table_is_in_code_order() {
        for (code, status) in Status::ALL.iter().enumerate() {
            assert_eq!(*status as usize, code);
        }
    }
}
