//! `NativeOperator`: the one native operator class. Its kind is one of: on a space, on a
//! symmetry sector, between two spaces (or two sectors), or a CSR matrix handed in from
//! Python; every
//! kind answers the same protocol (`protocol.rs`), and a method a kind cannot serve
//! (eigenvalues between two spaces, rebuilding a handed-in matrix) raises a `ValueError`
//! that says so.

use crate::arrays::{raw_terms, InBlock, InData, InIndex, InStart, InTerm, InTermBlock, InVector};
use crate::errors::{guarded, PyCoreError};
use crate::kinds::{held_from, BetweenSectors, BetweenSpaces, Held, OnSector, OnSpace, StoredCsr};
use crate::protocol::SolveRequest;
use crate::results::{CsrParts, LanczosResult, LevelsResult, NnzEstimate};
use crate::space::{NativeSpace, NativeSymmetricSpace};
use crate::threads::{detached, Threads};
use crate::watch::Hooks;
use fockmill_core::between::Between;
use fockmill_core::lanczos::LanczosOptions;
use fockmill_core::levels::LevelsOptions;
use fockmill_core::matvec::Product;
use fockmill_core::solve::Storage;
use fockmill_core::symmetry::SectorOperator;
use fockmill_core::{memory, CoreError, Operator};
use num_complex::Complex64;
use numpy::{PyReadonlyArray1, PyUntypedArrayMethods};
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;
use std::sync::OnceLock;

/// What the operator acts on.
enum Kind {
    Space(Box<OnSpace>),
    Sector(Box<OnSector>),
    Between(BetweenSpaces),
    Sectors(Box<BetweenSectors>),
    Csr(StoredCsr),
}

/// A compiled operator: validated, merged terms ready for products, builds and the
/// Lanczos solvers, or a CSR matrix handed in for the solvers.
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativeOperator {
    kind: Kind,
}

/// Run `$body` with `$v` bound to the operator's versions, whatever its kind.
macro_rules! with_versions {
    ($self:expr, $v:ident => $body:expr) => {
        match &$self.kind {
            Kind::Space(k) => {
                let $v = k.versions();
                $body
            }
            Kind::Sector(k) => {
                let $v = k.versions();
                $body
            }
            Kind::Between(k) => {
                let $v = k.versions();
                $body
            }
            Kind::Sectors(k) => {
                let $v = k.versions();
                $body
            }
            Kind::Csr(k) => {
                let $v = k.versions();
                $body
            }
        }
    };
}

/// As `with_versions!`, for the solvers: an operator between two spaces has none.
macro_rules! with_solvable {
    ($self:expr, $v:ident => $body:expr) => {
        match &$self.kind {
            Kind::Space(k) => {
                let $v = k.versions();
                $body
            }
            Kind::Sector(k) => {
                let $v = k.versions();
                $body
            }
            Kind::Csr(k) => {
                let $v = k.versions();
                $body
            }
            Kind::Between(_) | Kind::Sectors(_) => Err(PyValueError::new_err(
                "eigenvalues need an operator from a space to itself; this operator maps \
                 between two spaces",
            )),
        }
    };
}

fn copy_data<S: Copy + numpy::Element>(a: &PyReadonlyArray1<'_, S>) -> PyResult<Vec<S>> {
    let mut out = memory::try_with_capacity(a.len(), "a copy of the CSR values").map_err(PyCoreError)?;
    out.extend(a.as_array().iter().copied());
    Ok(out)
}

fn stored_from<S: fockmill_core::Scalar>(
    indptr: &InIndex<'_>,
    indices: &InIndex<'_>,
    data: Vec<S>,
    narrow: fn(fockmill_core::lanczos::CsrMap<S, i32>) -> Held,
    wide: fn(fockmill_core::lanczos::CsrMap<S, i64>) -> Held,
) -> PyResult<StoredCsr> {
    let held = if indptr.is_wide() || indices.is_wide() {
        held_from(indptr.owned::<i64>()?, indices.owned::<i64>()?, data, wide)
    } else {
        held_from(indptr.owned::<i32>()?, indices.owned::<i32>()?, data, narrow)
    };
    Ok(held.map_err(PyCoreError)?)
}

