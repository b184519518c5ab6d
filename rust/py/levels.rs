//! Binding of the lowest-levels solver (`NativeOperator.lanczos_levels`) and of both
//! Lanczos solvers on a CSR matrix handed in from Python (`NativeCsr`).

use crate::errors::{guarded, PyCoreError};
use crate::{protocol, Threads};
use fockmill_core::build::{build_csr_with, CsrAny, CsrIndex};
use fockmill_core::lanczos::{self, CsrMap, FockMap, HermitianMap, LanczosOptions};
use fockmill_core::levels::{self, LevelsOptions, LevelsOutcome};
use fockmill_core::matvec::Product;
use fockmill_core::{memory, CoreResult, FockSpace, Interrupt, Runner, Scalar};
use num_complex::Complex64;
use numpy::ndarray::{Array2, ShapeBuilder};
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1, PyReadonlyArray2, PyUntypedArrayMethods};
use pyo3::prelude::*;

/// A start vector (`(dim,)`) or block (`(dim, b)`), float64 or complex128.
#[derive(FromPyObject)]
pub enum InStart<'py> {
    Real(PyReadonlyArray1<'py, f64>),
    Complex(PyReadonlyArray1<'py, Complex64>),
    RealBlock(PyReadonlyArray2<'py, f64>),
    ComplexBlock(PyReadonlyArray2<'py, Complex64>),
}

/// Element conversions for start vectors: a real solver takes the real part.
pub trait FromInput: Scalar {
    fn from_real(v: f64) -> Self;
    fn from_complex(v: Complex64) -> Self;
}
impl FromInput for f64 {
    fn from_real(v: f64) -> Self {
        v
    }
    fn from_complex(v: Complex64) -> Self {
        v.re
    }
}
impl FromInput for Complex64 {
    fn from_real(v: f64) -> Self {
        Complex64::new(v, 0.0)
    }
    fn from_complex(v: Complex64) -> Self {
        v
    }
}

/// Owned copy (vector after vector) of a start, allocated fallibly.
pub(crate) fn owned_start<S: FromInput>(start: &InStart<'_>) -> PyResult<Vec<S>> {
    fn copy<T: Copy, S>(len: usize, items: impl Iterator<Item = T>, f: impl Fn(T) -> S) -> PyResult<Vec<S>> {
        let mut out = memory::try_with_capacity(len, "a copy of the start vectors").map_err(PyCoreError)?;
        out.extend(items.map(f));
        Ok(out)
    }
    match start {
        InStart::Real(a) => copy(a.len(), a.as_array().iter().copied(), S::from_real),
        InStart::Complex(a) => copy(a.len(), a.as_array().iter().copied(), S::from_complex),
        // Column after column: the core takes one vector after another.
        InStart::RealBlock(a) => {
            let a = a.as_array();
            copy(a.len(), a.t().iter().copied(), S::from_real)
        }
        InStart::ComplexBlock(a) => {
            let a = a.as_array();
            copy(a.len(), a.t().iter().copied(), S::from_complex)
        }
    }
}

/// (energies, vectors (dim, k), residuals, products, restarts, converged).
pub type LevelsTuple<'py> = (
    Bound<'py, PyArray1<f64>>,
    Bound<'py, PyAny>,
    Bound<'py, PyArray1<f64>>,
    usize,
    usize,
    bool,
);

pub(crate) fn levels_to_python<'py, S: Scalar + numpy::Element>(
    py: Python<'py>,
    dim: usize,
    out: LevelsOutcome<S>,
) -> PyResult<LevelsTuple<'py>> {
    let k = out.energies.len();
    // Fortran order: the core keeps each level contiguous, so no copy is needed.
    let vectors = Array2::from_shape_vec((dim, k).f(), out.vectors)
        .map_err(|e| pyo3::exceptions::PyRuntimeError::new_err(format!("internal shape error: {e}")))?;
    Ok((
        out.energies.into_pyarray(py),
        vectors.into_pyarray(py).into_any(),
        out.residuals.into_pyarray(py),
        out.products,
        out.restarts,
        out.converged,
    ))
}

