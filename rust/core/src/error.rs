//! Errors of the core. None of them panics; the binding maps each to a
//! Python exception.

use std::fmt;

/// Everything that can go wrong when a system is built or a batch is set up.
/// Bad values inside individual cases are not errors: they get
/// [`crate::Status::InvalidInput`].
#[derive(Clone, Debug, PartialEq)]
pub enum CoreError {
    /// Array sizes do not agree with the system.
    Shape(String),
    /// A stoichiometric coefficient is NaN or infinite.
    NonFiniteCoefficient { reaction: usize, species: usize },
    /// A reaction has no non-zero coefficient.
    EmptyReaction { reaction: usize },
    /// `reaction` is a linear combination of earlier reactions:
    /// `nu[reaction] = sum(coef * nu[other])` over `combination`.
    DependentReaction {
        reaction: usize,
        combination: Vec<(usize, f64)>,
    },
    /// A combination of the reactions consumes nothing, so its extent is
    /// unbounded: `sum(weight * nu[reaction])` has no negative coefficient.
    UnboundedReactions { combination: Vec<(usize, f64)> },
    /// The standard-state pressure is not a positive finite number.
    BadStandardPressure(f64),
    /// A solver option is out of range.
    BadOption(String),
}

impl fmt::Display for CoreError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CoreError::Shape(msg) => write!(f, "shape mismatch: {msg}"),
            CoreError::NonFiniteCoefficient { reaction, species } => write!(
                f,
                "stoichiometric coefficient of species {species} in reaction {reaction} is not finite"
            ),
            CoreError::EmptyReaction { reaction } => {
                write!(f, "reaction {reaction} has no non-zero coefficient")
            }
            CoreError::DependentReaction {
                reaction,
                combination,
            } => {
                write!(f, "reaction {reaction} is a linear combination of reactions")?;
                for (other, coef) in combination {
                    write!(f, " {other} ({coef:+})")?;
                }
                Ok(())
            }
            CoreError::UnboundedReactions { combination } => {
                write!(f, "a combination of reactions consumes nothing:")?;
                for (reaction, weight) in combination {
                    write!(f, " {reaction} ({weight:+})")?;
                }
                Ok(())
            }
            CoreError::BadStandardPressure(p0) => {
                write!(f, "standard-state pressure must be positive and finite, got {p0}")
            }
            CoreError::BadOption(msg) => write!(f, "bad solver option: {msg}"),
        }
    }
}

impl std::error::Error for CoreError {}
