//! Binding of `fockmill_core::correlations`: `⟨n_i n_j⟩` for every pair of modes.

use crate::errors::guarded;
use crate::{detached, InVector, NativeSpace, OwnedVector, Threads};
use fockmill_core::correlations;
use numpy::{IntoPyArray, PyArray1};
use pyo3::prelude::*;

/// Σ_s |ψ_s|² n_i(s) n_j(s) as a flat row-major (modes × modes) array (not normalised).
#[pyfunction]
#[pyo3(signature = (space, psi, threads=None))]
pub(crate) fn density_correlations<'py>(
    py: Python<'py>,
    space: &NativeSpace,
    psi: InVector<'py>,
    threads: Option<Threads<'_>>,
) -> PyResult<Bound<'py, PyArray1<f64>>> {
    guarded(|| {
        let sp = &space.inner;
        let values = match psi.to_owned_vec()? {
            OwnedVector::Real(v) => detached(py, threads, |r, s| {
                correlations::density_correlations(sp, &v, r, s)
            })?,
            OwnedVector::Complex(v) => detached(py, threads, |r, s| {
                correlations::density_correlations(sp, &v, r, s)
            })?,
        };
        Ok(values.into_pyarray(py))
    })
}
