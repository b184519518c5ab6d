//! The lowest `k` eigenpairs of a Hermitian map by thick-restart Lanczos (Wu & Simon
//! 2000, SIAM J. Matrix Anal. Appl. 22, 602) with full reorthogonalisation, locking of
//! converged levels, and a deflated re-check that recovers degenerate copies a
//! single-vector Krylov space cannot see.
//!
//! # Memory
//! One block of `m` basis vectors (`m` = `basis`, default `min(dim, 2k + 8)`) and one
//! work vector: `(m + 1) · dim` elements, refused up front through
//! [`crate::memory`] when they do not fit. Converged levels are *locked* inside the
//! block (its first columns), so the `k` results need no extra storage; the rest of
//! the block is the restart basis. On return the block is cut down to the `k` levels.
//!
//! # Method
//! - Expansion: `w = A v_j`, classical Gram–Schmidt of `w` against every locked and
//!   active column, repeated once when the norm dropped below `1/√2` of its value
//!   (Daniel, Gragg, Kaufman & Stewart 1976), so the basis stays orthonormal to
//!   working precision. The projected matrix keeps the thick-restart form: the
//!   Ritz values of the kept vectors on the diagonal, their couplings to the first new
//!   vector in one row and column (an arrowhead), then a tridiagonal part.
//! - Restart: when the block is full, the projected matrix is diagonalised (cyclic
//!   Jacobi), the basis is rotated onto its lowest Ritz vectors, those whose residual
//!   estimate `|β y_last|` meets `tol/2` are locked (lowest first), and about half of
//!   the free room is kept as Ritz vectors; the last Lanczos vector continues.
//! - Re-check: once `k` levels are locked and their true residuals `‖Av − θv‖`
//!   verified, a fresh run from a new seeded vector, orthogonal to the locked ones,
//!   finds the lowest level of the complement. If it lies below the highest locked
//!   level (a missed copy of a degenerate level, or a missed level), it is converged
//!   to `tol`, replaces that one, and the check repeats. Otherwise the check stops as
//!   soon as the lowest Ritz value is above the highest locked level with a residual
//!   estimate below `√tol` (its eigenvalue is then known to about `tol / gap`), and
//!   the answer stands. In exact arithmetic a
//!   single Krylov space holds one vector of each eigenspace; the fresh vector has
//!   weight on every remaining copy, so every copy that fits in `k` is found, and
//!   orthogonality of the locked block rules out duplicates.
//!
//! # Determinism
//! Every reduction sums fixed chunks of rows in chunk order and the small dense
//! problems run on one thread, so results are bit-identical for every thread count.

use crate::error::{CoreError, CoreResult};
use crate::lanczos::HermitianMap;
use crate::memory;
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::vecops;
use crate::watch::{Report, Restored, Snapshot, Unwatched, Watch};
use rayon::prelude::*;

/// Rows per reduction chunk (partial sums are added in chunk order).
const CHUNK: usize = 1 << 14;
/// A second Gram–Schmidt pass runs when the first leaves less than this fraction of
/// the norm (the `1/√2` criterion of Daniel, Gragg, Kaufman & Stewart 1976). A looser
/// `1e-2` was tried: it saved a pass per step but lost levels of highly degenerate
/// spectra (test `equal_frequency_modes_in_a_free_space`).
const REORTH: f64 = std::f64::consts::FRAC_1_SQRT_2;
/// Fraction of `tol` a residual estimate must reach before a level is locked.
const LOCK_FRACTION: f64 = 0.5;

/// Settings of [`lowest_levels`].
#[derive(Debug, Clone)]
pub struct LevelsOptions {
    /// A level is converged when `‖Av − θv‖ <= tol · max(1, |θ|)`.
    pub tol: f64,
    /// Most products of the iteration; the final residual check adds up to `k` more.
    pub max_products: usize,
    /// Seed of the start and re-check vectors and of the noise mixed into a start.
    pub seed: u64,
    /// Basis vectors `m` (0: `min(dim, 2k + 8)`); at least `k + 4` unless `dim` is smaller.
    pub basis: usize,
}

impl Default for LevelsOptions {
    fn default() -> Self {
        LevelsOptions {
            tol: 1e-9,
            max_products: 20_000,
            seed: 0,
            basis: 0,
        }
    }
}

/// What [`lowest_levels`] found.
#[derive(Debug, Clone)]
pub struct LevelsOutcome<S> {
    /// Rayleigh quotients of the returned vectors, ascending.
    pub energies: Vec<f64>,
    /// The `k` unit vectors, one after another (`dim` elements each), in the order of
    /// `energies`; mutually orthogonal to working precision.
    pub vectors: Vec<S>,
    /// `‖Av − θv‖` of each vector, measured with a final product.
    pub residuals: Vec<f64>,
    /// Products used, including the residual checks.
    pub products: usize,
    /// Thick restarts over all runs.
    pub restarts: usize,
    /// Deflated re-check runs (at least one when the complement is not empty).
    pub rechecks: usize,
    /// Whether every residual met `tol` and the re-check completed within the budget.
    pub converged: bool,
}

/// `Σ conj(v_i) w_i` with eight independent partial sums (vectorisable, fixed order).
#[inline]
fn dot_lanes<S: Scalar>(v: &[S], w: &[S]) -> S {
    let mut acc = [S::ZERO; 8];
    let (mut vc, mut wc) = (v.chunks_exact(8), w.chunks_exact(8));
    for (a, b) in (&mut vc).zip(&mut wc) {
        for l in 0..8 {
            acc[l] += a[l].conj() * b[l];
        }
    }
    let mut tail = S::ZERO;
    for (&a, &b) in vc.remainder().iter().zip(wc.remainder()) {
        tail += a.conj() * b;
    }
    ((acc[0] + acc[1]) + (acc[2] + acc[3])) + ((acc[4] + acc[5]) + (acc[6] + acc[7])) + tail
}

/// `Σ |w_i|²` with eight independent partial sums.
#[inline]
fn norm_sqr_lanes<S: Scalar>(w: &[S]) -> f64 {
    let mut acc = [0.0f64; 8];
    let mut wc = w.chunks_exact(8);
    for a in &mut wc {
        for l in 0..8 {
            acc[l] += a[l].norm_sqr();
        }
    }
    let tail: f64 = wc.remainder().iter().map(|x| x.norm_sqr()).sum();
    ((acc[0] + acc[1]) + (acc[2] + acc[3])) + ((acc[4] + acc[5]) + (acc[6] + acc[7])) + tail
}

/// Default basis size for `k` levels of a `dim`-dimensional map.
pub fn default_basis(k: usize, dim: usize) -> usize {
    (2 * k + 8).min(dim)
}

