//! The kinds of native operator and how each version (real or complex) of each kind
//! serves the protocol: on a space (the kept product kernel), on a symmetry sector,
//! between two spaces, between two symmetry sectors, and a CSR matrix handed in from
//! Python.

use crate::protocol::{Served, Versions};
use fockmill_core::between::{self, Between};
use fockmill_core::build::{build_csr_with, CsrAny, CsrIndex};
use fockmill_core::estimate::{estimate_nnz, NnzEstimate};
use fockmill_core::lanczos::{CsrMap, FockMap, HermitianMap};
use fockmill_core::matvec::Product;
use fockmill_core::solve::{Solvable, ESTIMATE_SAMPLES};
use fockmill_core::symmetry::{SectorMap, SectorOperator, SymmetricSpace};
use fockmill_core::{CoreError, CoreResult, FockSpace, Interrupt, Operator, Runner, Scalar};
use num_complex::Complex64;
use std::sync::{Arc, OnceLock};

/// The estimate of `ESTIMATE_SAMPLES` rows is kept (the solvers' storage decision and
/// the memory estimate share it); other sample counts are computed each time.
fn kept_estimate(
    cell: &OnceLock<NnzEstimate>,
    samples: usize,
    compute: impl FnOnce() -> CoreResult<NnzEstimate>,
) -> CoreResult<NnzEstimate> {
    if samples != ESTIMATE_SAMPLES {
        return compute();
    }
    if let Some(e) = cell.get() {
        return Ok(*e);
    }
    let e = compute()?;
    let _ = cell.set(e);
    Ok(e)
}

fn from_tuple((nnz, std_error, exact, max_row): (f64, f64, bool, u64)) -> NnzEstimate {
    NnzEstimate {
        nnz,
        std_error,
        exact,
        max_row,
    }
}

// -- on a space ------------------------------------------------------------------------

/// Validated, merged terms on a space; the product kernel is built once, on first use.
pub struct OnSpace {
    pub space: Arc<FockSpace>,
    pub real: Option<Operator<f64>>,
    pub complex: Operator<Complex64>,
    /// Requested cut (None: automatic; 0: row kernel; k: left modes 0..k).
    pub cut: Option<usize>,
    pub real_product: OnceLock<Product<f64>>,
    pub complex_product: OnceLock<Product<Complex64>>,
    pub real_estimate: OnceLock<NnzEstimate>,
    pub complex_estimate: OnceLock<NnzEstimate>,
}

/// One version of an operator on a space: its terms and its kept kernel.
pub struct SpaceVersion<'a, S: Scalar> {
    space: &'a FockSpace,
    op: &'a Operator<S>,
    cut: Option<usize>,
    cell: &'a OnceLock<Product<S>>,
    estimate: &'a OnceLock<NnzEstimate>,
}

impl<'a, S: Scalar> SpaceVersion<'a, S> {
    /// The kept kernel, built on first use (interruptible: large spaces take seconds).
    pub fn product(&self, stop: &dyn Interrupt) -> CoreResult<&'a Product<S>> {
        if let Some(p) = self.cell.get() {
            return Ok(p);
        }
        let built = Product::prepare(self.space, self.op, self.cut, stop)?;
        // Another thread may have won the race; either kernel is the same.
        let _ = self.cell.set(built);
        Ok(self.cell.get().expect("set above"))
    }
}

impl OnSpace {
    pub fn versions(&self) -> Versions<SpaceVersion<'_, f64>, SpaceVersion<'_, Complex64>> {
        Versions {
            real: self.real.as_ref().map(|op| SpaceVersion {
                space: &self.space,
                op,
                cut: self.cut,
                cell: &self.real_product,
                estimate: &self.real_estimate,
            }),
            complex: SpaceVersion {
                space: &self.space,
                op: &self.complex,
                cut: self.cut,
                cell: &self.complex_product,
                estimate: &self.complex_estimate,
            },
        }
    }
}

