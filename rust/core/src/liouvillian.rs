//! The Liouvillian of a Lindblad master equation applied to a density matrix without
//! storing the superoperator:
//!
//! ```text
//! 𝓛ρ = −i(K ρ − ρ K†) + Σ_k γ_k J_k ρ J_k†,     K = H − (i/2) Σ_k γ_k J_k† J_k
//! ```
//!
//! on a block-diagonal `ρ`: blocks `ρ_b` (complex `d_b × d_b`, row-major, concatenated),
//! each block with its own `K_b`, and jump channels carrying block `s` into block `t`
//! (`J: d_s → d_t`). A single block is the general case; several blocks are the number
//! sectors of a model whose jumps change the number of quanta by fixed amounts.
//!
//! Every output row is computed by one thread from rows of `ρ` and rows of the sparse
//! matrices only, in a fixed order (bit-identical for any thread count), with no
//! transposed copy: `(ρ K†)_ij = Σ_k ρ_ik conj(K_jk)` is row `i` of `ρ` dotted with
//! sparse row `j` of `K`, and `(J ρ J†)_ij = Σ_k T_ik conj(J_jk)` with row `i` of
//! `T = J ρ` made in a scratch row just before it is used.
//!
//! `K` is handed in ready made (the caller forms `J†J` as the product of the truncated
//! matrices, which keeps the truncated master equation trace-preserving).

use crate::error::{CoreError, CoreResult};
use crate::memory;
use crate::parallel::{Interrupt, Runner};
use num_complex::Complex64;

const MINUS_I: Complex64 = Complex64 { re: 0.0, im: -1.0 };
const PLUS_I: Complex64 = Complex64 { re: 0.0, im: 1.0 };

/// A complex CSR matrix of `rows × cols` (column indices as `u32`).
#[derive(Debug, Clone, PartialEq)]
pub struct SparseBlock {
    rows: usize,
    cols: usize,
    indptr: Vec<usize>,
    indices: Vec<u32>,
    data: Vec<Complex64>,
}

impl SparseBlock {
    /// Check and wrap CSR arrays: `indptr` of length `rows + 1` from 0 to `nnz`,
    /// non-decreasing; columns in `[0, cols)`; values finite.
    ///
    /// # Errors
    /// [`CoreError::Shape`], [`CoreError::InvalidArgument`] or [`CoreError::NonFinite`]
    /// naming what is wrong.
    pub fn new(
        rows: usize,
        cols: usize,
        indptr: Vec<usize>,
        indices: Vec<usize>,
        data: Vec<Complex64>,
    ) -> CoreResult<Self> {
        if indptr.len() != rows + 1 {
            return Err(CoreError::Shape(format!(
                "a CSR matrix of {rows} rows needs {} row pointers; got {}",
                rows + 1,
                indptr.len()
            )));
        }
        if indices.len() != data.len() || indptr[0] != 0 || indptr[rows] != data.len() {
            return Err(CoreError::Shape(format!(
                "CSR arrays disagree: {} indices, {} values, row pointers from {} to {}",
                indices.len(),
                data.len(),
                indptr[0],
                indptr[rows]
            )));
        }
        if indptr.windows(2).any(|p| p[1] < p[0]) {
            return Err(CoreError::Shape("CSR row pointers must be non-decreasing".into()));
        }
        if cols > u32::MAX as usize {
            return Err(CoreError::InvalidArgument(format!(
                "{cols} columns is more than the Liouvillian product supports ({})",
                u32::MAX
            )));
        }
        if let Some(bad) = indices.iter().find(|&&c| c >= cols) {
            return Err(CoreError::InvalidArgument(format!(
                "column index {bad} is outside a matrix of {cols} columns"
            )));
        }
        if data.iter().any(|v| !(v.re.is_finite() && v.im.is_finite())) {
            return Err(CoreError::NonFinite(
                "a matrix of the Liouvillian contains NaN or inf; fix the Hamiltonian or rates".into(),
            ));
        }
        Ok(SparseBlock {
            rows,
            cols,
            indptr,
            indices: indices.into_iter().map(|c| c as u32).collect(),
            data,
        })
    }

