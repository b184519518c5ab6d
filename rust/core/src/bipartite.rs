//! Bipartite ("two-table") products: the modes are cut into a left group `0..cut`
//! and a right group `cut..M`, and a basis state is a pair (left state, right state).
//!
//! # Layout
//! In the lexicographic basis (mode 0 most significant) the states that share a left
//! state form one contiguous segment, and the segments follow the left states in their
//! own lexicographic order: the rank of a state is the rank contribution of its left
//! modes (the segment's offset) plus that of its right modes (the right state's rank
//! among the right states owing the same residue). So the vector is, with no
//! permutation, a stack of rows `X[l, ·]` of length `d_R(r_l)`, where `r_l` is the
//! residue the left state leaves to the right modes; rows with equal residue form the
//! dense block `X_q` of the method of Lin (1990, Phys. Rev. B 42, 6561), here for
//! bosonic sectors with weighted, modular or no conserved charge.
//!
//! # Product
//! Each term is one of three kinds, by the modes it touches:
//! - left only (including diagonal terms and the identity): a small sparse matrix
//!   `A_L` on the left states, applied as `Y[l', ·] += A_L[l', l] X[l, ·]` (whole rows);
//! - right only: one small sparse matrix `A_R(r)` per residue, applied inside each row,
//!   `Y[l', ·] += A_R X[l', ·]`;
//! - crossing: `c · L ⊗ R`, gathered as `Y[l', i'] += c L[l', l] R[i', i] X[l, i]` from
//!   a table of `R` per output residue.
//!
//! The output is split by rows; each row is written by one thread in slabs of columns
//! that stay in the first-level cache, with its contributions added in a fixed order
//! (right-only terms, then left-only terms by source row, then crossing terms), so
//! results are bit-identical for any thread count.

use crate::error::{CoreError, CoreResult};
use crate::memory::try_with_capacity;
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::space::FockSpace;
use crate::terms::falling;
use crate::terms::Operator;
use rayon::prelude::*;
use std::collections::{HashMap, HashSet};
use std::ops::Range;
use std::sync::OnceLock;

/// Columns of a row processed together (the slab kept in the first-level cache).
const SLAB: usize = 4096;
/// Tables whose entries form runs this long on average are applied run by run.
const MIN_RUN: usize = 6;
/// Elements of output a work item covers (at least one row).
const CHUNK_ELEMENTS: usize = 1 << 15;
/// Elements of output between two interruption checks.
const CHECK_ELEMENTS: usize = 1 << 22;
/// Square roots of the integers below this are looked up.
const SQRT_TABLE: usize = 1 << 12;

/// Number of residue classes the space's tables use.
fn residue_count(space: &FockSpace) -> usize {
    space.residue_count()
}

/// Visit every state of modes `a..b` that starts owing `r0` and can be completed, in
/// lexicographic order: `alive(mode, residue)` says whether modes `mode..` can still
/// be filled when `residue` is owed. `visit(occupations, residue_after)`.
fn enumerate(
    space: &FockSpace,
    a: usize,
    b: usize,
    r0: usize,
    alive: impl Fn(usize, usize) -> bool,
    mut visit: impl FnMut(&[u32], usize),
) {
    if !alive(a, r0) {
        return;
    }
    let m = b - a;
    if m == 0 {
        visit(&[], r0);
        return;
    }
    let caps = space.caps();
    let mut occ = vec![0u32; m];
    let mut res = vec![0usize; m + 1];
    res[0] = r0;
    let mut p = 0usize;
    let mut v = 0u32;
    loop {
        let mode = a + p;
        let mut next = None;
        while v <= caps[mode] {
            match space.step(res[p], mode, v) {
                Some(r2) if alive(mode + 1, r2) => {
                    next = Some(r2);
                    break;
                }
                Some(_) => v += 1,
                None => break,
            }
        }
        match next {
            Some(r2) => {
                occ[p] = v;
                res[p + 1] = r2;
                if p + 1 == m {
                    visit(&occ, r2);
                    v += 1;
                } else {
                    p += 1;
                    v = 0;
                }
            }
            None => {
                if p == 0 {
                    return;
                }
                p -= 1;
                v = occ[p] + 1;
            }
        }
    }
}

/// Apply a gathering monomial (factors `(mode, removed, added)` relative to `base`)
/// to `occ` (the occupations of modes `base..`), in place; returns the squared
/// amplitude, or `None` when the image leaves the truncated space.
#[inline]
fn gather_image(caps: &[u32], base: usize, factors: &[(usize, u32, u32)], occ: &mut [u32]) -> Option<f64> {
    let mut amp_sq = 1.0;
    for &(mode, lower, raise) in factors {
        let n = occ[mode - base];
        if n < lower {
            return None;
        }
        let mid = n - lower;
        let w = mid + raise;
        if w > caps[mode] {
            return None;
        }
        amp_sq *= falling(n, lower) * falling(w, raise);
        occ[mode - base] = w;
    }
    Some(amp_sq)
}

/// Rank contribution of modes `a..a+occ.len()` owing `r0`, and the residue left after
/// them; `None` when a step is impossible.
#[inline]
fn partial_rank(space: &FockSpace, a: usize, r0: usize, occ: &[u32]) -> Option<(u64, usize)> {
    let caps = space.caps();
    let mut res = r0;
    let mut rank = 0u64;
    for (k, &v) in occ.iter().enumerate() {
        let mode = a + k;
        if v > caps[mode] {
            return None;
        }
        rank += space.offset(mode, res, v);
        res = space.step(res, mode, v)?;
    }
    Some((rank, res))
}

/// The residue owed after a right factor changes the right charges of a state owing
/// `r` by `deltas` (the source state's residue is `r + deltas`, digit by digit with
/// several charges), if such a residue exists.
fn shifted_residue(space: &FockSpace, r: usize, deltas: &[i64]) -> Option<usize> {
    space.shift_residue(r, deltas)
}

/// What a cut costs, from counts alone (no tables built).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CutCost {
    /// The cut: left modes `0..cut`.
    pub cut: usize,
    /// Left states (rows of the bipartite layout).
    pub left_states: f64,
    /// Right states summed over the residues the rows use.
    pub right_states: f64,
    /// Terms acting on both sides of the cut.
    pub crossing: usize,
    /// Entries of the tables the product keeps (upper bound).
    pub table_entries: f64,
    /// Relative cost of one product (arbitrary units).
    pub score: f64,
}

/// Estimate the cost of every cut `1..=M` of `op` on `space`.
pub fn cut_costs<S: Scalar>(space: &FockSpace, op: &Operator<S>) -> Vec<CutCost> {
    let m = space.modes();
    let rc = residue_count(space);
    let caps = space.caps();
    let dim = space.dim() as f64;
    // reach[r]: number of prefixes of modes 0..i that owe r (saturating in f64).
    let mut reach = vec![0.0f64; rc];
    reach[space.start_residue()] = 1.0;
    // (lowest mode, highest mode, diagonal) of each term.
    let spans: Vec<(usize, usize, bool)> = (0..op.len())
        .map(|t| {
            let mut lo = usize::MAX;
            let mut hi = 0;
            let mut diagonal = true;
            for (mode, lower, raise) in op.factors(t) {
                lo = lo.min(mode);
                hi = hi.max(mode);
                diagonal &= lower == raise;
            }
            (lo, hi, diagonal)
        })
        .collect();
    let mut out = Vec::with_capacity(m);
    for cut in 1..=m {
        let i = cut - 1;
        let mut next = vec![0.0f64; rc];
        for (r, &count) in reach.iter().enumerate() {
            if count == 0.0 {
                continue;
            }
            for v in 0..=caps[i] {
                match space.step(r, i, v) {
                    Some(r2) => next[r2] += count,
                    None => break,
                }
            }
        }
        reach = next;
        let mut left = 0.0;
        let mut right = 0.0;
        for (r, &count) in reach.iter().enumerate() {
            let d = space.completions(cut, r);
            if count > 0.0 && d > 0 {
                left += count;
                right += d as f64;
            }
        }
        let (mut t_left, mut t_right, mut crossing) = (0usize, 0usize, 0usize);
        let mut right_diag = false;
        for &(lo, hi, diagonal) in &spans {
            if lo == usize::MAX || hi < cut {
                t_left += 1;
            } else if lo >= cut {
                if diagonal {
                    right_diag = true;
                } else {
                    t_right += 1;
                }
            } else {
                crossing += 1;
            }
        }
        let table_entries = left * (2.0 + t_left as f64 + crossing as f64)
            + right * (1.0 + t_right as f64 + 2.0 * crossing as f64);
        // Per element: a right-only or crossing term is a gather through an index
        // table, a left-only term (or the right diagonal) a streamed multiple of a row;
        // per row: each left-only or crossing term has a fixed set-up cost; tables cost
        // their construction. Weights measured roughly on the Bose-Hubbard ring.
        let per_element =
            2.0 * t_right as f64 + 0.5 * (t_left as f64 + right_diag as u8 as f64) + 2.5 * crossing as f64;
        let score =
            dim * per_element + left * (12.0 * (t_left + crossing) as f64 + 40.0) + 2.0 * table_entries;
        out.push(CutCost {
            cut,
            left_states: left,
            right_states: right,
            crossing,
            table_entries,
            score,
        });
    }
    out
}

/// The cut the automatic choice takes, or `None` when no cut keeps the tables well
/// below the size of the stored matrix (the row kernel is used then).
pub fn choose_cut<S: Scalar>(space: &FockSpace, op: &Operator<S>) -> Option<usize> {
    let terms = op.len() as f64 + 1.0;
    let dim = space.dim() as f64;
    cut_costs(space, op)
        .into_iter()
        .filter(|c| c.cut < space.modes() || space.modes() == 1)
        .filter(|c| c.left_states < u32::MAX as f64 && c.table_entries <= 0.5 * dim * terms + 4096.0)
        .min_by(|a, b| a.score.total_cmp(&b.score))
        .map(|c| c.cut)
}