/// How a run of the thick-restart iteration ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum RunEnd {
    /// The target number of levels is locked.
    Locked,
    /// `max_products` was reached first.
    Budget,
    /// Re-check only: the complement's lowest Ritz value lies above the threshold
    /// and its residual estimate is below `√tol`, so its eigenvalue is known to about
    /// `tol / gap`: nothing lower remains.
    Confirmed,
}

/// The basis block, its projected matrix and the bookkeeping of one solve.
struct Krylov<'a, S: Scalar, A: HermitianMap<S>> {
    map: &'a A,
    runner: &'a Runner,
    interrupt: &'a dyn Interrupt,
    dim: usize,
    /// Columns of `basis`.
    m: usize,
    /// Column-major `dim × m`: column `j` at `[j * dim, (j + 1) * dim)`.
    basis: Vec<S>,
    /// Work vector; after a full expansion, the next (unit) Lanczos vector.
    w: Vec<S>,
    /// Locked columns `[0, locked)`.
    locked: usize,
    /// Ritz values of the locked columns (true Rayleigh quotients once verified).
    energies: Vec<f64>,
    /// True residuals of the locked columns (NaN until verified).
    residuals: Vec<f64>,
    /// Projected matrix of the active columns, `m × m` row-major (leading `na × na` used).
    t: Vec<f64>,
    /// Active columns with a completed expansion step or a kept Ritz vector.
    na: usize,
    /// Norm of the residual of the last expansion step (coupling to `w`).
    beta: f64,
    /// Largest `‖A v‖` seen: the scale for breakdown tests.
    anorm: f64,
    tol: f64,
    lock_tol: f64,
    /// During a re-check: the level a missed one would have to lie below.
    confirm_above: Option<f64>,
    max_products: usize,
    products: usize,
    restarts: usize,
    seed: u64,
    draws: u64,
    /// Receives a report after every product and, when it asks, a snapshot at the next
    /// thick restart of the first run.
    watch: &'a dyn Watch<S>,
    /// A snapshot was asked for and not yet saved.
    wanted: bool,
    /// The lowest residual estimate of the last Rayleigh–Ritz step (NaN before).
    estimate: f64,
}

impl<'a, S: Scalar, A: HermitianMap<S>> Krylov<'a, S, A> {
    fn col(&self, j: usize) -> &[S] {
        &self.basis[j * self.dim..(j + 1) * self.dim]
    }

    fn swap_cols(&mut self, a: usize, b: usize) {
        if a == b {
            return;
        }
        let (lo, hi) = (a.min(b), a.max(b));
        let d = self.dim;
        let (left, right) = self.basis.split_at_mut(hi * d);
        let x = &mut left[lo * d..(lo + 1) * d];
        let y = &mut right[..d];
        self.runner.install(|| {
            x.par_chunks_mut(CHUNK)
                .zip(y.par_chunks_mut(CHUNK))
                .for_each(|(p, q)| p.swap_with_slice(q));
        });
    }

    /// `h_j = ⟨v_j, w⟩` for the first `n` columns and `‖w‖`, in one pass.
    fn project(&self, n: usize) -> (Vec<S>, f64) {
        let (basis, w, dim) = (&self.basis, &self.w, self.dim);
        let parts: Vec<(Vec<S>, f64)> = self.runner.install(|| {
            w.par_chunks(CHUNK)
                .enumerate()
                .map(|(c, wc)| {
                    let start = c * CHUNK;
                    let h: Vec<S> = (0..n)
                        .map(|j| dot_lanes(&basis[j * dim + start..j * dim + start + wc.len()], wc))
                        .collect();
                    (h, norm_sqr_lanes(wc))
                })
                .collect()
        });
        let mut h = vec![S::ZERO; n];
        let mut nrm = 0.0;
        for (ph, pn) in parts {
            for (a, b) in h.iter_mut().zip(ph) {
                *a += b;
            }
            nrm += pn;
        }
        (h, nrm.sqrt())
    }

    /// `w ← w − Σ_j h_j v_j`; returns the new `‖w‖`.
    fn subtract(&mut self, h: &[S]) -> f64 {
        let (basis, dim) = (&self.basis, self.dim);
        let w = &mut self.w;
        let parts: Vec<f64> = self.runner.install(|| {
            w.par_chunks_mut(CHUNK)
                .enumerate()
                .map(|(c, wc)| {
                    let start = c * CHUNK;
                    let len = wc.len();
                    let col = |j: usize| &basis[j * dim + start..j * dim + start + len];
                    // Four columns per sweep over the chunk of `w`.
                    let mut j = 0;
                    while j + 4 <= h.len() {
                        let (h0, h1, h2, h3) = (h[j], h[j + 1], h[j + 2], h[j + 3]);
                        for ((((x, &a), &b), &c), &d) in wc
                            .iter_mut()
                            .zip(col(j))
                            .zip(col(j + 1))
                            .zip(col(j + 2))
                            .zip(col(j + 3))
                        {
                            *x = *x - (h0 * a + h1 * b) - (h2 * c + h3 * d);
                        }
                        j += 4;
                    }
                    for (jj, &hj) in h.iter().enumerate().skip(j) {
                        for (x, &v) in wc.iter_mut().zip(col(jj)) {
                            *x = *x - hj * v;
                        }
                    }
                    norm_sqr_lanes(wc)
                })
                .collect()
        });
        parts.iter().sum::<f64>().sqrt()
    }

    /// Orthogonalise `w` against the first `n` columns (one or two Gram–Schmidt
    /// passes). Returns (`h` summed over the passes, norm before, norm after).
    fn orthogonalize(&mut self, n: usize) -> (Vec<S>, f64, f64) {
        let (mut h, before) = self.project(n);
        let mut after = self.subtract(&h);
        if after < REORTH * before {
            let (h2, _) = self.project(n);
            after = self.subtract(&h2);
            for (a, b) in h.iter_mut().zip(h2) {
                *a += b;
            }
        }
        (h, before, after)
    }

    /// Put a fresh seeded vector, orthogonal to the first `n` columns, into `w` with
    /// unit norm. Returns `false` when the first `n` columns span the whole space.
    fn fresh_into_w(&mut self, n: usize) -> bool {
        self.draws += 1;
        let seed = vecops::splitmix64(self.seed ^ vecops::splitmix64(0xD1CE ^ self.draws));
        let w = &mut self.w;
        self.runner.install(|| vecops::fill_seeded(seed, w));
        let start = self.runner.install(|| vecops::norm(&self.w));
        let (_, _, mut after) = self.orthogonalize(n);
        if after <= 1e-8 * start {
            return false;
        }
        // A second full pass: a vector drawn against a nearly complete basis needs it.
        let (_, _, again) = self.orthogonalize(n);
        after = again;
        if after <= 1e-8 * start {
            return false;
        }
        let w = &mut self.w;
        self.runner.install(|| vecops::scale(1.0 / after, w));
        true
    }

