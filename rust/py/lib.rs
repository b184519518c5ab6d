//! `fockmill._native`: the thin Python binding of `fockmill-core`. It converts
//! arguments to owned Rust values, releases the interpreter around the core call, and
//! hands results to NumPy without copying. No algorithms live here; this file only
//! registers the module's items.
//!
//! - `threads.rs`: `NativePool`, `threads=` and running work detached (Ctrl-C polling)
//! - `arrays.rs`: arguments from Python and their owned copies
//! - `space.rs`: `NativeSpace`, `NativeSymmetricSpace`
//! - `operator.rs`: `NativeOperator`, the one operator class (kinds in `kinds.rs`, its
//!   protocol written once in `protocol.rs`)
//! - `results.rs`: `LanczosResult`, `LevelsResult`, `NnzEstimate`, `CsrParts`
//! - `observe.rs`: observables of a state
//! - `liouvillian.rs`: `NativeLiouvillian`, the matrix-free Liouvillian product
//! - `errors.rs`, `interrupt.rs`: error mapping, panic guard, signal polling
//! - `watch.rs`: progress reports and checkpoints of the solvers, streamed to Python

mod arrays;
mod errors;
mod interrupt;
mod kinds;
mod liouvillian;
mod observe;
mod operator;
mod protocol;
mod results;
mod space;
mod threads;
mod watch;

use pyo3::prelude::*;

#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add_class::<threads::NativePool>()?;
    m.add_class::<space::NativeSpace>()?;
    m.add_class::<space::NativeSymmetricSpace>()?;
    m.add_class::<operator::NativeOperator>()?;
    m.add_class::<liouvillian::NativeLiouvillian>()?;
    m.add_class::<results::LanczosResult>()?;
    m.add_class::<results::LevelsResult>()?;
    m.add_class::<results::NnzEstimate>()?;
    m.add_class::<results::CsrParts>()?;
    m.add_function(wrap_pyfunction!(observe::monomial_expectations, m)?)?;
    m.add_function(wrap_pyfunction!(observe::occupation_distributions, m)?)?;
    m.add_function(wrap_pyfunction!(observe::density_correlations, m)?)?;
    m.add_function(wrap_pyfunction!(threads::default_threads, m)?)?;
    Ok(())
}
