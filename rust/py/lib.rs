//! `fockmill._native`: the thin Python binding of `fockmill-core`. It converts
//! arguments to owned Rust values, releases the interpreter around the core call, and
//! hands results to NumPy without copying. No algorithms live here.

mod between;
mod correlations;
mod errors;
mod interrupt;
mod levels;
mod protocol;
mod symmetry;

use errors::{guarded, PyCoreError};
use fockmill_core::build::{build_csr_with, CsrAny};
use fockmill_core::estimate::estimate_nnz;
use fockmill_core::lanczos::{self, FockMap, LanczosOptions};
use fockmill_core::levels::{LevelsOptions, LevelsOutcome};
use fockmill_core::matvec::Product;
use fockmill_core::{
    observe, CoreError, CoreResult, FockSpace, Interrupt, Operator, RawTerm, Runner, Scalar,
};
use interrupt::SignalCheck;
use num_complex::Complex64;
use numpy::ndarray::Array2;
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1, PyReadonlyArray2, PyUntypedArrayMethods};
use pyo3::exceptions::PyKeyboardInterrupt;
use pyo3::prelude::*;
use std::sync::{Arc, OnceLock};

/// A thread pool kept between calls, so that repeated products do not start threads
/// each time (a prepared problem holds one).
#[pyclass(frozen, module = "fockmill._native")]
struct NativePool {
    runner: Arc<Runner>,
}

#[pymethods]
impl NativePool {
    #[new]
    #[pyo3(signature = (threads=None))]
    fn new(threads: Option<usize>) -> PyResult<Self> {
        guarded(|| {
            let runner = Runner::with_threads(threads).map_err(PyCoreError)?;
            Ok(NativePool {
                runner: Arc::new(runner),
            })
        })
    }

    /// Number of threads work in this pool uses.
    #[getter]
    fn threads(&self) -> usize {
        self.runner.threads()
    }
}

/// `threads=` as Python passes it: a count (0: rayon's global pool) or a kept pool.
#[derive(FromPyObject)]
enum Threads<'py> {
    Pool(Bound<'py, NativePool>),
    Count(usize),
}

impl Threads<'_> {
    fn runner(threads: Option<Threads<'_>>) -> PyResult<Arc<Runner>> {
        match threads {
            Some(Threads::Pool(pool)) => Ok(pool.get().runner.clone()),
            Some(Threads::Count(n)) => Ok(Arc::new(Runner::with_threads(Some(n)).map_err(PyCoreError)?)),
            None => Ok(Arc::new(Runner::global())),
        }
    }
}

/// Run core work with the interpreter released, on `threads` (None: rayon's global
/// pool; a count: a pool of that size; a `NativePool`: that pool), polling for Ctrl-C
/// between groups of rows.
fn detached<T: Send>(
    py: Python<'_>,
    threads: Option<Threads<'_>>,
    work: impl FnOnce(&Runner, &dyn Interrupt) -> CoreResult<T> + Send,
) -> PyResult<T> {
    let runner = Threads::runner(threads)?;
    let runner = runner.as_ref();
    let (result, raised) = py.detach(|| {
        let check = SignalCheck::new();
        let result = work(runner, &check);
        (result, check.take())
    });
    match result {
        Ok(v) => Ok(v),
        Err(CoreError::Interrupted) => {
            Err(raised.unwrap_or_else(|| PyKeyboardInterrupt::new_err("interrupted")))
        }
        Err(e) => Err(PyCoreError(e).into()),
    }
}

