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
            } => write_too_large(f, what, *requested, *limit),
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

/// Bytes as GiB with enough digits to tell two sizes near each other apart.
fn gib(bytes: u128) -> String {
    let value = bytes as f64 / (1u64 << 30) as f64;
    if value >= 0.01 {
        format!("{value:.2} GiB")
    } else {
        format!("{value:.2e} GiB")
    }
}

/// A size refusal as a sentence. A `what` of the form ``"SUBJECT (bytes...); ADVICE"``
/// is a memory request, shown in GiB; any other counts items (states, entries).
fn write_too_large(f: &mut fmt::Formatter<'_>, what: &str, requested: u128, limit: u128) -> fmt::Result {
    let huge = requested >= u64::MAX as u128;
    if let Some((subject, rest)) = what.split_once(" (bytes") {
        let detail = rest.split_once(')').map_or("", |(inside, _)| inside.trim());
        let advice = rest
            .split_once(')')
            .map_or("", |(_, after)| after.trim_start_matches(';').trim());
        let needs = if huge {
            "more than 16 EiB".to_string()
        } else {
            gib(requested)
        };
        let known = limit < u64::MAX as u128;
        write!(f, "{subject} needs {needs}")?;
        if !detail.is_empty() {
            write!(
                f,
                " ({})",
                detail.trim_start_matches(|c: char| !c.is_alphanumeric())
            )?;
        }
        if known {
            write!(f, " but only {} of memory may be used", gib(limit))?;
        }
        if advice.is_empty() {
            Ok(())
        } else {
            write!(f, "; {advice}")
        }
    } else if huge {
        write!(
            f,
            "{what}: needs more than {}, the most supported is {limit}",
            u64::MAX
        )
    } else {
        write!(f, "{what}: needs {requested}, the most supported is {limit}")
    }
}

impl std::error::Error for CoreError {}

/// Shorthand for results of the core.
pub type CoreResult<T> = Result<T, CoreError>;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn memory_refusals_read_as_sentences_in_gib() {
        let err = CoreError::TooLarge {
            what: "the sparse matrix (bytes); use a smaller sector".into(),
            requested: 926_901_464,
            limit: 911_704_064,
        };
        assert_eq!(
            err.to_string(),
            "the sparse matrix needs 0.86 GiB but only 0.85 GiB of memory may be used; use a \
             smaller sector"
        );
        let peak = CoreError::TooLarge {
            what: "storing it (bytes at the peak, estimated); solve matrix-free".into(),
            requested: 3 << 30,
            limit: 1 << 30,
        };
        assert_eq!(
            peak.to_string(),
            "storing it needs 3.00 GiB (at the peak, estimated) but only 1.00 GiB of memory \
             may be used; solve matrix-free"
        );
        let count = CoreError::TooLarge {
            what: "dimension of the space (states)".into(),
            requested: 10,
            limit: 5,
        };
        assert_eq!(
            count.to_string(),
            "dimension of the space (states): needs 10, the most supported is 5"
        );
    }
}
