//! The stored-or-matrix-free choice of the Lanczos solvers, made and carried out in one
//! place for every operator kind (on a space, on a symmetry sector, a CSR matrix handed
//! in from outside).
//!
//! A solver runs either on the matrix-free product or on a CSR matrix built first and
//! kept for the solve. [`Storage`] holds the caller's preference (store, do not store,
//! or decide) and memory limit; [`ground_state`] and [`lowest_levels`] decide with
//! [`Storage::decide`] and run the solver on the chosen product. The rule when deciding:
//! stay matrix-free when the operator's matrix-free product is as fast as a stored
//! matrix (the bipartite kernel, measured in `benchmarks/results/methods.txt`),
//! otherwise store the matrix when its build peak plus the solver's vectors fit in
//! [`MEMORY_BUDGET`] of the memory limit.

use crate::build::CsrAny;
use crate::error::{CoreError, CoreResult};
use crate::estimate::NnzEstimate;
use crate::lanczos::{self, CsrMap, HermitianMap, LanczosOptions, LanczosOutcome};
use crate::levels::{self, LevelsOptions, LevelsOutcome};
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::watch::{Restored, Unwatched, Watch};

/// Fraction of the memory limit a solve may plan to use.
pub const MEMORY_BUDGET: f64 = 0.8;

/// Rows sampled by the nonzero estimate the decision uses (and the default estimate).
pub const ESTIMATE_SAMPLES: usize = 2048;

/// Sizes of a CSR matrix estimated before building it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CsrSize {
    /// Stored entries (the estimate rounded to the nearest integer, ties to even).
    pub nnz: u64,
    /// Whether the indices need 64 bits (`nnz` or a dimension above `i32::MAX`).
    pub wide: bool,
    /// Bytes of the finished matrix (`indptr` + `indices` + `data`).
    pub csr_bytes: u128,
    /// Peak bytes while building (the matrix plus one row-count array).
    pub build_peak_bytes: u128,
}

/// The sizes of a `(rows, cols)` CSR matrix with about `nnz` entries of `value_bytes`.
pub fn csr_size(rows: u64, cols: u64, nnz: f64, value_bytes: usize) -> CsrSize {
    let nnz = nnz.max(0.0).round_ties_even() as u64;
    let narrow_max = i32::MAX as u64;
    let wide = nnz > narrow_max || rows.max(cols) > narrow_max;
    let index: u128 = if wide { 8 } else { 4 };
    let pointers = rows as u128 + 1;
    let csr_bytes = pointers * index + nnz as u128 * (index + value_bytes as u128);
    CsrSize {
        nnz,
        wide,
        csr_bytes,
        build_peak_bytes: csr_bytes + 8 * pointers,
    }
}

/// Vectors the Lanczos solvers keep for `k` levels: four (plus one) for the ground
/// state, the thick-restart basis (`2k + 8`) plus one for several levels.
pub fn solver_vectors(k: usize) -> usize {
    if k <= 1 {
        5
    } else {
        2 * k + 9
    }
}

/// An operator the Lanczos solvers can run on: matrix-free, or on its CSR matrix built
/// first.
pub trait Solvable<S: Scalar>: Sync {
    /// The matrix-free product.
    type Map<'a>: HermitianMap<S>
    where
        Self: 'a;
    /// Dimension of a vector.
    fn dim(&self) -> usize;
    /// The matrix-free product (prepared on first use; interruptible).
    ///
    /// # Errors
    /// [`CoreError::Interrupted`] while preparing.
    fn matrix_free(&self, interrupt: &dyn Interrupt) -> CoreResult<Self::Map<'_>>;
    /// Whether the operator is a stored matrix already: the solvers then run on it and
    /// build nothing, whatever the preference.
    fn is_stored(&self) -> bool {
        false
    }
    /// Whether the matrix-free product is about as fast as a stored matrix (then the
    /// solvers stay matrix-free unless told to store).
    ///
    /// # Errors
    /// [`CoreError::Interrupted`] while preparing the product.
    fn fast_matrix_free(&self, interrupt: &dyn Interrupt) -> CoreResult<bool>;
    /// Estimated stored entries of the matrix ([`ESTIMATE_SAMPLES`] rows).
    ///
    /// # Errors
    /// [`CoreError::Interrupted`] during an exact count.
    fn estimate(&self, runner: &Runner, interrupt: &dyn Interrupt) -> CoreResult<NnzEstimate>;
    /// The CSR matrix.
    ///
    /// # Errors
    /// As the operator's build.
    fn build(&self, runner: &Runner, interrupt: &dyn Interrupt) -> CoreResult<CsrAny<S>>;
}