/// A vector handed in from Python: float64 or complex128, any strides.
#[derive(FromPyObject)]
enum InVector<'py> {
    Real(PyReadonlyArray1<'py, f64>),
    Complex(PyReadonlyArray1<'py, Complex64>),
}

/// A row-major (n, k) block of vectors handed in from Python.
#[derive(FromPyObject)]
enum InBlock<'py> {
    Real(PyReadonlyArray2<'py, f64>),
    Complex(PyReadonlyArray2<'py, Complex64>),
}

/// Owned copy of the vector: the interpreter is released during the core call, and
/// another Python thread could write to a borrowed NumPy buffer meanwhile.
enum OwnedVector {
    Real(Vec<f64>),
    Complex(Vec<Complex64>),
}

/// A copy of `items` (`len` of them) allocated fallibly.
fn owned_copy<T>(len: usize, items: impl Iterator<Item = T>, what: &str) -> PyResult<Vec<T>> {
    let mut out = fockmill_core::memory::try_with_capacity(len, what).map_err(PyCoreError)?;
    out.extend(items);
    Ok(out)
}

impl OwnedVector {
    /// As complex numbers (a real vector is copied, fallibly).
    fn into_complex(self) -> PyResult<Vec<Complex64>> {
        match self {
            OwnedVector::Real(v) => owned_copy(
                v.len(),
                v.into_iter().map(|re| Complex64::new(re, 0.0)),
                "a complex copy of the vector",
            ),
            OwnedVector::Complex(v) => Ok(v),
        }
    }
}

impl InVector<'_> {
    fn to_owned_vec(&self) -> PyResult<OwnedVector> {
        let what = "a copy of the input vector";
        Ok(match self {
            InVector::Real(a) => OwnedVector::Real(owned_copy(a.len(), a.as_array().iter().copied(), what)?),
            InVector::Complex(a) => {
                OwnedVector::Complex(owned_copy(a.len(), a.as_array().iter().copied(), what)?)
            }
        })
    }
}

/// A Fock space: cutoffs, weights and an optional conserved (modular) total.
#[pyclass(frozen, module = "fockmill._native")]
struct NativeSpace {
    inner: Arc<FockSpace>,
}

#[pymethods]
impl NativeSpace {
    #[new]
    #[pyo3(signature = (cutoffs, weights=None, total=None, modulus=None))]
    fn new(
        cutoffs: Vec<u32>,
        weights: Option<Vec<u32>>,
        total: Option<u64>,
        modulus: Option<u64>,
    ) -> PyResult<Self> {
        guarded(|| {
            let inner = FockSpace::new(cutoffs, weights, total, modulus).map_err(PyCoreError)?;
            Ok(NativeSpace {
                inner: Arc::new(inner),
            })
        })
    }

    #[getter]
    fn dim(&self) -> u64 {
        self.inner.dim()
    }

    #[getter]
    fn modes(&self) -> usize {
        self.inner.modes()
    }

    #[getter]
    fn cutoffs(&self) -> Vec<u32> {
        self.inner.cutoffs().to_vec()
    }

    #[getter]
    fn weights(&self) -> Vec<u32> {
        self.inner.weights().to_vec()
    }

    /// Occupations of every basis state, shape (dim, modes), uint8 or uint16.
    #[pyo3(signature = (threads=None))]
    fn occupations<'py>(&self, py: Python<'py>, threads: Option<Threads<'_>>) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| {
            let space = self.inner.clone();
            let (dim, m) = (space.dim() as usize, space.modes());
            let len = dim.checked_mul(m).ok_or_else(|| {
                PyCoreError(CoreError::TooLarge {
                    what: "occupation table (entries)".into(),
                    requested: dim as u128 * m as u128,
                    limit: usize::MAX as u128,
                })
            })?;
            let cell = if space.max_cutoff() <= u8::MAX as u32 {
                1
            } else {
                2
            };
            fockmill_core::memory::ensure_room(
                len as u128 * cell,
                &format!("the occupations of all {dim} states of the space"),
            )
            .map_err(PyCoreError)?;
            if space.max_cutoff() <= u8::MAX as u32 {
                let table = detached(py, threads, |runner, stop| {
                    let mut out = fockmill_core::memory::try_filled(len, 0u8, "the occupation table")?;
                    observe::occupations_into(&space, &mut out, runner, stop)?;
                    Ok(out)
                })?;
                let arr = Array2::from_shape_vec((dim, m), table).expect("length checked above");
                Ok(arr.into_pyarray(py).into_any())
            } else {
                let table = detached(py, threads, |runner, stop| {
                    let mut out = fockmill_core::memory::try_filled(len, 0u16, "the occupation table")?;
                    observe::occupations_into(&space, &mut out, runner, stop)?;
                    Ok(out)
                })?;
                let arr = Array2::from_shape_vec((dim, m), table).expect("length checked above");
                Ok(arr.into_pyarray(py).into_any())
            }
        })
    }

    /// Occupations of basis state `index` (O(M log cutoff) unranking).
    fn state(&self, index: u64) -> PyResult<Vec<u32>> {
        guarded(|| {
            let m = self.inner.modes();
            let (mut occ, mut residues) = (vec![0u32; m], vec![0usize; m]);
            self.inner
                .unrank_into(index, &mut occ, &mut residues)
                .map_err(PyCoreError)?;
            Ok(occ)
        })
    }

    /// Ranks of the states in the rows of `occ` (int64, shape (n, modes)); -1 where a
    /// state is not in the space.
    #[pyo3(signature = (occ, threads=None))]
    fn index<'py>(
        &self,
        py: Python<'py>,
        occ: PyReadonlyArray2<'py, i64>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyArray1<i64>>> {
        guarded(|| {
            let shape = occ.shape();
            if shape[1] != self.inner.modes() {
                return Err(PyCoreError(CoreError::Shape(format!(
                    "occupations have {} columns but the space has {} modes",
                    shape[1],
                    self.inner.modes()
                )))
                .into());
            }
            let flat: Vec<i64> = owned_copy(
                occ.len(),
                occ.as_array().iter().copied(),
                "a copy of the occupations",
            )?;
            let space = self.inner.clone();
            let ranks = detached(py, threads, |runner, _| observe::ranks(&space, &flat, runner))?;
            Ok(ranks.into_pyarray(py))
        })
    }
}

