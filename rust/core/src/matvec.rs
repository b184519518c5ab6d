//! Matrix-free products `Y = H X`, parallel over output rows (each row is written by
//! one thread, so no atomics), with a fixed summation order per row.
//!
//! [`Product`] is an operator prepared once for many products: the bipartite kernel
//! ([`crate::bipartite`]) with an automatically chosen cut, or the row kernel
//! ([`crate::kernel`]) when no cut keeps the bipartite tables small.

use crate::bipartite::{choose_cut, Bipartite};
use crate::build::{apply_rows, Csr, CsrIndex, OnSpace};
use crate::error::{CoreError, CoreResult};
use crate::kernel::ProductKernel;
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::space::FockSpace;
use crate::terms::Operator;

/// An operator prepared for repeated products on one space.
#[derive(Debug, Clone)]
pub enum Product<S: Scalar> {
    /// Bipartite kernel (left modes `0..cut`).
    Split(Box<Bipartite<S>>),
    /// Row kernel: re-ranks the images of each row.
    Rows(Box<ProductKernel<S>>),
}

impl<S: Scalar> Product<S> {
    /// Prepare `op` (validated for `space`) with the automatic choice of kernel: the
    /// bipartite kernel at the cheapest cut, or the row kernel when no cut keeps the
    /// tables well below the stored matrix or the tables do not fit in memory.
    pub fn new(space: &FockSpace, op: &Operator<S>) -> Self {
        match Self::prepare(space, op, None, &crate::parallel::NoInterrupt) {
            Ok(p) => p,
            Err(_) => Product::Rows(Box::new(ProductKernel::new(space, op))),
        }
    }