fn storage(store: Option<bool>, memory_limit: Option<u128>) -> Storage {
    Storage { store, memory_limit }
}

#[pymethods]
impl NativeOperator {
    /// An operator on a space (`cut`: None automatic, 0 the row kernel, `k` the bipartite
    /// kernel with left modes `0..k`).
    #[staticmethod]
    #[pyo3(signature = (space, terms, *, blocks=Vec::new(), cut=None))]
    fn on_space(
        space: &NativeSpace,
        terms: Vec<InTerm>,
        blocks: Vec<InTermBlock<'_>>,
        cut: Option<usize>,
    ) -> PyResult<Self> {
        guarded(|| {
            let modes = space.inner.modes();
            if let Some(c) = cut {
                if c > modes {
                    return Err(PyCoreError(CoreError::InvalidArgument(format!(
                        "cut={c} is above the number of modes ({modes}); pass None, 0 (row \
                         kernel) or 1..={modes}"
                    )))
                    .into());
                }
            }
            let raw = raw_terms(terms, &blocks)?;
            let complex = Operator::<Complex64>::new(&space.inner, &raw).map_err(PyCoreError)?;
            let real = if raw.iter().all(|t| t.im == 0.0) {
                Some(Operator::<f64>::new(&space.inner, &raw).map_err(PyCoreError)?)
            } else {
                None
            };
            Ok(NativeOperator {
                kind: Kind::Space(Box::new(OnSpace {
                    space: space.inner.clone(),
                    real,
                    complex,
                    cut,
                    real_product: OnceLock::new(),
                    complex_product: OnceLock::new(),
                    real_estimate: OnceLock::new(),
                    complex_estimate: OnceLock::new(),
                })),
            })
        })
    }

    /// An operator commuting with a sector's group, on the sector.
    #[staticmethod]
    #[pyo3(signature = (sector, terms, *, blocks=Vec::new()))]
    fn on_sector(
        sector: &NativeSymmetricSpace,
        terms: Vec<InTerm>,
        blocks: Vec<InTermBlock<'_>>,
    ) -> PyResult<Self> {
        guarded(|| {
            let raw = raw_terms(terms, &blocks)?;
            let base = sector.inner.base();
            let op = Operator::<Complex64>::new(base, &raw).map_err(PyCoreError)?;
            let complex = SectorOperator::new(&sector.inner, &op, &sector.generators).map_err(PyCoreError)?;
            let real = if sector.inner.is_real() && raw.iter().all(|t| t.im == 0.0) {
                let op = Operator::<f64>::new(base, &raw).map_err(PyCoreError)?;
                Some(SectorOperator::new(&sector.inner, &op, &sector.generators).map_err(PyCoreError)?)
            } else {
                None
            };
            Ok(NativeOperator {
                kind: Kind::Sector(Box::new(OnSector {
                    sector: sector.inner.clone(),
                    real,
                    complex,
                    terms: op.len(),
                    real_estimate: OnceLock::new(),
                    complex_estimate: OnceLock::new(),
                })),
            })
        })
    }

    /// An operator carrying the states of `source` into `target` (`project`: drop the
    /// part of a term's image outside `target` instead of refusing the term).
    #[staticmethod]
    #[pyo3(signature = (source, target, terms, *, blocks=Vec::new(), project=false))]
    fn between(
        source: &NativeSpace,
        target: &NativeSpace,
        terms: Vec<InTerm>,
        blocks: Vec<InTermBlock<'_>>,
        project: bool,
    ) -> PyResult<Self> {
        guarded(|| {
            let raw = raw_terms(terms, &blocks)?;
            let complex = Between::<Complex64>::new(&source.inner, &target.inner, &raw, project)
                .map_err(PyCoreError)?;
            let real = if raw.iter().all(|t| t.im == 0.0) {
                Some(Between::<f64>::new(&source.inner, &target.inner, &raw, project).map_err(PyCoreError)?)
            } else {
                None
            };
            Ok(NativeOperator {
                kind: Kind::Between(BetweenSpaces {
                    source: source.inner.clone(),
                    target: target.inner.clone(),
                    real,
                    complex,
                }),
            })
        })
    }

