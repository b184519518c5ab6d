//! Binding of operators between two spaces (`fockmill_core::between`): a matrix of
//! shape (target.dim, source.dim), built as CSR or applied matrix-free.

use crate::errors::{guarded, PyCoreError};
use crate::{detached, owned_copy, InBlock, InTerm, InVector, NativeSpace, OwnedVector, Threads};
use fockmill_core::between::{self, Between, RectAny};
use fockmill_core::{FockSpace, RawTerm, Scalar};
use num_complex::Complex64;
use numpy::ndarray::Array2;
use numpy::{IntoPyArray, PyUntypedArrayMethods};
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
        guarded(|| {
            let (src, dst) = (&self.source, &self.target);
            match &self.real {
                Some(op) => rect_to_python(
                    py,
                    detached(py, threads, |r, s| {
                        between::build_csr(src, dst, op, r, s, force_wide)
                    })?,
                ),
                None => rect_to_python(
                    py,
                    detached(py, threads, |r, s| {
                        between::build_csr(src, dst, &self.complex, r, s, force_wide)
                    })?,
                ),
            }
        })
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
        guarded(|| {
            let (src, dst) = (&self.source, &self.target);
            let rows = dst.dim() as usize;
            match (x.to_owned_vec()?, &self.real) {
                (OwnedVector::Real(x), Some(op)) => {
                    let y = detached(py, threads, |r, s| {
                        let mut y = fockmill_core::memory::try_filled(rows, 0.0, "the product vector")?;
                        between::apply_many(src, dst, op, &x, &mut y, 1, r, s).map(|_| y)
                    })?;
                    Ok(y.into_pyarray(py).into_any())
                }
                (owned, _) => {
                    let x = owned.into_complex()?;
                    let y = detached(py, threads, |r, s| {
                        let mut y =
                            fockmill_core::memory::try_filled(rows, Complex64::ZERO, "the product vector")?;
                        between::apply_many(src, dst, &self.complex, &x, &mut y, 1, r, s).map(|_| y)
                    })?;
                    Ok(y.into_pyarray(py).into_any())
                }
            }
        })
    }

    /// Y = A X for a (dim, k) block; the result has shape (rows, k).
    #[pyo3(signature = (x, threads=None))]
    fn matmat<'py>(
        &self,
        py: Python<'py>,
        x: InBlock<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| {
            let (src, dst) = (&self.source, &self.target);
            let rows = dst.dim() as usize;
            let k = match &x {
                InBlock::Real(a) => a.shape()[1],
                InBlock::Complex(a) => a.shape()[1],
            };
            let len = rows.saturating_mul(k);
            match (&x, &self.real) {
                (InBlock::Real(a), Some(op)) => {
                    let xs = owned_copy(a.len(), a.as_array().iter().copied(), "a copy of the input block")?;
                    let y = detached(py, threads, |r, s| {
                        let mut y = fockmill_core::memory::try_filled(len, 0.0, "the product block")?;
                        between::apply_many(src, dst, op, &xs, &mut y, k, r, s).map(|_| y)
                    })?;
                    let arr = Array2::from_shape_vec((rows, k), y).expect("shape checked by the core");
                    Ok(arr.into_pyarray(py).into_any())
                }
                _ => {
                    let what = "a copy of the input block";
                    let xs: Vec<Complex64> = match &x {
                        InBlock::Real(a) => owned_copy(
                            a.len(),
                            a.as_array().iter().map(|&v| Complex64::new(v, 0.0)),
                            what,
                        )?,
                        InBlock::Complex(a) => owned_copy(a.len(), a.as_array().iter().copied(), what)?,
                    };
                    let y = detached(py, threads, |r, s| {
                        let mut y =
                            fockmill_core::memory::try_filled(len, Complex64::ZERO, "the product block")?;
                        between::apply_many(src, dst, &self.complex, &xs, &mut y, k, r, s).map(|_| y)
                    })?;
                    let arr = Array2::from_shape_vec((rows, k), y).expect("shape checked by the core");
                    Ok(arr.into_pyarray(py).into_any())
                }
            }
        })
    }

    /// (nnz estimate, standard error, exact?, largest row) without building.
    #[pyo3(signature = (samples=2048, threads=None))]
    fn estimate_nnz(
        &self,
        py: Python<'_>,
        samples: usize,
        threads: Option<Threads<'_>>,
    ) -> PyResult<(f64, f64, bool, u64)> {
        guarded(|| {
            let (src, dst) = (&self.source, &self.target);
            match &self.real {
                Some(op) => detached(py, threads, |r, s| {
                    between::estimate_nnz(src, dst, op, samples, r, s)
                }),
                None => detached(py, threads, |r, s| {
                    between::estimate_nnz(src, dst, &self.complex, samples, r, s)
                }),
            }
        })
    }
}

fn rect_to_python<'py, S: Scalar + numpy::Element>(
    py: Python<'py>,
    csr: RectAny<S>,
) -> PyResult<Bound<'py, PyAny>> {
    let tuple = match csr {
        RectAny::Narrow(c) => (
            c.indptr.into_pyarray(py).into_any(),
            c.indices.into_pyarray(py).into_any(),
            c.data.into_pyarray(py).into_any(),
        ),
        RectAny::Wide(c) => (
            c.indptr.into_pyarray(py).into_any(),
            c.indices.into_pyarray(py).into_any(),
            c.data.into_pyarray(py).into_any(),
        ),
    };
    Ok(tuple.into_pyobject(py)?.into_any())
}

/// Register the classes of this file on the module.
pub fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<NativeBetween>()
}