    /// Prepare `op` with the kernel `cut` asks for (None: the automatic choice, as
    /// [`Product::new`]; 0: the row kernel; `1..=M`: bipartite with left modes
    /// `0..cut`), polling `interrupt` while the tables are built.
    ///
    /// # Errors
    /// [`CoreError::Interrupted`]; for an explicit cut, as [`Product::with_cut`].
    pub fn prepare(
        space: &FockSpace,
        op: &Operator<S>,
        cut: Option<usize>,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<Self> {
        match cut {
            Some(0) => Ok(Product::Rows(Box::new(ProductKernel::new(space, op)))),
            Some(c) => Ok(Product::Split(Box::new(Bipartite::new_interruptible(
                space, op, c, interrupt,
            )?))),
            // Many terms: the row kernel indexes them by the quanta they remove, while
            // the bipartite tables would grow with the terms.
            None if crate::kernel::indexes_terms(space, op) => {
                Ok(Product::Rows(Box::new(ProductKernel::new(space, op))))
            }
            None => match choose_cut(space, op) {
                Some(c) => match Bipartite::new_interruptible(space, op, c, interrupt) {
                    Ok(b) => Ok(Product::Split(Box::new(b))),
                    Err(CoreError::Interrupted) => Err(CoreError::Interrupted),
                    // Tables that do not fit: the row kernel needs none.
                    Err(_) => Ok(Product::Rows(Box::new(ProductKernel::new(space, op)))),
                },
                None => Ok(Product::Rows(Box::new(ProductKernel::new(space, op)))),
            },
        }
    }

    /// Prepare `op` with an explicit kernel: `cut = 0` is the row kernel, `1..=M` the
    /// bipartite kernel with left modes `0..cut`.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] for a cut above the number of modes;
    /// [`CoreError::TooLarge`] when the bipartite tables do not fit in memory.
    pub fn with_cut(space: &FockSpace, op: &Operator<S>, cut: usize) -> CoreResult<Self> {
        Self::prepare(space, op, Some(cut), &crate::parallel::NoInterrupt)
    }

    /// Whether products are about as fast as with a stored matrix: the bipartite kernel
    /// (measured in benchmarks/results/methods.txt), or a quadratic form whose rows are
    /// read from the gathered hop table.
    pub fn as_fast_as_stored(&self) -> bool {
        match self {
            Product::Split(_) => true,
            Product::Rows(k) => k.reads_quadratic_rows(),
        }
    }

    /// The cut in use (0: the row kernel).
    pub fn cut(&self) -> usize {
        match self {
            Product::Split(b) => b.cut(),
            Product::Rows(_) => 0,
        }
    }

    /// `y = H x`.
    ///
    /// # Errors
    /// [`CoreError::Shape`] when `x` or `y` is not of length `dim`;
    /// [`CoreError::Interrupted`] when `interrupt` fires.
    pub fn apply(
        &self,
        space: &FockSpace,
        x: &[S],
        y: &mut [S],
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        self.apply_many(space, x, y, 1, runner, interrupt)
    }

    /// `Y = H X` for `k` vectors stored row-major: `X[r, j]` at `x[r * k + j]`.
    ///
    /// # Errors
    /// As [`Product::apply`].
    pub fn apply_many(
        &self,
        space: &FockSpace,
        x: &[S],
        y: &mut [S],
        k: usize,
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        let dim = space.dim() as usize;
        let expected = dim
            .checked_mul(k)
            .ok_or_else(|| CoreError::Shape("too many vectors".into()))?;
        if k == 0 || x.len() != expected || y.len() != expected {
            return Err(CoreError::Shape(format!(
                "vectors must have shape ({dim}, {k}) to match the space (got {} and {} elements); \
                 pass arrays whose length is the space's dim",
                x.len(),
                y.len()
            )));
        }
        match self {
            Product::Split(b) => b.apply(x, y, k, runner, interrupt),
            Product::Rows(kernel) if k == 1 => kernel.apply(space, x, y, runner, interrupt),
            // Several vectors: each row's entries are listed once and used for all k.
            Product::Rows(kernel) => apply_rows(
                &OnSpace {
                    space,
                    kernel: kernel.as_ref(),
                },
                x,
                y,
                k,
                runner,
                interrupt,
            ),
        }
    }
}

/// `y = H x` for one vector (prepares the operator, then one product; use
/// [`Product`] for repeated products).
///
/// # Errors
/// [`CoreError::Shape`] when `x` or `y` is not of length `dim`;
/// [`CoreError::Interrupted`] when `interrupt` fires.
pub fn apply<S: Scalar>(
    space: &FockSpace,
    op: &Operator<S>,
    x: &[S],
    y: &mut [S],
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<()> {
    apply_many(space, op, x, y, 1, runner, interrupt)
}

/// `Y = H X` for `k` vectors stored row-major: `X[r, j]` at `x[r * k + j]`.
///
/// # Errors
/// As [`apply`].
pub fn apply_many<S: Scalar>(
    space: &FockSpace,
    op: &Operator<S>,
    x: &[S],
    y: &mut [S],
    k: usize,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<()> {
    Product::new(space, op).apply_many(space, x, y, k, runner, interrupt)
}

/// A stored CSR matrix (built by [`crate::build::build_csr`] or any other two-pass
/// build), beside the matrix-free products: its product `y = A x` is one pass over
/// the rows, each summed by one thread in column order (bit-identical for any thread
/// count). Used by the solvers when the matrix fits in memory.
pub struct CsrMap<S, I> {
    csr: Csr<S, I>,
}

impl<S: Scalar, I: CsrIndex> CsrMap<S, I> {
    /// Wrap a square CSR matrix (assumed Hermitian).
    pub fn new(csr: Csr<S, I>) -> Self {
        CsrMap { csr }
    }
}

impl<S: Scalar, I: CsrIndex> CsrMap<S, I> {
    /// Wrap CSR arrays handed in from outside after checking them: `indptr` of
    /// length `dim + 1`, starting at 0, non-decreasing, ending at `indices.len() ==
    /// data.len()`; every column index in `[0, dim)`; every value finite. The matrix is
    /// assumed Hermitian (not checked: the solvers' guarantees need it).
    ///
    /// # Errors
    /// [`CoreError::Shape`] for inconsistent lengths or pointers,
    /// [`CoreError::InvalidArgument`] for an index out of range,
    /// [`CoreError::NonFinite`] for a NaN or infinite value.
    pub fn from_parts(indptr: Vec<I>, indices: Vec<I>, data: Vec<S>) -> CoreResult<Self> {
        if indptr.is_empty() {
            return Err(CoreError::Shape(
                "indptr is empty; a CSR matrix of n rows has n + 1 row pointers".into(),
            ));
        }
        let dim = (indptr.len() - 1) as u64;
        let nnz = indices.len() as u64;
        if data.len() as u64 != nnz {
            return Err(CoreError::Shape(format!(
                "indices has {nnz} entries but data has {}; pass arrays of equal length",
                data.len()
            )));
        }
        if indptr[0].to_u64() != 0 || indptr[indptr.len() - 1].to_u64() != nnz {
            return Err(CoreError::Shape(format!(
                "indptr must start at 0 and end at nnz = {nnz}; got {} and {}",
                indptr[0].to_u64() as i64,
                indptr[indptr.len() - 1].to_u64() as i64
            )));
        }
        if indptr
            .windows(2)
            .any(|p| (p[1].to_u64() as i64) < (p[0].to_u64() as i64))
        {
            return Err(CoreError::Shape("indptr must be non-decreasing".into()));
        }
        if let Some(bad) = indices.iter().find(|c| c.to_u64() >= dim) {
            return Err(CoreError::InvalidArgument(format!(
                "column index {} is outside the square matrix of dimension {dim}; CSR \
                 matrices passed to the solvers must be square and Hermitian",
                bad.to_u64() as i64
            )));
        }
        if data.iter().any(|v| !v.is_finite()) {
            return Err(CoreError::NonFinite(
                "the matrix contains NaN or inf; fix the values before solving".into(),
            ));
        }
        Ok(CsrMap {
            csr: Csr {
                dim,
                indptr,
                indices,
                data,
            },
        })
    }

    /// Stored entries.
    pub fn nnz(&self) -> usize {
        self.csr.data.len()
    }
}

impl<S: Scalar, I: CsrIndex> crate::lanczos::HermitianMap<S> for CsrMap<S, I> {
    fn dim(&self) -> usize {
        self.csr.dim as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], runner: &Runner, interrupt: &dyn Interrupt) -> CoreResult<()> {
        let c = &self.csr;
        runner.for_row_chunks(y, interrupt, |first, out| {
            for (k, yr) in out.iter_mut().enumerate() {
                let r = first as usize + k;
                let (a, b) = (c.indptr[r].to_u64() as usize, c.indptr[r + 1].to_u64() as usize);
                let mut acc = S::ZERO;
                for (&col, &v) in c.indices[a..b].iter().zip(&c.data[a..b]) {
                    acc += v * x[col.to_u64() as usize];
                }
                *yr = acc;
            }
            Ok(())
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::build::{build_csr, CsrAny};
    use crate::parallel::NoInterrupt;
    use crate::terms::RawTerm;

    fn ring_terms(l: usize, j: f64, u: f64) -> Vec<RawTerm> {
        let mut t = Vec::new();
        for i in 0..l {
            let k = (i + 1) % l;
            let (a, b) = if i < k { (i, k) } else { (k, i) };
            t.push(RawTerm::new(-j, 0.0, vec![(a, 1, 0), (b, 0, 1)]));
            t.push(RawTerm::new(-j, 0.0, vec![(a, 0, 1), (b, 1, 0)]));
            t.push(RawTerm::new(u / 2.0, 0.0, vec![(i, 2, 2)]));
        }
        t
    }

    #[test]
    #[allow(clippy::needless_range_loop)]
    fn product_equals_csr_product() {
        let space = FockSpace::new(vec![4; 5], None, Some(4), None).unwrap();
        let op = Operator::<f64>::new(&space, &ring_terms(5, 1.0, 2.5)).unwrap();
        let runner = Runner::with_threads(Some(2)).unwrap();
        let csr = match build_csr(&space, &op, &runner, &NoInterrupt, false).unwrap() {
            CsrAny::Narrow(c) => c,
            CsrAny::Wide(_) => panic!("small matrix must use narrow indices"),
        };
        let dim = space.dim() as usize;
        let x: Vec<f64> = (0..dim)
            .map(|i| ((i * 7919) % 113) as f64 / 113.0 - 0.5)
            .collect();
        let mut y = vec![0.0; dim];
        apply(&space, &op, &x, &mut y, &runner, &NoInterrupt).unwrap();
        for r in 0..dim {
            let (a, b) = (csr.indptr[r] as usize, csr.indptr[r + 1] as usize);
            let expect: f64 = (a..b).map(|e| csr.data[e] * x[csr.indices[e] as usize]).sum();
            assert!((expect - y[r]).abs() < 1e-12);
        }
        // Symmetric matrix: entry (r, c) equals (c, r).
        let dense = |r: usize, c: usize| {
            let (a, b) = (csr.indptr[r] as usize, csr.indptr[r + 1] as usize);
            (a..b)
                .find(|&e| csr.indices[e] as usize == c)
                .map_or(0.0, |e| csr.data[e])
        };
        for r in 0..dim {
            for c in 0..dim {
                assert_eq!(dense(r, c), dense(c, r));
            }
        }
        let k = 3;
        let xs: Vec<f64> = (0..dim * k).map(|i| ((i * 31) % 17) as f64).collect();
        let mut ys = vec![0.0; dim * k];
        apply_many(&space, &op, &xs, &mut ys, k, &runner, &NoInterrupt).unwrap();
        for j in 0..k {
            let col: Vec<f64> = (0..dim).map(|r| xs[r * k + j]).collect();
            let mut out = vec![0.0; dim];
            apply(&space, &op, &col, &mut out, &runner, &NoInterrupt).unwrap();
            for r in 0..dim {
                assert!((out[r] - ys[r * k + j]).abs() < 1e-12);
            }
        }
    }

    #[test]
    fn wrong_lengths_are_refused() {
        let space = FockSpace::new(vec![2; 2], None, Some(2), None).unwrap();
        let op = Operator::<f64>::new(&space, &ring_terms(2, 1.0, 1.0)).unwrap();
        let mut y = vec![0.0; 3];
        let e = apply(&space, &op, &[0.0; 2], &mut y, &Runner::global(), &NoInterrupt);
        assert!(matches!(e, Err(CoreError::Shape(_))));
    }
}
