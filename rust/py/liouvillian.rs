//! `NativeLiouvillian`: the core's matrix-free Liouvillian product, built from CSR
//! arrays of the effective Hamiltonians and jumps, applied with the interpreter released.

use crate::arrays::owned_copy;
use crate::errors::{guarded, PyCoreError};
use crate::threads::{detached, Threads};
use fockmill_core::liouvillian::{Channel, LiouvillianProduct, SparseBlock};
use fockmill_core::memory;
use num_complex::Complex64;
use numpy::{IntoPyArray, PyArray1, PyArrayMethods, PyReadonlyArray1, PyUntypedArrayMethods};
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;
use std::sync::Mutex;

/// A CSR matrix as Python passes it: `(rows, cols, indptr, indices, data)`.
type InCsr<'py> = (
    usize,
    usize,
    PyReadonlyArray1<'py, i64>,
    PyReadonlyArray1<'py, i64>,
    PyReadonlyArray1<'py, Complex64>,
);

fn sparse(m: InCsr<'_>, what: &str) -> PyResult<SparseBlock> {
    let (rows, cols, indptr, indices, data) = m;
    let to_index = |v: i64| -> PyResult<usize> {
        usize::try_from(v).map_err(|_| PyValueError::new_err(format!("{what}: negative CSR index {v}")))
    };
    let indptr = indptr
        .as_array()
        .iter()
        .map(|&v| to_index(v))
        .collect::<PyResult<Vec<usize>>>()?;
    let indices = indices
        .as_array()
        .iter()
        .map(|&v| to_index(v))
        .collect::<PyResult<Vec<usize>>>()?;
    let data = owned_copy(
        data.len(),
        data.as_array().iter().copied(),
        "a copy of CSR values",
    )?;
    SparseBlock::new(rows, cols, indptr, indices, data)
        .map_err(|e| PyValueError::new_err(format!("{what}: {e}")))
}

/// The Liouvillian `𝓛ρ = −i(Kρ − ρK†) + Σ γ J ρ J†` on the diagonal blocks of `ρ`.
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativeLiouvillian {
    inner: LiouvillianProduct,
    /// The copy of `x` and the work matrix of `apply_real`, kept between calls (a
    /// solver makes hundreds of products of the same size). Taken with `try_lock`: a
    /// call that finds them in use by another thread allocates its own.
    buffers: Mutex<RealBuffers>,
}

#[derive(Default)]
struct RealBuffers {
    input: Vec<f64>,
    work: Vec<f64>,
}

#[pymethods]
impl NativeLiouvillian {
    /// `effective`: one `K_b` per block, `(d, d, indptr, indices, data)`; `channels`:
    /// `(rate, source, target, (rows, cols, indptr, indices, data))` with the jump of
    /// `d_target × d_source`.
    #[new]
    fn new(effective: Vec<InCsr<'_>>, channels: Vec<(f64, usize, usize, InCsr<'_>)>) -> PyResult<Self> {
        guarded(|| {
            let ks = effective
                .into_iter()
                .enumerate()
                .map(|(b, m)| sparse(m, &format!("K of block {b}")))
                .collect::<PyResult<Vec<_>>>()?;
            let chans = channels
                .into_iter()
                .enumerate()
                .map(|(c, (rate, source, target, m))| {
                    Ok(Channel {
                        rate,
                        jump: sparse(m, &format!("the jump of channel {c}"))?,
                        source,
                        target,
                    })
                })
                .collect::<PyResult<Vec<_>>>()?;
            let inner = LiouvillianProduct::new(ks, chans).map_err(PyCoreError)?;
            Ok(NativeLiouvillian {
                inner,
                buffers: Mutex::new(RealBuffers::default()),
            })
        })
    }

    /// The block dimensions.
    #[getter]
    fn dims(&self) -> Vec<usize> {
        self.inner.dims().to_vec()
    }

    /// Entries of the block-diagonal density matrix, `Σ d²`.
    #[getter]
    fn size(&self) -> usize {
        self.inner.size()
    }

    /// `𝓛ρ` for the blocks concatenated row-major (complex, length `size`).
    #[pyo3(signature = (rho, threads=None))]
    fn apply<'py>(
        &self,
        py: Python<'py>,
        rho: PyReadonlyArray1<'py, Complex64>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyArray1<Complex64>>> {
        guarded(|| {
            let x = owned_copy(rho.len(), rho.as_array().iter().copied(), "a copy of rho")?;
            let n = self.inner.size();
            let out = detached(py, threads, |r, s| {
                let mut out = memory::try_filled(n, Complex64::new(0.0, 0.0), "the product 𝓛ρ")?;
                self.inner.apply(&x, &mut out, r, s)?;
                Ok(out)
            })?;
            Ok(out.into_pyarray(py))
        })
    }

    /// The real form `Re 𝓛ρ + Im 𝓛ρ` for Hermitian blocks given as `Re ρ + Im ρ`
    /// (float64, length `size`), into `out` when given (a writable C-contiguous float64
    /// array of that length, which may be `x` itself: `x` is copied first) and returned.
    #[pyo3(signature = (x, threads=None, out=None))]
    fn apply_real<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray1<'py, f64>,
        threads: Option<Threads<'_>>,
        out: Option<Bound<'py, PyArray1<f64>>>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        guarded(|| {
            let mut kept = self.buffers.try_lock().ok();
            let mut own = RealBuffers::default();
            let buffers = kept.as_deref_mut().unwrap_or(&mut own);
            buffers.input.clear();
            memory::try_reserve_for(&mut buffers.input, x.len(), "a copy of x").map_err(PyCoreError)?;
            match x.as_slice() {
                Ok(slice) => buffers.input.extend_from_slice(slice),
                Err(_) => buffers.input.extend(x.as_array().iter().copied()),
            }
            drop(x);
            let n = self.inner.size();
            let RealBuffers { input, work } = buffers;
            let Some(target) = out else {
                let y = detached(py, threads, |r, s| {
                    let mut y = memory::try_filled(n, 0.0, "the product 𝓛ρ")?;
                    self.inner
                        .apply_hermitian_real_reusing(input, &mut y, work, r, s)?;
                    Ok(y)
                })?;
                return Ok(y.into_pyarray(py));
            };
            {
                let mut view = target.try_readwrite().map_err(|e| {
                    PyValueError::new_err(format!(
                        "out= must be a writable array not in use elsewhere ({e})"
                    ))
                })?;
                let y = view
                    .as_slice_mut()
                    .map_err(|_| PyValueError::new_err("out= must be a C-contiguous float64 array"))?;
                if y.len() != n {
                    return Err(PyValueError::new_err(format!(
                        "out= has {} entries; the product has {n}",
                        y.len()
                    )));
                }
                detached(py, threads, |r, s| {
                    self.inner.apply_hermitian_real_reusing(input, y, work, r, s)
                })?;
            }
            Ok(target)
        })
    }
}