#[allow(clippy::too_many_arguments)]
pub(crate) fn levels_on_space<S: Scalar>(
    space: &FockSpace,
    product: &Product<S>,
    stored: bool,
    k: usize,
    start: Option<Vec<S>>,
    opts: &LevelsOptions,
    runner: &Runner,
    stop: &dyn Interrupt,
) -> CoreResult<LevelsOutcome<S>> {
    // The operator's kept kernel serves the products and the build alike.
    if !stored {
        return levels::lowest_levels(
            &FockMap::with_product(space, product),
            k,
            start,
            opts,
            runner,
            stop,
        );
    }
    match build_csr_with(space, product, runner, stop, false)? {
        CsrAny::Narrow(c) => levels::lowest_levels(&CsrMap::new(c), k, start, opts, runner, stop),
        CsrAny::Wide(c) => levels::lowest_levels(&CsrMap::new(c), k, start, opts, runner, stop),
    }
}

/// Column indices or row pointers handed in from Python.
#[derive(FromPyObject)]
enum InIndex<'py> {
    Narrow(PyReadonlyArray1<'py, i32>),
    Wide(PyReadonlyArray1<'py, i64>),
}

impl InIndex<'_> {
    fn is_wide(&self) -> bool {
        matches!(self, InIndex::Wide(_))
    }
    fn owned<I: CsrIndex>(&self) -> PyResult<Vec<I>> {
        let len = match self {
            InIndex::Narrow(a) => a.len(),
            InIndex::Wide(a) => a.len(),
        };
        let mut out: Vec<I> =
            memory::try_with_capacity(len, "a copy of the CSR index arrays").map_err(PyCoreError)?;
        match self {
            // Negative values map above every valid index and are refused by the check.
            InIndex::Narrow(a) => out.extend(a.as_array().iter().map(|&v| I::from_u64(v as i64 as u64))),
            InIndex::Wide(a) => out.extend(a.as_array().iter().map(|&v| I::from_u64(v as u64))),
        }
        Ok(out)
    }
}

