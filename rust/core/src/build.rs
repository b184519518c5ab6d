//! Row-parallel CSR assembly in two passes (count, then fill), so that peak memory is
//! the output plus one row-count array and per-thread scratch: no triplet list. Any
//! row listing ([`SparseRows`]) goes through the one build ([`build_rows`]).

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
    /// Number of rows (and of columns, except for a listing between two spaces, see
    /// [`build_rows`]).
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

/// The one row merge of every kernel: sort `buf` by column, stably (equal columns keep
/// their push order, so duplicates are summed in a fixed order whatever the threads),
/// sum equal columns in that order and keep the nonzero sums at the front; returns how
/// many were kept (`buf[..kept]` is the merged row).
#[inline]
pub fn merge_row<S: Scalar>(buf: &mut [(u64, S)]) -> usize {
    if buf.len() <= 16 {
        // Few entries: an insertion sort (stable).
        for a in 1..buf.len() {
            let mut b = a;
            while b > 0 && buf[b - 1].0 > buf[b].0 {
                buf.swap(b - 1, b);
                b -= 1;
            }
        }
    } else {
        buf.sort_by_key(|e| e.0);
    }
    let mut kept = 0usize;
    let mut k = 0usize;
    while k < buf.len() {
        let (col, mut val) = buf[k];
        k += 1;
        while k < buf.len() && buf[k].0 == col {
            val += buf[k].1;
            k += 1;
        }
        if val != S::ZERO {
            buf[kept] = (col, val);
            kept += 1;
        }
    }
    kept
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
    let kept = merge_row(scratch);
    scratch.truncate(kept);
}

/// Receives each row's merged entries: `(row, [(column, value), ...])`.
pub type RowVisitor<'a, S> = dyn FnMut(u64, &[(u64, S)]) + 'a;

/// A sparse operator listed row by row: what the two-pass build (count, then fill)
/// consumes, whatever the operator (square or between two spaces).
pub trait SparseRows<S: Scalar>: Sync {
    /// `(rows, columns)` of the matrix.
    fn shape(&self) -> (u64, u64);

    /// Call `visit(row, entries)` for rows `first..first + count` in order, each row's
    /// entries sorted by column, duplicates summed in a fixed order, exact zeros dropped.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when the rows are out of range.
    fn rows(&self, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()>;

    /// Get ready for a build (the default does nothing).
    fn prepare_rows(&self) {}

    /// The number of entries of each row `first..first + out.len()`, into `out` (the
    /// default lists the rows and counts their entries).
    ///
    /// # Errors
    /// As [`SparseRows::rows`].
    fn count_rows(&self, first: u64, out: &mut [u64]) -> CoreResult<()> {
        let mut k = 0usize;
        self.rows(first, out.len(), &mut |_, entries| {
            out[k] = entries.len() as u64;
            k += 1;
        })
    }

    /// Call `emit(column, value)` for every entry of the rows `first..first + count`,
    /// row after row, each row's in column order: the entries [`SparseRows::rows`]
    /// lists (the default lists them with it).
    ///
    /// # Errors
    /// As [`SparseRows::rows`].
    fn emit_rows(&self, first: u64, count: usize, emit: impl FnMut(u64, S)) -> CoreResult<()>
    where
        Self: Sized,
    {
        let mut emit = emit;
        self.rows(first, count, &mut |_, entries| {
            for &(col, val) in entries {
                emit(col, val);
            }
        })
    }
}

/// A prepared operator on a space, seen as the rows of its square matrix.
#[derive(Debug, Clone, Copy)]
pub struct OnSpace<'a, K> {
    /// The space (rows and columns).
    pub space: &'a FockSpace,
    /// The prepared operator.
    pub kernel: &'a K,
}

impl<S: Scalar> SparseRows<S> for OnSpace<'_, ProductKernel<S>> {
    fn shape(&self) -> (u64, u64) {
        (self.space.dim(), self.space.dim())
    }
    fn rows(&self, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()> {
        self.kernel.for_each_row(self.space, first, count, visit)
    }
}

/// The bipartite kernel counts rows from its tables and writes them in place.
impl<S: Scalar> SparseRows<S> for OnSpace<'_, Bipartite<S>> {
    fn shape(&self) -> (u64, u64) {
        (self.space.dim(), self.space.dim())
    }
    fn rows(&self, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()> {
        self.kernel.for_each_row(first, count, visit)
    }
    fn prepare_rows(&self) {
        self.kernel.prepare_rows();
    }
    fn count_rows(&self, first: u64, out: &mut [u64]) -> CoreResult<()> {
        self.kernel.count_rows(first, out)
    }
    fn emit_rows(&self, first: u64, count: usize, emit: impl FnMut(u64, S)) -> CoreResult<()> {
        self.kernel.emit_rows(first, count, emit)
    }
}

impl<S: Scalar> SparseRows<S> for OnSpace<'_, Product<S>> {
    fn shape(&self) -> (u64, u64) {
        (self.space.dim(), self.space.dim())
    }
    fn rows(&self, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()> {
        match self.kernel {
            Product::Split(b) => b.for_each_row(first, count, visit),
            Product::Rows(k) => k.for_each_row(self.space, first, count, visit),
        }
    }
    fn prepare_rows(&self) {
        if let Product::Split(b) = self.kernel {
            b.prepare_rows();
        }
    }
    fn count_rows(&self, first: u64, out: &mut [u64]) -> CoreResult<()> {
        match self.kernel {
            Product::Split(b) => b.count_rows(first, out),
            Product::Rows(k) => OnSpace {
                space: self.space,
                kernel: k.as_ref(),
            }
            .count_rows(first, out),
        }
    }
    fn emit_rows(&self, first: u64, count: usize, emit: impl FnMut(u64, S)) -> CoreResult<()> {
        match self.kernel {
            Product::Split(b) => b.emit_rows(first, count, emit),
            Product::Rows(k) => OnSpace {
                space: self.space,
                kernel: k.as_ref(),
            }
            .emit_rows(first, count, emit),
        }
    }
}