    /// The stored entries of row `r`: (columns, values).
    #[inline]
    fn row(&self, r: usize) -> (&[u32], &[Complex64]) {
        let (a, b) = (self.indptr[r], self.indptr[r + 1]);
        (&self.indices[a..b], &self.data[a..b])
    }

    /// Stored entries.
    pub fn nnz(&self) -> usize {
        self.data.len()
    }
}

/// One jump channel: rate `γ`, the jump's matrix from block `source` into block
/// `target`.
#[derive(Debug, Clone)]
pub struct Channel {
    /// The rate `γ` (finite, >= 0).
    pub rate: f64,
    /// `J`, of `d_target × d_source`.
    pub jump: SparseBlock,
    /// Block `J` acts on.
    pub source: usize,
    /// Block `J` lands in.
    pub target: usize,
}

/// The Liouvillian of effective Hamiltonians `K_b` and jump channels on the diagonal
/// blocks of a density matrix, prepared for many products.
#[derive(Debug, Clone)]
pub struct LiouvillianProduct {
    dims: Vec<usize>,
    offsets: Vec<usize>,
    effective: Vec<SparseBlock>,
    channels: Vec<Channel>,
    /// For each block, the channels landing in it (in the order given).
    incoming: Vec<Vec<usize>>,
}

impl LiouvillianProduct {
    /// Check the shapes (each `K_b` square, each channel's `J` of
    /// `d_target × d_source`, rates finite and >= 0) and prepare.
    ///
    /// # Errors
    /// [`CoreError::Shape`] or [`CoreError::InvalidArgument`] naming the offending
    /// block or channel.
    pub fn new(effective: Vec<SparseBlock>, channels: Vec<Channel>) -> CoreResult<Self> {
        let dims: Vec<usize> = effective.iter().map(|k| k.rows).collect();
        for (b, k) in effective.iter().enumerate() {
            if k.rows != k.cols {
                return Err(CoreError::Shape(format!(
                    "K of block {b} is {} × {}; it must be square",
                    k.rows, k.cols
                )));
            }
        }
        let mut incoming = vec![Vec::new(); dims.len()];
        for (c, ch) in channels.iter().enumerate() {
            if ch.source >= dims.len() || ch.target >= dims.len() {
                return Err(CoreError::InvalidArgument(format!(
                    "channel {c} joins blocks {} and {}, but there are {} blocks",
                    ch.source,
                    ch.target,
                    dims.len()
                )));
            }
            if ch.jump.rows != dims[ch.target] || ch.jump.cols != dims[ch.source] {
                return Err(CoreError::Shape(format!(
                    "channel {c}: the jump is {} × {} but blocks {} → {} need {} × {}",
                    ch.jump.rows, ch.jump.cols, ch.source, ch.target, dims[ch.target], dims[ch.source]
                )));
            }
            if !(ch.rate.is_finite() && ch.rate >= 0.0) {
                return Err(CoreError::InvalidArgument(format!(
                    "channel {c} has rate {}; rates must be finite and >= 0",
                    ch.rate
                )));
            }
            incoming[ch.target].push(c);
        }
        let mut offsets = Vec::with_capacity(dims.len() + 1);
        let mut total = 0usize;
        offsets.push(0);
        for &d in &dims {
            total = d
                .checked_mul(d)
                .and_then(|dd| total.checked_add(dd))
                .ok_or_else(|| CoreError::InvalidArgument("the density matrix is too large".into()))?;
            offsets.push(total);
        }
        Ok(LiouvillianProduct {
            dims,
            offsets,
            effective,
            channels,
            incoming,
        })
    }

    /// The block dimensions `d_b`.
    pub fn dims(&self) -> &[usize] {
        &self.dims
    }

    /// Entries of the block-diagonal density matrix, `Σ_b d_b²`.
    pub fn size(&self) -> usize {
        self.offsets[self.dims.len()]
    }

    fn check_len(&self, len: usize, what: &str) -> CoreResult<()> {
        if len != self.size() {
            return Err(CoreError::Shape(format!(
                "{what} has {len} entries but the blocks {:?} need Σ d² = {}",
                self.dims,
                self.size()
            )));
        }
        Ok(())
    }