impl<S: Scalar> Served<S> for SpaceVersion<'_, S> {
    fn rows(&self) -> usize {
        self.space.dim() as usize
    }
    fn cols(&self) -> usize {
        self.space.dim() as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        self.product(stop)?.apply_many(self.space, x, y, k, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>> {
        // The kept kernel writes the rows (built once, shared with products).
        build_csr_with(self.space, self.product(stop)?, runner, stop, force_wide)
    }
    fn estimate(&self, samples: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        kept_estimate(self.estimate, samples, || {
            estimate_nnz(self.space, self.op, samples, runner, stop)
        })
    }
}

impl<S: Scalar> Solvable<S> for SpaceVersion<'_, S> {
    type Map<'m>
        = FockMap<'m, S>
    where
        Self: 'm;
    fn dim(&self) -> usize {
        self.space.dim() as usize
    }
    fn matrix_free(&self, stop: &dyn Interrupt) -> CoreResult<FockMap<'_, S>> {
        Ok(FockMap::with_product(self.space, self.product(stop)?))
    }
    fn fast_matrix_free(&self, stop: &dyn Interrupt) -> CoreResult<bool> {
        // The bipartite kernel and gathered quadratic forms read no matrix and were
        // measured as fast as a stored one (benchmarks/results/methods.txt,
        // many_terms); the row kernel is otherwise several times slower.
        Ok(self.product(stop)?.as_fast_as_stored())
    }
    fn estimate(&self, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        Served::estimate(self, ESTIMATE_SAMPLES, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<CsrAny<S>> {
        Served::build(self, runner, stop, false)
    }
}

// -- on a symmetry sector --------------------------------------------------------------

/// An operator commuting with a sector's group, prepared on the sector.
pub struct OnSector {
    pub sector: Arc<SymmetricSpace>,
    pub real: Option<SectorOperator<f64>>,
    pub complex: SectorOperator<Complex64>,
    pub terms: usize,
    pub real_estimate: OnceLock<NnzEstimate>,
    pub complex_estimate: OnceLock<NnzEstimate>,
}

/// One version of an operator on a sector.
pub struct SectorVersion<'a, S: Scalar> {
    sector: &'a SymmetricSpace,
    op: &'a SectorOperator<S>,
    estimate: &'a OnceLock<NnzEstimate>,
}

impl OnSector {
    pub fn versions(&self) -> Versions<SectorVersion<'_, f64>, SectorVersion<'_, Complex64>> {
        Versions {
            real: self.real.as_ref().map(|op| SectorVersion {
                sector: &self.sector,
                op,
                estimate: &self.real_estimate,
            }),
            complex: SectorVersion {
                sector: &self.sector,
                op: &self.complex,
                estimate: &self.complex_estimate,
            },
        }
    }
}

impl<S: Scalar> Served<S> for SectorVersion<'_, S> {
    fn rows(&self) -> usize {
        self.sector.dim() as usize
    }
    fn cols(&self) -> usize {
        self.sector.dim() as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        self.op.apply_many(self.sector, x, y, k, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>> {
        self.op.build_csr(self.sector, runner, stop, force_wide)
    }
    fn estimate(&self, samples: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        kept_estimate(self.estimate, samples, || {
            self.op
                .estimate_nnz(self.sector, samples, runner, stop)
                .map(from_tuple)
        })
    }
}

impl<S: Scalar> Solvable<S> for SectorVersion<'_, S> {
    type Map<'m>
        = SectorMap<'m, S>
    where
        Self: 'm;
    fn dim(&self) -> usize {
        self.sector.dim() as usize
    }
    fn matrix_free(&self, _stop: &dyn Interrupt) -> CoreResult<SectorMap<'_, S>> {
        Ok(SectorMap {
            sector: self.sector,
            op: self.op,
        })
    }
    fn fast_matrix_free(&self, _stop: &dyn Interrupt) -> CoreResult<bool> {
        // Sector products (orbit lookups per entry) are several times slower than a
        // stored sector matrix.
        Ok(false)
    }
    fn estimate(&self, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        Served::estimate(self, ESTIMATE_SAMPLES, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<CsrAny<S>> {
        Served::build(self, runner, stop, false)
    }
}

// -- between two spaces ----------------------------------------------------------------

/// An operator carrying the states of `source` into `target` (same modes and cutoffs).
pub struct BetweenSpaces {
    pub source: Arc<FockSpace>,
    pub target: Arc<FockSpace>,
    pub real: Option<Between<f64>>,
    pub complex: Between<Complex64>,
}

/// One version of an operator between two spaces.
pub struct BetweenVersion<'a, S: Scalar> {
    source: &'a FockSpace,
    target: &'a FockSpace,
    op: &'a Between<S>,
}

impl BetweenSpaces {
    pub fn versions(&self) -> Versions<BetweenVersion<'_, f64>, BetweenVersion<'_, Complex64>> {
        Versions {
            real: self.real.as_ref().map(|op| BetweenVersion {
                source: &self.source,
                target: &self.target,
                op,
            }),
            complex: BetweenVersion {
                source: &self.source,
                target: &self.target,
                op: &self.complex,
            },
        }
    }
}

