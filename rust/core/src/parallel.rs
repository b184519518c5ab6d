//! Row-block scheduling: rayon over blocks of consecutive rows, with interruption
//! checks on the calling thread between groups of blocks.

use crate::error::{CoreError, CoreResult};
use rayon::prelude::*;
use rayon::ThreadPool;

/// Rows per block: each block unranks its first row and then steps through the rest.
pub const BLOCK_ROWS: u64 = 4096;
/// Blocks run between two interruption checks (about a million rows).
pub const BLOCKS_PER_CHECK: usize = 256;

/// Fewest rows of a matrix one task of [`Runner::for_matrix_rows`] gets.
pub const MATRIX_TASK_ROWS: usize = 8;

/// Most threads a private pool may have (far above any real machine's useful count;
/// larger requests are mistakes that would exhaust the process's thread limit).
pub const MAX_THREADS: usize = 1024;

/// Asked between groups of blocks whether the caller wants to stop.
pub trait Interrupt {
    /// `true` when the work should stop now.
    fn requested(&self) -> bool;
}

/// An interrupt that never fires.
#[derive(Debug, Default, Clone, Copy)]
pub struct NoInterrupt;

impl Interrupt for NoInterrupt {
    fn requested(&self) -> bool {
        false
    }
}

/// Where parallel work runs: rayon's global pool (sized by `RAYON_NUM_THREADS` or the
/// number of cores) or a private pool with a fixed thread count.
#[derive(Debug, Default)]
pub struct Runner {
    pool: Option<ThreadPool>,
}

impl Runner {
    /// Use rayon's global pool.
    pub fn global() -> Self {
        Runner { pool: None }
    }

    /// Use a private pool of `threads` threads (`None` or `0`: the global pool).
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when the pool cannot be created.
    pub fn with_threads(threads: Option<usize>) -> CoreResult<Self> {
        match threads {
            None | Some(0) => Ok(Self::global()),
            Some(n) if n > MAX_THREADS => Err(CoreError::InvalidArgument(format!(
                "threads={n} is too many; pass at most {MAX_THREADS} (or None for all cores)"
            ))),
            Some(n) => rayon::ThreadPoolBuilder::new()
                .num_threads(n)
                .build()
                .map(|pool| Runner { pool: Some(pool) })
                .map_err(|e| CoreError::InvalidArgument(format!("cannot start {n} threads: {e}"))),
        }
    }

    /// Number of threads work will use.
    pub fn threads(&self) -> usize {
        match &self.pool {
            Some(p) => p.current_num_threads(),
            None => rayon::current_num_threads(),
        }
    }

    /// Run `f` inside the pool.
    pub fn install<R: Send>(&self, f: impl FnOnce() -> R + Send) -> R {
        match &self.pool {
            Some(p) => p.install(f),
            None => f(),
        }
    }

    /// Call `work(first_row, rows)` for every block of `dim` rows in parallel and return
    /// the results in block order, checking `interrupt` between groups of blocks.
    ///
    /// # Errors
    /// [`CoreError::Interrupted`] when the interrupt fired; otherwise the first error
    /// `work` returned.
    pub fn map_blocks<T, F>(&self, dim: u64, interrupt: &dyn Interrupt, work: F) -> CoreResult<Vec<T>>
    where
        T: Send,
        F: Fn(u64, u64) -> CoreResult<T> + Sync,
    {
        let blocks = dim.div_ceil(BLOCK_ROWS) as usize;
        let mut out = Vec::with_capacity(blocks);
        let mut next = 0usize;
        while next < blocks {
            let end = (next + BLOCKS_PER_CHECK).min(blocks);
            let part: Vec<T> = self.install(|| {
                (next..end)
                    .into_par_iter()
                    .map(|b| {
                        let first = b as u64 * BLOCK_ROWS;
                        work(first, BLOCK_ROWS.min(dim - first))
                    })
                    .collect::<CoreResult<Vec<T>>>()
            })?;
            out.extend(part);
            next = end;
            if interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
        }
        Ok(out)
    }

    /// Call `work(first_row, rows)` for groups of consecutive rows of a row-major matrix
    /// `out` with `width` columns (`rows` holds whole rows), in parallel, checking
    /// `interrupt` between groups of about a million elements. Each row is written by
    /// one call, so results do not depend on the thread count.
    ///
    /// # Errors
    /// [`CoreError::Shape`] when `out` is not made of whole rows; otherwise as
    /// [`Runner::for_row_chunks`].
    pub fn for_matrix_rows<T, F>(
        &self,
        out: &mut [T],
        width: usize,
        interrupt: &dyn Interrupt,
        work: F,
    ) -> CoreResult<()>
    where
        T: Send,
        F: Fn(usize, &mut [T]) -> CoreResult<()> + Sync,
    {
        if width == 0 || out.len() % width != 0 {
            return Err(CoreError::Shape(format!(
                "a matrix of {} elements is not made of rows of {width}",
                out.len()
            )));
        }
        // A task of at least BLOCK_ROWS elements and MATRIX_TASK_ROWS rows (work that
        // also reads columns then reads whole cache lines); a group of
        // BLOCK_ROWS * BLOCKS_PER_CHECK elements between interruption checks.
        let task_rows = (BLOCK_ROWS as usize).div_ceil(width).max(MATRIX_TASK_ROWS);
        let group_rows = (BLOCK_ROWS as usize * BLOCKS_PER_CHECK)
            .div_ceil(width)
            .max(task_rows);
        let group_rows = group_rows.div_ceil(task_rows) * task_rows;
        for (g, chunk) in out.chunks_mut(group_rows * width).enumerate() {
            let base = g * group_rows;
            self.install(|| {
                chunk
                    .par_chunks_mut(task_rows * width)
                    .enumerate()
                    .try_for_each(|(t, rows)| work(base + t * task_rows, rows))
            })?;
            if interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
        }
        Ok(())
    }

    /// Call `work(first_row, out_block)` for consecutive blocks of `out` (one element a
    /// row), in parallel, checking `interrupt` between groups of blocks.
    ///
    /// # Errors
    /// As [`Runner::for_blocks`].
    pub fn for_row_chunks<T, F>(&self, out: &mut [T], interrupt: &dyn Interrupt, work: F) -> CoreResult<()>
    where
        T: Send,
        F: Fn(u64, &mut [T]) -> CoreResult<()> + Sync,
    {
        let group = BLOCK_ROWS as usize * BLOCKS_PER_CHECK;
        for (g, chunk) in out.chunks_mut(group).enumerate() {
            let base = (g * group) as u64;
            self.install(|| {
                chunk
                    .par_chunks_mut(BLOCK_ROWS as usize)
                    .enumerate()
                    .try_for_each(|(b, rows)| work(base + b as u64 * BLOCK_ROWS, rows))
            })?;
            if interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
        }
        Ok(())
    }
}