/// A right factor's gather table for one output residue: `y[dst] += amp · x[src]`,
/// entries sorted by `dst`.
#[derive(Debug, Clone, Default)]
struct FactorTable {
    dst: Vec<u32>,
    src: Vec<u32>,
    amp: Vec<f64>,
    amp_sq: Vec<f64>,
    /// The same entries as runs `(dst, src, len, amp)` of consecutive destinations and
    /// sources with one amplitude, when they are long enough to be worth it.
    runs: Vec<(u32, u32, u32, f64)>,
    /// Whether the factor is diagonal (each right state is its own source).
    keeps: bool,
}

impl FactorTable {
    /// Whether each right state is its own source (a diagonal factor).
    fn keeps_state(&self) -> bool {
        self.keeps
    }

    /// Group the entries into runs; keep them when they are long on average.
    fn find_runs(&mut self) {
        let mut runs: Vec<(u32, u32, u32, f64)> = Vec::new();
        for p in 0..self.dst.len() {
            if let Some(last) = runs.last_mut() {
                if last.0 + last.2 == self.dst[p] && last.1 + last.2 == self.src[p] && last.3 == self.amp[p] {
                    last.2 += 1;
                    continue;
                }
            }
            runs.push((self.dst[p], self.src[p], 1, self.amp[p]));
        }
        if runs.len() * MIN_RUN <= self.dst.len() {
            self.runs = runs;
        }
    }
}

/// The right-only terms on the right states owing one residue: the diagonal ones
/// summed into a dense array, each other one a gather table.
#[derive(Debug, Clone)]
struct RightBlock<S> {
    /// Number of right states.
    len: usize,
    /// Sum of the right-only diagonal terms at each right state (empty: none).
    diag: Vec<S>,
    /// `(coefficient, table)` of each off-diagonal right-only term that acts here.
    terms: Vec<(S, u32)>,
}

/// An operator prepared for bipartite products on one space.
#[derive(Debug, Clone)]
pub struct Bipartite<S: Scalar> {
    cut: usize,
    dim: u64,
    /// Segment offset of each left state, plus `dim` at the end.
    left_offset: Vec<u64>,
    left_residue: Vec<u32>,
    /// Index into `rights` of each residue (`u32::MAX`: unused).
    right_of_residue: Vec<u32>,
    rights: Vec<RightBlock<S>>,
    /// Left-only terms, gathering CSR over left states (sources sorted).
    al_ptr: Vec<usize>,
    al_src: Vec<u32>,
    al_val: Vec<S>,
    /// Crossing terms, gathering lists over left states: source row, table, coefficient
    /// times the left amplitude.
    cx_ptr: Vec<usize>,
    cx_src: Vec<u32>,
    cx_tab: Vec<u32>,
    cx_val: Vec<S>,
    /// Coefficient and squared left amplitude of each crossing entry (builds compute
    /// `c · sqrt(aL² aR²)`, as the row kernel does, for entries equal to the bit).
    cx_parts: Vec<(S, f64)>,
    tables: Vec<FactorTable>,
    /// Left states in scheduling order.
    order: Vec<u32>,
    /// Work items: ranges of `order`.
    chunks: Vec<(usize, usize)>,
    /// No two off-diagonal terms change the occupations alike (rows are then counted
    /// from the tables).
    distinct_changes: bool,
    /// Merged right-only rows of each block (prepared for builds only).
    merged: OnceLock<Option<Vec<MergedRows<S>>>>,
    /// `sqrt(k)` for `k < SQRT_TABLE`.
    sqrt: Vec<f64>,
}

/// The off-diagonal right-only entries of one block, row by row: `(col, val)` at
/// `ptr[i]..ptr[i + 1]` sorted by column, equal columns summed in term order, zeros
/// dropped; `split[i]` of them lie left of the diagonal.
#[derive(Debug, Clone, Default)]
struct MergedRows<S> {
    ptr: Vec<usize>,
    col: Vec<u32>,
    val: Vec<S>,
    split: Vec<u32>,
}

/// One left state a row gathers from: the left-only term's value from it (if any) and
/// its crossing entries.
#[derive(Debug, Clone)]
struct Source<S> {
    src: usize,
    al: Option<S>,
    cx: Range<usize>,
}

impl<S: Scalar> Bipartite<S> {
    /// Prepare `op` (validated for `space`) with left modes `0..cut`.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] for a cut outside `1..=M` or one whose tables
    /// would not fit 32-bit indices; [`CoreError::TooLarge`] when the tables do not fit
    /// in memory.
    pub fn new(space: &FockSpace, op: &Operator<S>, cut: usize) -> CoreResult<Self> {
        Self::new_interruptible(space, op, cut, &crate::parallel::NoInterrupt)
    }