    fn w_into_col(&mut self, j: usize, factor: f64) {
        let d = self.dim;
        let (w, col) = (&self.w, &mut self.basis[j * d..(j + 1) * d]);
        self.runner.install(|| {
            col.par_chunks_mut(CHUNK)
                .zip(w.par_chunks(CHUNK))
                .for_each(|(c, x)| c.iter_mut().zip(x).for_each(|(c, &x)| *c = x.scale(factor)))
        });
    }

    fn t_at(&mut self, i: usize, j: usize) -> &mut f64 {
        &mut self.t[i * self.m + j]
    }

    /// Thick-restart Lanczos on the active columns `[locked, m)` until `target`
    /// columns are locked or the product budget runs out. Column `locked + na` must
    /// hold the next unit vector, orthogonal to all before it, with the first `na`
    /// rows of `t` describing the kept Ritz vectors (arrowhead in row `na`).
    fn run(&mut self, target: usize) -> CoreResult<RunEnd> {
        loop {
            let p = self.locked;
            let room = (self.m - p).min(self.dim - p);
            // Expansion.
            let mut exhausted = false;
            let mut j = self.na;
            while j < room {
                if self.products >= self.max_products {
                    self.na = j;
                    return Ok(RunEnd::Budget);
                }
                let c = p + j;
                {
                    let d = self.dim;
                    let (x, w) = (&self.basis[c * d..(c + 1) * d], &mut self.w);
                    self.map.apply(x, w, self.runner, self.interrupt)?;
                }
                self.products += 1;
                self.wanted |= self.watch.step(&Report {
                    step: self.products,
                    products: self.products,
                    residual: self.estimate,
                })?;
                let (h, before, after) = self.orthogonalize(c + 1);
                self.anorm = self.anorm.max(before);
                *self.t_at(j, j) = h[c].re();
                let mut beta = after;
                // `w / factor` is the next unit vector.
                let mut factor = beta;
                if beta <= 1e-12 * self.anorm {
                    // Invariant subspace: continue with a fresh direction (coupling 0),
                    // or stop when the whole space is spanned.
                    if self.fresh_into_w(c + 1) {
                        beta = 0.0;
                        factor = 1.0;
                    } else {
                        exhausted = true;
                        self.beta = 0.0;
                        j += 1;
                        break;
                    }
                }
                if j + 1 < room {
                    *self.t_at(j, j + 1) = beta;
                    *self.t_at(j + 1, j) = beta;
                    self.w_into_col(c + 1, 1.0 / factor);
                } else {
                    // Kept in `w` for the restart.
                    let w = &mut self.w;
                    self.runner.install(|| vecops::scale(1.0 / factor, w));
                }
                self.beta = beta;
                j += 1;
            }
            self.na = j;
            // Rayleigh–Ritz on the projected matrix.
            let na = self.na;
            let (theta, y) = symmetric_eigen(&self.t, self.m, na);
            let need = target - p;
            self.estimate = (self.beta * y[na - 1]).abs();
            let mut nconv = 0;
            while nconv < need.min(na) {
                let estimate = (self.beta * y[nconv * na + na - 1]).abs();
                if exhausted || estimate <= self.lock_tol * theta[nconv].abs().max(1.0) {
                    nconv += 1;
                } else {
                    break;
                }
            }
            if let Some(bound) = self.confirm_above {
                let estimate = (self.beta * y[na - 1]).abs();
                if nconv == 0
                    && !exhausted
                    && theta[0] >= bound
                    && estimate <= self.tol.sqrt() * theta[0].abs().max(1.0)
                {
                    self.na = 0;
                    return Ok(RunEnd::Confirmed);
                }
            }
            let done = nconv == need || exhausted;
            let room_after = (self.m - p - nconv).min(self.dim - p - nconv);
            let left = need - nconv;
            let keep = if done {
                0
            } else {
                (left + room_after.saturating_sub(left) / 2)
                    .min(room_after.saturating_sub(2))
                    .min(na - nconv)
                    .max(left.min(na - nconv))
            };
            self.rotate(p, na, &y, nconv + keep);
            for &th in &theta[..nconv] {
                self.energies.push(th);
                self.residuals.push(f64::NAN);
            }
            self.locked = p + nconv;
            if done {
                self.na = 0;
                return Ok(RunEnd::Locked);
            }
            // Restart: kept Ritz values on the diagonal, couplings to the next vector.
            self.restarts += 1;
            if self.interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
            self.t.iter_mut().for_each(|v| *v = 0.0);
            for i in 0..keep {
                let s = self.beta * y[(nconv + i) * na + na - 1];
                *self.t_at(i, i) = theta[nconv + i];
                *self.t_at(i, keep) = s;
                *self.t_at(keep, i) = s;
            }
            self.na = keep;
            let next = self.locked + keep;
            self.w_into_col(next, 1.0);
            // A resumable point: the basis up to `next`, the arrowhead and the counters
            // describe the iteration completely (only in the first run: the re-check's
            // bookkeeping lives outside this struct).
            if self.wanted && self.confirm_above.is_none() {
                self.save(next + 1)?;
            }
        }
    }

    /// Hand the state at a thick restart to the watcher: the first `rows` columns.
    fn save(&mut self, rows: usize) -> CoreResult<()> {
        let report = Report {
            step: self.products,
            products: self.products,
            residual: self.estimate,
        };
        let snap = Snapshot {
            solver: "levels",
            integers: vec![
                ("locked", self.locked as u64),
                ("active", self.na as u64),
                ("columns", self.m as u64),
                ("products", self.products as u64),
                ("restarts", self.restarts as u64),
                ("draws", self.draws),
            ],
            numbers: vec![
                ("energies", self.energies.clone()),
                ("residuals", self.residuals.clone()),
                ("projected", self.t.clone()),
                ("scales", vec![self.anorm, self.lock_tol, self.estimate]),
            ],
            vectors: vec![("basis", rows, &self.basis[..rows * self.dim])],
        };
        self.watch.save(&report, &snap)?;
        self.wanted = false;
        Ok(())
    }