/// Terms as they come from Python: (re, im, [(mode, p, q), ...]).
type InTerm = (f64, f64, Vec<(usize, u32, u32)>);

/// An operator prepared on a space: validated, merged terms ready for builds and products.
/// The product kernel is built once, on first use, and reused by every product.
#[pyclass(frozen, module = "fockmill._native")]
struct NativeOperator {
    space: Arc<FockSpace>,
    real: Option<Operator<f64>>,
    complex: Operator<Complex64>,
    /// Requested cut (None: automatic; 0: row kernel; k: left modes 0..k).
    cut: Option<usize>,
    real_product: OnceLock<Product<f64>>,
    complex_product: OnceLock<Product<Complex64>>,
}

/// The kernel kept in `cell`, built on first use (interruptible: large sectors take
/// seconds to prepare).
fn product_in<'a, S: Scalar>(
    cell: &'a OnceLock<Product<S>>,
    space: &FockSpace,
    op: &Operator<S>,
    cut: Option<usize>,
    stop: &dyn Interrupt,
) -> CoreResult<&'a Product<S>> {
    if let Some(p) = cell.get() {
        return Ok(p);
    }
    let built = Product::prepare(space, op, cut, stop)?;
    // Another thread may have won the race; either kernel is the same.
    let _ = cell.set(built);
    Ok(cell.get().expect("set above"))
}

#[pymethods]
impl NativeOperator {
    #[new]
    #[pyo3(signature = (space, terms, cut=None))]
    fn new(space: &NativeSpace, terms: Vec<InTerm>, cut: Option<usize>) -> PyResult<Self> {
        guarded(|| {
            if let Some(c) = cut {
                if c > space.inner.modes() {
                    return Err(PyCoreError(CoreError::InvalidArgument(format!(
                        "cut={c} is above the number of modes ({}); pass None, 0 (row kernel) \
                         or 1..={}",
                        space.inner.modes(),
                        space.inner.modes()
                    )))
                    .into());
                }
            }
            let raw: Vec<RawTerm> = terms
                .into_iter()
                .map(|(re, im, f)| RawTerm::new(re, im, f))
                .collect();
            let complex = Operator::<Complex64>::new(&space.inner, &raw).map_err(PyCoreError)?;
            let real = if raw.iter().all(|t| t.im == 0.0) {
                Some(Operator::<f64>::new(&space.inner, &raw).map_err(PyCoreError)?)
            } else {
                None
            };
            Ok(NativeOperator {
                space: space.inner.clone(),
                real,
                complex,
                cut,
                real_product: OnceLock::new(),
                complex_product: OnceLock::new(),
            })
        })
    }

