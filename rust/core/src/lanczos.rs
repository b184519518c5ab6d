//! Low-memory ground state by the Lanczos iteration (Lanczos 1950), keeping four
//! vectors: a first pass collects the tridiagonal coefficients until the lowest Ritz
//! pair converges, a second pass regenerates the Krylov vectors from the stored
//! coefficients to assemble the Ritz vector, and a final product measures the true
//! residual ‖Hψ − Eψ‖. If that misses the tolerance the iteration restarts from ψ.

use crate::error::{CoreError, CoreResult};
use crate::matvec::Product;
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::space::FockSpace;
use crate::terms::Operator;
use crate::tridiag;
use crate::vecops;
use crate::watch::{Report, Restored, Snapshot, Unwatched, Watch};

/// Something that computes `y = A x` for a Hermitian `A`.
pub trait HermitianMap<S: Scalar> {
    /// Dimension.
    fn dim(&self) -> usize;
    /// `y = A x`.
    ///
    /// # Errors
    /// Whatever the product reports (interruption, shape).
    fn apply(&self, x: &[S], y: &mut [S], runner: &Runner, interrupt: &dyn Interrupt) -> CoreResult<()>;
}

/// The matrix-free product of an operator on a space.
pub struct FockMap<'a, S: Scalar> {
    space: &'a FockSpace,
    product: ProductRef<'a, S>,
}

enum ProductRef<'a, S: Scalar> {
    Owned(Box<Product<S>>),
    Borrowed(&'a Product<S>),
}

impl<'a, S: Scalar> FockMap<'a, S> {
    /// Prepare the products of `op` (which must be Hermitian for the solver's
    /// guarantees) on `space`.
    pub fn new(space: &'a FockSpace, op: &Operator<S>) -> Self {
        FockMap {
            space,
            product: ProductRef::Owned(Box::new(Product::new(space, op))),
        }
    }

    /// Use an operator already prepared for products on `space` (built once, reused
    /// by every call).
    pub fn with_product(space: &'a FockSpace, product: &'a Product<S>) -> Self {
        FockMap {
            space,
            product: ProductRef::Borrowed(product),
        }
    }
}

impl<S: Scalar> HermitianMap<S> for FockMap<'_, S> {
    fn dim(&self) -> usize {
        self.space.dim() as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], runner: &Runner, interrupt: &dyn Interrupt) -> CoreResult<()> {
        let product = match &self.product {
            ProductRef::Owned(p) => p,
            ProductRef::Borrowed(p) => *p,
        };
        product.apply(self.space, x, y, runner, interrupt)
    }
}

pub use crate::matvec::CsrMap;

/// Settings of [`ground_state`].
#[derive(Debug, Clone)]
pub struct LanczosOptions {
    /// Converged when `‖Hψ − Eψ‖ <= tol · max(1, |E|)`.
    pub tol: f64,
    /// Most Lanczos steps in one pass (the tridiagonal size).
    pub max_steps: usize,
    /// Most restarts after a pass whose true residual misses `tol`.
    pub max_restarts: usize,
    /// Seed of the start vector when none is given, and of the noise mixed into a
    /// given one.
    pub seed: u64,
}

impl Default for LanczosOptions {
    fn default() -> Self {
        LanczosOptions {
            tol: 1e-9,
            max_steps: 400,
            max_restarts: 8,
            seed: 0,
        }
    }
}

/// What [`ground_state`] found.
#[derive(Debug, Clone)]
pub struct LanczosOutcome<S> {
    /// Rayleigh quotient of `vector`.
    pub energy: f64,
    /// Unit-norm approximate ground state.
    pub vector: Vec<S>,
    /// `‖Hψ − Eψ‖`, measured with a final product.
    pub residual: f64,
    /// Lanczos steps over all passes.
    pub steps: usize,
    /// Matrix-vector products used.
    pub products: usize,
    /// Restarts used.
    pub restarts: usize,
    /// Whether `residual` met the tolerance.
    pub converged: bool,
}