/// Values handed in from Python.
#[derive(FromPyObject)]
enum InData<'py> {
    Real(PyReadonlyArray1<'py, f64>),
    Complex(PyReadonlyArray1<'py, Complex64>),
}

enum Held {
    RealNarrow(CsrMap<f64, i32>),
    RealWide(CsrMap<f64, i64>),
    ComplexNarrow(CsrMap<Complex64, i32>),
    ComplexWide(CsrMap<Complex64, i64>),
}

/// Run `$body` with `$map` bound to the held matrix, whatever its types.
macro_rules! with_map {
    ($held:expr, $map:ident => $body:expr) => {
        match $held {
            Held::RealNarrow($map) => $body,
            Held::RealWide($map) => $body,
            Held::ComplexNarrow($map) => $body,
            Held::ComplexWide($map) => $body,
        }
    };
}

/// A Hermitian CSR matrix copied in from Python (e.g. a sweep point's matrix), on
/// which the same Rust solvers run as on a `NativeOperator`.
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativeCsr {
    held: Held,
}

fn copy_data<S: Copy + numpy::Element, T>(
    a: &PyReadonlyArray1<'_, S>,
    f: impl Fn(S) -> T,
) -> PyResult<Vec<T>> {
    let mut out = memory::try_with_capacity(a.len(), "a copy of the CSR values").map_err(PyCoreError)?;
    out.extend(a.as_array().iter().map(|&v| f(v)));
    Ok(out)
}

fn held_from<S: Scalar>(
    indptr: &InIndex<'_>,
    indices: &InIndex<'_>,
    data: Vec<S>,
    wrap_narrow: fn(CsrMap<S, i32>) -> Held,
    wrap_wide: fn(CsrMap<S, i64>) -> Held,
) -> PyResult<Held> {
    if indptr.is_wide() || indices.is_wide() {
        let map =
            CsrMap::from_parts(indptr.owned::<i64>()?, indices.owned::<i64>()?, data).map_err(PyCoreError)?;
        Ok(wrap_wide(map))
    } else {
        let map =
            CsrMap::from_parts(indptr.owned::<i32>()?, indices.owned::<i32>()?, data).map_err(PyCoreError)?;
        Ok(wrap_narrow(map))
    }
}

/// A held matrix serves the Lanczos solvers of the protocol (always as stored).
impl<S: Scalar, I: CsrIndex> protocol::Solved<S> for CsrMap<S, I> {
    fn dim(&self) -> usize {
        HermitianMap::dim(self)
    }
    fn ground(
        &self,
        _stored: bool,
        start: Option<Vec<S>>,
        opts: &LanczosOptions,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<lanczos::LanczosOutcome<S>> {
        lanczos::ground_state(self, start, opts, runner, stop)
    }
    fn levels(
        &self,
        _stored: bool,
        k: usize,
        start: Option<Vec<S>>,
        opts: &LevelsOptions,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<LevelsOutcome<S>> {
        levels::lowest_levels(self, k, start, opts, runner, stop)
    }
}

#[pymethods]
impl NativeCsr {
    #[new]
    fn new(indptr: InIndex<'_>, indices: InIndex<'_>, data: InData<'_>) -> PyResult<Self> {
        guarded(|| {
            let held = match &data {
                InData::Real(a) => held_from(
                    &indptr,
                    &indices,
                    copy_data(a, |v| v)?,
                    Held::RealNarrow,
                    Held::RealWide,
                )?,
                InData::Complex(a) => held_from(
                    &indptr,
                    &indices,
                    copy_data(a, |v| v)?,
                    Held::ComplexNarrow,
                    Held::ComplexWide,
                )?,
            };
            Ok(NativeCsr { held })
        })
    }

    /// Rows (= columns).
    #[getter]
    fn dim(&self) -> usize {
        with_map!(&self.held, m => HermitianMap::dim(m))
    }

    /// Stored entries.
    #[getter]
    fn nnz(&self) -> usize {
        with_map!(&self.held, m => m.nnz())
    }

    /// Whether the values are float64.
    #[getter]
    fn is_real(&self) -> bool {
        matches!(self.held, Held::RealNarrow(_) | Held::RealWide(_))
    }

    /// Lanczos ground state (as `NativeOperator.lanczos_ground`, on this matrix):
    /// (energy, vector, residual, steps, products, restarts, converged).
    #[pyo3(signature = (tol=1e-9, max_steps=400, max_restarts=8, seed=0x5EED, start=None, threads=None))]
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
    ) -> PyResult<crate::LanczosTuple<'py>> {
        guarded(|| {
            let opts = LanczosOptions {
                tol,
                max_steps,
                max_restarts,
                seed,
            };
            with_map!(&self.held, m => protocol::ground_on(py, m, &opts, start.as_ref(), threads))
        })
    }

    /// Lowest `k` levels (as `NativeOperator.lanczos_levels`, on this matrix):
    /// (energies, vectors (dim, k), residuals, products, restarts, converged).
    #[pyo3(signature = (k, tol=1e-9, max_products=10_000, seed=0x5EED, start=None, threads=None, basis=0))]
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
        basis: usize,
    ) -> PyResult<LevelsTuple<'py>> {
        guarded(|| {
            let opts = LevelsOptions {
                tol,
                max_products,
                seed,
                basis,
            };
            with_map!(&self.held, m => protocol::levels_on(py, m, k, &opts, start.as_ref(), threads))
        })
    }
}

/// Register the classes of this file.
pub fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<NativeCsr>()
}
