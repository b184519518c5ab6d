//! Row-parallel CSR assembly in two passes (count, then fill), so that peak memory is
//! the output plus one row-count array and per-thread scratch: no triplet list.

use crate::bipartite::Bipartite;
use crate::error::{CoreError, CoreResult};
use crate::kernel::ProductKernel;
use crate::matvec::Product;
use crate::parallel::{Interrupt, Runner, BLOCKS_PER_CHECK, BLOCK_ROWS};
use crate::scalar::Scalar;
use crate::space::FockSpace;
use crate::terms::{Operator, RowState};
use rayon::prelude::*;

/// Integer types used for CSR index arrays.
pub trait CsrIndex: Copy + Send + Sync + Default + std::fmt::Debug + 'static {
    /// Largest value the type holds.
    const MAX: u64;
    /// Convert a value known to fit.
    fn from_u64(v: u64) -> Self;
    /// Back to `u64`.
    fn to_u64(self) -> u64;
}

impl CsrIndex for i32 {
    const MAX: u64 = i32::MAX as u64;
    #[inline(always)]
    fn from_u64(v: u64) -> Self {
        v as i32
    }
    #[inline(always)]
    fn to_u64(self) -> u64 {
        self as u64
    }
}

impl CsrIndex for i64 {
    const MAX: u64 = i64::MAX as u64;
    #[inline(always)]
    fn from_u64(v: u64) -> Self {
        v as i64
    }
    #[inline(always)]
    fn to_u64(self) -> u64 {
        self as u64
    }
}

/// A square CSR matrix: columns sorted within each row, no duplicates, no stored zeros.
#[derive(Debug, Clone, PartialEq)]
pub struct Csr<S, I> {
    /// Number of rows and columns.
    pub dim: u64,
    /// Row pointers, length `dim + 1`.
    pub indptr: Vec<I>,
    /// Column indices, length `nnz`.
    pub indices: Vec<I>,
    /// Values, length `nnz`.
    pub data: Vec<S>,
}

/// A CSR matrix with 32-bit indices when `dim` and `nnz` fit, else 64-bit.
#[derive(Debug, Clone, PartialEq)]
pub enum CsrAny<S> {
    /// `int32` indices.
    Narrow(Csr<S, i32>),
    /// `int64` indices.
    Wide(Csr<S, i64>),
}

/// The merged, nonzero entries of one row, sorted by column, left in `scratch`.
#[inline]
pub fn assemble_row<S: Scalar>(
    space: &FockSpace,
    op: &Operator<S>,
    row: &RowState,
    scratch: &mut Vec<(u64, S)>,
) {
    scratch.clear();
    op.for_each_in_row(space, row, |t, col, amp| {
        scratch.push((col, op.coef(t).scale(amp)))
    });
    // Stable sort: duplicates are summed in term order, so results never depend on threads.
    scratch.sort_by_key(|e| e.0);
    let mut w = 0usize;
    for k in 0..scratch.len() {
        let (col, val) = scratch[k];
        if w > 0 && scratch[w - 1].0 == col {
            scratch[w - 1].1 += val;
        } else {
            scratch[w] = (col, val);
            w += 1;
        }
    }
    scratch.truncate(w);
    scratch.retain(|e| e.1 != S::ZERO);
}

/// Receives each row's merged entries: `(row, [(column, value), ...])`.
pub type RowVisitor<'a, S> = dyn FnMut(u64, &[(u64, S)]) + 'a;