    /// As [`Bipartite::new`], polling `interrupt` while the tables are built (large
    /// sectors take seconds).
    ///
    /// # Errors
    /// As [`Bipartite::new`], and [`CoreError::Interrupted`].
    pub fn new_interruptible(
        space: &FockSpace,
        op: &Operator<S>,
        cut: usize,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<Self> {
        let m = space.modes();
        if cut == 0 || cut > m {
            return Err(CoreError::InvalidArgument(format!(
                "cut {cut} is outside 1..={m}; the left group must hold at least one mode"
            )));
        }
        let caps = space.caps();
        let rc = residue_count(space);
        let cost = cut_costs(space, op)[cut - 1];
        if cost.left_states >= u32::MAX as f64 {
            return Err(CoreError::InvalidArgument(format!(
                "cut {cut} gives {} left states; choose a cut with fewer left modes",
                cost.left_states
            )));
        }
        let table_bytes = cost.table_entries * (8.0 + std::mem::size_of::<S>() as f64 + 8.0);
        crate::memory::ensure_room(table_bytes as u128, "the tables of the bipartite product")?;

        // Left states: every prefix of modes 0..cut that the right modes can complete.
        let nl = cost.left_states as usize;
        let mut left_occ: Vec<u32> = try_with_capacity(nl * cut, "left states of the bipartite product")?;
        let mut left_residue: Vec<u32> = try_with_capacity(nl, "left states of the bipartite product")?;
        let mut left_offset: Vec<u64> = try_with_capacity(nl + 1, "left states of the bipartite product")?;
        let alive_left = |mode: usize, r: usize| -> bool {
            // A prefix up to `mode` can be extended to a left state with a completion iff
            // the whole space has a completion from here.
            space.completions(mode, r) > 0
        };
        let mut rank = 0u64;
        enumerate(space, 0, cut, space.start_residue(), alive_left, |occ, r| {
            left_occ.extend_from_slice(occ);
            left_residue.push(r as u32);
            left_offset.push(rank);
            rank += space.completions(cut, r);
        });
        left_offset.push(rank);
        debug_assert_eq!(rank, space.dim());
        let nl = left_residue.len();

        // Right blocks for the residues the rows use.
        let mut right_of_residue = vec![u32::MAX; rc];
        let mut used: Vec<usize> = left_residue.iter().map(|&r| r as usize).collect();
        used.sort_unstable();
        used.dedup();
        for d in used.iter().map(|&r| space.completions(cut, r)) {
            if d >= u32::MAX as u64 {
                return Err(CoreError::InvalidArgument(format!(
                    "cut {cut} leaves {d} right states in one block; choose a cut with more left modes"
                )));
            }
        }
        // Whether no two off-diagonal terms share their change of the occupations.
        let mut changes = HashSet::new();
        let mut distinct_changes = true;
        for t in 0..op.len() {
            let change: Vec<(usize, i64)> = op
                .factors(t)
                .filter(|f| f.1 != f.2)
                .map(|(mode, lower, raise)| (mode, raise as i64 - lower as i64))
                .collect();
            if !change.is_empty() && !changes.insert(change) {
                distinct_changes = false;
            }
        }
        // Classify terms.
        let mut left_terms = Vec::new();
        let mut right_terms = Vec::new();
        let mut crossing = Vec::new();
        for t in 0..op.len() {
            let f: Vec<(usize, u32, u32)> = op.factors(t).collect();
            let coef = op.coef(t);
            let (l, r): (Vec<_>, Vec<_>) = f.iter().partition(|x| x.0 < cut);
            if r.is_empty() {
                left_terms.push((coef, l));
            } else if l.is_empty() {
                right_terms.push((coef, r));
            } else {
                crossing.push((coef, l, r));
            }
        }
        // Right states owing each residue the rows use (the crossing tables' output
        // residues are among them), flat (`m - cut` occupations a state), enumerated
        // once and shared by the right blocks and the crossing tables.
        let width = m - cut;
        let right_states: HashMap<usize, Vec<u32>> = used
            .iter()
            .map(|&r| {
                let mut states = Vec::new();
                enumerate(
                    space,
                    cut,
                    m,
                    r,
                    |mode, res| space.completions(mode, res) > 0,
                    |occ, _| states.extend_from_slice(occ),
                );
                (r, states)
            })
            .collect();
        let right_occ_of = |r: usize| right_states[&r].as_slice();
        let mut tables: Vec<FactorTable> = Vec::new();
        let (right_diag, right_off): (Vec<_>, Vec<_>) = right_terms
            .iter()
            .partition(|(_, f)| f.iter().all(|&(_, lower, raise)| lower == raise));
        let mut rights = Vec::with_capacity(used.len());
        for &r in &used {
            if interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
            right_of_residue[r] = rights.len() as u32;
            let states = right_occ_of(r);
            let count = states.len().checked_div(width).unwrap_or(1);
            let mut diag = Vec::new();
            if !right_diag.is_empty() {
                diag = try_with_capacity(count, "right diagonal of the bipartite product")?;
                for occ in states.chunks_exact(width.max(1)).take(count) {
                    let mut d = S::ZERO;
                    for (coef, f) in &right_diag {
                        let mut amp = 1.0;
                        for &(mode, lower, _) in f.iter() {
                            let n = occ[mode - cut];
                            amp *= if n < lower { 0.0 } else { falling(n, lower) };
                        }
                        d += coef.scale(amp);
                    }
                    diag.push(d);
                }
            }
            let mut terms = Vec::new();
            for (coef, f) in &right_off {
                let table = factor_table(space, cut, r, f, states, count);
                if !table.dst.is_empty() {
                    terms.push((*coef, tables.len() as u32));
                    tables.push(table);
                }
            }
            rights.push(RightBlock {
                len: count,
                diag,
                terms,
            });
        }

        // Left-only terms and crossing terms, gathered per left state.
        let left_index = |occ: &[u32]| -> Option<(u32, usize)> {
            let (off, r) = partial_rank(space, 0, space.start_residue(), occ)?;
            if space.completions(cut, r) == 0 {
                return None;
            }
            let k = left_offset[..nl].partition_point(|&o| o < off);
            debug_assert!(k < nl && left_offset[k] == off);
            Some((k as u32, r))
        };
        // Distinct right factors of crossing terms, and their tables per output residue.
        let mut factor_ids: HashMap<Vec<(usize, u32, u32)>, usize> = HashMap::new();
        let mut cross_factor = Vec::with_capacity(crossing.len());
        for (_, _, rf) in &crossing {
            let n = factor_ids.len();
            cross_factor.push(*factor_ids.entry(rf.clone()).or_insert(n));
        }
        let mut factor_list: Vec<Vec<(usize, u32, u32)>> = vec![Vec::new(); factor_ids.len()];
        for (f, &k) in &factor_ids {
            factor_list[k] = f.clone();
        }
        let mut table_of: HashMap<(usize, usize), u32> = HashMap::new();
        let mut al_ptr = Vec::with_capacity(nl + 1);
        let mut al_src = Vec::new();
        let mut al_val = Vec::new();
        let mut cx_ptr = Vec::with_capacity(nl + 1);
        let mut cx_src = Vec::new();
        let mut cx_tab = Vec::new();
        let mut cx_val = Vec::new();
        let mut cx_parts = Vec::new();
        al_ptr.push(0);
        cx_ptr.push(0);
        let mut img = vec![0u32; cut];
        let mut row: Vec<(u32, S)> = Vec::new();
        let mut cross_row: Vec<(u32, u32, S, S, f64)> = Vec::new();
        for l in 0..nl {
            if l % 4096 == 0 && interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
            let occ = &left_occ[l * cut..(l + 1) * cut];
            let r_out = left_residue[l] as usize;
            row.clear();
            for (coef, f) in &left_terms {
                img.copy_from_slice(occ);
                let Some(amp_sq) = gather_image(caps, 0, f, &mut img) else {
                    continue;
                };
                let Some((src, _)) = left_index(&img) else {
                    continue;
                };
                row.push((src, coef.scale(amp_sq.sqrt())));
            }
            // Sort by source (stable: duplicates keep term order) and sum duplicates.
            row.sort_by_key(|e| e.0);
            let mut k = 0;
            while k < row.len() {
                let (src, mut v) = row[k];
                k += 1;
                while k < row.len() && row[k].0 == src {
                    v += row[k].1;
                    k += 1;
                }
                al_src.push(src);
                al_val.push(v);
            }
            al_ptr.push(al_src.len());
            cross_row.clear();
            for (t, (coef, lf, rf)) in crossing.iter().enumerate() {
                img.copy_from_slice(occ);
                let Some(amp_sq) = gather_image(caps, 0, lf, &mut img) else {
                    continue;
                };
                let Some((src, _)) = left_index(&img) else {
                    continue;
                };
                let key = (cross_factor[t], r_out);
                let tab = match table_of.get(&key) {
                    Some(&id) => id,
                    None => {
                        let id = tables.len() as u32;
                        let deltas = space.charge_deltas(
                            rf.iter()
                                .map(|&(mode, lower, raise)| (mode, raise as i64 - lower as i64)),
                        );
                        let table = match shifted_residue(space, r_out, &deltas) {
                            Some(r_src) if space.completions(cut, r_src) > 0 => factor_table(
                                space,
                                cut,
                                r_src,
                                &factor_list[cross_factor[t]],
                                right_occ_of(r_out),
                                space.completions(cut, r_out) as usize,
                            ),
                            _ => FactorTable::default(),
                        };
                        tables.push(table);
                        table_of.insert(key, id);
                        id
                    }
                };
                cross_row.push((src, tab, coef.scale(amp_sq.sqrt()), *coef, amp_sq));
            }
            cross_row.sort_by_key(|e| e.0);
            for &(src, tab, v, coef, amp_sq) in &cross_row {
                cx_src.push(src);
                cx_tab.push(tab);
                cx_val.push(v);
                cx_parts.push((coef, amp_sq));
            }
            cx_ptr.push(cx_src.len());
        }
        drop(left_occ);

        // Schedule: rows in lexicographic order, in chunks of about CHUNK_ELEMENTS
        // elements. Grouping the rows by block (equal residue) instead was measured no
        // faster at L = 14 and 15 (Bose-Hubbard ring): what one order gains in cache
        // reuse of the right tables, the other gains on the sources of hops near the cut.
        let order: Vec<u32> = (0..nl as u32).collect();
        let mut chunks = Vec::new();
        let mut start = 0usize;
        let mut acc = 0usize;
        for (p, &l) in order.iter().enumerate() {
            let len = (left_offset[l as usize + 1] - left_offset[l as usize]) as usize;
            if acc > 0 && acc + len > CHUNK_ELEMENTS {
                chunks.push((start, p));
                start = p;
                acc = 0;
            }
            acc += len;
        }
        if start < order.len() {
            chunks.push((start, order.len()));
        }
        Ok(Bipartite {
            cut,
            dim: space.dim(),
            left_offset,
            left_residue,
            right_of_residue,
            rights,
            al_ptr,
            al_src,
            al_val,
            cx_ptr,
            cx_src,
            cx_tab,
            cx_val,
            cx_parts,
            tables,
            order,
            chunks,
            distinct_changes,
            merged: OnceLock::new(),
            sqrt: (0..SQRT_TABLE).map(|k| (k as f64).sqrt()).collect(),
        })
    }

    /// The cut: left modes are `0..cut`.
    pub fn cut(&self) -> usize {
        self.cut
    }

    /// Number of left states (rows of the layout).
    pub fn left_states(&self) -> usize {
        self.left_residue.len()
    }

    /// Bytes the tables hold (approximately).
    pub fn table_bytes(&self) -> usize {
        let s = std::mem::size_of::<S>();
        let rights: usize = self
            .rights
            .iter()
            .map(|b| b.diag.len() * s + b.terms.len() * 16)
            .sum();
        let tables: usize = self.tables.iter().map(|t| t.dst.len() * 24).sum();
        self.left_offset.len() * 8
            + self.left_residue.len() * 4
            + self.order.len() * 4
            + self.al_src.len() * (4 + 2 * s + 8)
            + self.cx_src.len() * (8 + 2 * s + 8)
            + rights
            + tables
    }

    fn block(&self, l: usize) -> &RightBlock<S> {
        &self.rights[self.right_of_residue[self.left_residue[l] as usize] as usize]
    }

    /// `Y = H X` for `k` vectors stored row-major (`X[r, j]` at `x[r * k + j]`).
    ///
    /// # Errors
    /// [`CoreError::Shape`] for arrays of the wrong length; [`CoreError::Interrupted`].
    pub fn apply(
        &self,
        x: &[S],
        y: &mut [S],
        k: usize,
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        let expected = (self.dim as usize).checked_mul(k);
        if k == 0 || expected != Some(x.len()) || expected != Some(y.len()) {
            return Err(CoreError::Shape(format!(
                "vectors must have shape ({}, {k}) to match the space (got {} and {} elements); \
                 pass arrays whose length is the space's dim",
                self.dim,
                x.len(),
                y.len()
            )));
        }
        // Split the output into its rows, in scheduling order.
        let nl = self.left_residue.len();
        let mut rows: Vec<Option<&mut [S]>> = Vec::with_capacity(nl);
        let mut rest = y;
        for l in 0..nl {
            let len = (self.left_offset[l + 1] - self.left_offset[l]) as usize * k;
            let (head, tail) = rest.split_at_mut(len);
            rows.push(Some(head));
            rest = tail;
        }
        let mut ordered: Vec<&mut [S]> = self
            .order
            .iter()
            .map(|&l| rows[l as usize].take().expect("each row once"))
            .collect();
        drop(rows);
        // Groups of chunks between interruption checks.
        let mut pieces: Vec<(usize, &mut [&mut [S]])> = Vec::with_capacity(self.chunks.len());
        let mut rest: &mut [&mut [S]] = &mut ordered;
        let mut taken = 0usize;
        for &(a, b) in &self.chunks {
            debug_assert_eq!(a, taken);
            let (head, tail) = rest.split_at_mut(b - a);
            pieces.push((a, head));
            rest = tail;
            taken = b;
        }
        let mut pieces = pieces.into_iter().peekable();
        while pieces.peek().is_some() {
            let mut group = Vec::new();
            let mut elements = 0usize;
            while let Some(p) = pieces.peek() {
                let len: usize = p.1.iter().map(|r| r.len()).sum();
                if !group.is_empty() && elements + len > CHECK_ELEMENTS {
                    break;
                }
                elements += len;
                group.push(pieces.next().expect("peeked"));
            }
            runner.install(|| {
                group.into_par_iter().for_each(|(start, rows)| {
                    for (j, yrow) in rows.iter_mut().enumerate() {
                        let l = self.order[start + j] as usize;
                        if k == 1 {
                            self.row_one(l, x, yrow);
                        } else {
                            self.row_many(l, x, yrow, k);
                        }
                    }
                })
            });
            if interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
        }
        Ok(())
    }

    /// Prepare what builds use beyond the product tables: the right-only part of
    /// each block as merged rows, so that a build copies a row's own entries instead
    /// of sorting them. Skipped (builds then sort) when it does not fit in memory.
    pub fn prepare_rows(&self) {
        self.merged.get_or_init(|| {
            let entries: usize = self
                .rights
                .iter()
                .flat_map(|b| &b.terms)
                .map(|&(_, tab)| self.tables[tab as usize].dst.len())
                .sum();
            let rows: usize = self.rights.iter().map(|b| b.len + 1).sum();
            let bytes = entries as u128 * (4 + std::mem::size_of::<S>()) as u128 + rows as u128 * 12;
            crate::memory::ensure_room(bytes, "the merged rows of the bipartite build").ok()?;
            self.rights.iter().map(|b| self.merge_block(b)).collect()
        });
    }

    /// Whether rows can be counted from the tables alone (see [`Bipartite::count_rows`]).
    pub fn counts_from_tables(&self) -> bool {
        self.distinct_changes
    }

    /// The off-diagonal right-only entries of every right state of `block`, merged.
    fn merge_block(&self, block: &RightBlock<S>) -> Option<MergedRows<S>> {
        let total: usize = block
            .terms
            .iter()
            .map(|&(_, tab)| self.tables[tab as usize].dst.len())
            .sum();
        let what = "the merged rows of the bipartite build";
        let mut out = MergedRows {
            ptr: try_with_capacity(block.len + 1, what).ok()?,
            col: try_with_capacity(total, what).ok()?,
            val: try_with_capacity(total, what).ok()?,
            split: try_with_capacity(block.len, what).ok()?,
        };
        out.ptr.push(0);
        let mut cursor = vec![0usize; block.terms.len()];
        let mut buf: Vec<(u64, S)> = Vec::new();
        for i in 0..block.len {
            buf.clear();
            for (k, &(coef, tab)) in block.terms.iter().enumerate() {
                let t = &self.tables[tab as usize];
                let p = cursor[k];
                if p < t.dst.len() && t.dst[p] as usize == i {
                    buf.push((t.src[p] as u64, coef.scale(t.amp[p])));
                    cursor[k] = p + 1;
                }
            }
            let mut below = 0u32;
            merge_entries(&mut buf, |col, val| {
                below += u32::from((col as usize) < i);
                out.col.push(col as u32);
                out.val.push(val);
            });
            out.ptr.push(out.col.len());
            out.split.push(below);
        }
        Some(out)
    }

    /// The rows `first..first + count`, checked against the dimension.
    fn row_end(&self, first: u64, count: usize) -> CoreResult<u64> {
        first
            .checked_add(count as u64)
            .filter(|&e| e <= self.dim)
            .ok_or_else(|| {
                CoreError::InvalidArgument(format!(
                    "rows {first}..{first}+{count} are out of range for dimension {}",
                    self.dim
                ))
            })
    }

    /// The left state whose segment holds `row`.
    fn left_of(&self, row: u64) -> usize {
        let nl = self.left_residue.len();
        self.left_offset[..nl].partition_point(|&o| o <= row).max(1) - 1
    }

    /// The sources of left state `l` in column order: every left state its left-only or
    /// crossing terms gather from, and `l` itself.
    fn sources(&self, l: usize, out: &mut Vec<Source<S>>) {
        out.clear();
        let (al_b, cx_b) = (self.al_ptr[l + 1], self.cx_ptr[l + 1]);
        let mut own_done = false;
        let (mut ea, mut ec) = (self.al_ptr[l], self.cx_ptr[l]);
        loop {
            let next_al = (ea < al_b).then(|| self.al_src[ea] as usize);
            let next_cx = (ec < cx_b).then(|| self.cx_src[ec] as usize);
            let own = (!own_done).then_some(l);
            let Some(src) = [next_al, next_cx, own].into_iter().flatten().min() else {
                break;
            };
            let al = if next_al == Some(src) {
                ea += 1;
                Some(self.al_val[ea - 1])
            } else {
                None
            };
            let c0 = ec;
            while ec < cx_b && self.cx_src[ec] as usize == src {
                ec += 1;
            }
            own_done |= src == l;
            out.push(Source { src, al, cx: c0..ec });
        }
    }

    /// Value of crossing entry `e` at table position `p`: `c · sqrt(aL² aR²)`, as the
    /// row kernel computes it.
    #[inline(always)]
    fn cross_value(&self, e: usize, t: &FactorTable, p: usize) -> S {
        let (coef, al_sq) = self.cx_parts[e];
        // Products of falling factorials are integers, exact in f64 below 2^53: the
        // table holds the same correctly rounded square roots, without the latency.
        let sq = al_sq * t.amp_sq[p];
        let amp = if sq < SQRT_TABLE as f64 {
            self.sqrt[sq as usize]
        } else {
            sq.sqrt()
        };
        coef.scale(amp)
    }

    /// Walk the stored entries of rows `first..first + count`: `entry(column, value)`
    /// in column order, then `row_done(row)`, row after row. Within a row the sources
    /// (left states) come in column order and never share a column; within a source,
    /// entries are pushed in a fixed order (right diagonal, left-only term, right-only
    /// terms, crossing terms), sorted stably and equal columns summed in that order,
    /// exact zeros dropped, so the values never depend on threads or chunking.
    fn walk(
        &self,
        first: u64,
        count: usize,
        entry: &mut impl FnMut(u64, S),
        row_done: &mut impl FnMut(u64),
    ) -> CoreResult<()> {
        let end = self.row_end(first, count)?;
        let merged = self.merged.get().and_then(|m| m.as_deref());
        let mut l = self.left_of(first);
        let mut sources = Vec::new();
        let mut right_cursor: Vec<usize> = Vec::new();
        let mut cx_cursor: Vec<usize> = Vec::new();
        let mut buf: Vec<(u64, S)> = Vec::new();
        let mut row = first;
        while row < end {
            let off = self.left_offset[l];
            let seg_end = self.left_offset[l + 1].min(end);
            let (i0, i1) = ((row - off) as usize, (seg_end - off) as usize);
            let bi = self.right_of_residue[self.left_residue[l] as usize] as usize;
            let block = &self.rights[bi];
            self.sources(l, &mut sources);
            let cx_a = self.cx_ptr[l];
            // The own source's right part comes from the merged rows unless crossing
            // terms also gather from `l` (their entries then join the sort).
            let own_merged = merged
                .map(|m| &m[bi])
                .filter(|_| sources.iter().all(|s| s.src != l || s.cx.is_empty()));
            right_cursor.clear();
            if own_merged.is_none() {
                for &(_, tab) in &block.terms {
                    right_cursor.push(start_at(&self.tables[tab as usize], i0));
                }
            }
            cx_cursor.clear();
            for e in cx_a..self.cx_ptr[l + 1] {
                cx_cursor.push(start_at(&self.tables[self.cx_tab[e] as usize], i0));
            }
            for i in i0..i1 {
                for s in &sources {
                    let base = self.left_offset[s.src];
                    buf.clear();
                    if s.src == l {
                        if let Some(rows) = own_merged {
                            let mut d = block.diag.get(i).copied();
                            if let Some(v) = s.al {
                                d = Some(d.map_or(v, |x| x + v));
                            }
                            let (a, b) = (rows.ptr[i], rows.ptr[i + 1]);
                            let mid = a + rows.split[i] as usize;
                            for p in a..mid {
                                entry(base + rows.col[p] as u64, rows.val[p]);
                            }
                            if let Some(v) = d.filter(|&v| v != S::ZERO) {
                                entry(base + i as u64, v);
                            }
                            for p in mid..b {
                                entry(base + rows.col[p] as u64, rows.val[p]);
                            }
                            continue;
                        }
                        if let Some(&v) = block.diag.get(i) {
                            buf.push((base + i as u64, v));
                        }
                        if let Some(v) = s.al {
                            buf.push((base + i as u64, v));
                        }
                        for (k, &(coef, tab)) in block.terms.iter().enumerate() {
                            let t = &self.tables[tab as usize];
                            let p = right_cursor[k];
                            if p < t.dst.len() && t.dst[p] as usize == i {
                                buf.push((base + t.src[p] as u64, coef.scale(t.amp[p])));
                                right_cursor[k] = p + 1;
                            }
                        }
                    } else if s.cx.is_empty() {
                        // Only the left-only term: one entry, no sort.
                        if let Some(v) = s.al.filter(|&v| v != S::ZERO) {
                            entry(base + i as u64, v);
                        }
                        continue;
                    } else if let Some(v) = s.al {
                        buf.push((base + i as u64, v));
                    }
                    for e in s.cx.clone() {
                        let t = &self.tables[self.cx_tab[e] as usize];
                        let p = cx_cursor[e - cx_a];
                        if p < t.dst.len() && t.dst[p] as usize == i {
                            buf.push((base + t.src[p] as u64, self.cross_value(e, t, p)));
                            cx_cursor[e - cx_a] = p + 1;
                        }
                    }
                    merge_entries(&mut buf, &mut *entry);
                }
                row_done(off + i as u64);
            }
            row = seg_end;
            l += 1;
        }
        Ok(())
    }

    /// Call `visit(row, entries)` for the rows `first..first + count` in order, with each
    /// row's entries sorted by column, duplicates summed and exact zeros dropped.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when the rows are out of range.
    pub fn for_each_row(
        &self,
        first: u64,
        count: usize,
        mut visit: impl FnMut(u64, &[(u64, S)]),
    ) -> CoreResult<()> {
        let entries = std::cell::RefCell::new(Vec::new());
        self.walk(
            first,
            count,
            &mut |col, val| entries.borrow_mut().push((col, val)),
            &mut |row| {
                let mut e = entries.borrow_mut();
                visit(row, &e);
                e.clear();
            },
        )
    }

    /// Call `emit(column, value)` for every stored entry of the rows `first..first +
    /// count`, row after row, each row's in column order (the entries
    /// [`Bipartite::for_each_row`] lists).
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when the rows are out of range.
    pub fn emit_rows(&self, first: u64, count: usize, mut emit: impl FnMut(u64, S)) -> CoreResult<()> {
        self.walk(first, count, &mut emit, &mut |_| {})
    }

    /// Number of stored entries of each row `first..first + out.len()`.
    ///
    /// When no two off-diagonal terms change the occupations alike
    /// ([`Bipartite::counts_from_tables`]), no two entries of a row share a column
    /// except on the diagonal, and a single term's entry is never zero (a nonzero
    /// coefficient times a square root of a product of positive integers): a row then
    /// holds one entry per table hit, plus the diagonal when its sum is nonzero, and
    /// the count needs no entries. Otherwise the entries are walked and counted.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when the rows are out of range.
    pub fn count_rows(&self, first: u64, out: &mut [u64]) -> CoreResult<()> {
        if !self.distinct_changes {
            let n = std::cell::Cell::new(0u64);
            let mut k = 0usize;
            return self.walk(first, out.len(), &mut |_, _| n.set(n.get() + 1), &mut |_| {
                out[k] = n.replace(0);
                k += 1;
            });
        }
        let end = self.row_end(first, out.len())?;
        let merged = self.merged.get().and_then(|m| m.as_deref());
        let mut l = self.left_of(first);
        let mut own_cx: Vec<(usize, usize)> = Vec::new();
        let mut row = first;
        while row < end {
            let off = self.left_offset[l];
            let seg_end = self.left_offset[l + 1].min(end);
            let (i0, i1) = ((row - off) as usize, (seg_end - off) as usize);
            let part = &mut out[(row - first) as usize..(seg_end - first) as usize];
            let bi = self.right_of_residue[self.left_residue[l] as usize] as usize;
            let block = &self.rights[bi];
            let mut own_al = None;
            let mut others = 0u64;
            for e in self.al_ptr[l]..self.al_ptr[l + 1] {
                if self.al_src[e] as usize == l {
                    own_al = Some(self.al_val[e]);
                } else {
                    others += 1;
                }
            }
            part.fill(others);
            match merged {
                // One merged entry a table hit (no shared columns, no zero sums).
                Some(m) => {
                    let ptr = &m[bi].ptr[i0..=i1];
                    for (c, w) in part.iter_mut().zip(ptr.windows(2)) {
                        *c += (w[1] - w[0]) as u64;
                    }
                }
                None => {
                    for &(_, tab) in &block.terms {
                        add_hits(&self.tables[tab as usize], i0, part);
                    }
                }
            }
            // Crossing entries count one a hit, except those that keep both the left and
            // the right state: they land on the diagonal and join its sum.
            own_cx.clear();
            for e in self.cx_ptr[l]..self.cx_ptr[l + 1] {
                let t = &self.tables[self.cx_tab[e] as usize];
                if self.cx_src[e] as usize == l && t.keeps_state() {
                    own_cx.push((e, start_at(t, i0)));
                } else {
                    add_hits(t, i0, part);
                }
            }
            if !block.diag.is_empty() || own_al.is_some() || !own_cx.is_empty() {
                for (i, c) in (i0..i1).zip(part.iter_mut()) {
                    // The same sums, in the same order, as `walk`.
                    let mut d = block.diag.get(i).copied();
                    if let Some(v) = own_al {
                        d = Some(d.map_or(v, |x| x + v));
                    }
                    for (e, p) in own_cx.iter_mut() {
                        let t = &self.tables[self.cx_tab[*e] as usize];
                        if *p < t.dst.len() && t.dst[*p] as usize == i {
                            let v = self.cross_value(*e, t, *p);
                            d = Some(d.map_or(v, |x| x + v));
                            *p += 1;
                        }
                    }
                    *c += u64::from(d.is_some_and(|v| v != S::ZERO));
                }
            }
            row = seg_end;
            l += 1;
        }
        Ok(())
    }
    /// Upper bound of the stored entries of one row.
    pub fn row_capacity(&self) -> usize {
        let right = self.rights.iter().map(|b| b.terms.len() + 1).max().unwrap_or(1);
        let left = (0..self.left_residue.len())
            .map(|l| self.al_ptr[l + 1] - self.al_ptr[l] + self.cx_ptr[l + 1] - self.cx_ptr[l])
            .max()
            .unwrap_or(0);
        right + left
    }

    /// One output row, one vector.
    #[inline]
    fn row_one(&self, l: usize, x: &[S], y: &mut [S]) {
        let n = y.len();
        let block = self.block(l);
        let own = &x[self.left_offset[l] as usize..][..n];
        let (al_a, al_b) = (self.al_ptr[l], self.al_ptr[l + 1]);
        let (cx_a, cx_b) = (self.cx_ptr[l], self.cx_ptr[l + 1]);
        let whole = n <= SLAB;
        let mut t0 = 0usize;
        while t0 < n {
            let t1 = (t0 + SLAB).min(n);
            let ys = &mut y[t0..t1];
            // Right-only terms: the dense diagonal, then each term's gather table.
            if block.diag.is_empty() {
                ys.fill(S::ZERO);
            } else {
                for ((yi, &d), &xi) in ys.iter_mut().zip(&block.diag[t0..t1]).zip(&own[t0..t1]) {
                    *yi = d * xi;
                }
            }
            for &(coef, tab) in &block.terms {
                gather_add(&self.tables[tab as usize], coef, own, ys, t0, t1, whole);
            }
            // Left-only terms: whole-row multiples of the source rows.
            for e in al_a..al_b {
                let src = self.al_src[e] as usize;
                let v = self.al_val[e];
                let xs = &x[self.left_offset[src] as usize + t0..][..t1 - t0];
                for (yi, &xi) in ys.iter_mut().zip(xs) {
                    *yi += v * xi;
                }
            }
            // Crossing terms: gathered through the right factor's table.
            for e in cx_a..cx_b {
                let src = self.left_offset[self.cx_src[e] as usize] as usize;
                let tab = &self.tables[self.cx_tab[e] as usize];
                gather_add(tab, self.cx_val[e], &x[src..], ys, t0, t1, whole);
            }
            t0 = t1;
        }
    }

    /// One output row, `k` vectors (row-major).
    fn row_many(&self, l: usize, x: &[S], y: &mut [S], k: usize) {
        let block = self.block(l);
        let base = self.left_offset[l] as usize * k;
        let n = y.len() / k;
        let own = &x[base..][..n * k];
        if block.diag.is_empty() {
            y.fill(S::ZERO);
        } else {
            for i in 0..n {
                let d = block.diag[i];
                for (a, &b) in y[i * k..(i + 1) * k].iter_mut().zip(&own[i * k..(i + 1) * k]) {
                    *a = d * b;
                }
            }
        }
        for &(coef, tab) in &block.terms {
            let tab = &self.tables[tab as usize];
            for p in 0..tab.dst.len() {
                let c = coef.scale(tab.amp[p]);
                let yi = &mut y[tab.dst[p] as usize * k..][..k];
                let xs = &own[tab.src[p] as usize * k..][..k];
                for (a, &b) in yi.iter_mut().zip(xs) {
                    *a += c * b;
                }
            }
        }
        for e in self.al_ptr[l]..self.al_ptr[l + 1] {
            let v = self.al_val[e];
            let xs = &x[self.left_offset[self.al_src[e] as usize] as usize * k..][..n * k];
            for (a, &b) in y.iter_mut().zip(xs) {
                *a += v * b;
            }
        }
        for e in self.cx_ptr[l]..self.cx_ptr[l + 1] {
            let src = self.left_offset[self.cx_src[e] as usize] as usize * k;
            let tab = &self.tables[self.cx_tab[e] as usize];
            let v = self.cx_val[e];
            for p in 0..tab.dst.len() {
                let c = v.scale(tab.amp[p]);
                let yi = &mut y[tab.dst[p] as usize * k..][..k];
                let xs = &x[src + tab.src[p] as usize * k..][..k];
                for (a, &b) in yi.iter_mut().zip(xs) {
                    *a += c * b;
                }
            }
        }
    }
}

/// `ys[d - t0] += coef · amp · xs[src]` for the table entries with `t0 <= d < t1`.
#[inline(always)]
fn gather_add<S: Scalar>(
    tab: &FactorTable,
    coef: S,
    xs: &[S],
    ys: &mut [S],
    t0: usize,
    t1: usize,
    whole: bool,
) {
    if !tab.runs.is_empty() {
        let a = if whole {
            0
        } else {
            tab.runs.partition_point(|r| ((r.0 + r.2) as usize) <= t0)
        };
        for &(d, src, len, amp) in &tab.runs[a..] {
            let (d, src, len) = (d as usize, src as usize, len as usize);
            if d >= t1 {
                break;
            }
            // Clip the run to the slab.
            let lo = d.max(t0);
            let hi = (d + len).min(t1);
            let c = coef.scale(amp);
            let from = &xs[src + (lo - d)..src + (hi - d)];
            for (yi, &xi) in ys[lo - t0..hi - t0].iter_mut().zip(from) {
                *yi += c * xi;
            }
        }
        return;
    }
    let (a, b) = if whole {
        (0, tab.dst.len())
    } else {
        let a = tab.dst.partition_point(|&d| (d as usize) < t0);
        (a, a + tab.dst[a..].partition_point(|&d| (d as usize) < t1))
    };
    for ((&d, &src), &amp) in tab.dst[a..b].iter().zip(&tab.src[a..b]).zip(&tab.amp[a..b]) {
        ys[(d as usize).wrapping_sub(t0)] += coef.scale(amp) * xs[src as usize];
    }
}

/// Where row `i0`'s hits start in a table (entries sorted by destination).
#[inline]
fn start_at(t: &FactorTable, i0: usize) -> usize {
    if i0 == 0 {
        0
    } else {
        t.dst.partition_point(|&d| (d as usize) < i0)
    }
}

/// Add one to `part[d - i0]` for every table entry with destination `d` in the rows
/// `i0..i0 + part.len()`.
#[inline]
fn add_hits(t: &FactorTable, i0: usize, part: &mut [u64]) {
    let i1 = i0 + part.len();
    for &d in &t.dst[start_at(t, i0)..] {
        let d = d as usize;
        if d >= i1 {
            break;
        }
        part[d - i0] += 1;
    }
}

/// Merge `buf` ([`crate::build::merge_row`]) and pass the kept entries to `emit`.
#[inline]
fn merge_entries<S: Scalar>(buf: &mut [(u64, S)], mut emit: impl FnMut(u64, S)) {
    let kept = crate::build::merge_row(buf);
    for &(col, val) in &buf[..kept] {
        emit(col, val);
    }
}

/// Gather table of a right factor from the right states `states` (of one output
/// residue) to the right states owing `r_src`.
fn factor_table(
    space: &FockSpace,
    cut: usize,
    r_src: usize,
    factor: &[(usize, u32, u32)],
    states: &[u32],
    count: usize,
) -> FactorTable {
    let m = space.modes();
    let mut t = FactorTable {
        keeps: factor.iter().all(|&(_, lower, raise)| lower == raise),
        ..FactorTable::default()
    };
    let mut img = vec![0u32; m - cut];
    let width = (m - cut).max(1);
    for i in 0..count {
        let occ = &states[(i * width).min(states.len())..((i + 1) * width).min(states.len())];
        img.copy_from_slice(occ);
        let Some(amp_sq) = gather_image(space.caps(), cut, factor, &mut img) else {
            continue;
        };
        let Some((k, end)) = partial_rank(space, cut, r_src, &img) else {
            continue;
        };
        if space.completions(m, end) == 0 {
            continue;
        }
        t.dst.push(i as u32);
        t.src.push(k as u32);
        t.amp.push(amp_sq.sqrt());
        t.amp_sq.push(amp_sq);
    }
    t.find_runs();
    t
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::build::{build_csr_with, build_rows, Csr, CsrAny, RowVisitor, SparseRows};
    use crate::kernel::ProductKernel;
    use crate::parallel::NoInterrupt;
    use crate::terms::RawTerm;
    use num_complex::Complex64;

    fn ring(l: usize, j: f64, u: f64) -> Vec<RawTerm> {
        let mut t = Vec::new();
        for i in 0..l {
            let k = (i + 1) % l;
            t.push(RawTerm::new(-j, 0.0, vec![(i, 1, 0), (k, 0, 1)]));
            t.push(RawTerm::new(-j, 0.0, vec![(k, 1, 0), (i, 0, 1)]));
            t.push(RawTerm::new(u / 2.0, 0.0, vec![(i, 2, 2)]));
        }
        t
    }

    /// The row listing as first written (every source's entries pushed, sorted and
    /// merged per row, no merged rows, no shortcuts): the reference the build's fast
    /// paths must reproduce bit for bit.
    fn reference_rows<S: Scalar>(
        bp: &Bipartite<S>,
        first: u64,
        count: usize,
        mut visit: impl FnMut(u64, &[(u64, S)]),
    ) -> CoreResult<()> {
        let end = first
            .checked_add(count as u64)
            .filter(|&e| e <= bp.dim)
            .ok_or_else(|| {
                CoreError::InvalidArgument(format!(
                    "rows {first}..{first}+{count} are out of range for dimension {}",
                    bp.dim
                ))
            })?;
        let nl = bp.left_residue.len();
        let mut l = bp.left_offset[..nl].partition_point(|&o| o <= first) - 1;
        let mut entries: Vec<(u64, S)> = Vec::new();
        // Sources of the current left state: (left source, value of the left-only term
        // from it, crossing entries from it).
        let mut sources: Vec<(usize, Option<S>, std::ops::Range<usize>)> = Vec::new();
        let mut right_cursor: Vec<usize> = Vec::new();
        let mut cx_cursor: Vec<usize> = Vec::new();
        let mut row = first;
        while row < end {
            let off = bp.left_offset[l];
            let seg_end = bp.left_offset[l + 1].min(end);
            let i0 = (row - off) as usize;
            let block = bp.block(l);
            // Merge the sources in column order (left index order).
            sources.clear();
            let (al_a, al_b) = (bp.al_ptr[l], bp.al_ptr[l + 1]);
            let (cx_a, cx_b) = (bp.cx_ptr[l], bp.cx_ptr[l + 1]);
            let mut own_done = false;
            let (mut ea, mut ec) = (al_a, cx_a);
            loop {
                let next_al = (ea < al_b).then(|| bp.al_src[ea] as usize);
                let next_cx = (ec < cx_b).then(|| bp.cx_src[ec] as usize);
                let own = (!own_done).then_some(l);
                let Some(src) = [next_al, next_cx, own].into_iter().flatten().min() else {
                    break;
                };
                let al = if next_al == Some(src) {
                    ea += 1;
                    Some(bp.al_val[ea - 1])
                } else {
                    None
                };
                let c0 = ec;
                while ec < cx_b && bp.cx_src[ec] as usize == src {
                    ec += 1;
                }
                if src == l {
                    own_done = true;
                }
                sources.push((src, al, c0..ec));
            }
            right_cursor.clear();
            for &(_, tab) in &block.terms {
                let t = &bp.tables[tab as usize];
                right_cursor.push(t.dst.partition_point(|&d| (d as usize) < i0));
            }
            cx_cursor.clear();
            for e in cx_a..cx_b {
                let t = &bp.tables[bp.cx_tab[e] as usize];
                cx_cursor.push(t.dst.partition_point(|&d| (d as usize) < i0));
            }
            for i in i0..(seg_end - off) as usize {
                entries.clear();
                for (src, al, cx) in &sources {
                    let base = bp.left_offset[*src];
                    let start = entries.len();
                    if *src == l {
                        if !block.diag.is_empty() {
                            entries.push((base + i as u64, block.diag[i]));
                        }
                        if let Some(v) = al {
                            entries.push((base + i as u64, *v));
                        }
                        for (k, &(coef, tab)) in block.terms.iter().enumerate() {
                            let t = &bp.tables[tab as usize];
                            let p = right_cursor[k];
                            if p < t.dst.len() && t.dst[p] as usize == i {
                                entries.push((base + t.src[p] as u64, coef.scale(t.amp[p])));
                                right_cursor[k] = p + 1;
                            }
                        }
                    } else if let Some(v) = al {
                        entries.push((base + i as u64, *v));
                    }
                    for e in cx.clone() {
                        let t = &bp.tables[bp.cx_tab[e] as usize];
                        let p = cx_cursor[e - cx_a];
                        if p < t.dst.len() && t.dst[p] as usize == i {
                            let (coef, al_sq) = bp.cx_parts[e];
                            entries.push((base + t.src[p] as u64, coef.scale((al_sq * t.amp_sq[p]).sqrt())));
                            cx_cursor[e - cx_a] = p + 1;
                        }
                    }
                    // Few entries per source: an insertion sort keeps equal columns in
                    // push order, so duplicates are summed in a fixed order.
                    let part = &mut entries[start..];
                    for a in 1..part.len() {
                        let mut b = a;
                        while b > 0 && part[b - 1].0 > part[b].0 {
                            part.swap(b - 1, b);
                            b -= 1;
                        }
                    }
                }
                // Sum runs of equal columns and drop exact zeros, in place.
                let mut kept = 0usize;
                let mut k = 0usize;
                while k < entries.len() {
                    let (col, mut val) = entries[k];
                    k += 1;
                    while k < entries.len() && entries[k].0 == col {
                        val += entries[k].1;
                        k += 1;
                    }
                    if val != S::ZERO {
                        entries[kept] = (col, val);
                        kept += 1;
                    }
                }
                visit(off + i as u64, &entries[..kept]);
            }
            row = seg_end;
            l += 1;
        }
        Ok(())
    }

    /// A bipartite operator seen only through the reference listing: the build then
    /// takes its general path (count by listing, fill by listing).
    struct Reference<'a, S: Scalar>(&'a Bipartite<S>);

