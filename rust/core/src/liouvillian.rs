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
    /// The same Liouvillian in real arithmetic, when it has one (see [`RealParts`]).
    real: Option<RealParts>,
}

/// A real CSR matrix (the real or imaginary part of a [`SparseBlock`]).
#[derive(Debug, Clone, PartialEq)]
struct RealSparse {
    indptr: Vec<usize>,
    indices: Vec<u32>,
    data: Vec<f64>,
}

impl RealSparse {
    /// The nonzero entries of one part of `m`.
    fn part(m: &SparseBlock, take: impl Fn(Complex64) -> f64) -> Self {
        let mut indptr = Vec::with_capacity(m.rows + 1);
        let mut indices = Vec::new();
        let mut data = Vec::new();
        indptr.push(0);
        for r in 0..m.rows {
            let (cols, vals) = m.row(r);
            for (&c, &v) in cols.iter().zip(vals) {
                let x = take(v);
                if x != 0.0 {
                    indices.push(c);
                    data.push(x);
                }
            }
            indptr.push(data.len());
        }
        RealSparse {
            indptr,
            indices,
            data,
        }
    }

    #[inline]
    fn row(&self, r: usize) -> (&[u32], &[f64]) {
        let (a, b) = (self.indptr[r], self.indptr[r + 1]);
        (&self.indices[a..b], &self.data[a..b])
    }

    /// Whether the matrix equals its transpose to within `tol` (entry by entry).
    fn is_symmetric(&self, tol: f64) -> bool {
        let entry = |r: usize, c: u32| -> f64 {
            let (cols, vals) = self.row(r);
            cols.iter()
                .zip(vals)
                .filter(|(&k, _)| k == c)
                .map(|(_, &v)| v)
                .sum()
        };
        (0..self.indptr.len() - 1).all(|r| {
            let (cols, vals) = self.row(r);
            cols.iter()
                .zip(vals)
                .all(|(&c, &v)| (entry(c as usize, r as u32) - v).abs() <= tol)
        })
    }
}

/// `K_b = H_b − (i/2) Γ_b` with `H_b` and `Γ_b` real symmetric and every jump real: the
/// case of a real Hamiltonian with real jumps (loss, pumping, dephasing). Then the real
/// form `X = Re ρ + Im ρ` of a Hermitian `ρ` maps to
///
/// ```text
/// R(𝓛ρ) = [H, X]ᵀ − ½ {Γ, X} + Σ_k γ_k J_k X_s J_kᵀ
/// ```
///
/// (the commutator turns the symmetric part `Re ρ` into the antisymmetric part of the
/// result and back, hence the transpose), all in real arithmetic on `X` itself: no
/// complex copy of `ρ`, a quarter of the multiply-adds.
#[derive(Debug, Clone)]
struct RealParts {
    hamiltonians: Vec<RealSparse>,
    decays: Vec<RealSparse>,
    jumps: Vec<RealSparse>,
    /// `Γ_b` as its diagonal when it is diagonal (loss, pumping and dephasing of
    /// single modes): `−½{Γ, X}_ij = −½(g_i + g_j) X_ij`.
    decay_diagonals: Vec<Option<Vec<f64>>>,
    /// Each jump as `J_ij = w_i δ(j, c_i)` when every row has at most one entry (the
    /// ladder operators of one mode): `(J X Jᵀ)_ij = w_i w_j X[c_i, c_j]`, a gather.
    jump_rows: Vec<Option<(Vec<u32>, Vec<f64>)>>,
}

impl RealSparse {
    fn diagonal(&self) -> Option<Vec<f64>> {
        let rows = self.indptr.len() - 1;
        let mut out = vec![0.0; rows];
        for (r, o) in out.iter_mut().enumerate() {
            let (cols, vals) = self.row(r);
            for (&c, &v) in cols.iter().zip(vals) {
                if c as usize != r {
                    return None;
                }
                *o += v;
            }
        }
        Some(out)
    }

