//! The native operator protocol, written once: products of a vector or a block, CSR
//! builds, nnz estimates and the two Lanczos solvers, each dispatched to the real
//! version of an operator (when it has one and the input allows it) or to its complex
//! version, run with the interpreter released and converted for NumPy without copying.
//! Each operator class says how one version does the work ([`Served`], [`Solved`]) and
//! hands its versions to [`Versions`].

use crate::errors::guarded;
use crate::levels::{levels_to_python, owned_start, FromInput, InStart, LevelsTuple};
use crate::{
    csr_to_python, detached, outcome_to_python, owned_copy, InBlock, InVector, LanczosTuple, Threads,
};
use fockmill_core::build::CsrAny;
use fockmill_core::lanczos::{LanczosOptions, LanczosOutcome};
use fockmill_core::levels::{LevelsOptions, LevelsOutcome};
use fockmill_core::symmetry::{SectorOperator, SymmetricSpace};
use fockmill_core::{CoreResult, Interrupt, Runner, Scalar};
use num_complex::Complex64;
use numpy::ndarray::Array2;
use numpy::{IntoPyArray, PyUntypedArrayMethods};
use pyo3::prelude::*;

/// One version (real or complex) of an operator: products, builds, estimates.
pub(crate) trait Served<S: Scalar>: Sync {
    /// Length of one product (rows of the matrix).
    fn out_len(&self) -> usize;
    /// `Y = A X` for `k` vectors stored row-major.
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()>;
    /// The CSR matrix (its `dim` is the number of rows).
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>>;
    /// (nnz estimate, standard error, exact?, largest row).
    fn estimate(
        &self,
        samples: usize,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<(f64, f64, bool, u64)>;
}

/// One version of a Hermitian operator: the Lanczos solvers, matrix-free or (with
/// `stored`) on a CSR matrix kept inside Rust.
pub(crate) trait Solved<S: Scalar>: Sync {
    /// Dimension of a vector.
    fn dim(&self) -> usize;
    /// Lanczos ground state.
    fn ground(
        &self,
        stored: bool,
        start: Option<Vec<S>>,
        opts: &LanczosOptions,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<LanczosOutcome<S>>;
    /// Lowest `k` levels.
    #[allow(clippy::too_many_arguments)]
    fn levels(
        &self,
        stored: bool,
        k: usize,
        start: Option<Vec<S>>,
        opts: &LevelsOptions,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<LevelsOutcome<S>>;
}

/// A start vector as a method receives it: one vector, or (levels) a block.
pub(crate) trait StartIn {
    /// Owned copy in the solver's element type (a real solver takes the real part).
    fn owned<S: FromInput>(&self) -> PyResult<Vec<S>>;
}

impl StartIn for InVector<'_> {
    fn owned<S: FromInput>(&self) -> PyResult<Vec<S>> {
        let what = "a copy of the start vector";
        match self {
            InVector::Real(a) => owned_copy(a.len(), a.as_array().iter().map(|&v| S::from_real(v)), what),
            InVector::Complex(a) => {
                owned_copy(a.len(), a.as_array().iter().map(|&v| S::from_complex(v)), what)
            }
        }
    }
}

impl StartIn for InStart<'_> {
    fn owned<S: FromInput>(&self) -> PyResult<Vec<S>> {
        owned_start::<S>(self)
    }
}

/// The versions of one operator: the real one when every coefficient (and character)
/// is real, and the complex one, which serves complex inputs and complex operators.
pub(crate) struct Versions<R, C> {
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
        let len = op.out_len().saturating_mul(k);
        let mut y = fockmill_core::memory::try_filled(len, S::ZERO, "the product")?;
        op.apply(x, &mut y, k, r, s).map(|_| y)
    })
}

/// A product block as a `(rows, k)` array (the core checked the length).
fn shaped<S>(rows: usize, k: usize, y: Vec<S>) -> Array2<S> {
    Array2::from_shape_vec((rows, k), y).expect("shape checked by the core")
}

fn ground_of<'py, S: FromInput + numpy::Element>(
    py: Python<'py>,
    op: &impl Solved<S>,
    stored: bool,
    start: Option<&impl StartIn>,
    opts: &LanczosOptions,
    threads: Option<Threads<'_>>,
) -> PyResult<LanczosTuple<'py>> {
    let start = start.map(|s| s.owned::<S>()).transpose()?;
    let out = detached(py, threads, |r, s| op.ground(stored, start, opts, r, s))?;
    Ok(outcome_to_python(py, out))
}

#[allow(clippy::too_many_arguments)]
fn levels_of<'py, S: FromInput + numpy::Element>(
    py: Python<'py>,
    op: &impl Solved<S>,
    stored: bool,
    k: usize,
    start: Option<&InStart<'py>>,
    opts: &LevelsOptions,
    threads: Option<Threads<'_>>,
) -> PyResult<LevelsTuple<'py>> {
    let start = start.map(|s| s.owned::<S>()).transpose()?;
    let out = detached(py, threads, |r, s| op.levels(stored, k, start, opts, r, s))?;
    levels_to_python(py, op.dim(), out)
}