impl<S: Scalar> Served<S> for BetweenVersion<'_, S> {
    fn rows(&self) -> usize {
        self.target.dim() as usize
    }
    fn cols(&self) -> usize {
        self.source.dim() as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        between::apply_many(self.source, self.target, self.op, x, y, k, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>> {
        between::build_csr(self.source, self.target, self.op, runner, stop, force_wide)
    }
    fn estimate(&self, samples: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        between::estimate_nnz(self.source, self.target, self.op, samples, runner, stop).map(from_tuple)
    }
}

// -- between two symmetry sectors -----------------------------------------------------

/// An operator with a definite character carrying the states of the sector `source`
/// into the sector `target` (same generators; labels shifted by the operator's).
pub struct BetweenSectors {
    pub source: Arc<SymmetricSpace>,
    pub target: Arc<SymmetricSpace>,
    pub real: Option<SectorOperator<f64>>,
    pub complex: SectorOperator<Complex64>,
    pub terms: usize,
}

/// One version of an operator between two sectors.
pub struct SectorsVersion<'a, S: Scalar> {
    source: &'a SymmetricSpace,
    target: &'a SymmetricSpace,
    op: &'a SectorOperator<S>,
}

impl BetweenSectors {
    pub fn versions(&self) -> Versions<SectorsVersion<'_, f64>, SectorsVersion<'_, Complex64>> {
        Versions {
            real: self.real.as_ref().map(|op| SectorsVersion {
                source: &self.source,
                target: &self.target,
                op,
            }),
            complex: SectorsVersion {
                source: &self.source,
                target: &self.target,
                op: &self.complex,
            },
        }
    }
}

impl<S: Scalar> Served<S> for SectorsVersion<'_, S> {
    fn rows(&self) -> usize {
        self.target.dim() as usize
    }
    fn cols(&self) -> usize {
        self.source.dim() as usize
    }
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        self.op
            .apply_between(self.source, self.target, x, y, k, runner, stop)
    }
    fn build(&self, runner: &Runner, stop: &dyn Interrupt, force_wide: bool) -> CoreResult<CsrAny<S>> {
        self.op
            .build_between(self.source, self.target, runner, stop, force_wide)
    }
    fn estimate(&self, samples: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        self.op
            .estimate_between(self.source, self.target, samples, runner, stop)
            .map(from_tuple)
    }
}

// -- a CSR matrix handed in from Python ------------------------------------------------

/// A square Hermitian CSR matrix copied in from Python (e.g. a sweep point's matrix).
pub enum Held {
    RealNarrow(CsrMap<f64, i32>),
    RealWide(CsrMap<f64, i64>),
    ComplexNarrow(CsrMap<Complex64, i32>),
    ComplexWide(CsrMap<Complex64, i64>),
}

/// A held matrix and the longest of its rows.
pub struct StoredCsr {
    pub held: Held,
    pub max_row: u64,
}

/// One held matrix of element type `S`, whatever its index type.
pub enum HeldRef<'a, S> {
    Narrow(&'a CsrMap<S, i32>),
    Wide(&'a CsrMap<S, i64>),
}

impl<S> Clone for HeldRef<'_, S> {
    fn clone(&self) -> Self {
        *self
    }
}
impl<S> Copy for HeldRef<'_, S> {}

/// A held version: the matrix and its longest row.
pub struct CsrVersion<'a, S> {
    map: HeldRef<'a, S>,
    max_row: u64,
}