    /// The cut of the product kernel (0: the row kernel; k: left modes 0..k).
    #[getter]
    fn cut(&self, py: Python<'_>) -> PyResult<usize> {
        let v = self.versions();
        guarded(|| match &v.real {
            Some(real) => Ok(detached(py, None, |_, s| real.product(s).map(|p| p.cut()))?),
            None => Ok(detached(py, None, |_, s| v.complex.product(s).map(|p| p.cut()))?),
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

    #[getter]
    fn dim(&self) -> u64 {
        self.space.dim()
    }

    /// CSR arrays (indptr, indices, data) of the matrix.
    #[pyo3(signature = (threads=None, force_wide=false))]
    fn build_csr<'py>(
        &self,
        py: Python<'py>,
        threads: Option<Threads<'_>>,
        force_wide: bool,
    ) -> PyResult<Bound<'py, PyAny>> {
        // The kept product kernel writes the rows (built once, shared with products).
        self.versions().build_csr(py, threads, force_wide)
    }

    /// y = H x for a float64 or complex128 vector; the result is complex128 when either is.
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

    /// Lowest `k` levels by thick-restart Lanczos with locking and a deflated re-check
    /// (every degenerate copy that fits in `k`), on the matrix-free product or (with
    /// `stored`) on a CSR matrix built and kept inside Rust:
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
        start: Option<levels::InStart<'py>>,
        threads: Option<Threads<'_>>,
        stored: bool,
        basis: usize,
    ) -> PyResult<levels::LevelsTuple<'py>> {
        let v = self.versions();
        v.lanczos_levels(py, k, tol, max_products, seed, start, threads, stored, basis)
    }

    /// Lanczos ground state keeping four vectors, on the matrix-free product or (with
    /// `stored`) on a CSR matrix built and kept inside Rust:
    /// (energy, vector, residual, steps, products, restarts, converged).
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
}

/// One version (real or complex) of a `NativeOperator`: its terms and its kept kernel.
struct OperatorVersion<'a, S: Scalar> {
    space: &'a FockSpace,
    op: &'a Operator<S>,
    cut: Option<usize>,
    cell: &'a OnceLock<Product<S>>,
}

impl<S: Scalar> OperatorVersion<'_, S> {
    fn product(&self, stop: &dyn Interrupt) -> CoreResult<&Product<S>> {
        product_in(self.cell, self.space, self.op, self.cut, stop)
    }
}