    fn single_entry_rows(&self) -> Option<(Vec<u32>, Vec<f64>)> {
        let rows = self.indptr.len() - 1;
        let mut columns = vec![0u32; rows];
        let mut weights = vec![0.0; rows];
        for r in 0..rows {
            let (cols, vals) = self.row(r);
            match cols.len() {
                0 => {}
                1 => {
                    columns[r] = cols[0];
                    weights[r] = vals[0];
                }
                _ => return None,
            }
        }
        Some((columns, weights))
    }
}

impl RealParts {
    /// The real parts when the conditions above hold (symmetry to within 10⁻¹³ of the
    /// largest entry); None otherwise.
    fn detect(effective: &[SparseBlock], channels: &[Channel]) -> Option<Self> {
        if channels.iter().any(|c| c.jump.data.iter().any(|v| v.im != 0.0)) {
            return None;
        }
        let largest = effective
            .iter()
            .flat_map(|k| k.data.iter().map(|v| v.re.abs().max(v.im.abs())))
            .fold(0.0f64, f64::max);
        let tol = 1e-13 * largest;
        let hamiltonians: Vec<RealSparse> = effective.iter().map(|k| RealSparse::part(k, |v| v.re)).collect();
        let decays: Vec<RealSparse> = effective
            .iter()
            .map(|k| RealSparse::part(k, |v| -2.0 * v.im))
            .collect();
        if !hamiltonians
            .iter()
            .chain(&decays)
            .all(|m| m.is_symmetric(2.0 * tol))
        {
            return None;
        }
        let jumps: Vec<RealSparse> = channels
            .iter()
            .map(|c| RealSparse::part(&c.jump, |v| v.re))
            .collect();
        let decay_diagonals = decays.iter().map(RealSparse::diagonal).collect();
        let jump_rows = jumps.iter().map(RealSparse::single_entry_rows).collect();
        Some(RealParts {
            hamiltonians,
            decays,
            jumps,
            decay_diagonals,
            jump_rows,
        })
    }
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
        let real = RealParts::detect(&effective, &channels);
        Ok(LiouvillianProduct {
            dims,
            offsets,
            effective,
            channels,
            incoming,
            real,
        })
    }

    /// The block dimensions `d_b`.
    pub fn dims(&self) -> &[usize] {
        &self.dims
    }

    /// Whether [`LiouvillianProduct::apply_hermitian_real`] runs in real arithmetic (a
    /// real Hamiltonian with real jumps, see [`RealParts`]).
    pub fn real_arithmetic(&self) -> bool {
        self.real.is_some()
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
        self.apply_hermitian_real_reusing(x, y, &mut Vec::new(), runner, interrupt)
    }

    /// [`LiouvillianProduct::apply_hermitian_real`] with the work matrix of the real
    /// path kept in `work` between calls (grown when it is too short): a solver making
    /// many products then touches fresh memory for none of them.
    ///
    /// # Errors
    /// As [`LiouvillianProduct::apply_hermitian_real`].
    pub fn apply_hermitian_real_reusing(
        &self,
        x: &[f64],
        y: &mut [f64],
        work: &mut Vec<f64>,
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        self.check_len(x.len(), "x")?;
        self.check_len(y.len(), "y")?;
        if let Some(real) = &self.real {
            return self.apply_real_parts(real, x, y, work, runner, interrupt);
        }
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

    /// [`LiouvillianProduct::apply_hermitian_real`] in real arithmetic: per block, the
    /// rows of `W = [H, X]` first, then each output row from column `i` of `W` (a few
    /// consecutive entries at a time), the decay terms and the jumps.
    fn apply_real_parts(
        &self,
        real: &RealParts,
        x: &[f64],
        y: &mut [f64],
        commutator: &mut Vec<f64>,
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        let widest = self.dims.iter().copied().max().unwrap_or(0);
        if commutator.len() < widest * widest {
            *commutator = memory::try_filled(widest * widest, 0.0, "a work copy of a Liouvillian product")?;
        }
        for (b, &d) in self.dims.iter().enumerate() {
            if d == 0 {
                continue;
            }
            let (lo, hi) = (self.offsets[b], self.offsets[b + 1]);
            let xb = &x[lo..hi];
            let h = &real.hamiltonians[b];
            let w = &mut commutator[..d * d];
            runner.for_matrix_rows(w, d, interrupt, |first, rows| {
                rows.fill(0.0);
                for (k, row) in rows.chunks_mut(d).enumerate() {
                    add_products_row(h, xb, d, first + k, 1.0, -1.0, row);
                }
                Ok(())
            })?;
            let w = &commutator[..d * d];
            runner.for_matrix_rows(&mut y[lo..hi], d, interrupt, |first, rows| {
                transpose_rows(w, d, first, rows);
                let widest_source = self.incoming[b]
                    .iter()
                    .map(|&c| self.dims[self.channels[c].source])
                    .max()
                    .unwrap_or(0);
                let mut scratch = vec![0.0; widest_source];
                for (k, row) in rows.chunks_mut(d).enumerate() {
                    self.real_dissipation_row(real, b, first + k, x, row, &mut scratch);
                }
                Ok(())
            })?;
        }
        Ok(())
    }

    /// Adds row `i` of block `b` of `−½{Γ, X} + Σ γ J X_s Jᵀ` to `out`.
    fn real_dissipation_row(
        &self,
        real: &RealParts,
        b: usize,
        i: usize,
        x: &[f64],
        out: &mut [f64],
        scratch: &mut [f64],
    ) {
        let d = self.dims[b];
        let xb = &x[self.offsets[b]..self.offsets[b + 1]];
        let xi = &xb[i * d..(i + 1) * d];
        if let Some(g) = &real.decay_diagonals[b] {
            let gi = g[i];
            for ((o, &v), &gj) in out.iter_mut().zip(xi).zip(g) {
                *o -= 0.5 * (gi + gj) * v;
            }
        } else {
            add_products_row(&real.decays[b], xb, d, i, -0.5, -0.5, out);
        }
        for &c in &self.incoming[b] {
            let ch = &self.channels[c];
            let ds = self.dims[ch.source];
            let xs = &x[self.offsets[ch.source]..self.offsets[ch.source + 1]];
            if let Some((columns, weights)) = &real.jump_rows[c] {
                let wi = weights[i];
                if wi == 0.0 {
                    continue;
                }
                let src = &xs[columns[i] as usize * ds..(columns[i] as usize + 1) * ds];
                let scale = ch.rate * wi;
                for ((o, &cj), &wj) in out.iter_mut().zip(columns).zip(weights) {
                    *o += scale * wj * src[cj as usize];
                }
                continue;
            }
            let jump = &real.jumps[c];
            let (cols, vals) = jump.row(i);
            if cols.is_empty() {
                continue;
            }
            let t = &mut scratch[..ds];
            t.fill(0.0);
            for (&col, &v) in cols.iter().zip(vals) {
                let src = &xs[col as usize * ds..(col as usize + 1) * ds];
                for (tv, &r) in t.iter_mut().zip(src) {
                    *tv += v * r;
                }
            }
            for (j, o) in out.iter_mut().enumerate() {
                let (cols, vals) = jump.row(j);
                if cols.is_empty() {
                    continue;
                }
                let acc: f64 = cols.iter().zip(vals).map(|(&col, &v)| t[col as usize] * v).sum();
                *o += ch.rate * acc;
            }
        }
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

/// Adds row `i` of `left · MX + right · XM` (`d × d`, `M` real symmetric) to `out`:
/// rows of `X` combined for `MX`, row `i` of `X` dotted with the rows of `M` for `XM`.
/// The commutator is `(1, −1)`, the decay's anticommutator `(−½, −½)`.
fn add_products_row(m: &RealSparse, x: &[f64], d: usize, i: usize, left: f64, right: f64, out: &mut [f64]) {
    let (cols, vals) = m.row(i);
    for (&c, &v) in cols.iter().zip(vals) {
        let src = &x[c as usize * d..(c as usize + 1) * d];
        let w = left * v;
        for (o, &r) in out.iter_mut().zip(src) {
            *o += w * r;
        }
    }
    let xi = &x[i * d..(i + 1) * d];
    for (j, o) in out.iter_mut().enumerate() {
        let (cols, vals) = m.row(j);
        if cols.is_empty() {
            continue;
        }
        let acc: f64 = cols.iter().zip(vals).map(|(&c, &v)| xi[c as usize] * v).sum();
        *o += right * acc;
    }
}

/// Rows `first..` of `Wᵀ` (`d × d`), column `i` of `W` read a few entries at a time.
fn transpose_rows(w: &[f64], d: usize, first: usize, rows: &mut [f64]) {
    let count = rows.len() / d;
    for j in 0..d {
        let col = &w[j * d + first..j * d + first + count];
        for (k, &wji) in col.iter().enumerate() {
            rows[k * d + j] = wji;
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

    /// `Re z + Im z` of every entry: the real form of Hermitian blocks.
    fn real_form(z: &[Complex64]) -> Vec<f64> {
        z.iter().map(|z| z.re + z.im).collect()
    }

    /// Random Hermitian blocks `(A + A†)/2` of the given sizes.
    fn hermitian_blocks(dims: &[usize], seed: u64) -> Vec<Dense> {
        dims.iter()
            .enumerate()
            .map(|(b, &d)| {
                let a = random_dense(d, d, seed + b as u64, 1.0);
                let ad = dagger(&a);
                a.iter()
                    .zip(&ad)
                    .map(|(r, s)| r.iter().zip(s).map(|(x, y)| (x + y) * 0.5).collect())
                    .collect()
            })
            .collect()
    }

    /// The product of dense `K_b` and channels `(rate, jump, source, target)`.
    fn product_from(k: &[Dense], chans: &[DenseChannel], dims: &[usize]) -> LiouvillianProduct {
        LiouvillianProduct::new(
            k.iter().zip(dims).map(|(m, &d)| to_sparse(m, d)).collect(),
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
        .unwrap()
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
        let product = product_from(&k, &chans, &dims);
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
        let rho = hermitian_blocks(product.dims(), 200);
        let x = real_form(&flat(&rho));
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

    /// A random real symmetric matrix (about `fill` of the entries).
    fn random_symmetric(d: usize, seed: u64, fill: f64) -> Vec<Vec<f64>> {
        let a = random_dense(d, d, seed, fill);
        (0..d)
            .map(|i| (0..d).map(|j| a[i][j].re + a[j][i].re).collect())
            .collect()
    }

    #[test]
    fn real_hamiltonian_and_real_jumps_take_real_arithmetic() {
        // K_b = H_b − (i/2) Γ_b with H_b, Γ_b real symmetric and real jumps, as the
        // solvers build them for a real Hamiltonian with loss, pumping or dephasing.
        let dims = [6usize, 4];
        let k: Vec<Dense> = dims
            .iter()
            .enumerate()
            .map(|(b, &d)| {
                let h = random_symmetric(d, 30 + b as u64, 0.5);
                let g = random_symmetric(d, 40 + b as u64, 0.3);
                (0..d)
                    .map(|i| (0..d).map(|j| c(h[i][j], -0.5 * g[i][j])).collect())
                    .collect()
            })
            .collect();
        let real = |m: Dense| -> Dense {
            m.iter()
                .map(|r| r.iter().map(|v| c(v.re, 0.0)).collect())
                .collect()
        };
        let chans: Vec<DenseChannel> = vec![
            (0.8, real(random_dense(4, 6, 5, 0.4)), 0, 1),
            (0.3, real(random_dense(6, 6, 6, 0.3)), 0, 0),
            (1.1, real(random_dense(6, 4, 7, 0.5)), 1, 0),
        ];
        let make = |chans: &[DenseChannel]| product_from(&k, chans, &dims);
        let product = make(&chans);
        assert!(product.real_arithmetic());
        let rho = hermitian_blocks(&dims, 300);
        let expect = real_form(&flat(&dense_reference(&k, &chans, &rho)));
        let x = real_form(&flat(&rho));
        let mut first: Option<Vec<f64>> = None;
        for threads in [1, 2, 3] {
            let runner = Runner::with_threads(Some(threads)).unwrap();
            let mut y = vec![0.0; product.size()];
            product
                .apply_hermitian_real(&x, &mut y, &runner, &NoInterrupt)
                .unwrap();
            for (a, b) in y.iter().zip(&expect) {
                assert!((a - b).abs() < 1e-12, "{a} vs {b}");
            }
            match &first {
                None => first = Some(y),
                Some(f) => assert_eq!(f, &y, "results differ between thread counts"),
            }
        }
        // One complex jump, or a K that is not of that form, keeps complex arithmetic.
        let mut complex = chans.clone();
        complex[1].1[0][0] = c(0.5, 0.25);
        assert!(!make(&complex).real_arithmetic());
        let (general, _, _) = case();
        assert!(!general.real_arithmetic());
    }

    #[test]
    fn diagonal_decay_and_single_entry_jumps_take_the_gathers() {
        // Loss-like jumps (at most one entry per row, some rows empty) and a diagonal Γ:
        // the gather paths of the real arithmetic, against the dense Lindblad form.
        let dims = [5usize, 6];
        let ladder = |rows: usize, cols: usize, shift: usize, seed: f64| -> Dense {
            (0..rows)
                .map(|r| {
                    (0..cols)
                        .map(|c| {
                            if r % 4 != 3 && c == (r + shift) % cols {
                                Complex64::new(seed + r as f64 * 0.1, 0.0)
                            } else {
                                Complex64::new(0.0, 0.0)
                            }
                        })
                        .collect()
                })
                .collect()
        };
        let chans: Vec<DenseChannel> = vec![
            (0.6, ladder(5, 6, 1, 0.5), 1, 0),
            (0.9, ladder(6, 6, 2, 0.3), 1, 1),
            (0.4, ladder(6, 5, 0, 0.7), 0, 1),
        ];
        let k: Vec<Dense> = dims
            .iter()
            .enumerate()
            .map(|(b, &d)| {
                let h = random_symmetric(d, 50 + b as u64, 0.5);
                (0..d)
                    .map(|i| {
                        (0..d)
                            .map(|j| c(h[i][j], if i == j { -0.3 * (i as f64 + 1.0) } else { 0.0 }))
                            .collect()
                    })
                    .collect()
            })
            .collect();
        let product = product_from(&k, &chans, &dims);
        let real = product.real.as_ref().expect("real arithmetic");
        assert!(real.decay_diagonals.iter().all(Option::is_some));
        assert!(real.jump_rows.iter().all(Option::is_some));
        let rho = hermitian_blocks(&dims, 400);
        let expect = real_form(&flat(&dense_reference(&k, &chans, &rho)));
        let x = real_form(&flat(&rho));
        let mut y = vec![0.0; product.size()];
        let mut work = Vec::new();
        for _ in 0..2 {
            // twice with the same work matrix: nothing is left over from the first call
            product
                .apply_hermitian_real_reusing(&x, &mut y, &mut work, &Runner::global(), &NoInterrupt)
                .unwrap();
            for (a, b) in y.iter().zip(&expect) {
                assert!((a - b).abs() < 1e-12, "{a} vs {b}");
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