    /// An operator with a definite character under every generator, carrying the states
    /// of the sector `source` into the sector `target` (same generators; the target's
    /// labels are the source's shifted by the operator's). `project` as for `between`.
    #[staticmethod]
    #[pyo3(signature = (source, target, terms, *, project=false))]
    fn between_sectors(
        source: &NativeSymmetricSpace,
        target: &NativeSymmetricSpace,
        terms: Vec<InTerm>,
        project: bool,
    ) -> PyResult<Self> {
        guarded(|| {
            // Array blocks are expanded to terms by the caller on this path.
            let raw = raw_terms(terms, &[])?;
            let (src, dst) = (&source.inner, &target.inner);
            let (gs, gt) = (&source.generators, &target.generators);
            let op = Between::<Complex64>::new(src.base(), dst.base(), &raw, project).map_err(PyCoreError)?;
            let complex = SectorOperator::between(src, dst, &op, gs, gt).map_err(PyCoreError)?;
            let real = if src.is_real() && dst.is_real() && raw.iter().all(|t| t.im == 0.0) {
                let op = Between::<f64>::new(src.base(), dst.base(), &raw, project).map_err(PyCoreError)?;
                Some(SectorOperator::between(src, dst, &op, gs, gt).map_err(PyCoreError)?)
            } else {
                None
            };
            Ok(NativeOperator {
                kind: Kind::Sectors(Box::new(BetweenSectors {
                    source: src.clone(),
                    target: dst.clone(),
                    real,
                    complex,
                    terms: op.len(),
                })),
            })
        })
    }

    /// A square Hermitian CSR matrix copied in from Python, for products and the
    /// solvers (Hermiticity is assumed, not checked).
    #[staticmethod]
    fn from_csr(indptr: InIndex<'_>, indices: InIndex<'_>, data: InData<'_>) -> PyResult<Self> {
        guarded(|| {
            let stored = match &data {
                InData::Real(a) => {
                    stored_from(&indptr, &indices, copy_data(a)?, Held::RealNarrow, Held::RealWide)?
                }
                InData::Complex(a) => stored_from(
                    &indptr,
                    &indices,
                    copy_data(a)?,
                    Held::ComplexNarrow,
                    Held::ComplexWide,
                )?,
            };
            Ok(NativeOperator {
                kind: Kind::Csr(stored),
            })
        })
    }

