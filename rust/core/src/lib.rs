//! fockmill-core: the pure-Rust engine of fockmill.
//!
//! Multi-mode truncated Fock spaces restricted to a conserved (weighted, optionally
//! modular) number of quanta, ranked in O(M) from counting tables ([`space`]);
//! normal-ordered ladder-operator terms acting on basis states ([`terms`]); a
//! row-parallel two-pass CSR build ([`build`]); matrix-free products ([`matvec`]);
//! observables from one pass over the basis ([`observe`]); a low-memory Lanczos ground
//! state ([`lanczos`]); the lowest `k` levels by thick-restart Lanczos
//! ([`levels`]); the Liouvillian of a Lindblad master equation applied to a density
//! matrix ([`liouvillian`]); and cheap size estimates ([`estimate`]).
//!
//! Nothing here knows about Python; the binding crate converts types and errors.
#![forbid(unsafe_code)]
#![warn(missing_docs)]

pub mod between;
pub mod bipartite;
pub mod build;
pub mod correlations;
pub mod error;
pub mod estimate;
pub mod kernel;
pub mod lanczos;
pub mod levels;
pub mod liouvillian;
pub mod matvec;
pub mod memory;
pub mod observe;
pub mod orbit_table;
pub mod parallel;
pub mod scalar;
pub mod solve;
pub mod space;
pub mod symmetry;
pub mod terms;
pub mod tridiag;
pub mod vecops;
pub mod watch;

pub use error::{CoreError, CoreResult};
pub use parallel::{Interrupt, NoInterrupt, Runner};
pub use scalar::Scalar;
pub use space::{Charge, Constraint, FockSpace};
pub use terms::{Operator, RawTerm, RowState};
