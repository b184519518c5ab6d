//! Binding of operators between two spaces (`fockmill_core::between`): a matrix of
//! shape (target.dim, source.dim), built as CSR or applied matrix-free.

use crate::errors::{guarded, PyCoreError};
use crate::protocol::{Served, Versions};
use crate::{InBlock, InTerm, InVector, NativeSpace, Threads};
use fockmill_core::between::{self, Between};
use fockmill_core::build::CsrAny;
use fockmill_core::{CoreResult, FockSpace, Interrupt, RawTerm, Runner, Scalar};
use num_complex::Complex64;
use pyo3::prelude::*;
use std::sync::Arc;

/// An operator carrying the states of `source` into `target` (same modes and cutoffs).
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativeBetween {
    source: Arc<FockSpace>,
    target: Arc<FockSpace>,
    real: Option<Between<f64>>,
    complex: Between<Complex64>,
}

#[pymethods]
impl NativeBetween {
    #[new]
    #[pyo3(signature = (source, target, terms, project=false))]
    fn new(source: &NativeSpace, target: &NativeSpace, terms: Vec<InTerm>, project: bool) -> PyResult<Self> {
        guarded(|| {
            let raw: Vec<RawTerm> = terms
                .into_iter()
                .map(|(re, im, f)| RawTerm::new(re, im, f))
                .collect();
            let complex = Between::<Complex64>::new(&source.inner, &target.inner, &raw, project)
                .map_err(PyCoreError)?;
            let real = if raw.iter().all(|t| t.im == 0.0) {
                Some(Between::<f64>::new(&source.inner, &target.inner, &raw, project).map_err(PyCoreError)?)
            } else {
                None
            };
            Ok(NativeBetween {
                source: source.inner.clone(),
                target: target.inner.clone(),
                real,
                complex,
            })
        })
    }

    /// Whether every coefficient is real (the matrix is then float64).
    #[getter]
    fn is_real(&self) -> bool {
        self.real.is_some()
    }

    /// Number of distinct nonzero monomials after merging.
    #[getter]
    fn terms(&self) -> usize {
        self.complex.len()
    }

    /// Columns: the source space's dimension.
    #[getter]
    fn dim(&self) -> u64 {
        self.source.dim()
    }

    /// Rows: the target space's dimension.
    #[getter]
    fn rows(&self) -> u64 {
        self.target.dim()
    }

    /// CSR arrays (indptr, indices, data) of the (rows, dim) matrix.
    #[pyo3(signature = (threads=None, force_wide=false))]
    fn build_csr<'py>(
        &self,
        py: Python<'py>,
        threads: Option<Threads<'_>>,
        force_wide: bool,
    ) -> PyResult<Bound<'py, PyAny>> {
        self.versions().build_csr(py, threads, force_wide)
    }

    /// y = A x: x of length dim (source), y of length rows (target); complex128 when
    /// either the operator or x is complex.
    #[pyo3(signature = (x, threads=None))]
    fn matvec<'py>(
        &self,
        py: Python<'py>,
        x: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        self.versions().matvec(py, x, threads)
    }

    /// Y = A X for a (dim, k) block; the result has shape (rows, k).
    #[pyo3(signature = (x, threads=None))]
    fn matmat<'py>(
        &self,
        py: Python<'py>,
        x: InBlock<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        self.versions().matmat(py, x, threads)
    }

    /// (nnz estimate, standard error, exact?, largest row) without building.
    #[pyo3(signature = (samples=2048, threads=None))]
    fn estimate_nnz(
        &self,
        py: Python<'_>,
        samples: usize,
        threads: Option<Threads<'_>>,
    ) -> PyResult<(f64, f64, bool, u64)> {
        self.versions().estimate_nnz(py, samples, threads)
    }
}

/// One version (real or complex) of a `NativeBetween`.
struct BetweenVersion<'a, S: Scalar> {
    source: &'a FockSpace,
    target: &'a FockSpace,
    op: &'a Between<S>,
}

impl<S: Scalar> Served<S> for BetweenVersion<'_, S> {
    fn out_len(&self) -> usize {
        self.target.dim() as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        between::apply_many(self.source, self.target, self.op, x, y, k, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>> {
        between::build_csr(self.source, self.target, self.op, runner, stop, force_wide)
    }
    fn estimate(
        &self,
        samples: usize,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<(f64, f64, bool, u64)> {
        between::estimate_nnz(self.source, self.target, self.op, samples, runner, stop)
    }
}

impl NativeBetween {
    fn version<'a, S: Scalar>(&'a self, op: &'a Between<S>) -> BetweenVersion<'a, S> {
        BetweenVersion {
            source: &self.source,
            target: &self.target,
            op,
        }
    }

    fn versions(&self) -> Versions<BetweenVersion<'_, f64>, BetweenVersion<'_, Complex64>> {
        Versions {
            real: self.real.as_ref().map(|op| self.version(op)),
            complex: self.version(&self.complex),
        }
    }
}

/// Register the classes of this file on the module.
pub fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<NativeBetween>()
}