    /// Put a saved state (see [`Krylov::save`]) in place of the start.
    fn restore(&mut self, mut saved: Restored<S>) -> CoreResult<()> {
        let locked = saved.integer("locked")?;
        let na = saved.integer("active")?;
        let rows = locked + na + 1;
        let energies = saved.numbers("energies")?.to_vec();
        let residuals = saved.numbers("residuals")?.to_vec();
        let t = saved.numbers("projected")?.to_vec();
        let scales = saved.numbers("scales")?.to_vec();
        if saved.integer("columns")? != self.m
            || rows > self.m.min(self.dim)
            || energies.len() != locked
            || residuals.len() != locked
            || t.len() != self.m * self.m
            || scales.len() != 3
        {
            return Err(CoreError::InvalidArgument(
                "the saved state of the levels solver does not fit this problem (basis size, \
                 locked levels or projected matrix differ); delete the checkpoint and run again"
                    .into(),
            ));
        }
        let block = saved.take_vector("basis", rows * self.dim)?;
        self.basis[..rows * self.dim].copy_from_slice(&block);
        drop(block);
        self.locked = locked;
        self.na = na;
        self.energies = energies;
        self.residuals = residuals;
        self.t = t;
        self.anorm = scales[0];
        self.lock_tol = scales[1];
        self.estimate = scales[2];
        self.products = saved.integer("products")?;
        self.restarts = saved.integer("restarts")?;
        self.draws = saved.integer("draws")? as u64;
        Ok(())
    }

    /// Rotate columns `[p, p + na)` onto `cols` Ritz vectors (`y` column-major `na × na`).
    fn rotate(&mut self, p: usize, na: usize, y: &[f64], cols: usize) {
        if cols == 0 {
            return;
        }
        let d = self.dim;
        let active = &mut self.basis[p * d..(p + na) * d];
        let chunks = d.div_ceil(CHUNK);
        let mut pieces: Vec<Vec<&mut [S]>> = (0..chunks).map(|_| Vec::with_capacity(na)).collect();
        for column in active.chunks_mut(d) {
            for (c, piece) in column.chunks_mut(CHUNK).enumerate() {
                pieces[c].push(piece);
            }
        }
        self.runner.install(|| {
            pieces.into_par_iter().for_each(|mut cols_of_chunk| {
                // Sub-blocks of rows small enough for the new values to stay in cache;
                // each new column is a sum of whole old columns (vectorisable).
                const ROWS: usize = 512;
                let len = cols_of_chunk[0].len();
                let mut out = vec![S::ZERO; cols * ROWS];
                let mut first = 0;
                while first < len {
                    let rows = ROWS.min(len - first);
                    for (i, o) in out.chunks_mut(ROWS).enumerate() {
                        let o = &mut o[..rows];
                        o.fill(S::ZERO);
                        for (piece, &coef) in cols_of_chunk.iter().zip(&y[i * na..(i + 1) * na]) {
                            for (x, &v) in o.iter_mut().zip(&piece[first..first + rows]) {
                                *x += v.scale(coef);
                            }
                        }
                    }
                    for (piece, o) in cols_of_chunk.iter_mut().zip(out.chunks(ROWS)) {
                        piece[first..first + rows].copy_from_slice(&o[..rows]);
                    }
                    first += rows;
                }
            })
        });
    }

    /// Measure `θ = ⟨v, Av⟩` and `‖Av − θv‖` of locked column `j` (one product).
    fn verify(&mut self, j: usize) -> CoreResult<()> {
        {
            let d = self.dim;
            let (x, w) = (&self.basis[j * d..(j + 1) * d], &mut self.w);
            self.map.apply(x, w, self.runner, self.interrupt)?;
        }
        self.products += 1;
        let x = self.col(j);
        let theta = self.runner.install(|| vecops::dot_re(x, &self.w));
        let w = &mut self.w;
        let x = &self.basis[j * self.dim..(j + 1) * self.dim];
        self.runner.install(|| vecops::axpy(-theta, x, w));
        let r = self.runner.install(|| vecops::norm(&self.w));
        self.energies[j] = theta;
        self.residuals[j] = r;
        Ok(())
    }

    fn passes(&self, j: usize) -> bool {
        self.residuals[j] <= self.tol * self.energies[j].abs().max(1.0)
    }

    /// Unit vector in column `locked`, orthogonal to the locked columns, built from
    /// the columns `[locked, locked + extra)` summed (or fresh noise when `extra` is 0
    /// or they vanish). Resets the active part.
    fn restart_from(&mut self, extra: usize) -> bool {
        let p = self.locked;
        let mut have = false;
        if extra > 0 {
            let d = self.dim;
            let (w, basis) = (&mut self.w, &self.basis);
            self.runner.install(|| {
                vecops::copy(&basis[p * d..(p + 1) * d], w);
                for e in 1..extra {
                    vecops::axpy(1.0, &basis[(p + e) * d..(p + e + 1) * d], w);
                }
            });
            let start = self.runner.install(|| vecops::norm(&self.w));
            if start > 0.0 {
                self.orthogonalize(p);
                let (_, _, after) = self.orthogonalize(p);
                if after > 1e-8 * start {
                    let w = &mut self.w;
                    self.runner.install(|| vecops::scale(1.0 / after, w));
                    have = true;
                }
            }
        }
        if !have && !self.fresh_into_w(p) {
            return false;
        }
        self.w_into_col(p, 1.0);
        self.na = 0;
        self.t.iter_mut().for_each(|v| *v = 0.0);
        true
    }

    /// Run until `target` levels are locked with verified residuals (re-running from
    /// the failures with a stricter lock tolerance), or the budget runs out.
    fn lock_verified(&mut self, target: usize) -> CoreResult<RunEnd> {
        loop {
            let first = self.locked;
            match self.run(target)? {
                RunEnd::Locked => {}
                other => return Ok(other),
            }
            // Every column locked in this run, and any a resumed run locked before its
            // snapshot (their residuals are still unmeasured).
            let first = (0..first).find(|&j| self.residuals[j].is_nan()).unwrap_or(first);
            for j in first..self.locked {
                self.verify(j)?;
            }
            let failed: Vec<usize> = (first..self.locked).filter(|&j| !self.passes(j)).collect();
            if failed.is_empty() {
                return Ok(RunEnd::Locked);
            }
            // Move the failures to the end of the locked block and restart from them.
            let mut end = self.locked;
            for &j in failed.iter().rev() {
                end -= 1;
                self.swap_cols(j, end);
                self.energies.swap(j, end);
                self.residuals.swap(j, end);
            }
            let n = failed.len();
            self.locked -= n;
            self.energies.truncate(self.locked);
            self.residuals.truncate(self.locked);
            self.lock_tol *= 0.1;
            if !self.restart_from(n) {
                return Ok(RunEnd::Locked);
            }
        }
    }

