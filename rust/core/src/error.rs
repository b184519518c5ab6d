//! The one error type the core returns.

use std::fmt;

/// Everything that can go wrong in the core, with what a good message needs.
#[derive(Debug, Clone, PartialEq)]
pub enum CoreError {
    /// The Fock-space specification is inconsistent (bad cutoff, weights, total, modulus).
    InvalidSpace(String),
    /// The requested sector contains no state at all.
    EmptySpace(String),
    /// The space, its counting tables or an operator would be too large.
    TooLarge {
        /// What was too large, in words.
        what: String,
        /// Estimated bytes (or count) requested.
        requested: u128,
        /// The limit it exceeded.
        limit: u128,
    },
    /// A term references a mode the space does not have.
    ModeOutOfRange {
        /// The offending mode index.
        mode: usize,
        /// Number of modes in the space.
        modes: usize,
        /// The rendered term.
        term: String,
    },
    /// A term changes the conserved charge of the space.
    ChargeViolation {
        /// The rendered term.
        term: String,
        /// The charge Σ w_i (p_i − q_i) it carries.
        charge: i64,
        /// What is conserved, in words.
        conserved: String,
    },
    /// A coefficient is NaN or infinite.
    NonFinite(String),
    /// A vector or array has the wrong shape or size.
    Shape(String),
    /// Any other invalid argument.
    InvalidArgument(String),
    /// The caller asked to stop (Ctrl-C).
    Interrupted,
    /// An iterative solver did not reach its tolerance.
    NotConverged(String),
    /// A symmetry specification is invalid (not a permutation, breaks the space, labels
    /// out of range or not a one-dimensional representation, operator not invariant).
    Symmetry(String),
}

impl fmt::Display for CoreError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CoreError::InvalidSpace(m) | CoreError::EmptySpace(m) => write!(f, "{m}"),
            CoreError::TooLarge {
                what,
                requested,
                limit,
            } if *requested >= u64::MAX as u128 => {
                write!(f, "{what}: needs more than {}, limit {limit}", u64::MAX)
            }
            CoreError::TooLarge {
                what,
                requested,
                limit,
            } => write!(f, "{what}: needs {requested}, limit {limit}"),
            CoreError::ModeOutOfRange { mode, modes, term } => write!(
                f,
                "term {term} acts on mode {mode}, but the space has only {modes} modes \
                 (valid indices 0..={}); use a space with more modes or fix the index",
                modes.saturating_sub(1)
            ),
            CoreError::ChargeViolation {
                term,
                charge,
                conserved,
            } => write!(
                f,
                "term {term} changes the conserved charge by {charge} ({conserved}); \
                 drop the term, use a space without `total` (the full truncated space), \
                 or a `modulus` that the term respects"
            ),
            CoreError::NonFinite(m)
            | CoreError::Shape(m)
            | CoreError::InvalidArgument(m)
            | CoreError::NotConverged(m)
            | CoreError::Symmetry(m) => write!(f, "{m}"),
            CoreError::Interrupted => write!(f, "interrupted"),
        }
    }
}

impl std::error::Error for CoreError {}

/// Shorthand for results of the core.
pub type CoreResult<T> = Result<T, CoreError>;