    /// `out = 𝓛ρ` for the blocks `ρ_b` concatenated row-major (any complex `ρ`, not
    /// only Hermitian ones).
    ///
    /// # Errors
    /// [`CoreError::Shape`] for lengths other than `Σ d_b²`;
    /// [`CoreError::Interrupted`] when `interrupt` fires.
    pub fn apply(
        &self,
        rho: &[Complex64],
        out: &mut [Complex64],
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        self.check_len(rho.len(), "rho")?;
        self.check_len(out.len(), "the output")?;
        for (b, &d) in self.dims.iter().enumerate() {
            if d == 0 {
                continue;
            }
            let part = &mut out[self.offsets[b]..self.offsets[b + 1]];
            runner.for_matrix_rows(part, d, interrupt, |first, rows| {
                let mut scratch = self.scratch();
                for (k, row) in rows.chunks_mut(d).enumerate() {
                    self.row(b, first + k, rho, row, &mut scratch);
                }
                Ok(())
            })?;
        }
        Ok(())
    }

    /// `y = R(𝓛ρ)` for Hermitian blocks given in the real form `x = R(ρ)`, where
    /// `R(ρ) = Re ρ + Im ρ` (an isometry of Hermitian onto real matrices: the
    /// symmetric part holds `Re ρ`, the antisymmetric part `Im ρ`). The solvers work in
    /// this real space; `ρ` is rebuilt once per product (a complex copy of the blocks,
    /// refused up front when it does not fit in memory).
    ///
    /// # Errors
    /// As [`LiouvillianProduct::apply`], and [`CoreError::TooLarge`] for the copy.
    pub fn apply_hermitian_real(
        &self,
        x: &[f64],
        y: &mut [f64],
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        self.check_len(x.len(), "x")?;
        self.check_len(y.len(), "y")?;
        let zero = Complex64::new(0.0, 0.0);
        let mut rho = memory::try_filled(self.size(), zero, "the density matrix of a Liouvillian product")?;
        for (b, &d) in self.dims.iter().enumerate() {
            if d == 0 {
                continue;
            }
            let (lo, hi) = (self.offsets[b], self.offsets[b + 1]);
            let xb = &x[lo..hi];
            runner.for_matrix_rows(&mut rho[lo..hi], d, interrupt, |first, rows| {
                hermitian_rows(xb, d, first, rows);
                Ok(())
            })?;
        }
        // 𝓛ρ = Z + Z† with Z = −iKρ + ½ Σ γ JρJ† (ρ Hermitian, so JρJ† is): the real
        // form is Re Z + Im Z plus the transpose of Re Z − Im Z, which replaces the
        // sparse gathers of ρK† by one transposed read.
        let mut half = memory::try_filled(self.size(), zero, "a work copy of a Liouvillian product")?;
        for (b, &d) in self.dims.iter().enumerate() {
            if d == 0 {
                continue;
            }
            let (lo, hi) = (self.offsets[b], self.offsets[b + 1]);
            let rho = &rho;
            runner.for_matrix_rows(&mut half[lo..hi], d, interrupt, |first, rows| {
                let mut scratch = self.scratch();
                for (k, row) in rows.chunks_mut(d).enumerate() {
                    self.half_row(b, first + k, rho, row, &mut scratch, 0.5);
                }
                Ok(())
            })?;
            let zb = &half[lo..hi];
            runner.for_matrix_rows(&mut y[lo..hi], d, interrupt, |first, rows| {
                hermitian_sum_rows(zb, d, first, rows);
                Ok(())
            })?;
        }
        Ok(())
    }

    fn scratch(&self) -> Vec<Complex64> {
        let widest = self
            .channels
            .iter()
            .map(|c| self.dims[c.source])
            .max()
            .unwrap_or(0);
        vec![Complex64::new(0.0, 0.0); widest]
    }