    /// "space", "sector", "between" or "csr".
    #[getter]
    fn kind(&self) -> &'static str {
        match self.kind {
            Kind::Space(_) => "space",
            Kind::Sector(_) => "sector",
            Kind::Between(_) | Kind::Sectors(_) => "between",
            Kind::Csr(_) => "csr",
        }
    }

    /// Whether the matrix is real (real coefficients, and real characters on a sector).
    #[getter]
    fn is_real(&self) -> bool {
        match &self.kind {
            Kind::Space(k) => k.real.is_some(),
            Kind::Sector(k) => k.real.is_some(),
            Kind::Between(k) => k.real.is_some(),
            Kind::Sectors(k) => k.real.is_some(),
            Kind::Csr(k) => k.is_real(),
        }
    }

    /// Columns: the dimension of the space the operator acts on.
    #[getter]
    fn dim(&self) -> u64 {
        self.shape().1
    }

    /// Rows: the dimension of the space products land in (`dim` unless between spaces).
    #[getter]
    fn rows(&self) -> u64 {
        self.shape().0
    }

    /// `(rows, dim)`.
    #[getter]
    fn shape(&self) -> (u64, u64) {
        match &self.kind {
            Kind::Space(k) => (k.space.dim(), k.space.dim()),
            Kind::Sector(k) => (k.sector.dim(), k.sector.dim()),
            Kind::Between(k) => (k.target.dim(), k.source.dim()),
            Kind::Sectors(k) => (k.target.dim(), k.source.dim()),
            Kind::Csr(k) => (k.dim(), k.dim()),
        }
    }

    /// Number of distinct nonzero monomials after merging (None for a CSR matrix).
    #[getter]
    fn terms(&self) -> Option<usize> {
        match &self.kind {
            Kind::Space(k) => Some(k.complex.len()),
            Kind::Sector(k) => Some(k.terms),
            Kind::Between(k) => Some(k.complex.len()),
            Kind::Sectors(k) => Some(k.terms),
            Kind::Csr(_) => None,
        }
    }

    /// Whether matrix-free products are as fast as a stored matrix's (the bipartite
    /// kernel, or a quadratic form read from its gathered hop table); False for the
    /// other kinds. Prepares the kernel on first use.
    #[getter]
    fn fast_products(&self, py: Python<'_>) -> PyResult<bool> {
        Ok(self
            .on_product(py, |p| p.as_fast_as_stored(), |p| p.as_fast_as_stored())?
            .unwrap_or(false))
    }

    /// The cut of the product kernel on a space (0: the row kernel; `k`: left modes
    /// `0..k`); 0 for the other kinds. Prepares the kernel on first use.
    #[getter]
    fn cut(&self, py: Python<'_>) -> PyResult<usize> {
        Ok(self.on_product(py, |p| p.cut(), |p| p.cut())?.unwrap_or(0))
    }

    /// `y = A x`; complex128 when `x` or the operator is complex.
    #[pyo3(signature = (x, *, threads=None))]
    fn matvec<'py>(
        &self,
        py: Python<'py>,
        x: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        with_versions!(self, v => v.matvec(py, x, threads))
    }

    /// `Y = A X` for a `(dim, k)` block; the result has shape `(rows, k)`.
    #[pyo3(signature = (x, *, threads=None))]
    fn matmat<'py>(
        &self,
        py: Python<'py>,
        x: InBlock<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        with_versions!(self, v => v.matmat(py, x, threads))
    }

    /// The canonical CSR arrays of the `(rows, dim)` matrix, moved to NumPy.
    #[pyo3(signature = (*, threads=None, force_wide=false))]
    fn build_csr(
        &self,
        py: Python<'_>,
        threads: Option<Threads<'_>>,
        force_wide: bool,
    ) -> PyResult<CsrParts> {
        with_versions!(self, v => v.build_csr(py, threads, force_wide))
    }

    /// Estimated stored entries and CSR sizes, without building.
    #[pyo3(signature = (*, samples=2048, threads=None))]
    fn estimate_nnz(
        &self,
        py: Python<'_>,
        samples: usize,
        threads: Option<Threads<'_>>,
    ) -> PyResult<NnzEstimate> {
        with_versions!(self, v => v.estimate_nnz(py, samples, threads))
    }

    /// Whether a Lanczos solve of `levels` levels would run on a stored matrix, given
    /// the preference `store` (None: decide) and `memory_limit` (None: the memory
    /// available now).
    #[pyo3(signature = (*, levels=1, store=None, memory_limit=None, threads=None))]
    fn stores_matrix(
        &self,
        py: Python<'_>,
        levels: usize,
        store: Option<bool>,
        memory_limit: Option<u128>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<bool> {
        with_solvable!(self, v => v.stores_matrix(py, levels, storage(store, memory_limit), threads))
    }

    /// The memory a Lanczos solve of `levels` levels plans to add (the numbers its
    /// stored-or-matrix-free choice compares with `memory_limit`):
    /// `(stored, matrix_bytes, build_bytes, vector_bytes)`; the peak is `matrix_bytes +
    /// max(build_bytes, vector_bytes)`. `held`: vectors handed in (a start vector: 1).
    #[pyo3(signature = (*, levels=1, store=None, memory_limit=None, held=0, threads=None))]
    fn memory_plan(
        &self,
        py: Python<'_>,
        levels: usize,
        store: Option<bool>,
        memory_limit: Option<u128>,
        held: usize,
        threads: Option<Threads<'_>>,
    ) -> PyResult<(bool, u128, u128, u128)> {
        with_solvable!(self, v => v.memory_plan(py, levels, held, storage(store, memory_limit), threads))
    }

    /// Four-vector Lanczos ground state, on the matrix-free product or on a CSR matrix
    /// built first and kept inside Rust (`store`: True, False, or None to decide).
    ///
    /// `progress`: called with `{"step", "products", "residual"}` at most every
    /// `report_every` seconds. `checkpoint`: a sink receiving the resumable state at most
    /// every `checkpoint_every` seconds (`begin`, `write` per chunk, `commit`; see
    /// `rust/py/watch.rs`). `resume`: a loader of such a state to continue from.
    #[pyo3(signature = (*, tol=1e-9, max_steps=400, max_restarts=8, seed=0, start=None, threads=None, store=None, memory_limit=None, progress=None, report_every=0.5, checkpoint=None, checkpoint_every=300.0, resume=None))]
    #[allow(clippy::too_many_arguments)]
    fn lanczos_ground<'py>(
        &self,
        py: Python<'py>,
        tol: f64,
        max_steps: usize,
        max_restarts: usize,
        seed: u64,
        start: Option<InStart<'py>>,
        threads: Option<Threads<'_>>,
        store: Option<bool>,
        memory_limit: Option<u128>,
        progress: Option<Bound<'py, PyAny>>,
        report_every: f64,
        checkpoint: Option<Bound<'py, PyAny>>,
        checkpoint_every: f64,
        resume: Option<Bound<'py, PyAny>>,
    ) -> PyResult<LanczosResult> {
        let opts = LanczosOptions {
            tol,
            max_steps,
            max_restarts,
            seed,
        };
        let req = SolveRequest {
            storage: storage(store, memory_limit),
            start,
            threads,
            hooks: Hooks::new(progress, checkpoint, report_every, checkpoint_every)?,
            resume,
        };
        with_solvable!(self, v => v.lanczos_ground(py, &opts, req))
    }

    /// Lowest `k` levels by thick-restart Lanczos with locking and a deflated re-check,
    /// on the matrix-free product or on a CSR matrix kept inside Rust (`store` as for
    /// `lanczos_ground`).
    /// `progress`, `report_every`, `checkpoint`, `checkpoint_every`, `resume` as for
    /// `lanczos_ground` (snapshots at thick restarts of the first run).
    #[pyo3(signature = (k, *, tol=1e-9, max_products=20_000, seed=0, start=None, threads=None, store=None, memory_limit=None, basis=0, progress=None, report_every=0.5, checkpoint=None, checkpoint_every=300.0, resume=None))]
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
        store: Option<bool>,
        memory_limit: Option<u128>,
        basis: usize,
        progress: Option<Bound<'py, PyAny>>,
        report_every: f64,
        checkpoint: Option<Bound<'py, PyAny>>,
        checkpoint_every: f64,
        resume: Option<Bound<'py, PyAny>>,
    ) -> PyResult<LevelsResult> {
        let opts = LevelsOptions {
            tol,
            max_products,
            seed,
            basis,
        };
        let req = SolveRequest {
            storage: storage(store, memory_limit),
            start,
            threads,
            hooks: Hooks::new(progress, checkpoint, report_every, checkpoint_every)?,
            resume,
        };
        with_solvable!(self, v => v.lanczos_levels(py, k, &opts, req))
    }

    fn __repr__(&self) -> String {
        let (rows, dim) = self.shape();
        format!(
            "NativeOperator(kind={:?}, shape=({rows}, {dim}), is_real={})",
            self.kind(),
            if self.is_real() { "True" } else { "False" }
        )
    }
}

impl NativeOperator {
    /// `real` or `complex` of the kept product kernel of an operator on a space
    /// (prepared on first use, without the GIL); None for the other kinds.
    fn on_product<T: Send>(
        &self,
        py: Python<'_>,
        real: impl Fn(&Product<f64>) -> T + Send + Sync,
        complex: impl Fn(&Product<Complex64>) -> T + Send + Sync,
    ) -> PyResult<Option<T>> {
        guarded(|| match &self.kind {
            Kind::Space(k) => {
                let v = k.versions();
                match &v.real {
                    Some(r) => detached(py, None, |_, s| r.product(s).map(&real)).map(Some),
                    None => detached(py, None, |_, s| v.complex.product(s).map(&complex)).map(Some),
                }
            }
            _ => Ok(None),
        })
    }
}