    /// After the budget ran out mid-run: take the lowest Ritz vectors of the active
    /// part (or fresh orthogonal vectors) as unconverged levels until `k` are locked.
    fn fill_unconverged(&mut self, k: usize) -> CoreResult<()> {
        let p = self.locked;
        let na = self.na;
        if na > 0 {
            let (theta, y) = symmetric_eigen(&self.t, self.m, na);
            let take = (k - p).min(na);
            self.rotate(p, na, &y, take);
            for &th in &theta[..take] {
                self.energies.push(th);
                self.residuals.push(f64::NAN);
            }
            self.locked += take;
        }
        while self.locked < k {
            let p = self.locked;
            if !self.fresh_into_w(p) {
                break;
            }
            self.w_into_col(p, 1.0);
            self.energies.push(f64::NAN);
            self.residuals.push(f64::NAN);
            self.locked += 1;
        }
        for j in 0..self.locked {
            if self.residuals[j].is_nan() {
                self.verify(j)?;
            }
        }
        Ok(())
    }
}

/// Lowest `k` eigenpairs of a Hermitian map, every copy of a degenerate level that
/// fits in `k` included (see the module documentation for the method and memory).
///
/// `start` is an optional warm start: one vector (`dim` elements) or a block of `b`
/// vectors one after another (`b · dim` elements). A block is summed (each vector
/// normalised) into one start vector; then [`vecops::START_NOISE`] of seeded noise is
/// mixed in, so a start with no weight on some symmetry sector still reaches the
/// levels there. Without `start`, a seeded vector is used. The outcome depends only
/// on the inputs and `opts.seed`, never on the thread count.
///
/// # Errors
/// [`CoreError::InvalidArgument`] for `k = 0`, `k > dim`, a bad tolerance or basis,
/// or a zero / non-finite start; [`CoreError::Shape`] for a start whose length is not
/// a multiple of `dim`; [`CoreError::TooLarge`] when the basis does not fit in memory;
/// [`CoreError::Interrupted`] when `interrupt` fires.
pub fn lowest_levels<S: Scalar, A: HermitianMap<S>>(
    map: &A,
    k: usize,
    start: Option<Vec<S>>,
    opts: &LevelsOptions,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<LevelsOutcome<S>> {
    lowest_levels_watched(map, k, start, opts, runner, interrupt, &Unwatched, None)
}

/// [`lowest_levels`] reporting to `watch` after every product and, when it asks,
/// handing it the resumable state at the next thick restart of the first run (the one
/// that locks the `k` levels; the deflated re-check after it is short and not saved):
/// the locked and kept columns with the next Lanczos vector (`basis`, `locked +
/// active + 1` vectors), the projected matrix, the locked energies and the counters. Given
/// such a state as `resume` (same map, `k` and options; `start` is then ignored), the
/// solver continues from it and returns what an uninterrupted run returns, bit for bit.
///
/// # Errors
/// As [`lowest_levels`]; whatever `watch` returns; [`CoreError::InvalidArgument`] or
/// [`CoreError::Shape`] for a state that does not fit this problem.
#[allow(clippy::too_many_arguments)]
pub fn lowest_levels_watched<S: Scalar, A: HermitianMap<S>>(
    map: &A,
    k: usize,
    start: Option<Vec<S>>,
    opts: &LevelsOptions,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    watch: &dyn Watch<S>,
    resume: Option<Restored<S>>,
) -> CoreResult<LevelsOutcome<S>> {
    let dim = map.dim();
    if !(opts.tol > 0.0 && opts.tol.is_finite()) {
        return Err(CoreError::InvalidArgument(format!(
            "tol must be a positive finite number; got {}",
            opts.tol
        )));
    }
    if k == 0 || k > dim {
        return Err(CoreError::InvalidArgument(format!(
            "k={k} levels requested from a space of dimension {dim}; pass 1 <= k <= dim"
        )));
    }
    let m = if opts.basis == 0 {
        default_basis(k, dim)
    } else {
        opts.basis.min(dim)
    };
    if m < (k + 4).min(dim) {
        return Err(CoreError::InvalidArgument(format!(
            "basis={} is too small for k={k} levels; pass at least k + 4 = {} (or 0 for \
             the default 2k + 8)",
            opts.basis,
            k + 4
        )));
    }
    let size = std::mem::size_of::<S>() as u128;
    memory::ensure_room(
        (m as u128 + 1) * dim as u128 * size,
        &format!(
            "the Lanczos basis for {k} levels ({} vectors of the space's dimension)",
            m + 1
        ),
    )?;
    let what = "the Lanczos basis";
    let basis = memory::try_filled(
        m.checked_mul(dim).ok_or_else(|| CoreError::TooLarge {
            what: what.into(),
            requested: m as u128 * dim as u128 * size,
            limit: usize::MAX as u128,
        })?,
        S::ZERO,
        what,
    )?;
    let w = memory::try_filled(dim, S::ZERO, "a Lanczos work vector")?;
    let mut kr = Krylov {
        map,
        runner,
        interrupt,
        dim,
        m,
        basis,
        w,
        locked: 0,
        energies: Vec::with_capacity(k + 1),
        residuals: Vec::with_capacity(k + 1),
        t: vec![0.0; m * m],
        na: 0,
        beta: 0.0,
        anorm: f64::MIN_POSITIVE,
        tol: opts.tol,
        lock_tol: LOCK_FRACTION * opts.tol,
        confirm_above: None,
        max_products: opts.max_products,
        products: 0,
        restarts: 0,
        seed: opts.seed,
        draws: 0,
        watch,
        wanted: false,
        estimate: f64::NAN,
    };
    // Start vector in column 0 (or the saved state).
    match (resume, start) {
        (Some(saved), _) => kr.restore(saved)?,
        (None, Some(s)) => {
            if s.is_empty() || s.len() % dim != 0 {
                return Err(CoreError::Shape(format!(
                    "start has {} elements; pass one vector of the space's dimension {dim} \
                     or a block of such vectors",
                    s.len()
                )));
            }
            if s.iter().any(|x| !x.is_finite()) {
                return Err(CoreError::InvalidArgument("start contains NaN or inf".into()));
            }
            let col0 = &mut kr.basis[..dim];
            for v in s.chunks(dim) {
                let n = runner.install(|| vecops::norm(v));
                if n > 0.0 {
                    runner.install(|| vecops::axpy(1.0 / n, v, col0));
                }
            }
            drop(s);
            let (col0, w) = (&mut kr.basis[..dim], &mut kr.w);
            if !runner.install(|| vecops::mix_start_noise(col0, w, opts.seed)) {
                return Err(CoreError::InvalidArgument(
                    "start is zero; pass a nonzero vector or none".into(),
                ));
            }
        }
        (None, None) => {
            kr.restart_from(0);
        }
    }
    let mut converged = true;
    let mut rechecks = 0;
    if kr.lock_verified(k)? == RunEnd::Budget {
        kr.fill_unconverged(k)?;
        converged = false;
    } else {
        // Deflated re-check: is any level of the complement below the highest locked one?
        while kr.locked < dim {
            if !kr.restart_from(0) {
                break;
            }
            rechecks += 1;
            let highest = kr.energies[..k].iter().copied().fold(f64::NEG_INFINITY, f64::max);
            kr.confirm_above = Some(highest - opts.tol * highest.abs().max(1.0));
            match kr.lock_verified(k + 1)? {
                RunEnd::Budget => {
                    converged = false;
                    break;
                }
                RunEnd::Confirmed => break,
                RunEnd::Locked => {}
            }
            if kr.locked <= k {
                break;
            }
            let (found, found_energy) = (kr.locked - 1, kr.energies[kr.locked - 1]);
            let (highest, highest_energy) =
                kr.energies[..found]
                    .iter()
                    .copied()
                    .enumerate()
                    .fold(
                        (0, f64::NEG_INFINITY),
                        |a, (i, e)| if e > a.1 { (i, e) } else { a },
                    );
            let margin = opts.tol * highest_energy.abs().max(1.0);
            if found_energy < highest_energy - margin {
                // A level was missed: keep it in place of the highest, check again.
                kr.swap_cols(highest, found);
                kr.energies.swap(highest, found);
                kr.residuals.swap(highest, found);
            }
            kr.locked = k;
            kr.energies.truncate(k);
            kr.residuals.truncate(k);
            if found_energy >= highest_energy - margin {
                break;
            }
        }
        if kr.locked > k {
            kr.locked = k;
            kr.energies.truncate(k);
            kr.residuals.truncate(k);
        }
    }
    // Ascending order, by permuting columns in place.
    let mut order: Vec<usize> = (0..k).collect();
    order.sort_by(|&a, &b| kr.energies[a].total_cmp(&kr.energies[b]).then(a.cmp(&b)));
    let mut pos: Vec<usize> = (0..k).collect(); // pos[i]: column now holding original i
    let mut at: Vec<usize> = (0..k).collect(); // at[c]: original index in column c
    for (target, &orig) in order.iter().enumerate() {
        let c = pos[orig];
        if c != target {
            kr.swap_cols(c, target);
            let displaced = at[target];
            at.swap(c, target);
            pos[orig] = target;
            pos[displaced] = c;
        }
    }
    let energies: Vec<f64> = order.iter().map(|&i| kr.energies[i]).collect();
    let residuals: Vec<f64> = order.iter().map(|&i| kr.residuals[i]).collect();
    converged &= (0..k).all(|i| residuals[i] <= opts.tol * energies[i].abs().max(1.0));
    let products = kr.products;
    let restarts = kr.restarts;
    let mut vectors = kr.basis;
    drop(kr.w);
    vectors.truncate(k * dim);
    vectors.shrink_to_fit();
    Ok(LevelsOutcome {
        energies,
        vectors,
        residuals,
        products,
        restarts,
        rechecks,
        converged,
    })
}

/// Eigenvalues (ascending) and eigenvectors (column-major `n × n`, vector `i` at
/// `[i n, (i + 1) n)`) of the leading `n × n` block of the symmetric row-major matrix
/// `a` with row stride `stride`, by cyclic Jacobi rotations (Golub & Van Loan, Matrix
/// Computations, 4th ed., §8.5).
fn symmetric_eigen(a: &[f64], stride: usize, n: usize) -> (Vec<f64>, Vec<f64>) {
    let mut m = vec![0.0; n * n];
    for i in 0..n {
        for j in 0..n {
            m[i * n + j] = 0.5 * (a[i * stride + j] + a[j * stride + i]);
        }
    }
    let mut v = vec![0.0; n * n];
    for i in 0..n {
        v[i * n + i] = 1.0;
    }
    let frob: f64 = m.iter().map(|x| x * x).sum::<f64>().sqrt();
    for _sweep in 0..100 {
        let off: f64 = (0..n)
            .flat_map(|i| (0..n).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| m[i * n + j] * m[i * n + j])
            .sum::<f64>()
            .sqrt();
        if off <= 1e-16 * frob || off == 0.0 {
            break;
        }
        for p in 0..n {
            for q in p + 1..n {
                let apq = m[p * n + q];
                if apq == 0.0 {
                    continue;
                }
                let (app, aqq) = (m[p * n + p], m[q * n + q]);
                let tau = (aqq - app) / (2.0 * apq);
                let t = tau.signum() / (tau.abs() + (1.0 + tau * tau).sqrt());
                let t = if tau == 0.0 { 1.0 } else { t };
                let c = 1.0 / (1.0 + t * t).sqrt();
                let s = t * c;
                for k in 0..n {
                    let (mkp, mkq) = (m[k * n + p], m[k * n + q]);
                    m[k * n + p] = c * mkp - s * mkq;
                    m[k * n + q] = s * mkp + c * mkq;
                }
                for k in 0..n {
                    let (mpk, mqk) = (m[p * n + k], m[q * n + k]);
                    m[p * n + k] = c * mpk - s * mqk;
                    m[q * n + k] = s * mpk + c * mqk;
                }
                // Columns of v are the eigenvectors; v is stored column-major.
                for k in 0..n {
                    let (vp, vq) = (v[p * n + k], v[q * n + k]);
                    v[p * n + k] = c * vp - s * vq;
                    v[q * n + k] = s * vp + c * vq;
                }
            }
        }
    }
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| m[a * n + a].total_cmp(&m[b * n + b]).then(a.cmp(&b)));
    let theta = order.iter().map(|&i| m[i * n + i]).collect();
    let mut y = Vec::with_capacity(n * n);
    for &i in &order {
        y.extend_from_slice(&v[i * n..(i + 1) * n]);
    }
    (theta, y)
}

