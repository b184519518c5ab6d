//! Cheap estimates of the stored entries of a matrix before building it: exact for
//! small spaces, from a stratified sample of rows otherwise.

use crate::build::assemble_row;
use crate::error::CoreResult;
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::space::FockSpace;
use crate::terms::{Operator, RowState};
use crate::vecops::splitmix64;
use rayon::prelude::*;

/// Estimated number of stored entries of a matrix.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NnzEstimate {
    /// Estimated (or exact) number of stored entries.
    pub nnz: f64,
    /// Standard error of the estimate (0 when exact).
    pub std_error: f64,
    /// Whether every row was counted.
    pub exact: bool,
    /// Largest number of entries in a counted row.
    pub max_row: u64,
}

/// Estimate the stored entries of `op` on `space` from `samples` rows (all rows when
/// the space has at most `4 × samples` states).
///
/// # Errors
/// [`crate::CoreError::Interrupted`] when `interrupt` fires during an exact count.
pub fn estimate_nnz<S: Scalar>(
    space: &FockSpace,
    op: &Operator<S>,
    samples: usize,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<NnzEstimate> {
    estimate_from_rows(
        space.dim(),
        samples,
        runner,
        || crate::build::row_counts(space, op, runner, interrupt),
        Vec::new,
        |scratch, idx| match RowState::at(space, idx) {
            Ok(row) => {
                assemble_row(space, op, &row, scratch);
                scratch.len() as u64
            }
            Err(_) => 0,
        },
    )
}

/// The one estimator of stored entries, for any row listing of `dim` rows: every row's
/// count from `exact` when there are at most `4 × samples` rows, else one row drawn
/// uniformly from each of `samples` equal strata of the rows (`row_len(scratch, row)`:
/// its merged entries, with per-thread scratch from `init`). Strata bounds are computed
/// in `u128`, since `s · dim` exceeds `u64` for large spaces and many samples; the rows
/// drawn depend only on `dim` and `samples`, not on the threads.
///
/// # Errors
/// The errors of `exact`.
pub fn estimate_from_rows<T: Send>(
    dim: u64,
    samples: usize,
    runner: &Runner,
    exact: impl FnOnce() -> CoreResult<Vec<u64>>,
    init: impl Fn() -> T + Sync + Send,
    row_len: impl Fn(&mut T, u64) -> u64 + Sync + Send,
) -> CoreResult<NnzEstimate> {
    let samples = samples.max(1) as u64;
    if dim <= 4 * samples {
        let counts = exact()?;
        return Ok(NnzEstimate {
            nnz: counts.iter().sum::<u64>() as f64,
            std_error: 0.0,
            exact: true,
            max_row: counts.iter().copied().max().unwrap_or(0),
        });
    }
    let counts: Vec<u64> = runner.install(|| {
        (0..samples)
            .into_par_iter()
            .map_init(&init, |scratch, s| row_len(scratch, stratum_row(s, samples, dim)))
            .collect()
    });
    let n = counts.len() as f64;
    let mean = counts.iter().sum::<u64>() as f64 / n;
    let var = counts.iter().map(|&c| (c as f64 - mean).powi(2)).sum::<f64>() / (n - 1.0).max(1.0);
    Ok(NnzEstimate {
        nnz: mean * dim as f64,
        std_error: (var / n).sqrt() * dim as f64,
        exact: false,
        max_row: counts.iter().copied().max().unwrap_or(0),
    })
}

/// The row drawn from stratum `s` of `samples` equal strata of `0..dim`
/// (`samples <= dim`), overflow-safe.
#[inline]
fn stratum_row(s: u64, samples: u64, dim: u64) -> u64 {
    let lo = (s as u128 * dim as u128 / samples as u128) as u64;
    let hi = ((s + 1) as u128 * dim as u128 / samples as u128) as u64;
    lo + splitmix64(s ^ 0xA5A5_5A5A) % (hi - lo).max(1)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::NoInterrupt;
    use crate::terms::RawTerm;

    #[test]
    fn strata_of_a_huge_space_do_not_wrap() {
        // 2^50 states and 2^15 samples: s · dim reaches 2^65, beyond u64. The number
        // operator of mode 0 has one entry in each row of the second half of the basis
        // (n_0 = 1, mode 0 most significant) and none in the first, so equal strata
        // give exactly dim / 2; wrapped strata all land in the first half (counting
        // argument, common practice, no source).
        let space = FockSpace::new(vec![1; 50], None, None, None).unwrap();
        let op = Operator::<f64>::new(&space, &[RawTerm::new(1.0, 0.0, vec![(0, 1, 1)])]).unwrap();
        let est = estimate_nnz(&space, &op, 1 << 15, &Runner::global(), &NoInterrupt).unwrap();
        assert!(!est.exact);
        assert_eq!(est.nnz, (1u64 << 49) as f64);
        assert_eq!(est.max_row, 1);
    }
}