    impl<S: Scalar> SparseRows<S> for Reference<'_, S> {
        fn shape(&self) -> (u64, u64) {
            (self.0.dim, self.0.dim)
        }
        fn rows(&self, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()> {
            reference_rows(self.0, first, count, visit)
        }
    }

    fn wide<S: Scalar>(c: CsrAny<S>) -> Csr<S, i64> {
        match c {
            CsrAny::Wide(c) => c,
            CsrAny::Narrow(_) => unreachable!("wide requested"),
        }
    }

    fn bits<S: Scalar>(v: &[S]) -> Vec<(u64, u64)> {
        v.iter().map(|z| (z.re().to_bits(), z.im().to_bits())).collect()
    }

    /// The build's fast paths (counts from the tables, merged right rows, entries
    /// written in place) against the reference listing, bit for bit, for every cut,
    /// on one and two threads, and for row ranges that start inside segments
    /// (exact equality with the path the fast one replaces: common practice, no source).
    fn fast_paths_equal_reference<S: Scalar>(space: &FockSpace, op: &Operator<S>) {
        let dim = space.dim();
        for cut in 1..=space.modes() {
            let bp = Bipartite::new(space, op, cut).unwrap();
            let runner = Runner::with_threads(Some(2)).unwrap();
            let reference = wide(build_rows(&Reference(&bp), &runner, &NoInterrupt, true).unwrap());
            let listed = |b: &Bipartite<S>| {
                let mut out = Vec::new();
                b.for_each_row(0, dim as usize, |r, e| out.push((r, e.to_vec())))
                    .unwrap();
                out
            };
            let mut expect = Vec::new();
            reference_rows(&bp, 0, dim as usize, |r, e| expect.push((r, e.to_vec()))).unwrap();
            // Without merged rows (as products leave it), then with them (as builds do).
            let unmerged = listed(&bp);
            ranges_equal_reference(&bp, &reference, cut);
            for threads in [1, 2] {
                let runner = Runner::with_threads(Some(threads)).unwrap();
                let built = wide(build_csr_with(space, &bp, &runner, &NoInterrupt, true).unwrap());
                assert_eq!(built.indptr, reference.indptr, "cut {cut}, {threads} threads");
                assert_eq!(built.indices, reference.indices, "cut {cut}, {threads} threads");
                assert_eq!(
                    bits(&built.data),
                    bits(&reference.data),
                    "cut {cut}, {threads} threads"
                );
            }
            assert!(
                bp.merged.get().is_some_and(|m| m.is_some()),
                "cut {cut}: merged rows prepared"
            );
            for (got, rows) in [(unmerged, "unmerged"), (listed(&bp), "merged")] {
                assert_eq!(got.len(), expect.len());
                for ((r, a), (q, b)) in got.iter().zip(&expect) {
                    assert_eq!(r, q);
                    let cols = |e: &[(u64, S)]| e.iter().map(|x| x.0).collect::<Vec<_>>();
                    let vals = |e: &[(u64, S)]| bits(&e.iter().map(|x| x.1).collect::<Vec<_>>());
                    assert_eq!(cols(a), cols(b), "cut {cut} row {r} ({rows})");
                    assert_eq!(vals(a), vals(b), "cut {cut} row {r} ({rows})");
                }
            }
            ranges_equal_reference(&bp, &reference, cut);
        }
    }

