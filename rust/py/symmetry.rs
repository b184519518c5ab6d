//! Binding of symmetry sectors: `NativeSymmetricSpace` (a sector of a `NativeSpace`) and
//! `NativeSymmetricOperator` (an invariant operator on it, with the same product, build
//! and Lanczos methods as `NativeOperator`).

use crate::errors::{guarded, PyCoreError};
use crate::levels::{InStart, LevelsTuple};
use crate::protocol::{self, SectorVersion};
use crate::{detached, InBlock, InTerm, InVector, LanczosTuple, NativeSpace, OwnedVector, Threads};
use fockmill_core::symmetry::{Generator, SectorOperator, SymmetricSpace};
use fockmill_core::{Operator, RawTerm};
use num_complex::Complex64;
use numpy::{IntoPyArray, PyArray1};
use pyo3::prelude::*;
use std::sync::Arc;

/// A symmetry sector: orbit representatives of a group of mode permutations with a
/// one-dimensional representation given by one label per generator.
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativeSymmetricSpace {
    inner: Arc<SymmetricSpace>,
    generators: Arc<Vec<Generator>>,
}

fn complex_of(v: OwnedVector) -> Vec<Complex64> {
    match v {
        OwnedVector::Real(v) => v.into_iter().map(|re| Complex64::new(re, 0.0)).collect(),
        OwnedVector::Complex(v) => v,
    }
}

#[pymethods]
impl NativeSymmetricSpace {
    #[new]
    #[pyo3(signature = (space, generators, threads=None))]
    fn new(
        py: Python<'_>,
        space: &NativeSpace,
        generators: Vec<(Vec<usize>, u64)>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Self> {
        guarded(|| {
            let gens: Vec<Generator> = generators
                .into_iter()
                .map(|(images, label)| Generator { images, label })
                .collect();
            let base = (*space.inner).clone();
            let inner = detached(py, threads, |r, s| SymmetricSpace::new(base, &gens, r, s))?;
            Ok(NativeSymmetricSpace {
                inner: Arc::new(inner),
                generators: Arc::new(gens),
            })
        })
    }

    /// Number of sector states.
    #[getter]
    fn dim(&self) -> u64 {
        self.inner.dim()
    }

    /// Order of the group.
    #[getter]
    fn order(&self) -> usize {
        self.inner.order()
    }

    /// Whether every character is real (±1).
    #[getter]
    fn is_real(&self) -> bool {
        self.inner.is_real()
    }

    /// Base ranks of the representatives, in sector order (uint64).
    fn representatives<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<u64>> {
        self.inner.representatives().to_vec().into_pyarray(py)
    }

    /// The base-space vector of a sector vector (norm-preserving).
    #[pyo3(signature = (v, threads=None))]
    fn expand<'py>(
        &self,
        py: Python<'py>,
        v: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| {
            let sector = &self.inner;
            let n = sector.base().dim() as usize;
            match v.to_owned_vec()? {
                OwnedVector::Real(x) if sector.is_real() => {
                    let w = detached(py, threads, |r, s| {
                        let mut w = fockmill_core::memory::try_filled(n, 0.0, "the expanded vector")?;
                        sector.expand(&x, &mut w, r, s).map(|_| w)
                    })?;
                    Ok(w.into_pyarray(py).into_any())
                }
                owned => {
                    let x = complex_of(owned);
                    let w = detached(py, threads, |r, s| {
                        let mut w =
                            fockmill_core::memory::try_filled(n, Complex64::ZERO, "the expanded vector")?;
                        sector.expand(&x, &mut w, r, s).map(|_| w)
                    })?;
                    Ok(w.into_pyarray(py).into_any())
                }
            }
        })
    }

    /// The sector components of a base-space vector (the adjoint of `expand`).
    #[pyo3(signature = (w, threads=None))]
    fn project<'py>(
        &self,
        py: Python<'py>,
        w: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| {
            let sector = &self.inner;
            let n = sector.dim() as usize;
            match w.to_owned_vec()? {
                OwnedVector::Real(x) if sector.is_real() => {
                    let v = detached(py, threads, |r, s| {
                        let mut v = fockmill_core::memory::try_filled(n, 0.0, "the projected vector")?;
                        sector.project(&x, &mut v, r, s).map(|_| v)
                    })?;
                    Ok(v.into_pyarray(py).into_any())
                }
                owned => {
                    let x = complex_of(owned);
                    let v = detached(py, threads, |r, s| {
                        let mut v =
                            fockmill_core::memory::try_filled(n, Complex64::ZERO, "the projected vector")?;
                        sector.project(&x, &mut v, r, s).map(|_| v)
                    })?;
                    Ok(v.into_pyarray(py).into_any())
                }
            }
        })
    }
}