#[cfg(test)]
#[allow(clippy::needless_range_loop)]
mod tests {
    use super::*;
    use crate::parallel::NoInterrupt;
    use num_complex::Complex64;

    /// A dense Hermitian matrix as a map (row-major).
    struct Dense<S> {
        n: usize,
        a: Vec<S>,
    }
    impl<S: Scalar> HermitianMap<S> for Dense<S> {
        fn dim(&self) -> usize {
            self.n
        }
        fn apply(&self, x: &[S], y: &mut [S], _: &Runner, _: &dyn Interrupt) -> CoreResult<()> {
            for (i, yi) in y.iter_mut().enumerate() {
                let mut acc = S::ZERO;
                for (a, &xj) in self.a[i * self.n..(i + 1) * self.n].iter().zip(x) {
                    acc += *a * xj;
                }
                *yi = acc;
            }
            Ok(())
        }
    }

    /// One particle hopping on a ring of `l` sites with amplitude −j (sparse product).
    struct Ring {
        l: usize,
        j: f64,
    }
    impl HermitianMap<f64> for Ring {
        fn dim(&self) -> usize {
            self.l
        }
        fn apply(&self, x: &[f64], y: &mut [f64], _: &Runner, _: &dyn Interrupt) -> CoreResult<()> {
            let l = self.l;
            for (i, yi) in y.iter_mut().enumerate() {
                *yi = -self.j * (x[(i + 1) % l] + x[(i + l - 1) % l]);
            }
            Ok(())
        }
    }

