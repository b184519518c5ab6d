//! Observables of a state on a space, each from one pass over the basis:
//! monomial expectations, occupation distributions, density correlations.

use crate::arrays::{InVector, OwnedVector};
use crate::errors::guarded;
use crate::space::NativeSpace;
use crate::threads::{detached, Threads};
use fockmill_core::{correlations, observe};
use num_complex::Complex64;
use numpy::{IntoPyArray, PyArray1};
use pyo3::prelude::*;

/// ⟨ψ|m|ψ⟩ for each monomial m given as [(mode, p, q), ...], as complex numbers.
#[pyfunction]
#[pyo3(signature = (space, monomials, psi, threads=None))]
pub fn monomial_expectations<'py>(
    py: Python<'py>,
    space: &NativeSpace,
    monomials: Vec<Vec<(usize, u32, u32)>>,
    psi: InVector<'py>,
    threads: Option<Threads<'_>>,
) -> PyResult<Bound<'py, PyArray1<Complex64>>> {
    guarded(|| {
        let sp = &space.inner;
        let values = match psi.to_owned_vec()? {
            OwnedVector::Real(v) => detached(py, threads, |r, s| {
                observe::monomial_expectations(sp, &monomials, &v, r, s)
            })?,
            OwnedVector::Complex(v) => detached(py, threads, |r, s| {
                observe::monomial_expectations(sp, &monomials, &v, r, s)
            })?,
        };
        Ok(values.into_pyarray(py))
    })
}

/// P_i(n) for every mode, concatenated (mode i has cutoff_i + 1 entries).
#[pyfunction]
#[pyo3(signature = (space, psi, threads=None))]
pub fn occupation_distributions<'py>(
    py: Python<'py>,
    space: &NativeSpace,
    psi: InVector<'py>,
    threads: Option<Threads<'_>>,
) -> PyResult<Bound<'py, PyArray1<f64>>> {
    guarded(|| {
        let sp = &space.inner;
        let values = match psi.to_owned_vec()? {
            OwnedVector::Real(v) => detached(py, threads, |r, s| {
                observe::occupation_distributions(sp, &v, r, s)
            })?,
            OwnedVector::Complex(v) => detached(py, threads, |r, s| {
                observe::occupation_distributions(sp, &v, r, s)
            })?,
        };
        Ok(values.into_pyarray(py))
    })
}

/// Σ_s |ψ_s|² n_i(s) n_j(s) as a flat row-major (modes × modes) array (not normalised).
#[pyfunction]
#[pyo3(signature = (space, psi, threads=None))]
pub fn density_correlations<'py>(
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