/// `Y = A X` for `k` vectors stored row-major (`X[c, j]` at `x[c * k + j]`), from the
/// rows of `op` (lengths checked by the caller): each row's entries are listed once
/// and used for all `k` vectors; each output row is written by one thread, in column
/// order, so results do not depend on the thread count.
///
/// # Errors
/// [`CoreError::Interrupted`] when `interrupt` fires; the errors of the listing.
pub fn apply_rows<S: Scalar>(
    op: &impl SparseRows<S>,
    x: &[S],
    y: &mut [S],
    k: usize,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<()> {
    let mut rows_out: Vec<&mut [S]> = y.chunks_mut(k).collect();
    runner.for_row_chunks(&mut rows_out, interrupt, |first, out| {
        let mut i = 0usize;
        op.rows(first, out.len(), &mut |_, entries| {
            let yi = &mut out[i];
            yi.fill(S::ZERO);
            for &(col, c) in entries {
                let xs = &x[col as usize * k..][..k];
                for (yj, &xj) in yi.iter_mut().zip(xs) {
                    *yj += c * xj;
                }
            }
            i += 1;
        })
    })
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
pub fn row_counts_with<'a, S: Scalar, K>(
    space: &'a FockSpace,
    kernel: &'a K,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<u64>>
where
    OnSpace<'a, K>: SparseRows<S>,
{
    counts_of(&OnSpace { space, kernel }, runner, interrupt)
}

/// Number of stored entries in each row of `op` (room is left for one more value,
/// so that the counts can become row pointers in place).
///
/// # Errors
/// [`CoreError::Interrupted`] when `interrupt` fires; [`CoreError::TooLarge`] when the
/// counts do not fit in memory.
pub fn counts_of<S: Scalar>(
    op: &impl SparseRows<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<u64>> {
    let rows = op.shape().0 as usize;
    let what = "row counts of the sparse matrix";
    let mut counts = crate::memory::try_with_capacity(rows.saturating_add(1), what)?;
    counts.resize(rows, 0u64);
    op.prepare_rows();
    runner.for_row_chunks(&mut counts, interrupt, |first, out| op.count_rows(first, out))?;
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
pub fn build_csr_with<'a, S: Scalar, K>(
    space: &'a FockSpace,
    kernel: &'a K,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    force_wide: bool,
) -> CoreResult<CsrAny<S>>
where
    OnSpace<'a, K>: SparseRows<S>,
{
    build_rows(&OnSpace { space, kernel }, runner, interrupt, force_wide)
}

/// Build the CSR arrays of any row listing in two passes: count each row's entries,
/// then write them in place, so that peak memory is the output plus one row-count
/// array and per-thread scratch (no triplet list). The matrix's `dim` is its number
/// of rows. Indices are `i32` when the rows, the columns and `nnz` fit (unless
/// `force_wide`), else `i64`.
///
/// # Errors
/// [`CoreError::Interrupted`] when `interrupt` fires; [`CoreError::TooLarge`] when the
/// matrix does not fit in memory; the errors of the listing.
pub fn build_rows<S: Scalar>(
    op: &impl SparseRows<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    force_wide: bool,
) -> CoreResult<CsrAny<S>> {
    let (rows, cols) = op.shape();
    let mut indptr = counts_of(op, runner, interrupt)?;
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
    let fits = |n: u64| n <= i32::MAX as u64;
    if !force_wide && fits(nnz) && fits(rows) && fits(cols) {
        Ok(CsrAny::Narrow(fill::<S, i32>(op, runner, interrupt, indptr)?))
    } else {
        Ok(CsrAny::Wide(fill::<S, i64>(op, runner, interrupt, indptr)?))
    }
}

fn fill<S: Scalar, I: CsrIndex>(
    op: &impl SparseRows<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    indptr: Vec<u64>,
) -> CoreResult<Csr<S, I>> {
    let dim = op.shape().0;
    let nnz = indptr[dim as usize] as usize;
    let entry = (std::mem::size_of::<I>() + std::mem::size_of::<S>()) as u128;
    crate::memory::ensure_room(
        nnz as u128 * entry + (dim as u128 + 1) * std::mem::size_of::<I>() as u128,
        "the sparse matrix",
    )?;
    // Zeroed in parallel: the first touch of every page (which the kernel serialises
    // per page but not across threads) is shared by the threads, not left to one.
    let mut indices: Vec<I> = crate::memory::try_with_capacity(nnz, "column indices of the sparse matrix")?;
    let mut data: Vec<S> = crate::memory::try_with_capacity(nnz, "values of the sparse matrix")?;
    runner.install(|| {
        indices.par_extend(rayon::iter::repeat_n(I::default(), nnz));
        data.par_extend(rayon::iter::repeat_n(S::ZERO, nnz));
    });
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
                    // Indexing is bounds-checked: a kernel listing more entries than it
                    // counted panics instead of writing past its block.
                    op.emit_rows(first, rows as usize, |col, v| {
                        idx[pos] = I::from_u64(col);
                        val[pos] = v;
                        pos += 1;
                    })?;
                    if pos != idx.len() {
                        return Err(CoreError::InvalidArgument(format!(
                            "internal error: rows {first}..{} listed {pos} entries but counted {} \
                             (please report this)",
                            first + rows,
                            idx.len()
                        )));
                    }
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