/// Whether a solve stores the matrix: the caller's preference and memory limit.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Storage {
    /// `Some(true)`: store; `Some(false)`: matrix-free; `None`: decide.
    pub store: Option<bool>,
    /// Bytes the solve may plan to use (`None`: the memory available now).
    pub memory_limit: Option<u128>,
}

impl Storage {
    /// The limit in force: the caller's, else the memory available now (None when
    /// unknown).
    fn limit(&self) -> Option<u128> {
        self.memory_limit.or_else(crate::memory::available_bytes)
    }

    /// Whether a solve of `k` levels on `op` runs on a stored matrix (always true for
    /// an operator that is a stored matrix).
    ///
    /// # Errors
    /// [`CoreError::TooLarge`] when storing is asked for and the build would exceed the
    /// memory limit; [`CoreError::Interrupted`] while estimating.
    pub fn decide<S: Scalar, A: Solvable<S>>(
        &self,
        op: &A,
        k: usize,
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<bool> {
        if op.is_stored() {
            return Ok(true);
        }
        let size = |runner: &Runner| -> CoreResult<CsrSize> {
            let est = op.estimate(runner, interrupt)?;
            let dim = op.dim() as u64;
            Ok(csr_size(dim, dim, est.nnz, std::mem::size_of::<S>()))
        };
        match self.store {
            Some(false) => Ok(false),
            Some(true) => {
                if let Some(limit) = self.limit() {
                    let peak = size(runner)?.build_peak_bytes;
                    if peak > limit {
                        return Err(CoreError::TooLarge {
                            what: "storing this matrix for the solver (bytes at the peak of its \
                                   build, estimated); solve matrix-free (store_matrix=False) or \
                                   allow more memory (memory_limit)"
                                .into(),
                            requested: peak,
                            limit,
                        });
                    }
                }
                Ok(true)
            }
            None => {
                if op.fast_matrix_free(interrupt)? {
                    return Ok(false);
                }
                let Some(limit) = self.limit() else {
                    return Ok(true);
                };
                let vectors = solver_vectors(k) as u128 * op.dim() as u128 * std::mem::size_of::<S>() as u128;
                let need = size(runner)?.build_peak_bytes + vectors;
                Ok(need as f64 <= MEMORY_BUDGET * limit as f64)
            }
        }
    }
}

/// Run `solve` on the product [`Storage::decide`] chose: the operator itself (matrix-free
/// or already stored) or its CSR matrix built first. Returns the result and whether a
/// stored matrix served it.
fn run<S: Scalar, A: Solvable<S>, T>(
    op: &A,
    storage: &Storage,
    k: usize,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    solve: impl SolveOn<S, T>,
) -> CoreResult<(T, bool)> {
    let stored = storage.decide(op, k, runner, interrupt)?;
    if !stored || op.is_stored() {
        let map = op.matrix_free(interrupt)?;
        return Ok((solve.on(&map)?, stored));
    }
    let found = match op.build(runner, interrupt)? {
        CsrAny::Narrow(c) => solve.on(&CsrMap::new(c))?,
        CsrAny::Wide(c) => solve.on(&CsrMap::new(c))?,
    };
    Ok((found, true))
}

/// A solver waiting for its product (a generic closure).
trait SolveOn<S: Scalar, T> {
    fn on<M: HermitianMap<S>>(self, map: &M) -> CoreResult<T>;
}

struct Ground<'a, S> {
    start: Option<Vec<S>>,
    opts: &'a LanczosOptions,
    runner: &'a Runner,
    interrupt: &'a dyn Interrupt,
    watch: &'a dyn Watch<S>,
    resume: Option<Restored<S>>,
}

impl<S: Scalar> SolveOn<S, LanczosOutcome<S>> for Ground<'_, S> {
    fn on<M: HermitianMap<S>>(self, map: &M) -> CoreResult<LanczosOutcome<S>> {
        lanczos::ground_state_watched(
            map,
            self.start,
            self.opts,
            self.runner,
            self.interrupt,
            self.watch,
            self.resume,
        )
    }
}

struct Lowest<'a, S> {
    k: usize,
    start: Option<Vec<S>>,
    opts: &'a LevelsOptions,
    runner: &'a Runner,
    interrupt: &'a dyn Interrupt,
    watch: &'a dyn Watch<S>,
    resume: Option<Restored<S>>,
}

