//! The native operator protocol, written once for every kind of operator: products of
//! a vector or a block, CSR builds, nonzero estimates and the two Lanczos solvers, each
//! dispatched to the real version of an operator (when it has one and the input allows
//! it) or to its complex version, run with the interpreter released, and returned as
//! NumPy arrays (moved, not copied) or small result objects. Each kind says how one
//! version does the work ([`Served`] and the core's [`Solvable`]) and hands its versions
//! to [`Versions`]; the stored-or-matrix-free choice of the solvers is the core's
//! ([`fockmill_core::solve`]).

use crate::arrays::{owned_copy, FromInput, InBlock, InStart, InVector, OwnedVector};
use crate::errors::guarded;
use crate::results::{CsrParts, LanczosResult, LevelsResult, NnzEstimate};
use crate::threads::{detached, detached_watched, Threads};
use crate::watch::{restored, Hooks, LeBytes};
use fockmill_core::build::CsrAny;
use fockmill_core::estimate::NnzEstimate as CoreEstimate;
use fockmill_core::lanczos::LanczosOptions;
use fockmill_core::levels::LevelsOptions;
use fockmill_core::solve::{self, Solvable, Storage, Watched};
use fockmill_core::{CoreResult, Interrupt, Runner, Scalar};
use num_complex::Complex64;
use numpy::ndarray::Array2;
use numpy::{IntoPyArray, PyUntypedArrayMethods};
use pyo3::prelude::*;

/// One version (real or complex) of an operator: products, builds, estimates.
pub trait Served<S: Scalar>: Sync {
    /// Rows of the matrix (length of one product).
    fn rows(&self) -> usize;
    /// Columns of the matrix (length of one input vector).
    fn cols(&self) -> usize;
    /// `Y = A X` for `k` vectors stored row-major.
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()>;
    /// The CSR matrix.
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>>;
    /// Estimated stored entries from `samples` rows.
    fn estimate(&self, samples: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<CoreEstimate>;
}

/// The versions of one operator: the real one when every coefficient (and character)
/// is real, and the complex one, which serves complex inputs and complex operators.
pub struct Versions<R, C> {
    pub real: Option<R>,
    pub complex: C,
}

/// `A x` for one version: the output allocated fallibly inside the released section.
fn product<S: Scalar>(
    py: Python<'_>,
    op: &impl Served<S>,
    x: &[S],
    k: usize,
    threads: Option<Threads<'_>>,
) -> PyResult<Vec<S>> {
    detached(py, threads, |r, s| {
        let len = op.rows().saturating_mul(k);
        let mut y = fockmill_core::memory::try_filled(len, S::ZERO, "the product")?;
        op.apply(x, &mut y, k, r, s).map(|_| y)
    })
}

/// A product block as a `(rows, k)` array (the core checked the length).
fn shaped<S>(rows: usize, k: usize, y: Vec<S>) -> Array2<S> {
    Array2::from_shape_vec((rows, k), y).expect("shape checked by the core")
}

fn estimate_of<S: Scalar>(
    py: Python<'_>,
    op: &impl Served<S>,
    samples: usize,
    threads: Option<Threads<'_>>,
) -> PyResult<NnzEstimate> {
    let est = detached(py, threads, |r, s| op.estimate(samples, r, s))?;
    let size = std::mem::size_of::<S>();
    Ok(NnzEstimate::new(est, op.rows() as u64, op.cols() as u64, size))
}

impl<R: Served<f64>, C: Served<Complex64>> Versions<R, C> {
    /// The CSR arrays.
    pub fn build_csr(
        &self,
        py: Python<'_>,
        threads: Option<Threads<'_>>,
        force_wide: bool,
    ) -> PyResult<CsrParts> {
        guarded(|| match &self.real {
            Some(op) => Ok(CsrParts::new(
                py,
                detached(py, threads, |r, s| op.build(r, s, force_wide))?,
            )),
            None => Ok(CsrParts::new(
                py,
                detached(py, threads, |r, s| self.complex.build(r, s, force_wide))?,
            )),
        })
    }

    /// `y = A x`; complex128 when the operator or `x` is complex.
    pub fn matvec<'py>(
        &self,
        py: Python<'py>,
        x: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| match (x.to_owned_vec()?, &self.real) {
            (OwnedVector::Real(x), Some(op)) => {
                Ok(product(py, op, &x, 1, threads)?.into_pyarray(py).into_any())
            }
            (owned, _) => {
                let x = owned.into_complex()?;
                Ok(product(py, &self.complex, &x, 1, threads)?
                    .into_pyarray(py)
                    .into_any())
            }
        })
    }

    /// `Y = A X` for a `(cols, k)` block; the result has shape `(rows, k)`.
    pub fn matmat<'py>(
        &self,
        py: Python<'py>,
        x: InBlock<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| {
            let k = match &x {
                InBlock::Real(a) => a.shape()[1],
                InBlock::Complex(a) => a.shape()[1],
            };
            let what = "a copy of the input block";
            match (&x, &self.real) {
                (InBlock::Real(a), Some(op)) => {
                    let xs = owned_copy(a.len(), a.as_array().iter().copied(), what)?;
                    let y = product(py, op, &xs, k, threads)?;
                    Ok(shaped(op.rows(), k, y).into_pyarray(py).into_any())
                }
                _ => {
                    let xs: Vec<Complex64> = match &x {
                        InBlock::Real(a) => owned_copy(
                            a.len(),
                            a.as_array().iter().map(|&v| Complex64::new(v, 0.0)),
                            what,
                        )?,
                        InBlock::Complex(a) => owned_copy(a.len(), a.as_array().iter().copied(), what)?,
                    };
                    let y = product(py, &self.complex, &xs, k, threads)?;
                    Ok(shaped(self.complex.rows(), k, y).into_pyarray(py).into_any())
                }
            }
        })
    }

    /// Estimated stored entries and CSR sizes, without building.
    pub fn estimate_nnz(
        &self,
        py: Python<'_>,
        samples: usize,
        threads: Option<Threads<'_>>,
    ) -> PyResult<NnzEstimate> {
        guarded(|| match &self.real {
            Some(op) => estimate_of(py, op, samples, threads),
            None => estimate_of(py, &self.complex, samples, threads),
        })
    }
}