impl<S: Scalar> protocol::Served<S> for OperatorVersion<'_, S> {
    fn out_len(&self) -> usize {
        self.space.dim() as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        self.product(stop)?.apply_many(self.space, x, y, k, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>> {
        build_csr_with(self.space, self.product(stop)?, runner, stop, force_wide)
    }
    fn estimate(
        &self,
        samples: usize,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<(f64, f64, bool, u64)> {
        let est = estimate_nnz(self.space, self.op, samples, runner, stop)?;
        Ok((est.nnz, est.std_error, est.exact, est.max_row))
    }
}

impl<S: Scalar> protocol::Solved<S> for OperatorVersion<'_, S> {
    fn dim(&self) -> usize {
        self.space.dim() as usize
    }
    fn ground(
        &self,
        stored: bool,
        start: Option<Vec<S>>,
        opts: &LanczosOptions,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<lanczos::LanczosOutcome<S>> {
        lanczos_on(self.space, self.product(stop)?, stored, start, opts, runner, stop)
    }
    fn levels(
        &self,
        stored: bool,
        k: usize,
        start: Option<Vec<S>>,
        opts: &LevelsOptions,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<LevelsOutcome<S>> {
        levels::levels_on_space(
            self.space,
            self.product(stop)?,
            stored,
            k,
            start,
            opts,
            runner,
            stop,
        )
    }
}

impl NativeOperator {
    fn version<'a, S: Scalar>(
        &'a self,
        op: &'a Operator<S>,
        cell: &'a OnceLock<Product<S>>,
    ) -> OperatorVersion<'a, S> {
        OperatorVersion {
            space: &self.space,
            op,
            cut: self.cut,
            cell,
        }
    }

    fn versions(&self) -> protocol::Versions<OperatorVersion<'_, f64>, OperatorVersion<'_, Complex64>> {
        protocol::Versions {
            real: self.real.as_ref().map(|op| self.version(op, &self.real_product)),
            complex: self.version(&self.complex, &self.complex_product),
        }
    }
}

/// Lanczos on the matrix-free product (the kept kernel `product`), or on a CSR matrix
/// built first (by the same kernel) when `stored`.
fn lanczos_on<S: Scalar>(
    space: &FockSpace,
    product: &Product<S>,
    stored: bool,
    start: Option<Vec<S>>,
    opts: &LanczosOptions,
    runner: &Runner,
    stop: &dyn Interrupt,
) -> CoreResult<lanczos::LanczosOutcome<S>> {
    if !stored {
        return lanczos::ground_state(&FockMap::with_product(space, product), start, opts, runner, stop);
    }
    match build_csr_with(space, product, runner, stop, false)? {
        CsrAny::Narrow(c) => lanczos::ground_state(&lanczos::CsrMap::new(c), start, opts, runner, stop),
        CsrAny::Wide(c) => lanczos::ground_state(&lanczos::CsrMap::new(c), start, opts, runner, stop),
    }
}

type LanczosTuple<'py> = (f64, Bound<'py, PyAny>, f64, usize, usize, usize, bool);

fn outcome_to_python<'py, S: Scalar + numpy::Element>(
    py: Python<'py>,
    out: lanczos::LanczosOutcome<S>,
) -> LanczosTuple<'py> {
    (
        out.energy,
        out.vector.into_pyarray(py).into_any(),
        out.residual,
        out.steps,
        out.products,
        out.restarts,
        out.converged,
    )
}

/// ⟨ψ|m|ψ⟩ for each monomial m given as [(mode, p, q), ...], as complex numbers.
#[pyfunction]
#[pyo3(signature = (space, monomials, psi, threads=None))]
fn monomial_expectations<'py>(
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
fn occupation_distributions<'py>(
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

/// Number of threads rayon's global pool uses (RAYON_NUM_THREADS or the core count).
#[pyfunction]
fn default_threads() -> usize {
    rayon::current_num_threads()
}

#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add_class::<NativeSpace>()?;
    m.add_class::<NativeOperator>()?;
    m.add_class::<NativePool>()?;
    between::register(m)?;
    m.add_function(wrap_pyfunction!(monomial_expectations, m)?)?;
    m.add_function(wrap_pyfunction!(occupation_distributions, m)?)?;
    m.add_function(wrap_pyfunction!(default_threads, m)?)?;
    symmetry::register(m)?;
    levels::register(m)?;
    m.add_function(wrap_pyfunction!(correlations::density_correlations, m)?)?;
    Ok(())
}

fn csr_to_python<'py, S: Scalar + numpy::Element>(
    py: Python<'py>,
    csr: CsrAny<S>,
) -> PyResult<Bound<'py, PyAny>> {
    let tuple = match csr {
        CsrAny::Narrow(c) => (
            c.indptr.into_pyarray(py).into_any(),
            c.indices.into_pyarray(py).into_any(),
            c.data.into_pyarray(py).into_any(),
        ),
        CsrAny::Wide(c) => (
            c.indptr.into_pyarray(py).into_any(),
            c.indices.into_pyarray(py).into_any(),
            c.data.into_pyarray(py).into_any(),
        ),
    };
    Ok(tuple.into_pyobject(py)?.into_any())
}