impl<S: Scalar> SolveOn<S, LevelsOutcome<S>> for Lowest<'_, S> {
    fn on<M: HermitianMap<S>>(self, map: &M) -> CoreResult<LevelsOutcome<S>> {
        levels::lowest_levels_watched(
            map,
            self.k,
            self.start,
            self.opts,
            self.runner,
            self.interrupt,
            self.watch,
            self.resume,
        )
    }
}

/// What a watched solve reports to and resumes from (see [`crate::watch`]).
pub struct Watched<'a, S: Scalar> {
    /// Receives reports and snapshots.
    pub watch: &'a dyn Watch<S>,
    /// A saved state to continue from.
    pub resume: Option<Restored<S>>,
}

impl<S: Scalar> Watched<'_, S> {
    /// Nothing reported, nothing resumed.
    pub fn none() -> Self {
        Watched {
            watch: &Unwatched,
            resume: None,
        }
    }
}

/// The four-vector Lanczos ground state ([`lanczos::ground_state`]) on `op`, stored or
/// matrix-free as `storage` says; also returns whether a stored matrix served it.
///
/// # Errors
/// As [`Storage::decide`], the build and [`lanczos::ground_state`].
pub fn ground_state<S: Scalar, A: Solvable<S>>(
    op: &A,
    storage: &Storage,
    start: Option<Vec<S>>,
    opts: &LanczosOptions,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<(LanczosOutcome<S>, bool)> {
    ground_state_watched(op, storage, start, opts, runner, interrupt, Watched::none())
}

/// [`ground_state`] with reports, snapshots and a resumed state
/// ([`lanczos::ground_state_watched`]).
///
/// # Errors
/// As [`ground_state`] and [`lanczos::ground_state_watched`].
pub fn ground_state_watched<S: Scalar, A: Solvable<S>>(
    op: &A,
    storage: &Storage,
    start: Option<Vec<S>>,
    opts: &LanczosOptions,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    watched: Watched<'_, S>,
) -> CoreResult<(LanczosOutcome<S>, bool)> {
    let solve = Ground {
        start,
        opts,
        runner,
        interrupt,
        watch: watched.watch,
        resume: watched.resume,
    };
    run(op, storage, 1, runner, interrupt, solve)
}

/// The lowest `k` levels ([`levels::lowest_levels`]) on `op`, stored or matrix-free as
/// `storage` says; also returns whether a stored matrix served them.
///
/// # Errors
/// As [`Storage::decide`], the build and [`levels::lowest_levels`].
#[allow(clippy::too_many_arguments)]
pub fn lowest_levels<S: Scalar, A: Solvable<S>>(
    op: &A,
    storage: &Storage,
    k: usize,
    start: Option<Vec<S>>,
    opts: &LevelsOptions,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<(LevelsOutcome<S>, bool)> {
    lowest_levels_watched(op, storage, k, start, opts, runner, interrupt, Watched::none())
}

/// [`lowest_levels`] with reports, snapshots and a resumed state
/// ([`levels::lowest_levels_watched`]).
///
/// # Errors
/// As [`lowest_levels`] and [`levels::lowest_levels_watched`].
#[allow(clippy::too_many_arguments)]
pub fn lowest_levels_watched<S: Scalar, A: Solvable<S>>(
    op: &A,
    storage: &Storage,
    k: usize,
    start: Option<Vec<S>>,
    opts: &LevelsOptions,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    watched: Watched<'_, S>,
) -> CoreResult<(LevelsOutcome<S>, bool)> {
    let solve = Lowest {
        k,
        start,
        opts,
        runner,
        interrupt,
        watch: watched.watch,
        resume: watched.resume,
    };
    run(op, storage, k, runner, interrupt, solve)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::build::build_csr;
    use crate::lanczos::FockMap;
    use crate::parallel::NoInterrupt;
    use crate::terms::{Operator, RawTerm};
    use crate::FockSpace;
    use std::sync::atomic::{AtomicUsize, Ordering};

    /// A hopping ring on a small space, counting builds.
    struct Ring {
        space: FockSpace,
        op: Operator<f64>,
        fast: bool,
        builds: AtomicUsize,
    }

    impl Ring {
        fn new(fast: bool) -> Self {
            let space = FockSpace::new(vec![2; 4], None, Some(4), None).unwrap();
            let mut terms = Vec::new();
            for i in 0..4 {
                let j = (i + 1) % 4;
                terms.push(RawTerm::new(-1.0, 0.0, vec![(i, 1, 0), (j, 0, 1)]));
                terms.push(RawTerm::new(-1.0, 0.0, vec![(j, 1, 0), (i, 0, 1)]));
                terms.push(RawTerm::new(0.5, 0.0, vec![(i, 2, 2)]));
            }
            let op = Operator::new(&space, &terms).unwrap();
            Ring {
                space,
                op,
                fast,
                builds: AtomicUsize::new(0),
            }
        }
    }

    impl Solvable<f64> for Ring {
        type Map<'a> = FockMap<'a, f64>;
        fn dim(&self) -> usize {
            self.space.dim() as usize
        }
        fn matrix_free(&self, _: &dyn Interrupt) -> CoreResult<FockMap<'_, f64>> {
            Ok(FockMap::new(&self.space, &self.op))
        }
        fn fast_matrix_free(&self, _: &dyn Interrupt) -> CoreResult<bool> {
            Ok(self.fast)
        }
        fn estimate(&self, runner: &Runner, interrupt: &dyn Interrupt) -> CoreResult<NnzEstimate> {
            crate::estimate::estimate_nnz(&self.space, &self.op, ESTIMATE_SAMPLES, runner, interrupt)
        }
        fn build(&self, runner: &Runner, interrupt: &dyn Interrupt) -> CoreResult<CsrAny<f64>> {
            self.builds.fetch_add(1, Ordering::Relaxed);
            build_csr(&self.space, &self.op, runner, interrupt, false)
        }
    }

    fn storage(store: Option<bool>, memory_limit: Option<u128>) -> Storage {
        Storage { store, memory_limit }
    }

    #[test]
    fn csr_size_counts_pointers_indices_and_values() {
        // Common practice, no source: CSR holds rows + 1 pointers and nnz (index, value)
        // pairs; the build adds one u64 count per row pointer.
        let s = csr_size(10, 10, 30.4, 8);
        assert_eq!(s.nnz, 30);
        assert!(!s.wide);
        assert_eq!(s.csr_bytes, 11 * 4 + 30 * 12);
        assert_eq!(s.build_peak_bytes, s.csr_bytes + 88);
        // Ties round to even, as Python's round() does.
        assert_eq!(csr_size(4, 4, 2.5, 8).nnz, 2);
        assert!(csr_size(4, 4, 3e9, 16).wide);
        assert!(csr_size(1 << 31, 1 << 31, 1.0, 8).wide);
    }

    #[test]
    fn the_preference_wins_and_auto_follows_kernel_and_memory() {
        let runner = Runner::global();
        let stop = NoInterrupt;
        let slow = Ring::new(false);
        let fast = Ring::new(true);
        // Told: obeyed.
        assert!(!storage(Some(false), None)
            .decide(&slow, 1, &runner, &stop)
            .unwrap());
        assert!(storage(Some(true), None)
            .decide(&fast, 1, &runner, &stop)
            .unwrap());
        // Auto: matrix-free on a fast kernel, stored when it fits, else matrix-free.
        assert!(!storage(None, None).decide(&fast, 1, &runner, &stop).unwrap());
        assert!(storage(None, Some(1 << 30))
            .decide(&slow, 1, &runner, &stop)
            .unwrap());
        assert!(!storage(None, Some(64)).decide(&slow, 1, &runner, &stop).unwrap());
        // Told to store beyond the limit: refused with the estimate.
        let err = storage(Some(true), Some(64))
            .decide(&slow, 1, &runner, &stop)
            .unwrap_err();
        assert!(matches!(err, CoreError::TooLarge { limit: 64, .. }), "{err}");
    }

    #[test]
    fn stored_and_matrix_free_solves_agree() {
        // Reference: the same Lanczos on the matrix-free product; a stored matrix holds
        // the same numbers, so energies agree to rounding (common practice, no source).
        let runner = Runner::global();
        let stop = NoInterrupt;
        let ring = Ring::new(false);
        let opts = LanczosOptions::default();
        let (free, was_stored) =
            ground_state(&ring, &storage(Some(false), None), None, &opts, &runner, &stop).unwrap();
        assert!(!was_stored);
        assert_eq!(ring.builds.load(Ordering::Relaxed), 0);
        let (kept, was_stored) =
            ground_state(&ring, &storage(Some(true), None), None, &opts, &runner, &stop).unwrap();
        assert!(was_stored);
        assert_eq!(ring.builds.load(Ordering::Relaxed), 1);
        assert!((free.energy - kept.energy).abs() < 1e-10);
        let lopts = LevelsOptions::default();
        let (levels, was_stored) =
            lowest_levels(&ring, &storage(None, None), 3, None, &lopts, &runner, &stop).unwrap();
        assert!(was_stored);
        assert!((levels.energies[0] - free.energy).abs() < 1e-9);
    }
}