    /// Counts and entries of short row ranges starting anywhere (inside segments too)
    /// against the reference build.
    fn ranges_equal_reference<S: Scalar>(bp: &Bipartite<S>, reference: &Csr<S, i64>, cut: usize) {
        let dim = bp.dim;
        let step = 7u64;
        let mut first = 0u64;
        while first < dim {
            let n = step.min(dim - first) as usize;
            let mut counts = vec![0u64; n];
            bp.count_rows(first, &mut counts).unwrap();
            let mut entries = Vec::new();
            bp.emit_rows(first, n, |c, v| entries.push((c, v))).unwrap();
            let (a, b) = (
                reference.indptr[first as usize] as usize,
                reference.indptr[first as usize + n] as usize,
            );
            for (k, &c) in counts.iter().enumerate() {
                let r = first as usize + k;
                assert_eq!(
                    c as i64,
                    reference.indptr[r + 1] - reference.indptr[r],
                    "cut {cut} row {r}"
                );
            }
            let cols: Vec<i64> = entries.iter().map(|e| e.0 as i64).collect();
            assert_eq!(cols, reference.indices[a..b], "cut {cut} rows from {first}");
            let vals: Vec<S> = entries.iter().map(|e| e.1).collect();
            assert_eq!(
                bits(&vals),
                bits(&reference.data[a..b]),
                "cut {cut} rows from {first}"
            );
            first += step;
        }
    }