    /// Row `i` of block `b` of `𝓛ρ` into `out` (length `d_b`).
    fn row(&self, b: usize, i: usize, rho: &[Complex64], out: &mut [Complex64], scratch: &mut [Complex64]) {
        self.half_row(b, i, rho, out, scratch, 1.0);
        // +i ρ K†: row i of ρ dotted with sparse row j of K.
        let d = self.dims[b];
        let k = &self.effective[b];
        let rho_i = &rho[self.offsets[b] + i * d..self.offsets[b] + (i + 1) * d];
        for (j, o) in out.iter_mut().enumerate() {
            let (cols, vals) = k.row(j);
            let mut acc = Complex64::new(0.0, 0.0);
            for (&c, &v) in cols.iter().zip(vals) {
                acc += rho_i[c as usize] * v.conj();
            }
            *o += PLUS_I * acc;
        }
    }

    /// Row `i` of block `b` of `−iKρ + w Σ γ J ρ_s J†` into `out` (length `d_b`).
    fn half_row(
        &self,
        b: usize,
        i: usize,
        rho: &[Complex64],
        out: &mut [Complex64],
        scratch: &mut [Complex64],
        jump_weight: f64,
    ) {
        let d = self.dims[b];
        let rb = &rho[self.offsets[b]..self.offsets[b + 1]];
        out.fill(Complex64::new(0.0, 0.0));
        // −i K ρ: a combination of rows of ρ.
        let (cols, vals) = self.effective[b].row(i);
        for (&c, &v) in cols.iter().zip(vals) {
            let w = MINUS_I * v;
            let src = &rb[c as usize * d..(c as usize + 1) * d];
            for (o, &r) in out.iter_mut().zip(src) {
                *o += w * r;
            }
        }
        // γ J ρ_s J†: row i of T = J ρ_s, then dotted with sparse rows of J.
        for &c in &self.incoming[b] {
            let ch = &self.channels[c];
            let (cols, vals) = ch.jump.row(i);
            if cols.is_empty() {
                continue;
            }
            let ds = self.dims[ch.source];
            let rs = &rho[self.offsets[ch.source]..self.offsets[ch.source + 1]];
            let t = &mut scratch[..ds];
            t.fill(Complex64::new(0.0, 0.0));
            for (&col, &v) in cols.iter().zip(vals) {
                let src = &rs[col as usize * ds..(col as usize + 1) * ds];
                for (tv, &r) in t.iter_mut().zip(src) {
                    *tv += v * r;
                }
            }
            let rate = ch.rate * jump_weight;
            for (j, o) in out.iter_mut().enumerate() {
                let (cols, vals) = ch.jump.row(j);
                let mut acc = Complex64::new(0.0, 0.0);
                for (&col, &v) in cols.iter().zip(vals) {
                    acc += t[col as usize] * v.conj();
                }
                *o += acc * rate;
            }
        }
    }
}

/// Rows `first..` of the real form of `Z + Z†` (`d × d`): `(Re Z_ij + Im Z_ij) +
/// (Re Z_ji − Im Z_ji)`, column `i` of `Z` read a few entries at a time.
fn hermitian_sum_rows(z: &[Complex64], d: usize, first: usize, rows: &mut [f64]) {
    let count = rows.len() / d;
    for j in 0..d {
        let col = &z[j * d + first..j * d + first + count];
        for (k, zji) in col.iter().enumerate() {
            let zij = z[(first + k) * d + j];
            rows[k * d + j] = (zij.re + zij.im) + (zji.re - zji.im);
        }
    }
}

