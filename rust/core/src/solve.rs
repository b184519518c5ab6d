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

/// Vectors of the space's dimension the Lanczos solvers hold at once for `k` levels:
/// four for the ground state (a start vector handed in becomes one of them), the
/// thick-restart basis (`2k + 8`) plus one work vector for several levels.
pub fn solver_vectors(k: usize) -> usize {
    if k <= 1 {
        4
    } else {
        2 * k + 9
    }
}

/// What a Lanczos solve plans to add to the process's memory, by part: the numbers
/// [`Storage::decide`] compares with the memory limit, and what the solve then holds.
///
/// The matrix is kept for the whole solve; its build's row counts (and a start vector
/// handed in) are held only until the build ends, before the solver allocates its
/// vectors, so the peak is the matrix plus the larger of the two.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SolvePlan {
    /// Whether the solve runs on a stored matrix.
    pub stored: bool,
    /// Bytes of the stored matrix (`indptr` + `indices` + `data`; 0 matrix-free).
    pub matrix_bytes: u128,
    /// Bytes held only while the matrix is built: one `u64` count per row, and the
    /// vectors handed in (a start vector, a resumed state's; 0 matrix-free).
    pub build_bytes: u128,
    /// Bytes of the solver's vectors ([`solver_vectors`]).
    pub vector_bytes: u128,
}

impl SolvePlan {
    /// Peak bytes the solve adds to the process.
    pub fn peak_bytes(&self) -> u128 {
        self.matrix_bytes + self.build_bytes.max(self.vector_bytes)
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
    /// an operator that is a stored matrix): [`Storage::plan`] with no vector handed in.
    ///
    /// # Errors
    /// As [`Storage::plan`].
    pub fn decide<S: Scalar, A: Solvable<S>>(
        &self,
        op: &A,
        k: usize,
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<bool> {
        Ok(self.plan(op, k, 0, runner, interrupt)?.stored)
    }

    /// The memory plan of a solve of `k` levels on `op` (`held`: vectors of the space's
    /// dimension handed in and held while the matrix is built: a start vector, or a
    /// resumed state's), with the stored-or-matrix-free choice made from it: the
    /// preference when given, else matrix-free when the operator's product is as fast
    /// as a stored matrix, else stored when [`SolvePlan::peak_bytes`] fits in
    /// [`MEMORY_BUDGET`] of the memory limit. The operator's own tables are prepared
    /// first (they are part of the process's memory when the plan is compared with it).
    ///
    /// # Errors
    /// [`CoreError::TooLarge`] when storing is asked for and the plan exceeds the memory
    /// limit; [`CoreError::Interrupted`] while preparing or estimating.
    pub fn plan<S: Scalar, A: Solvable<S>>(
        &self,
        op: &A,
        k: usize,
        held: usize,
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<SolvePlan> {
        let dim = op.dim() as u128;
        let value = std::mem::size_of::<S>() as u128;
        let free = SolvePlan {
            stored: false,
            matrix_bytes: 0,
            build_bytes: 0,
            vector_bytes: solver_vectors(k) as u128 * dim * value,
        };
        let stored = |runner: &Runner| -> CoreResult<SolvePlan> {
            let est = op.estimate(runner, interrupt)?;
            let size = csr_size(dim as u64, dim as u64, est.nnz, std::mem::size_of::<S>());
            Ok(SolvePlan {
                stored: true,
                matrix_bytes: size.csr_bytes,
                build_bytes: size.build_peak_bytes - size.csr_bytes + held as u128 * dim * value,
                ..free
            })
        };
        if op.is_stored() {
            return Ok(SolvePlan { stored: true, ..free });
        }
        // The product's tables: kept by the operator, used by the build as well.
        op.matrix_free(interrupt)?;
        match self.store {
            Some(false) => Ok(free),
            Some(true) => {
                let plan = stored(runner)?;
                if let Some(limit) = self.limit() {
                    let peak = plan.peak_bytes();
                    if peak > limit {
                        return Err(CoreError::TooLarge {
                            what: "storing this matrix for the solver (bytes at the peak of its \
                                   build and solve, estimated); solve matrix-free \
                                   (store_matrix=False) or allow more memory (memory_limit)"
                                .into(),
                            requested: peak,
                            limit,
                        });
                    }
                }
                Ok(plan)
            }
            None => {
                if op.fast_matrix_free(interrupt)? {
                    return Ok(free);
                }
                let plan = stored(runner)?;
                let Some(limit) = self.limit() else {
                    return Ok(plan);
                };
                if plan.peak_bytes() as f64 <= MEMORY_BUDGET * limit as f64 {
                    Ok(plan)
                } else {
                    Ok(free)
                }
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
    held: usize,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    solve: impl SolveOn<S, T>,
) -> CoreResult<(T, bool)> {
    let stored = storage.plan(op, k, held, runner, interrupt)?.stored;
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

/// Vectors of the space's dimension a solve holds before it starts: a resumed state
/// (three; the levels' saved basis is counted as that many, a lower bound), else the
/// start vector handed in.
fn held_vectors(start: bool, resume: bool) -> usize {
    if resume {
        3
    } else {
        usize::from(start)
    }
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
    let held = held_vectors(start.is_some(), watched.resume.is_some());
    let solve = Ground {
        start,
        opts,
        runner,
        interrupt,
        watch: watched.watch,
        resume: watched.resume,
    };
    run(op, storage, 1, held, runner, interrupt, solve)
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
    let held = held_vectors(start.is_some(), watched.resume.is_some());
    let solve = Lowest {
        k,
        start,
        opts,
        runner,
        interrupt,
        watch: watched.watch,
        resume: watched.resume,
    };
    run(op, storage, k, held, runner, interrupt, solve)
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
    fn the_plan_counts_the_matrix_its_build_and_the_vectors() {
        // Common practice, no source: the matrix is kept for the solve; its row counts
        // (and a start vector handed in) live only during the build, the solver's four
        // vectors only after it, so the peak holds the larger of the two.
        let runner = Runner::global();
        let stop = NoInterrupt;
        let ring = Ring::new(false);
        let dim = ring.dim() as u128;
        let est = ring.estimate(&runner, &stop).unwrap();
        assert!(est.exact);
        let size = csr_size(dim as u64, dim as u64, est.nnz, 8);
        for held in [0usize, 1] {
            let plan = storage(Some(true), None)
                .plan(&ring, 1, held, &runner, &stop)
                .unwrap();
            assert!(plan.stored);
            assert_eq!(plan.matrix_bytes, size.csr_bytes);
            assert_eq!(plan.build_bytes, 8 * (dim + 1) + held as u128 * 8 * dim);
            assert_eq!(plan.vector_bytes, 4 * 8 * dim);
            assert_eq!(
                plan.peak_bytes(),
                size.csr_bytes + plan.build_bytes.max(plan.vector_bytes)
            );
        }
        let free = storage(Some(false), None)
            .plan(&ring, 3, 0, &runner, &stop)
            .unwrap();
        assert_eq!((free.stored, free.matrix_bytes, free.build_bytes), (false, 0, 0));
        assert_eq!(free.vector_bytes, (2 * 3 + 9) * 8 * dim);
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