/// A prepared operator that lists the merged entries of consecutive rows.
pub trait RowEntries<S: Scalar>: Sync {
    /// Call `visit(row, entries)` for rows `first..first + count` in order, with each
    /// row's entries sorted by column, duplicates summed in a fixed order and exact
    /// zeros dropped.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when the rows are out of range.
    fn rows(&self, space: &FockSpace, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()>;
}

impl<S: Scalar> RowEntries<S> for ProductKernel<S> {
    fn rows(&self, space: &FockSpace, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()> {
        self.for_each_row(space, first, count, visit)
    }
}

impl<S: Scalar> RowEntries<S> for Bipartite<S> {
    fn rows(&self, _: &FockSpace, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()> {
        self.for_each_row(first, count, visit)
    }
}

impl<S: Scalar> RowEntries<S> for Product<S> {
    fn rows(&self, space: &FockSpace, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()> {
        match self {
            Product::Split(b) => b.for_each_row(first, count, visit),
            Product::Rows(k) => k.for_each_row(space, first, count, visit),
        }
    }
}

/// Number of stored entries in each row.
///
/// # Errors
/// [`CoreError::Interrupted`] when `interrupt` fires.
pub fn row_counts<S: Scalar>(
    space: &FockSpace,
    op: &Operator<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<u64>> {
    row_counts_with(space, &Product::new(space, op), runner, interrupt)
}

/// Number of stored entries in each row, from a prepared operator.
///
/// # Errors
/// [`CoreError::Interrupted`] when `interrupt` fires; [`CoreError::TooLarge`] when the
/// counts do not fit in memory.
pub fn row_counts_with<S: Scalar>(
    space: &FockSpace,
    kernel: &impl RowEntries<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<u64>> {
    let mut counts =
        crate::memory::try_filled(space.dim() as usize, 0u64, "row counts of the sparse matrix")?;
    runner.for_row_chunks(&mut counts, interrupt, |first, out| {
        let mut k = 0usize;
        kernel.rows(space, first, out.len(), &mut |_, entries| {
            out[k] = entries.len() as u64;
            k += 1;
        })
    })?;
    Ok(counts)
}

/// Build the CSR matrix of `op` on `space`.
///
/// Indices are `i32` when both `dim` and `nnz` fit (unless `force_wide`), else `i64`.
///
/// # Errors
/// [`CoreError::Interrupted`] when `interrupt` fires; [`CoreError::TooLarge`] when the
/// number of entries does not fit the address space.
pub fn build_csr<S: Scalar>(
    space: &FockSpace,
    op: &Operator<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    force_wide: bool,
) -> CoreResult<CsrAny<S>> {
    build_csr_with(space, &Product::new(space, op), runner, interrupt, force_wide)
}

/// Build the CSR matrix from an operator already prepared for `space` (the bipartite
/// kernel writes each row's entries in column order, with no re-ranking).
///
/// # Errors
/// As [`build_csr`].
pub fn build_csr_with<S: Scalar>(
    space: &FockSpace,
    kernel: &impl RowEntries<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    force_wide: bool,
) -> CoreResult<CsrAny<S>> {
    let mut indptr = row_counts_with(space, kernel, runner, interrupt)?;
    // Turn counts into row pointers in place: indptr[r] = entries before row r.
    let mut acc = 0u64;
    for c in indptr.iter_mut() {
        let n = *c;
        *c = acc;
        acc += n;
    }
    indptr.push(acc);
    let nnz = acc;
    if nnz > isize::MAX as u64 / 16 {
        return Err(CoreError::TooLarge {
            what: "stored entries of the sparse matrix".into(),
            requested: nnz as u128,
            limit: (isize::MAX as u64 / 16) as u128,
        });
    }
    if !force_wide && nnz <= i32::MAX as u64 && space.dim() <= i32::MAX as u64 {
        Ok(CsrAny::Narrow(fill::<S, i32>(
            space, kernel, runner, interrupt, indptr,
        )?))
    } else {
        Ok(CsrAny::Wide(fill::<S, i64>(
            space, kernel, runner, interrupt, indptr,
        )?))
    }
}

fn fill<S: Scalar, I: CsrIndex>(
    space: &FockSpace,
    kernel: &impl RowEntries<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    indptr: Vec<u64>,
) -> CoreResult<Csr<S, I>> {
    let dim = space.dim();
    let nnz = indptr[dim as usize] as usize;
    let entry = (std::mem::size_of::<I>() + std::mem::size_of::<S>()) as u128;
    crate::memory::ensure_room(
        nnz as u128 * entry + (dim as u128 + 1) * std::mem::size_of::<I>() as u128,
        "the sparse matrix",
    )?;
    let mut indices = crate::memory::try_filled(nnz, I::default(), "column indices of the sparse matrix")?;
    let mut data = crate::memory::try_filled(nnz, S::ZERO, "values of the sparse matrix")?;
    {
        let blocks = dim.div_ceil(BLOCK_ROWS) as usize;
        let mut pieces = Vec::with_capacity(blocks);
        let mut rest_idx: &mut [I] = &mut indices;
        let mut rest_val: &mut [S] = &mut data;
        for b in 0..blocks {
            let first = b as u64 * BLOCK_ROWS;
            let last = (first + BLOCK_ROWS).min(dim);
            let len = (indptr[last as usize] - indptr[first as usize]) as usize;
            let (idx, tail_idx) = rest_idx.split_at_mut(len);
            let (val, tail_val) = rest_val.split_at_mut(len);
            rest_idx = tail_idx;
            rest_val = tail_val;
            pieces.push((first, last - first, idx, val));
        }
        let mut pieces = pieces.into_iter();
        loop {
            let group: Vec<_> = pieces.by_ref().take(BLOCKS_PER_CHECK).collect();
            if group.is_empty() {
                break;
            }
            runner.install(|| {
                group.into_par_iter().try_for_each(|(first, rows, idx, val)| {
                    let mut pos = 0usize;
                    kernel.rows(space, first, rows as usize, &mut |_, entries| {
                        for &(col, v) in entries {
                            idx[pos] = I::from_u64(col);
                            val[pos] = v;
                            pos += 1;
                        }
                    })?;
                    debug_assert_eq!(pos, idx.len());
                    Ok::<(), CoreError>(())
                })
            })?;
            if interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
        }
    }
    let indptr: Vec<I> = runner.install(|| indptr.into_par_iter().map(I::from_u64).collect());
    Ok(Csr {
        dim,
        indptr,
        indices,
        data,
    })
}