/// Rows `first..` of the Hermitian `ρ` whose real form is `x` (`d × d`):
/// `ρ_ij = (x_ij + x_ji)/2 + i (x_ij − x_ji)/2`. Column `i` of `x` is read for the
/// rows of the group together, a few consecutive entries at a time.
fn hermitian_rows(x: &[f64], d: usize, first: usize, rows: &mut [Complex64]) {
    let count = rows.len() / d;
    for j in 0..d {
        let col = &x[j * d + first..j * d + first + count];
        for (k, &xji) in col.iter().enumerate() {
            let xij = x[(first + k) * d + j];
            rows[k * d + j] = Complex64::new(0.5 * (xij + xji), 0.5 * (xij - xji));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::NoInterrupt;

    type Dense = Vec<Vec<Complex64>>;
    /// (rate, jump, source block, target block)
    type DenseChannel = (f64, Dense, usize, usize);

    fn c(re: f64, im: f64) -> Complex64 {
        Complex64::new(re, im)
    }

    /// A deterministic pseudo-random sparse matrix (about `fill` of the entries).
    fn random_dense(rows: usize, cols: usize, seed: u64, fill: f64) -> Dense {
        let mut state = seed
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let mut next = move || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        (0..rows)
            .map(|_| {
                (0..cols)
                    .map(|_| {
                        if next() < fill {
                            c(next() - 0.5, next() - 0.5)
                        } else {
                            c(0.0, 0.0)
                        }
                    })
                    .collect()
            })
            .collect()
    }

    fn to_sparse(m: &Dense, cols: usize) -> SparseBlock {
        let mut indptr = vec![0];
        let mut indices = Vec::new();
        let mut data = Vec::new();
        for row in m {
            for (j, &v) in row.iter().enumerate() {
                if v != c(0.0, 0.0) {
                    indices.push(j);
                    data.push(v);
                }
            }
            indptr.push(data.len());
        }
        SparseBlock::new(m.len(), cols, indptr, indices, data).unwrap()
    }

    fn mul(a: &Dense, b: &Dense) -> Dense {
        let (n, m, p) = (a.len(), b.len(), b[0].len());
        (0..n)
            .map(|i| (0..p).map(|j| (0..m).map(|k| a[i][k] * b[k][j]).sum()).collect())
            .collect()
    }

    fn dagger(a: &Dense) -> Dense {
        let (n, m) = (a.len(), a[0].len());
        (0..m).map(|j| (0..n).map(|i| a[i][j].conj()).collect()).collect()
    }

    /// The Lindblad form (Lindblad 1976; Gorini, Kossakowski & Sudarshan 1976) in
    /// dense matrices, as written in the module docs.
    fn dense_reference(k: &[Dense], chans: &[DenseChannel], rho: &[Dense]) -> Vec<Dense> {
        let mut out: Vec<Dense> = Vec::new();
        for (kb, r) in k.iter().zip(rho) {
            let kr = mul(kb, r);
            let rk = mul(r, &dagger(kb));
            out.push(
                kr.iter()
                    .zip(&rk)
                    .map(|(a, b)| a.iter().zip(b).map(|(x, y)| MINUS_I * (x - y)).collect())
                    .collect(),
            );
        }
        for (rate, j, s, t) in chans {
            let g = mul(&mul(j, &rho[*s]), &dagger(j));
            for (o, gr) in out[*t].iter_mut().zip(&g) {
                for (ov, gv) in o.iter_mut().zip(gr) {
                    *ov += gv * *rate;
                }
            }
        }
        out
    }

    fn flat(blocks: &[Dense]) -> Vec<Complex64> {
        blocks.iter().flat_map(|b| b.iter().flatten().copied()).collect()
    }

    fn case() -> (LiouvillianProduct, Vec<Dense>, Vec<DenseChannel>) {
        let dims = [5usize, 7, 3];
        let k: Vec<Dense> = dims
            .iter()
            .enumerate()
            .map(|(b, &d)| random_dense(d, d, 10 + b as u64, 0.5))
            .collect();
        let chans = vec![
            (0.7, random_dense(7, 5, 1, 0.4), 0usize, 1usize),
            (1.3, random_dense(3, 7, 2, 0.5), 1, 2),
            (0.2, random_dense(7, 7, 3, 0.3), 1, 1),
            (0.9, random_dense(5, 3, 4, 0.6), 2, 0),
        ];
        let product = LiouvillianProduct::new(
            k.iter().zip(dims).map(|(m, d)| to_sparse(m, d)).collect(),
            chans
                .iter()
                .map(|(rate, j, s, t)| Channel {
                    rate: *rate,
                    jump: to_sparse(j, dims[*s]),
                    source: *s,
                    target: *t,
                })
                .collect(),
        )
        .unwrap();
        (product, k, chans)
    }

    #[test]
    fn product_matches_the_dense_lindblad_form() {
        let (product, k, chans) = case();
        let rho: Vec<Dense> = product
            .dims()
            .iter()
            .enumerate()
            .map(|(b, &d)| random_dense(d, d, 100 + b as u64, 1.0))
            .collect();
        let expect = flat(&dense_reference(&k, &chans, &rho));
        for threads in [1, 2, 3] {
            let runner = Runner::with_threads(Some(threads)).unwrap();
            let mut out = vec![c(0.0, 0.0); product.size()];
            product
                .apply(&flat(&rho), &mut out, &runner, &NoInterrupt)
                .unwrap();
            for (a, b) in out.iter().zip(&expect) {
                assert!((a - b).norm() < 1e-12, "{a} vs {b}");
            }
        }
    }

    #[test]
    fn real_form_matches_the_complex_product_and_thread_counts_agree() {
        let (product, _k, _chans) = case();
        // Hermitian blocks and their real form Re ρ + Im ρ.
        let rho: Vec<Dense> = product
            .dims()
            .iter()
            .enumerate()
            .map(|(b, &d)| {
                let a = random_dense(d, d, 200 + b as u64, 1.0);
                let ad = dagger(&a);
                a.iter()
                    .zip(&ad)
                    .map(|(r, s)| r.iter().zip(s).map(|(x, y)| (x + y) * 0.5).collect())
                    .collect()
            })
            .collect();
        let x: Vec<f64> = flat(&rho).iter().map(|z| z.re + z.im).collect();
        let mut full = vec![c(0.0, 0.0); product.size()];
        let runner = Runner::with_threads(Some(2)).unwrap();
        product
            .apply(&flat(&rho), &mut full, &runner, &NoInterrupt)
            .unwrap();
        let mut first: Option<Vec<f64>> = None;
        for threads in [1, 2, 4] {
            let runner = Runner::with_threads(Some(threads)).unwrap();
            let mut y = vec![0.0; product.size()];
            product
                .apply_hermitian_real(&x, &mut y, &runner, &NoInterrupt)
                .unwrap();
            for (a, z) in y.iter().zip(&full) {
                assert!((a - (z.re + z.im)).abs() < 1e-12);
            }
            match &first {
                None => first = Some(y),
                Some(f) => assert_eq!(f, &y, "results differ between thread counts"),
            }
        }
    }

    #[test]
    fn bad_shapes_and_rates_are_refused() {
        let k = to_sparse(&random_dense(3, 3, 1, 0.5), 3);
        let j = to_sparse(&random_dense(2, 3, 2, 0.5), 3);
        let bad = LiouvillianProduct::new(
            vec![k.clone()],
            vec![Channel {
                rate: 1.0,
                jump: j,
                source: 0,
                target: 0,
            }],
        );
        assert!(matches!(bad, Err(CoreError::Shape(_))));
        let j = to_sparse(&random_dense(3, 3, 2, 0.5), 3);
        let bad = LiouvillianProduct::new(
            vec![k.clone()],
            vec![Channel {
                rate: -1.0,
                jump: j,
                source: 0,
                target: 0,
            }],
        );
        assert!(matches!(bad, Err(CoreError::InvalidArgument(_))));
        assert!(SparseBlock::new(2, 2, vec![0, 1, 1], vec![5], vec![c(1.0, 0.0)]).is_err());
        let product = LiouvillianProduct::new(vec![k], vec![]).unwrap();
        let mut out = vec![c(0.0, 0.0); 9];
        let e = product.apply(&[c(0.0, 0.0); 4], &mut out, &Runner::global(), &NoInterrupt);
        assert!(matches!(e, Err(CoreError::Shape(_))));
    }

    #[test]
    fn interrupt_stops_the_product() {
        struct Always;
        impl Interrupt for Always {
            fn requested(&self) -> bool {
                true
            }
        }
        let (product, _k, _c) = case();
        let rho = vec![c(0.0, 0.0); product.size()];
        let mut out = rho.clone();
        let e = product.apply(&rho, &mut out, &Runner::global(), &Always);
        assert_eq!(e, Err(CoreError::Interrupted));
    }
}