/// An operator commuting with a sector's group, prepared on the sector.
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativeSymmetricOperator {
    sector: Arc<SymmetricSpace>,
    real: Option<SectorOperator<f64>>,
    complex: SectorOperator<Complex64>,
    terms: usize,
}

#[pymethods]
impl NativeSymmetricOperator {
    #[new]
    fn new(sector: &NativeSymmetricSpace, terms: Vec<InTerm>) -> PyResult<Self> {
        guarded(|| {
            let raw: Vec<RawTerm> = terms
                .into_iter()
                .map(|(re, im, f)| RawTerm::new(re, im, f))
                .collect();
            let base = sector.inner.base();
            let op = Operator::<Complex64>::new(base, &raw).map_err(PyCoreError)?;
            let complex = SectorOperator::new(&sector.inner, &op, &sector.generators).map_err(PyCoreError)?;
            let real = if sector.inner.is_real() && raw.iter().all(|t| t.im == 0.0) {
                let op = Operator::<f64>::new(base, &raw).map_err(PyCoreError)?;
                Some(SectorOperator::new(&sector.inner, &op, &sector.generators).map_err(PyCoreError)?)
            } else {
                None
            };
            Ok(NativeSymmetricOperator {
                sector: sector.inner.clone(),
                real,
                complex,
                terms: op.len(),
            })
        })
    }

    /// Whether the sector matrix is real (real coefficients and real characters).
    #[getter]
    fn is_real(&self) -> bool {
        self.real.is_some()
    }

    /// Number of distinct nonzero monomials after merging.
    #[getter]
    fn terms(&self) -> usize {
        self.terms
    }

    #[getter]
    fn dim(&self) -> u64 {
        self.sector.dim()
    }

    /// CSR arrays (indptr, indices, data) of the sector matrix.
    #[pyo3(signature = (threads=None, force_wide=false))]
    fn build_csr<'py>(
        &self,
        py: Python<'py>,
        threads: Option<Threads<'_>>,
        force_wide: bool,
    ) -> PyResult<Bound<'py, PyAny>> {
        self.versions().build_csr(py, threads, force_wide)
    }

    /// y = H x on the sector; complex128 when x or the operator is complex.
    #[pyo3(signature = (x, threads=None))]
    fn matvec<'py>(
        &self,
        py: Python<'py>,
        x: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        self.versions().matvec(py, x, threads)
    }

    /// Y = H X for a (dim, k) block of vectors.
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

    /// Lanczos ground state on the sector, matrix-free or (with `stored`) on a CSR
    /// matrix kept inside Rust: (energy, vector, residual, steps, products, restarts,
    /// converged).
    #[pyo3(signature = (tol=1e-9, max_steps=400, max_restarts=8, seed=0x5EED, start=None, threads=None, stored=false))]
    #[allow(clippy::too_many_arguments)]
    fn lanczos_ground<'py>(
        &self,
        py: Python<'py>,
        tol: f64,
        max_steps: usize,
        max_restarts: usize,
        seed: u64,
        start: Option<InVector<'py>>,
        threads: Option<Threads<'_>>,
        stored: bool,
    ) -> PyResult<LanczosTuple<'py>> {
        let v = self.versions();
        v.lanczos_ground(py, tol, max_steps, max_restarts, seed, start, threads, stored)
    }

    /// Lowest `k` levels on the sector (as `NativeOperator.lanczos_levels`):
    /// (energies, vectors (dim, k), residuals, products, restarts, converged).
    #[pyo3(signature = (k, tol=1e-9, max_products=10_000, seed=0x5EED, start=None, threads=None, stored=false, basis=0))]
    #[allow(clippy::too_many_arguments)]
    fn lanczos_levels<'py>(
        &self,
        py: Python<'py>,
        k: usize,
        tol: f64,
        max_products: usize,
        seed: u64,
        start: Option<InStart<'py>>,
        threads: Option<Threads<'_>>,
        stored: bool,
        basis: usize,
    ) -> PyResult<LevelsTuple<'py>> {
        let v = self.versions();
        v.lanczos_levels(py, k, tol, max_products, seed, start, threads, stored, basis)
    }
}

impl NativeSymmetricOperator {
    fn versions(&self) -> protocol::Versions<SectorVersion<'_, f64>, SectorVersion<'_, Complex64>> {
        protocol::sector_versions(&self.sector, self.real.as_ref(), &self.complex)
    }
}

/// Add the classes to the module.
pub fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<NativeSymmetricSpace>()?;
    m.add_class::<NativeSymmetricOperator>()?;
    Ok(())
}