/// The solver options and inputs the protocol's two Lanczos methods share.
pub struct SolveRequest<'a, 'py> {
    pub storage: Storage,
    pub start: Option<InStart<'py>>,
    pub threads: Option<Threads<'a>>,
    /// Progress and checkpoint callbacks.
    pub hooks: Hooks,
    /// A loader of a saved state to continue from (see [`crate::watch`]).
    pub resume: Option<Bound<'py, PyAny>>,
}

impl<R: Solvable<f64>, C: Solvable<Complex64>> Versions<R, C> {
    /// Whether a solve of `k` levels would store the matrix (the core's decision).
    pub fn stores_matrix(
        &self,
        py: Python<'_>,
        k: usize,
        storage: Storage,
        threads: Option<Threads<'_>>,
    ) -> PyResult<bool> {
        guarded(|| match &self.real {
            Some(op) => detached(py, threads, |r, s| storage.decide(op, k, r, s)),
            None => detached(py, threads, |r, s| storage.decide(&self.complex, k, r, s)),
        })
    }

    /// The memory plan of a solve of `k` levels (the core's, from which it decides):
    /// `(stored, matrix bytes, bytes held only while building, vector bytes)`.
    pub fn memory_plan(
        &self,
        py: Python<'_>,
        k: usize,
        held: usize,
        storage: Storage,
        threads: Option<Threads<'_>>,
    ) -> PyResult<(bool, u128, u128, u128)> {
        guarded(|| {
            let plan = match &self.real {
                Some(op) => detached(py, threads, |r, s| storage.plan(op, k, held, r, s))?,
                None => detached(py, threads, |r, s| storage.plan(&self.complex, k, held, r, s))?,
            };
            Ok((
                plan.stored,
                plan.matrix_bytes,
                plan.build_bytes,
                plan.vector_bytes,
            ))
        })
    }

    /// The four-vector Lanczos ground state.
    pub fn lanczos_ground(
        &self,
        py: Python<'_>,
        opts: &LanczosOptions,
        req: SolveRequest<'_, '_>,
    ) -> PyResult<LanczosResult> {
        fn on<S: FromInput + LeBytes>(
            py: Python<'_>,
            op: &impl Solvable<S>,
            opts: &LanczosOptions,
            req: SolveRequest<'_, '_>,
        ) -> PyResult<LanczosResult> {
            let start = req.start.as_ref().map(|s| s.owned::<S>()).transpose()?;
            let resume = req.resume.as_ref().map(restored::<S>).transpose()?;
            let storage = req.storage;
            let (out, stored) = detached_watched(py, req.threads, &req.hooks, |r, s, watch| {
                let watched = Watched { watch, resume };
                solve::ground_state_watched(op, &storage, start, opts, r, s, watched)
            })?;
            Ok(LanczosResult::new(py, out, stored))
        }
        guarded(|| match &self.real {
            Some(op) => on(py, op, opts, req),
            None => on(py, &self.complex, opts, req),
        })
    }

    /// The lowest `k` levels by thick-restart Lanczos.
    pub fn lanczos_levels(
        &self,
        py: Python<'_>,
        k: usize,
        opts: &LevelsOptions,
        req: SolveRequest<'_, '_>,
    ) -> PyResult<LevelsResult> {
        fn on<S: FromInput + LeBytes>(
            py: Python<'_>,
            op: &impl Solvable<S>,
            k: usize,
            opts: &LevelsOptions,
            req: SolveRequest<'_, '_>,
        ) -> PyResult<LevelsResult> {
            let start = req.start.as_ref().map(|s| s.owned::<S>()).transpose()?;
            let resume = req.resume.as_ref().map(restored::<S>).transpose()?;
            let storage = req.storage;
            let (out, stored) = detached_watched(py, req.threads, &req.hooks, |r, s, watch| {
                let watched = Watched { watch, resume };
                solve::lowest_levels_watched(op, &storage, k, start, opts, r, s, watched)
            })?;
            LevelsResult::new(py, op.dim(), out, stored)
        }
        guarded(|| match &self.real {
            Some(op) => on(py, op, k, opts, req),
            None => on(py, &self.complex, k, opts, req),
        })
    }
}