    /// A ring with a seeded on-site potential in [0, w): well-separated low levels.
    struct Disordered {
        ring: Ring,
        potential: Vec<f64>,
    }
    impl HermitianMap<f64> for Disordered {
        fn dim(&self) -> usize {
            self.ring.l
        }
        fn apply(&self, x: &[f64], y: &mut [f64], r: &Runner, s: &dyn Interrupt) -> CoreResult<()> {
            self.ring.apply(x, y, r, s)?;
            for ((yi, &xi), &v) in y.iter_mut().zip(x).zip(&self.potential) {
                *yi += v * xi;
            }
            Ok(())
        }
    }

    fn solve<S: Scalar, A: HermitianMap<S>>(map: &A, k: usize, threads: usize) -> LevelsOutcome<S> {
        let runner = Runner::with_threads(Some(threads)).unwrap();
        lowest_levels(map, k, None, &LevelsOptions::default(), &runner, &NoInterrupt).unwrap()
    }

    fn ring_levels(l: usize, j: f64) -> Vec<f64> {
        // Bloch waves on a ring: ε(q) = −2J cos(2πq/L) (common practice, no source).
        let mut e: Vec<f64> = (0..l)
            .map(|q| -2.0 * j * (2.0 * std::f64::consts::PI * q as f64 / l as f64).cos())
            .collect();
        e.sort_by(f64::total_cmp);
        e
    }

    fn check_orthonormal<S: Scalar>(v: &[S], dim: usize, k: usize) {
        for a in 0..k {
            for b in 0..k {
                let (x, y) = (&v[a * dim..(a + 1) * dim], &v[b * dim..(b + 1) * dim]);
                let d: f64 = x.iter().zip(y).map(|(&p, &q)| (p.conj() * q).re()).sum();
                let expect = if a == b { 1.0 } else { 0.0 };
                assert!((d - expect).abs() < 1e-9, "overlap ({a},{b}) = {d}");
            }
        }
    }

    #[test]
    fn ring_doublets_all_found() {
        // L = 400: every excited level is a ±q doublet; k = 7 takes the singlet and
        // three doublets, k = 6 cuts one doublet in half.
        for k in [6, 7] {
            let map = Ring { l: 400, j: 1.0 };
            let out = solve(&map, k, 2);
            let exact = ring_levels(400, 1.0);
            assert!(out.converged, "{:?}", out.residuals);
            for i in 0..k {
                assert!(
                    (out.energies[i] - exact[i]).abs() < 1e-9,
                    "k={k} level {i}: {:?}",
                    out.energies
                );
                assert!(out.residuals[i] <= 1e-9 * out.energies[i].abs().max(1.0));
            }
            check_orthonormal(&out.vectors, 400, k);
        }
    }

    #[test]
    fn same_bits_for_any_thread_count() {
        // Spans several reduction chunks, so thread counts split the work differently.
        let l = 40_000;
        let mut potential = vec![0.0; l];
        vecops::fill_seeded(7, &mut potential);
        let map = Disordered {
            ring: Ring { l, j: 0.7 },
            potential: potential.iter().map(|v| 8.0 * v).collect(),
        };
        let one = solve(&map, 3, 1);
        let two = solve(&map, 3, 2);
        assert_eq!(
            one.energies.iter().map(|e| e.to_bits()).collect::<Vec<_>>(),
            two.energies.iter().map(|e| e.to_bits()).collect::<Vec<_>>()
        );
        assert_eq!(one.vectors, two.vectors);
        assert_eq!(one.products, two.products);
    }

    #[test]
    fn small_dimensions_are_exact() {
        // Path graph of 5 sites (hopping −1): −2 cos(qπ/6), q = 1..5 (common practice,
        // no source); every k up to the dimension, basis larger than the space.
        let n = 5;
        let mut a = vec![0.0; n * n];
        for i in 0..n - 1 {
            a[i * n + i + 1] = -1.0;
            a[(i + 1) * n + i] = -1.0;
        }
        let map = Dense { n, a };
        for k in 1..=n {
            let out = solve(&map, k, 1);
            for (q, e) in out.energies.iter().enumerate() {
                let exact = -2.0 * ((q + 1) as f64 * std::f64::consts::PI / 6.0).cos();
                assert!((e - exact).abs() < 1e-12, "k={k}: {:?}", out.energies);
            }
            assert!(out.converged);
            check_orthonormal(&out.vectors, n, k);
        }
    }

    #[test]
    fn complex_hermitian_with_flux() {
        // Ring of 9 sites threaded by flux φ: hopping −e^{iφ} one way; levels
        // −2 cos(2πq/L + φ) (Peierls substitution; common practice, no source).
        let (l, phi) = (9usize, 0.3f64);
        let mut a = vec![Complex64::new(0.0, 0.0); l * l];
        for i in 0..l {
            let jn = (i + 1) % l;
            a[i * l + jn] += -Complex64::from_polar(1.0, phi);
            a[jn * l + i] += -Complex64::from_polar(1.0, -phi);
        }
        let map = Dense { n: l, a };
        let out = solve(&map, 4, 2);
        let mut exact: Vec<f64> = (0..l)
            .map(|q| -2.0 * (2.0 * std::f64::consts::PI * q as f64 / l as f64 + phi).cos())
            .collect();
        exact.sort_by(f64::total_cmp);
        for i in 0..4 {
            assert!(
                (out.energies[i] - exact[i]).abs() < 1e-10,
                "{:?} vs {:?}",
                out.energies,
                exact
            );
        }
        check_orthonormal(&out.vectors, l, 4);
    }