/// The complex version of a held matrix: itself when complex, a real matrix applied to
/// the real and imaginary parts of a complex input otherwise.
pub enum ComplexCsr<'a> {
    Native(CsrVersion<'a, Complex64>),
    Lifted(CsrVersion<'a, f64>),
}

impl StoredCsr {
    pub fn dim(&self) -> u64 {
        (match &self.held {
            Held::RealNarrow(m) => m.dim(),
            Held::RealWide(m) => m.dim(),
            Held::ComplexNarrow(m) => m.dim(),
            Held::ComplexWide(m) => m.dim(),
        }) as u64
    }

    pub fn is_real(&self) -> bool {
        matches!(self.held, Held::RealNarrow(_) | Held::RealWide(_))
    }

    pub fn versions(&self) -> Versions<CsrVersion<'_, f64>, ComplexCsr<'_>> {
        let max_row = self.max_row;
        let real = |map| CsrVersion { map, max_row };
        match &self.held {
            Held::RealNarrow(m) => Versions {
                real: Some(real(HeldRef::Narrow(m))),
                complex: ComplexCsr::Lifted(real(HeldRef::Narrow(m))),
            },
            Held::RealWide(m) => Versions {
                real: Some(real(HeldRef::Wide(m))),
                complex: ComplexCsr::Lifted(real(HeldRef::Wide(m))),
            },
            Held::ComplexNarrow(m) => Versions {
                real: None,
                complex: ComplexCsr::Native(CsrVersion {
                    map: HeldRef::Narrow(m),
                    max_row,
                }),
            },
            Held::ComplexWide(m) => Versions {
                real: None,
                complex: ComplexCsr::Native(CsrVersion {
                    map: HeldRef::Wide(m),
                    max_row,
                }),
            },
        }
    }
}

impl<S: Scalar> HermitianMap<S> for HeldRef<'_, S> {
    fn dim(&self) -> usize {
        match self {
            HeldRef::Narrow(m) => m.dim(),
            HeldRef::Wide(m) => m.dim(),
        }
    }
    fn apply(&self, x: &[S], y: &mut [S], runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        match self {
            HeldRef::Narrow(m) => m.apply(x, y, runner, stop),
            HeldRef::Wide(m) => m.apply(x, y, runner, stop),
        }
    }
}

impl<S: Scalar> HeldRef<'_, S> {
    fn nnz(&self) -> usize {
        match self {
            HeldRef::Narrow(m) => m.nnz(),
            HeldRef::Wide(m) => m.nnz(),
        }
    }
}

/// `Y = A X` for `k` row-major vectors, one column at a time through `apply`.
fn columns<T: Copy + Default>(
    n: usize,
    x: &[T],
    y: &mut [T],
    k: usize,
    mut apply: impl FnMut(&[T], &mut [T]) -> CoreResult<()>,
) -> CoreResult<()> {
    if x.len() != n * k || y.len() != n * k {
        return Err(CoreError::Shape(format!(
            "the block has {} entries, the matrix needs {n} rows × {k} vectors",
            x.len()
        )));
    }
    if k == 1 {
        return apply(x, y);
    }
    let (mut xc, mut yc) = (vec![T::default(); n], vec![T::default(); n]);
    for j in 0..k {
        for (i, v) in xc.iter_mut().enumerate() {
            *v = x[i * k + j];
        }
        apply(&xc, &mut yc)?;
        for (i, v) in yc.iter().enumerate() {
            y[i * k + j] = *v;
        }
    }
    Ok(())
}

fn held_build<S>() -> CoreResult<CsrAny<S>> {
    Err(CoreError::InvalidArgument(
        "this operator is a CSR matrix handed in from Python; use that matrix instead of \
         building it again"
            .into(),
    ))
}

impl<S: Scalar> Served<S> for CsrVersion<'_, S> {
    fn rows(&self) -> usize {
        self.map.dim()
    }
    fn cols(&self) -> usize {
        self.map.dim()
    }
    fn apply(&self, x: &[S], y: &mut [S], k: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<()> {
        columns(self.map.dim(), x, y, k, |a, b| self.map.apply(a, b, runner, stop))
    }
    fn build(&self, _: &Runner, _: &dyn Interrupt, _: bool) -> CoreResult<CsrAny<S>> {
        held_build()
    }
    fn estimate(&self, _: usize, _: &Runner, _: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        Ok(NnzEstimate {
            nnz: self.map.nnz() as f64,
            std_error: 0.0,
            exact: true,
            max_row: self.max_row,
        })
    }
}

impl<S: Scalar> Solvable<S> for CsrVersion<'_, S> {
    type Map<'m>
        = HeldRef<'m, S>
    where
        Self: 'm;
    fn dim(&self) -> usize {
        self.map.dim()
    }
    fn matrix_free(&self, _: &dyn Interrupt) -> CoreResult<HeldRef<'_, S>> {
        Ok(self.map)
    }
    fn is_stored(&self) -> bool {
        true
    }
    fn fast_matrix_free(&self, _: &dyn Interrupt) -> CoreResult<bool> {
        Ok(false)
    }
    fn estimate(&self, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        Served::estimate(self, ESTIMATE_SAMPLES, runner, stop)
    }
    fn build(&self, _: &Runner, _: &dyn Interrupt) -> CoreResult<CsrAny<S>> {
        held_build()
    }
}

/// A real held matrix acting on complex vectors: `A (x + i z) = A x + i A z`.
pub struct Lifted<'a>(HeldRef<'a, f64>);