    fn compare<S: Scalar>(space: &FockSpace, terms: &[RawTerm], make: impl Fn(usize) -> S) {
        let op = Operator::<S>::new(space, terms).unwrap();
        fast_paths_equal_reference(space, &op);
        let dim = space.dim() as usize;
        let x: Vec<S> = (0..dim).map(&make).collect();
        let runner = Runner::with_threads(Some(2)).unwrap();
        let mut expect = vec![S::ZERO; dim];
        ProductKernel::new(space, &op)
            .apply(space, &x, &mut expect, &runner, &NoInterrupt)
            .unwrap();
        let scale = expect.iter().map(|v| v.norm_sqr()).fold(1.0, f64::max).sqrt();
        let rows = ProductKernel::new(space, &op);
        let reference = match build_csr_with(space, &rows, &runner, &NoInterrupt, true).unwrap() {
            CsrAny::Wide(c) => c,
            CsrAny::Narrow(_) => unreachable!("wide requested"),
        };
        for cut in 1..=space.modes() {
            let bp = Bipartite::new(space, &op, cut).unwrap();
            // The build: same pattern, same values (to the last bit for single terms;
            // sums of several diagonal terms may be grouped differently).
            let built = match build_csr_with(space, &bp, &runner, &NoInterrupt, true).unwrap() {
                CsrAny::Wide(c) => c,
                CsrAny::Narrow(_) => unreachable!("wide requested"),
            };
            assert_eq!(built.indptr, reference.indptr, "cut {cut}");
            assert_eq!(built.indices, reference.indices, "cut {cut}");
            let big = reference
                .data
                .iter()
                .map(|v| v.norm_sqr())
                .fold(1.0, f64::max)
                .sqrt();
            for (a, b) in built.data.iter().zip(&reference.data) {
                assert!(
                    (*a - *b).norm_sqr().sqrt() <= 1e-14 * big,
                    "cut {cut}: {a:?} vs {b:?}"
                );
            }
            let mut y = vec![S::ZERO; dim];
            bp.apply(&x, &mut y, 1, &runner, &NoInterrupt).unwrap();
            for r in 0..dim {
                assert!(
                    (y[r] - expect[r]).norm_sqr().sqrt() <= 1e-12 * scale,
                    "cut {cut} row {r}: {:?} vs {:?}",
                    y[r],
                    expect[r]
                );
            }
            // Several vectors at once equal one at a time.
            let k = 3;
            let xs: Vec<S> = (0..dim * k).map(|i| make(i * 7 + 1)).collect();
            let mut ys = vec![S::ZERO; dim * k];
            bp.apply(&xs, &mut ys, k, &runner, &NoInterrupt).unwrap();
            for j in 0..k {
                let col: Vec<S> = (0..dim).map(|r| xs[r * k + j]).collect();
                let mut one = vec![S::ZERO; dim];
                bp.apply(&col, &mut one, 1, &runner, &NoInterrupt).unwrap();
                for r in 0..dim {
                    assert!((one[r] - ys[r * k + j]).norm_sqr().sqrt() <= 1e-12 * scale);
                }
            }
        }
    }