    #[test]
    fn start_in_one_sector_still_finds_the_ground_state() {
        // Start exactly on the antisymmetric q = ±1 combination sin(2πi/L): with no
        // noise, its Krylov space never sees the q = 0 ground state (ε = −2J).
        let l = 300;
        let map = Ring { l, j: 1.0 };
        let start: Vec<f64> = (0..l)
            .map(|i| (2.0 * std::f64::consts::PI * i as f64 / l as f64).sin())
            .collect();
        let out = lowest_levels(
            &map,
            2,
            Some(start),
            &LevelsOptions::default(),
            &Runner::global(),
            &NoInterrupt,
        )
        .unwrap();
        let exact = ring_levels(l, 1.0);
        assert!((out.energies[0] - exact[0]).abs() < 1e-9, "{:?}", out.energies);
        assert!((out.energies[1] - exact[1]).abs() < 1e-9, "{:?}", out.energies);
    }

    #[test]
    fn budget_exhaustion_reports_unconverged() {
        let map = Ring { l: 2000, j: 1.0 };
        let opts = LevelsOptions {
            max_products: 30,
            ..Default::default()
        };
        let out = lowest_levels(&map, 3, None, &opts, &Runner::global(), &NoInterrupt).unwrap();
        assert!(!out.converged);
        assert_eq!(out.energies.len(), 3);
        assert_eq!(out.vectors.len(), 3 * 2000);
        assert!(out.energies.windows(2).all(|w| w[0] <= w[1]));
    }

    #[test]
    fn bad_arguments_are_refused() {
        let map = Ring { l: 20, j: 1.0 };
        let run = |k, opts: LevelsOptions, start: Option<Vec<f64>>| {
            lowest_levels(&map, k, start, &opts, &Runner::global(), &NoInterrupt)
        };
        assert!(matches!(
            run(0, LevelsOptions::default(), None),
            Err(CoreError::InvalidArgument(_))
        ));
        assert!(matches!(
            run(21, LevelsOptions::default(), None),
            Err(CoreError::InvalidArgument(_))
        ));
        let small = LevelsOptions {
            basis: 5,
            ..Default::default()
        };
        assert!(matches!(run(3, small, None), Err(CoreError::InvalidArgument(_))));
        assert!(matches!(
            run(2, LevelsOptions::default(), Some(vec![1.0; 7])),
            Err(CoreError::Shape(_))
        ));
        assert!(matches!(
            run(2, LevelsOptions::default(), Some(vec![0.0; 20])),
            Err(CoreError::InvalidArgument(_))
        ));
    }

    #[test]
    fn equal_frequency_modes_in_a_free_space() {
        // Three modes of frequency ω coupled in a ring by g: normal modes ω + 2g,
        // ω − g, ω − g (circulant; common practice, no source). Up to the cutoff the
        // truncation does not act, so the lowest levels are 0, (ω−g)×2, 2(ω−g)×3, ...
        use crate::lanczos::FockMap;
        use crate::space::FockSpace;
        use crate::terms::{Operator, RawTerm};
        let (omega, g) = (1.0, 0.3);
        let space = FockSpace::new(vec![4; 3], None, None, None).unwrap();
        let mut terms = Vec::new();
        for i in 0..3 {
            let j = (i + 1) % 3;
            let (a, b) = (i.min(j), i.max(j));
            terms.push(RawTerm::new(omega, 0.0, vec![(i, 1, 1)]));
            terms.push(RawTerm::new(g, 0.0, vec![(a, 1, 0), (b, 0, 1)]));
            terms.push(RawTerm::new(g, 0.0, vec![(a, 0, 1), (b, 1, 0)]));
        }
        let op = Operator::<f64>::new(&space, &terms).unwrap();
        let map = FockMap::new(&space, &op);
        let low = omega - g;
        let exact = [0.0, low, low, 2.0 * low, 2.0 * low, 2.0 * low, omega + 2.0 * g];
        for seed in 0..4 {
            let opts = LevelsOptions {
                seed,
                ..Default::default()
            };
            let out = lowest_levels(&map, 6, None, &opts, &Runner::global(), &NoInterrupt).unwrap();
            assert!(
                out.converged,
                "seed {seed}: {:?} {:?}",
                out.energies, out.residuals
            );
            for i in 0..6 {
                assert!((out.energies[i] - exact[i]).abs() < 1e-9, "{:?}", out.energies);
            }
            check_orthonormal(&out.vectors, space.dim() as usize, 6);
        }
    }

    #[test]
    fn jacobi_matches_a_known_spectrum() {
        // [[2,1,0],[1,2,1],[0,1,2]]: 2 − √2, 2, 2 + √2 (common practice, no source).
        let a = [2.0, 1.0, 0.0, 1.0, 2.0, 1.0, 0.0, 1.0, 2.0];
        let (theta, y) = symmetric_eigen(&a, 3, 3);
        let s = 2f64.sqrt();
        for (t, e) in theta.iter().zip([2.0 - s, 2.0, 2.0 + s]) {
            assert!((t - e).abs() < 1e-14);
        }
        // A y_0 = θ_0 y_0.
        for r in 0..3 {
            let ay: f64 = (0..3).map(|c| a[r * 3 + c] * y[c]).sum();
            assert!((ay - theta[0] * y[r]).abs() < 1e-14);
        }
    }
    #[test]
    fn a_run_stopped_at_a_snapshot_resumes_to_the_same_bits() {
        // Common practice, no source: the resumed run repeats the arithmetic of the
        // uninterrupted one from the saved thick restart on.
        use crate::watch::Capture;
        let l = 3000;
        let mut potential = vec![0.0; l];
        vecops::fill_seeded(11, &mut potential);
        let map = Disordered {
            ring: Ring { l, j: 1.0 },
            potential: potential.iter().map(|v| 2.0 * v).collect(),
        };
        let opts = LevelsOptions::default();
        let whole = lowest_levels(&map, 3, None, &opts, &Runner::global(), &NoInterrupt).unwrap();
        assert!(whole.restarts > 3, "too easy a test: {} restarts", whole.restarts);
        for after in [5, whole.products / 2] {
            let capture = Capture::new(after);
            let stopped = lowest_levels_watched(
                &map,
                3,
                None,
                &opts,
                &Runner::global(),
                &NoInterrupt,
                &capture,
                None,
            );
            assert!(matches!(stopped, Err(CoreError::Interrupted)));
            let saved = capture.saved.borrow_mut().take().expect("a snapshot");
            let again = lowest_levels_watched(
                &map,
                3,
                None,
                &opts,
                &Runner::global(),
                &NoInterrupt,
                &Unwatched,
                Some(saved),
            )
            .unwrap();
            assert_eq!(
                whole.energies.iter().map(|e| e.to_bits()).collect::<Vec<_>>(),
                again.energies.iter().map(|e| e.to_bits()).collect::<Vec<_>>()
            );
            assert_eq!(whole.vectors, again.vectors);
            assert_eq!(whole.products, again.products);
        }
    }
}