impl HermitianMap<Complex64> for Lifted<'_> {
    fn dim(&self) -> usize {
        self.0.dim()
    }
    fn apply(
        &self,
        x: &[Complex64],
        y: &mut [Complex64],
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<()> {
        let n = self.0.dim();
        let re: Vec<f64> = x.iter().map(|v| v.re).collect();
        let im: Vec<f64> = x.iter().map(|v| v.im).collect();
        let (mut yr, mut yi) = (vec![0.0; n], vec![0.0; n]);
        self.0.apply(&re, &mut yr, runner, stop)?;
        self.0.apply(&im, &mut yi, runner, stop)?;
        for ((out, r), i) in y.iter_mut().zip(yr).zip(yi) {
            *out = Complex64::new(r, i);
        }
        Ok(())
    }
}

/// The complex view of either kind of held matrix.
pub enum ComplexMap<'a> {
    Native(HeldRef<'a, Complex64>),
    Lifted(Lifted<'a>),
}

impl HermitianMap<Complex64> for ComplexMap<'_> {
    fn dim(&self) -> usize {
        match self {
            ComplexMap::Native(m) => m.dim(),
            ComplexMap::Lifted(m) => m.dim(),
        }
    }
    fn apply(
        &self,
        x: &[Complex64],
        y: &mut [Complex64],
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<()> {
        match self {
            ComplexMap::Native(m) => m.apply(x, y, runner, stop),
            ComplexMap::Lifted(m) => m.apply(x, y, runner, stop),
        }
    }
}

impl ComplexCsr<'_> {
    fn map(&self) -> ComplexMap<'_> {
        match self {
            ComplexCsr::Native(v) => ComplexMap::Native(v.map),
            ComplexCsr::Lifted(v) => ComplexMap::Lifted(Lifted(v.map)),
        }
    }
    fn dim(&self) -> usize {
        match self {
            ComplexCsr::Native(v) => v.map.dim(),
            ComplexCsr::Lifted(v) => v.map.dim(),
        }
    }
}

impl Served<Complex64> for ComplexCsr<'_> {
    fn rows(&self) -> usize {
        self.dim()
    }
    fn cols(&self) -> usize {
        self.dim()
    }
    fn apply(
        &self,
        x: &[Complex64],
        y: &mut [Complex64],
        k: usize,
        runner: &Runner,
        stop: &dyn Interrupt,
    ) -> CoreResult<()> {
        let map = self.map();
        columns(self.dim(), x, y, k, |a, b| map.apply(a, b, runner, stop))
    }
    fn build(&self, _: &Runner, _: &dyn Interrupt, _: bool) -> CoreResult<CsrAny<Complex64>> {
        held_build()
    }
    fn estimate(&self, samples: usize, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        match self {
            ComplexCsr::Native(v) => Served::estimate(v, samples, runner, stop),
            ComplexCsr::Lifted(v) => Served::estimate(v, samples, runner, stop),
        }
    }
}

impl Solvable<Complex64> for ComplexCsr<'_> {
    type Map<'m>
        = ComplexMap<'m>
    where
        Self: 'm;
    fn dim(&self) -> usize {
        ComplexCsr::dim(self)
    }
    fn matrix_free(&self, _: &dyn Interrupt) -> CoreResult<ComplexMap<'_>> {
        Ok(self.map())
    }
    fn is_stored(&self) -> bool {
        true
    }
    fn fast_matrix_free(&self, _: &dyn Interrupt) -> CoreResult<bool> {
        Ok(false)
    }
    fn estimate(&self, runner: &Runner, stop: &dyn Interrupt) -> CoreResult<NnzEstimate> {
        Served::estimate(self, ESTIMATE_SAMPLES, runner, stop)
    }
    fn build(&self, _: &Runner, _: &dyn Interrupt) -> CoreResult<CsrAny<Complex64>> {
        held_build()
    }
}

/// Wrap checked CSR arrays (`indptr`, `indices`, `data`) as a held matrix.
pub fn held_from<S: Scalar, I: CsrIndex>(
    indptr: Vec<I>,
    indices: Vec<I>,
    data: Vec<S>,
    wrap: fn(CsrMap<S, I>) -> Held,
) -> CoreResult<StoredCsr> {
    let max_row = indptr
        .windows(2)
        .map(|p| p[1].to_u64().saturating_sub(p[0].to_u64()))
        .max()
        .unwrap_or(0);
    let map = CsrMap::from_parts(indptr, indices, data)?;
    Ok(StoredCsr {
        held: wrap(map),
        max_row,
    })
}