    fn real(i: usize) -> f64 {
        ((i * 7919 + 13) % 113) as f64 / 113.0 - 0.5
    }

    #[test]
    fn ring_equals_row_kernel_for_every_cut() {
        let space = FockSpace::new(vec![5; 5], None, Some(5), None).unwrap();
        compare::<f64>(&space, &ring(5, 1.0, 2.5), real);
    }

    #[test]
    fn weights_modulus_free_and_many_mode_terms() {
        let terms = vec![
            RawTerm::new(0.7, 0.0, vec![(0, 1, 0), (1, 0, 1)]),
            RawTerm::new(0.7, 0.0, vec![(0, 0, 1), (1, 1, 0)]),
            RawTerm::new(-0.3, 0.0, vec![(0, 2, 0), (2, 0, 1), (3, 0, 1)]),
            RawTerm::new(-0.3, 0.0, vec![(0, 0, 2), (2, 1, 0), (3, 1, 0)]),
            RawTerm::new(1.1, 0.0, vec![(1, 1, 1), (3, 1, 1)]),
            RawTerm::new(0.4, 0.0, vec![(2, 2, 2)]),
            RawTerm::new(0.25, 0.0, vec![]),
            RawTerm::new(0.5, 0.0, vec![(1, 1, 0), (2, 0, 1)]),
            RawTerm::new(0.5, 0.0, vec![(1, 0, 1), (2, 1, 0)]),
        ];
        let exact = FockSpace::new(vec![3, 2, 3, 2], None, Some(4), None).unwrap();
        compare::<f64>(&exact, &terms, real);
        let free = FockSpace::new(vec![2, 2, 2, 1], None, None, None).unwrap();
        compare::<f64>(&free, &terms, real);
        let parity = FockSpace::new(vec![3, 2, 3, 2], None, Some(1), Some(2)).unwrap();
        compare::<f64>(&parity, &terms, real);
        // Weights (1, 1, 1, 1) keep these terms conserving; weight 2 on modes 2 and 3
        // with pair terms below.
        let weighted = FockSpace::new(vec![4, 3, 2, 2], Some(vec![2, 2, 1, 1]), Some(6), None).unwrap();
        let wterms = vec![
            RawTerm::new(0.9, 0.0, vec![(0, 1, 0), (2, 0, 2)]),
            RawTerm::new(0.9, 0.0, vec![(0, 0, 1), (2, 2, 0)]),
            RawTerm::new(-0.4, 0.0, vec![(1, 1, 0), (2, 0, 1), (3, 0, 1)]),
            RawTerm::new(-0.4, 0.0, vec![(1, 0, 1), (2, 1, 0), (3, 1, 0)]),
            RawTerm::new(0.3, 0.0, vec![(0, 1, 1), (3, 1, 1)]),
            RawTerm::new(0.2, 0.0, vec![(2, 1, 0), (3, 0, 1)]),
            RawTerm::new(0.2, 0.0, vec![(2, 0, 1), (3, 1, 0)]),
        ];
        compare::<f64>(&weighted, &wterms, real);
        let modw = FockSpace::new(vec![3, 3, 2, 2], Some(vec![2, 1, 3, 1]), Some(2), Some(3)).unwrap();
        let mterms = vec![
            RawTerm::new(0.9, 0.0, vec![(0, 1, 0), (1, 0, 2)]),
            RawTerm::new(0.9, 0.0, vec![(0, 0, 1), (1, 2, 0)]),
            RawTerm::new(-0.4, 0.0, vec![(2, 1, 0)]),
            RawTerm::new(-0.4, 0.0, vec![(2, 0, 1)]),
            RawTerm::new(0.3, 0.0, vec![(1, 3, 0), (3, 0, 0)]),
            RawTerm::new(0.2, 0.0, vec![(0, 1, 0), (3, 1, 0)]),
        ];
        compare::<f64>(&modw, &mterms, real);
    }