/// Lowest eigenpair of a Hermitian map with four vectors of memory.
///
/// A `start` vector is normalised and mixed with [`vecops::START_NOISE`] of seeded
/// noise (seed `opts.seed`), so that a start with no weight on the ground state's
/// symmetry sector still converges to the true ground state; without `start`, a
/// seeded vector is used.
///
/// The outcome is the same for every thread count: products sum each row in a fixed
/// order and reductions add partial sums in a fixed order.
///
/// # Errors
/// [`CoreError::InvalidArgument`] for a zero or wrongly sized start vector or bad
/// options; [`CoreError::Interrupted`] when `interrupt` fires.
pub fn ground_state<S: Scalar, A: HermitianMap<S>>(
    map: &A,
    start: Option<Vec<S>>,
    opts: &LanczosOptions,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<LanczosOutcome<S>> {
    ground_state_watched(map, start, opts, runner, interrupt, &Unwatched, None)
}

/// Where a (possibly resumed) pass begins.
enum Entry {
    /// A new pass from `v0`.
    Fresh,
    /// Inside pass 1, with `v_prev`, `v` and the coefficients restored.
    Collect,
    /// Inside pass 2 at Krylov vector `next`, with `ψ` (in `v0`), `v_prev` and `v`
    /// restored.
    Assemble(usize),
}

/// [`ground_state`] reporting to `watch` after every Lanczos step and, when it asks,
/// handing it the resumable state at the end of a step: phase (1: collecting
/// coefficients, 2: assembling the Ritz vector), counters, the coefficients, and three
/// vectors (`v0`: the pass's start, or in phase 2 the partial Ritz vector; `v_prev`,
/// `v`). Given such a state as `resume` (with the same map and options; `start` is then
/// ignored), the iteration continues from it and returns what an uninterrupted run
/// returns, bit for bit.
///
/// # Errors
/// As [`ground_state`]; whatever `watch` returns; [`CoreError::InvalidArgument`] or
/// [`CoreError::Shape`] for a state that does not fit this problem.
pub fn ground_state_watched<S: Scalar, A: HermitianMap<S>>(
    map: &A,
    start: Option<Vec<S>>,
    opts: &LanczosOptions,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    watch: &dyn Watch<S>,
    resume: Option<Restored<S>>,
) -> CoreResult<LanczosOutcome<S>> {
    let dim = map.dim();
    if !(opts.tol > 0.0 && opts.tol.is_finite()) || opts.max_steps < 2 {
        return Err(CoreError::InvalidArgument(
            "tolerance must be a positive finite number and max_steps at least 2".into(),
        ));
    }
    crate::memory::ensure_room(
        crate::solve::solver_vectors(1) as u128 * dim as u128 * std::mem::size_of::<S>() as u128,
        "the Lanczos vectors (four of the space's dimension)",
    )?;
    if let (Some(v), None) = (&start, &resume) {
        if v.len() != dim {
            return Err(CoreError::Shape(format!(
                "start vector has length {} but the space has dim {dim}",
                v.len()
            )));
        }
        if v.iter().any(|x| !x.is_finite()) {
            return Err(CoreError::InvalidArgument(
                "start vector contains NaN or inf".into(),
            ));
        }
    }
    let what = "a Lanczos vector";
    let max_steps = opts.max_steps.min(dim.max(1));
    let mut w = crate::memory::try_filled(dim, S::ZERO, what)?;
    let mut steps = 0usize;
    let mut products = 0usize;
    let mut restarts = 0usize;
    let mut alphas: Vec<f64> = Vec::new();
    let mut betas: Vec<f64> = Vec::new();
    let mut estimate = f64::NAN;
    let (mut v0, mut v_prev, mut v, mut entry) = match resume {
        Some(mut saved) => {
            steps = saved.integer("steps")?;
            products = saved.integer("products")?;
            restarts = saved.integer("restarts")?;
            alphas = saved.numbers("alphas")?.to_vec();
            betas = saved.numbers("betas")?.to_vec();
            estimate = saved.numbers("estimate")?.first().copied().unwrap_or(f64::NAN);
            let entry = match saved.integer("phase")? {
                1 if !alphas.is_empty() && betas.len() == alphas.len() && alphas.len() < max_steps => {
                    Entry::Collect
                }
                2 => {
                    let next = saved.integer("next")?;
                    if alphas.is_empty()
                        || betas.len() + 1 != alphas.len()
                        || next == 0
                        || next >= alphas.len()
                    {
                        return Err(bad_state());
                    }
                    Entry::Assemble(next)
                }
                _ => return Err(bad_state()),
            };
            let v0 = saved.take_vector("v0", dim)?;
            let v_prev = saved.take_vector("v_prev", dim)?;
            let v = saved.take_vector("v", dim)?;
            (v0, v_prev, v, entry)
        }
        None => {
            let v_prev = crate::memory::try_filled(dim, S::ZERO, what)?;
            let v = crate::memory::try_filled(dim, S::ZERO, what)?;
            let v0 = match start {
                // A caller's vector gets a little seeded noise, so that a start with no
                // weight on the ground state's symmetry sector still reaches it.
                Some(mut v0) => {
                    if !runner.install(|| vecops::mix_start_noise(&mut v0, &mut w, opts.seed)) {
                        return Err(CoreError::InvalidArgument(
                            "start vector is zero; pass a nonzero vector or none".into(),
                        ));
                    }
                    v0
                }
                None => {
                    let mut v0 = crate::memory::try_filled(dim, S::ZERO, what)?;
                    runner.install(|| vecops::fill_seeded(opts.seed, &mut v0));
                    let n0 = runner.install(|| vecops::norm(&v0));
                    runner.install(|| vecops::scale(1.0 / n0, &mut v0));
                    v0
                }
            };
            (v0, v_prev, v, Entry::Fresh)
        }
    };
    let mut wanted = false;
    loop {
        let entry_now = std::mem::replace(&mut entry, Entry::Fresh);
        let first = match entry_now {
            Entry::Assemble(next) => next,
            fresh_or_collect => {
                if let Entry::Fresh = fresh_or_collect {
                    // Pass 1: coefficients only.
                    alphas.clear();
                    betas.clear();
                    runner.install(|| {
                        vecops::copy(&v0, &mut v);
                        vecops::zero(&mut v_prev);
                    });
                }
                loop {
                    map.apply(&v, &mut w, runner, interrupt)?;
                    products += 1;
                    steps += 1;
                    let j = alphas.len();
                    let beta_prev = if j == 0 { 0.0 } else { betas[j - 1] };
                    let alpha = runner.install(|| vecops::dot_re(&v, &w));
                    runner.install(|| vecops::sub2(&mut w, alpha, &v, beta_prev, &v_prev));
                    alphas.push(alpha);
                    let beta = runner.install(|| vecops::norm(&w));
                    let (theta, s) = tridiag::lowest_pair(&alphas, &betas);
                    let scale = theta.abs().max(1.0);
                    estimate = beta * s[j].abs();
                    wanted |= watch.step(&Report {
                        step: steps,
                        products,
                        residual: estimate,
                    })?;
                    if estimate <= 0.25 * opts.tol * scale
                        || beta <= 1e-13 * scale
                        || alphas.len() >= max_steps
                    {
                        break;
                    }
                    betas.push(beta);
                    std::mem::swap(&mut v_prev, &mut v);
                    std::mem::swap(&mut v, &mut w);
                    runner.install(|| vecops::scale(1.0 / beta, &mut v));
                    if wanted {
                        let state = snapshot(
                            1,
                            0,
                            [steps, products, restarts],
                            &alphas,
                            &betas,
                            estimate,
                            [&v0[..], &v_prev[..], &v[..]],
                        );
                        watch.save(&state.0, &state.1)?;
                        wanted = false;
                    }
                }
                // Pass 2 from its start: regenerate the Krylov vectors and accumulate
                // ψ = Σ s_j v_j into v0's buffer (v0 is needed only to seed the
                // regeneration).
                runner.install(|| {
                    vecops::copy(&v0, &mut v);
                    vecops::zero(&mut v_prev);
                    vecops::zero(&mut v0);
                });
                0
            }
        };
        let m = alphas.len();
        let (_, s) = tridiag::lowest_pair(&alphas, &betas[..m - 1]);
        for j in first..m {
            runner.install(|| vecops::axpy(s[j], &v, &mut v0));
            if j + 1 == m {
                break;
            }
            map.apply(&v, &mut w, runner, interrupt)?;
            products += 1;
            let beta_prev = if j == 0 { 0.0 } else { betas[j - 1] };
            runner.install(|| {
                vecops::sub2(&mut w, alphas[j], &v, beta_prev, &v_prev);
                vecops::scale(1.0 / betas[j], &mut w);
            });
            std::mem::swap(&mut v_prev, &mut v);
            std::mem::swap(&mut v, &mut w);
            let report = Report {
                step: steps,
                products,
                residual: estimate,
            };
            wanted |= watch.step(&report)?;
            if wanted {
                let state = snapshot(
                    2,
                    j + 1,
                    [steps, products, restarts],
                    &alphas,
                    &betas,
                    estimate,
                    [&v0[..], &v_prev[..], &v[..]],
                );
                watch.save(&state.0, &state.1)?;
                wanted = false;
            }
        }
        let psi = &mut v0;
        let nrm = runner.install(|| vecops::norm(psi));
        runner.install(|| vecops::scale(1.0 / nrm, psi));
        // True residual.
        map.apply(psi, &mut w, runner, interrupt)?;
        products += 1;
        let energy = runner.install(|| vecops::dot_re(psi, &w));
        runner.install(|| vecops::axpy(-energy, psi, &mut w));
        let residual = runner.install(|| vecops::norm(&w));
        estimate = residual;
        wanted |= watch.step(&Report {
            step: steps,
            products,
            residual,
        })?;
        let converged = residual <= opts.tol * energy.abs().max(1.0);
        if converged || restarts >= opts.max_restarts {
            return Ok(LanczosOutcome {
                energy,
                vector: v0,
                residual,
                steps,
                products,
                restarts,
                converged,
            });
        }
        restarts += 1;
        if interrupt.requested() {
            return Err(CoreError::Interrupted);
        }
    }
}

fn bad_state() -> CoreError {
    CoreError::InvalidArgument(
        "the saved Lanczos state is inconsistent (phase, coefficients and position do not \
         match); delete the checkpoint and run again"
            .into(),
    )
}

/// The report and snapshot of the ground-state iteration at the end of a step.
#[allow(clippy::too_many_arguments)]
fn snapshot<'a, S: Scalar>(
    phase: u64,
    next: usize,
    [steps, products, restarts]: [usize; 3],
    alphas: &[f64],
    betas: &[f64],
    estimate: f64,
    [v0, v_prev, v]: [&'a [S]; 3],
) -> (Report, Snapshot<'a, S>) {
    let report = Report {
        step: steps,
        products,
        residual: estimate,
    };
    let snap = Snapshot {
        solver: "ground",
        integers: vec![
            ("phase", phase),
            ("next", next as u64),
            ("steps", steps as u64),
            ("products", products as u64),
            ("restarts", restarts as u64),
        ],
        numbers: vec![
            ("alphas", alphas.to_vec()),
            ("betas", betas.to_vec()),
            ("estimate", vec![estimate]),
        ],
        vectors: vec![("v0", 1, v0), ("v_prev", 1, v_prev), ("v", 1, v)],
    };
    (report, snap)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::NoInterrupt;

    struct Dense {
        n: usize,
        a: Vec<f64>,
    }
    impl HermitianMap<f64> for Dense {
        fn dim(&self) -> usize {
            self.n
        }
        #[allow(clippy::needless_range_loop)]
        fn apply(&self, x: &[f64], y: &mut [f64], _: &Runner, _: &dyn Interrupt) -> CoreResult<()> {
            for i in 0..self.n {
                y[i] = (0..self.n).map(|j| self.a[i * self.n + j] * x[j]).sum();
            }
            Ok(())
        }
    }

    fn path(n: usize) -> Dense {
        let mut a = vec![0.0; n * n];
        for i in 0..n - 1 {
            a[i * n + i + 1] = -1.0;
            a[(i + 1) * n + i] = -1.0;
        }
        Dense { n, a }
    }

    #[test]
    fn finds_lowest_of_a_path_graph() {
        // Tight-binding chain with hopping -1 and n sites: lowest eigenvalue
        // -2 cos(π / (n + 1)) (common practice, no source).
        for (n, max_steps, restarts_expected) in [(300, 400, false), (40, 12, true)] {
            let opts = LanczosOptions {
                max_steps,
                max_restarts: 200,
                ..Default::default()
            };
            let out = ground_state(&path(n), None, &opts, &Runner::global(), &NoInterrupt).unwrap();
            let exact = -2.0 * (std::f64::consts::PI / (n as f64 + 1.0)).cos();
            assert!(out.converged, "n={n}: residual {}", out.residual);
            assert!((out.energy - exact).abs() < 1e-12, "{} vs {exact}", out.energy);
            assert!(out.residual <= 2e-9);
            assert_eq!(out.restarts > 0, restarts_expected);
        }
    }

    #[test]
    fn same_result_for_any_thread_count() {
        let opts = LanczosOptions {
            max_steps: 30,
            ..Default::default()
        };
        let one = ground_state(
            &path(50),
            None,
            &opts,
            &Runner::with_threads(Some(1)).unwrap(),
            &NoInterrupt,
        )
        .unwrap();
        let two = ground_state(
            &path(50),
            None,
            &opts,
            &Runner::with_threads(Some(2)).unwrap(),
            &NoInterrupt,
        )
        .unwrap();
        assert_eq!(one.energy.to_bits(), two.energy.to_bits());
        assert_eq!(one.vector, two.vector);
    }

    #[test]
    fn start_outside_the_ground_sector_still_finds_the_ground_state() {
        // One particle on a ring of L sites, hopping -1: levels -2 cos(2πq/L), ground
        // state uniform (q = 0) (Bloch; common practice, no source). The start
        // sin(2πi/L) lies in the q = ±1 sector, orthogonal to the ground state: without
        // the mixed-in noise its Krylov space never leaves that sector.
        let l = 60;
        let mut a = vec![0.0; l * l];
        for i in 0..l {
            let j = (i + 1) % l;
            a[i * l + j] = -1.0;
            a[j * l + i] = -1.0;
        }
        let start: Vec<f64> = (0..l)
            .map(|i| (2.0 * std::f64::consts::PI * i as f64 / l as f64).sin())
            .collect();
        let out = ground_state(
            &Dense { n: l, a },
            Some(start),
            &LanczosOptions::default(),
            &Runner::global(),
            &NoInterrupt,
        )
        .unwrap();
        assert!(out.converged);
        assert!((out.energy + 2.0).abs() < 1e-10, "{}", out.energy);
    }

    #[test]
    fn small_dimension_terminates() {
        let map = Dense {
            n: 3,
            a: vec![2.0, 1.0, 0.0, 1.0, 2.0, 1.0, 0.0, 1.0, 2.0],
        };
        let out = ground_state(
            &map,
            None,
            &LanczosOptions::default(),
            &Runner::global(),
            &NoInterrupt,
        )
        .unwrap();
        // Eigenvalues 2 - √2, 2, 2 + √2 (common practice, no source).
        assert!((out.energy - (2.0 - 2f64.sqrt())).abs() < 1e-12);
        assert!(out.converged);
    }
    #[test]
    fn a_run_stopped_at_a_snapshot_resumes_to_the_same_bits() {
        // Common practice, no source: a resumed run repeats the arithmetic of the
        // uninterrupted one, so energy and vector agree bit for bit. Snapshots in
        // pass 1 (product 10), pass 2 (product 45 of a 40-step pass) and after a
        // restart (max_steps 12 forces restarts).
        use crate::watch::Capture;
        for (max_steps, after) in [(400, 10), (40, 45), (12, 30)] {
            let opts = LanczosOptions {
                max_steps,
                max_restarts: 200,
                ..Default::default()
            };
            let map = path(60);
            let whole = ground_state(&map, None, &opts, &Runner::global(), &NoInterrupt).unwrap();
            let capture = Capture::new(after);
            let stopped =
                ground_state_watched(&map, None, &opts, &Runner::global(), &NoInterrupt, &capture, None);
            assert!(matches!(stopped, Err(CoreError::Interrupted)));
            let saved = capture.saved.borrow_mut().take().expect("a snapshot");
            let again = ground_state_watched(
                &map,
                None,
                &opts,
                &Runner::global(),
                &NoInterrupt,
                &Unwatched,
                Some(saved),
            )
            .unwrap();
            assert_eq!(
                whole.energy.to_bits(),
                again.energy.to_bits(),
                "max_steps {max_steps}"
            );
            assert_eq!(whole.vector, again.vector);
            assert_eq!((whole.products, whole.steps), (again.products, again.steps));
            let reports = capture.reports.borrow();
            assert!(reports.windows(2).all(|w| w[0].products <= w[1].products));
        }
    }
}