/// Lanczos ground state on one version (for classes that hold a single one).
pub(crate) fn ground_on<'py, S: FromInput + numpy::Element>(
    py: Python<'py>,
    op: &impl Solved<S>,
    opts: &LanczosOptions,
    start: Option<&impl StartIn>,
    threads: Option<Threads<'_>>,
) -> PyResult<LanczosTuple<'py>> {
    ground_of(py, op, false, start, opts, threads)
}

/// Lowest levels on one version (for classes that hold a single one).
pub(crate) fn levels_on<'py, S: FromInput + numpy::Element>(
    py: Python<'py>,
    op: &impl Solved<S>,
    k: usize,
    opts: &LevelsOptions,
    start: Option<&InStart<'py>>,
    threads: Option<Threads<'_>>,
) -> PyResult<LevelsTuple<'py>> {
    levels_of(py, op, false, k, start, opts, threads)
}

impl<R: Served<f64>, C: Served<Complex64>> Versions<R, C> {
    /// CSR arrays (indptr, indices, data).
    pub fn build_csr<'py>(
        &self,
        py: Python<'py>,
        threads: Option<Threads<'_>>,
        force_wide: bool,
    ) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| match &self.real {
            Some(op) => csr_to_python(py, detached(py, threads, |r, s| op.build(r, s, force_wide))?),
            None => csr_to_python(
                py,
                detached(py, threads, |r, s| self.complex.build(r, s, force_wide))?,
            ),
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
            (crate::OwnedVector::Real(x), Some(op)) => {
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

    /// `Y = A X` for a `(n, k)` block; the result has shape `(rows, k)`.
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
                    Ok(shaped(op.out_len(), k, y).into_pyarray(py).into_any())
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
                    Ok(shaped(self.complex.out_len(), k, y).into_pyarray(py).into_any())
                }
            }
        })
    }

    /// (nnz estimate, standard error, exact?, largest row) without building.
    pub fn estimate_nnz(
        &self,
        py: Python<'_>,
        samples: usize,
        threads: Option<Threads<'_>>,
    ) -> PyResult<(f64, f64, bool, u64)> {
        guarded(|| match &self.real {
            Some(op) => detached(py, threads, |r, s| op.estimate(samples, r, s)),
            None => detached(py, threads, |r, s| self.complex.estimate(samples, r, s)),
        })
    }
}

impl<R: Solved<f64>, C: Solved<Complex64>> Versions<R, C> {
    /// Lanczos ground state: (energy, vector, residual, steps, products, restarts,
    /// converged).
    #[allow(clippy::too_many_arguments)]
    pub fn lanczos_ground<'py>(
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
        guarded(|| {
            let opts = LanczosOptions {
                tol,
                max_steps,
                max_restarts,
                seed,
            };
            match &self.real {
                Some(op) => ground_of(py, op, stored, start.as_ref(), &opts, threads),
                None => ground_of(py, &self.complex, stored, start.as_ref(), &opts, threads),
            }
        })
    }

    /// Lowest `k` levels: (energies, vectors (dim, k), residuals, products, restarts,
    /// converged).
    #[allow(clippy::too_many_arguments)]
    pub fn lanczos_levels<'py>(
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
        guarded(|| {
            let opts = LevelsOptions {
                tol,
                max_products,
                seed,
                basis,
            };
            match &self.real {
                Some(op) => levels_of(py, op, stored, k, start.as_ref(), &opts, threads),
                None => levels_of(py, &self.complex, stored, k, start.as_ref(), &opts, threads),
            }
        })
    }
}

/// One version (real or complex) of an operator on a symmetry sector.
pub(crate) struct SectorVersion<'a, S: Scalar> {
    sector: &'a SymmetricSpace,
    op: &'a SectorOperator<S>,
}

/// The versions of an operator on a symmetry sector.
pub(crate) fn sector_versions<'a>(
    sector: &'a SymmetricSpace,
    real: Option<&'a SectorOperator<f64>>,
    complex: &'a SectorOperator<Complex64>,
) -> Versions<SectorVersion<'a, f64>, SectorVersion<'a, Complex64>> {
    Versions {
        real: real.map(|op| SectorVersion { sector, op }),
        complex: SectorVersion { sector, op: complex },
    }
}

impl<S: Scalar> Served<S> for SectorVersion<'_, S> {
    fn out_len(&self) -> usize {
        self.sector.dim() as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        self.op.apply_many(self.sector, x, y, k, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>> {
        self.op.build_csr(self.sector, runner, stop, force_wide)
    }
    fn estimate(
        &self,
        samples: usize,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<(f64, f64, bool, u64)> {
        self.op.estimate_nnz(self.sector, samples, runner, stop)
    }
}

impl<S: Scalar> Solved<S> for SectorVersion<'_, S> {
    fn dim(&self) -> usize {
        self.sector.dim() as usize
    }
    fn ground(
        &self,
        stored: bool,
        start: Option<Vec<S>>,
        opts: &LanczosOptions,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<LanczosOutcome<S>> {
        self.op
            .lanczos_ground(self.sector, stored, start, opts, runner, stop)
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
        self.op
            .lowest_levels(self.sector, stored, k, start, opts, runner, stop)
    }
}