    /// `c a_i† a_j† a_k a_l` as a raw term (repeated modes merged into powers).
    fn pair(c: f64, i: usize, j: usize, k: usize, l: usize) -> RawTerm {
        let mut factors: Vec<(usize, u32, u32)> = Vec::new();
        for (mode, up) in [(i, true), (j, true), (k, false), (l, false)] {
            match factors.iter_mut().find(|f| f.0 == mode) {
                Some(f) if up => f.1 += 1,
                Some(f) => f.2 += 1,
                None => factors.push((mode, up as u32, (!up) as u32)),
            }
        }
        factors.sort_unstable();
        RawTerm::new(c, 0.0, factors)
    }

    #[test]
    fn several_charges_every_cut() {
        use crate::space::Charge;
        // Momentum ring: number exact, momentum mod L (a mixed residue).
        let l = 4;
        let mut terms = Vec::new();
        for k in 0..l {
            terms.push(RawTerm::new(-2.0 * (k as f64).cos(), 0.0, vec![(k, 1, 1)]));
            for p in 0..l {
                for q in 0..l {
                    terms.push(pair(
                        0.3 + 0.01 * (k + 2 * p + 3 * q) as f64,
                        (k + q) % l,
                        (p + l - q) % l,
                        p,
                        k,
                    ));
                }
            }
        }
        let ks: Vec<u32> = (0..l as u32).collect();
        for total_k in [0, 1] {
            let space = FockSpace::with_charges(
                vec![3; l],
                vec![
                    Charge {
                        weights: vec![1; l],
                        total: 3,
                        modulus: None,
                    },
                    Charge {
                        weights: ks.clone(),
                        total: total_k,
                        modulus: Some(l as u64),
                    },
                ],
            )
            .unwrap();
            // Hermitian parts do not matter here: every term conserves both charges.
            compare::<f64>(&space, &terms, real);
        }
        // Two species, both numbers exact (the packed residue).
        let mut species = Vec::new();
        for s in [0, 3] {
            for i in 0..2 {
                species.push(RawTerm::new(-0.8, 0.0, vec![(s + i, 1, 0), (s + i + 1, 0, 1)]));
                species.push(RawTerm::new(-0.8, 0.0, vec![(s + i, 0, 1), (s + i + 1, 1, 0)]));
            }
            species.push(RawTerm::new(0.7, 0.0, vec![(s + 1, 2, 2)]));
        }
        species.push(RawTerm::new(0.45, 0.0, vec![(0, 1, 1), (3, 1, 1)]));
        let two = FockSpace::with_charges(
            vec![2; 6],
            vec![
                Charge {
                    weights: vec![1, 1, 1, 0, 0, 0],
                    total: 2,
                    modulus: None,
                },
                Charge {
                    weights: vec![0, 0, 0, 1, 1, 1],
                    total: 3,
                    modulus: None,
                },
            ],
        )
        .unwrap();
        compare::<f64>(&two, &species, real);
    }

    #[test]
    fn complex_coefficients_and_emitters() {
        let terms = vec![
            RawTerm::new(0.5, 0.3, vec![(0, 1, 0), (1, 0, 1)]),
            RawTerm::new(0.5, -0.3, vec![(0, 0, 1), (1, 1, 0)]),
            RawTerm::new(0.1, 0.7, vec![(1, 1, 0), (2, 0, 1)]),
            RawTerm::new(0.1, -0.7, vec![(1, 0, 1), (2, 1, 0)]),
            RawTerm::new(1.0, 0.0, vec![(2, 1, 1)]),
            RawTerm::new(0.0, 0.2, vec![(0, 1, 0), (3, 0, 1)]),
            RawTerm::new(0.0, -0.2, vec![(0, 0, 1), (3, 1, 0)]),
        ];
        let space = FockSpace::new(vec![3, 1, 3, 1], None, Some(3), None).unwrap();
        compare::<Complex64>(&space, &terms, |i| Complex64::new(real(i), real(i * 3 + 5)));
    }

    #[test]
    fn single_mode_and_zero_operator() {
        let space = FockSpace::new(vec![6], None, None, None).unwrap();
        compare::<f64>(
            &space,
            &[
                RawTerm::new(0.3, 0.0, vec![(0, 1, 0)]),
                RawTerm::new(1.0, 0.0, vec![(0, 2, 3)]),
            ],
            real,
        );
        compare::<f64>(&space, &[], real);
    }

    #[test]
    fn cancelling_terms_cross_kerr_and_zero_diagonals() {
        // Terms that share their change of the occupations (a0† a1 and a0† n2 a1, which
        // cancel where n2 = 1), a density-density term across every cut, a left
        // diagonal that cancels the right one where n0 = n3, and a diagonal-times-hop
        // crossing term (n0 a2† a3).
        let terms = vec![
            RawTerm::new(1.0, 0.0, vec![(0, 0, 1), (1, 1, 0)]),
            RawTerm::new(-1.0, 0.0, vec![(0, 0, 1), (1, 1, 0), (2, 1, 1)]),
            RawTerm::new(1.0, 0.0, vec![(0, 1, 0), (1, 0, 1)]),
            RawTerm::new(-1.0, 0.0, vec![(0, 1, 0), (1, 0, 1), (2, 1, 1)]),
            RawTerm::new(0.5, 0.0, vec![(0, 1, 1), (3, 1, 1)]),
            RawTerm::new(0.7, 0.0, vec![(0, 1, 1)]),
            RawTerm::new(-0.7, 0.0, vec![(3, 1, 1)]),
            RawTerm::new(0.3, 0.0, vec![(0, 1, 1), (2, 0, 1), (3, 1, 0)]),
            RawTerm::new(0.3, 0.0, vec![(0, 1, 1), (2, 1, 0), (3, 0, 1)]),
            RawTerm::new(0.2, 0.0, vec![(2, 0, 1), (3, 1, 0)]),
            RawTerm::new(0.2, 0.0, vec![(2, 1, 0), (3, 0, 1)]),
        ];
        let space = FockSpace::new(vec![3, 2, 2, 3], None, Some(4), None).unwrap();
        let op = Operator::<f64>::new(&space, &terms).unwrap();
        assert!(!Bipartite::new(&space, &op, 2).unwrap().counts_from_tables());
        compare::<f64>(&space, &terms, real);
        // Without the shared changes: counted from the tables, diagonal zeros and all.
        let distinct: Vec<RawTerm> = terms
            .iter()
            .filter(|t| !(t.factors.len() == 3 && t.factors[0].0 == 0 && t.factors[1].0 == 1))
            .cloned()
            .collect();
        let op = Operator::<f64>::new(&space, &distinct).unwrap();
        assert!(!Bipartite::new(&space, &op, 2).unwrap().counts_from_tables());
        compare::<f64>(&space, &distinct, real);
        let plain: Vec<RawTerm> = distinct
            .iter()
            .filter(|t| !(t.factors.len() == 3 && t.factors[0] == (0, 1, 1)))
            .cloned()
            .collect();
        let op = Operator::<f64>::new(&space, &plain).unwrap();
        assert!(Bipartite::new(&space, &op, 2).unwrap().counts_from_tables());
        compare::<f64>(&space, &plain, real);
        // The ring: counted from the tables.
        let ring_space = FockSpace::new(vec![5; 5], None, Some(5), None).unwrap();
        let op = Operator::<f64>::new(&ring_space, &ring(5, 1.0, 2.5)).unwrap();
        assert!(Bipartite::new(&ring_space, &op, 2).unwrap().counts_from_tables());
    }

    #[test]
    fn automatic_cut_is_balanced_on_a_ring() {
        let space = FockSpace::new(vec![10; 10], None, Some(10), None).unwrap();
        let op = Operator::<f64>::new(&space, &ring(10, 1.0, 1.0)).unwrap();
        // Every cut crosses two bonds of a ring; the choice must avoid the lopsided
        // ends, whose tables approach the size of the stored matrix.
        let cut = choose_cut(&space, &op).unwrap();
        assert!((3..=7).contains(&cut), "cut {cut}");
    }
}
