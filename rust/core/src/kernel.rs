//! Fast matrix-free products: rows are processed in small blocks whose states are
//! unpacked once, then terms are applied term by term over the block, with each
//! term's constants (modes, powers, table strides) hoisted out of the row loop.
//! Diagonal single-mode terms are folded into per-mode tables.
//!
//! Operators with many terms (coupling matrices, pair interactions: far more terms than
//! modes) would make that loop visit every term on every row although only a few act
//! on it. Their terms that remove one or two quanta from the row state are indexed by
//! the quanta they remove instead ([`Lowering`]): a row visits only the groups of the
//! modes it occupies, so the work follows the entries, as configuration-interaction
//! codes drive their builds from the excitations a state allows (Knowles & Handy,
//! Chem. Phys. Lett. 111, 315 (1984); Olsen et al., J. Chem. Phys. 89, 2185 (1988)).
//! Their columns are ranked from the occupied modes only (a mode without quanta adds
//! nothing to the rank and leaves the residue alone).
//!
//! Every row still receives its contributions in a fixed order (the diagonal first,
//! then the off-diagonal terms in order), so results do not depend on threads.

use crate::error::{CoreError, CoreResult};
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::space::{Constraint, FockSpace};
use crate::terms::falling;
use crate::terms::{Operator, RowState};
use rayon::prelude::*;
use std::sync::OnceLock;

/// Rows per block of unpacked states.
const KERNEL_BLOCK: usize = 256;
/// `sqrt(k)` is looked up for `k` below this.
const SQRT_TABLE: usize = 1 << 12;

/// How the residue owed changes when `v` quanta are placed in a mode whose key (see
/// [`residue_keys`]) is `key`.
trait ResidueRule: Copy + Send + Sync {
    fn step(self, residue: u32, key: u64, v: u32) -> u32;
}

#[derive(Clone, Copy)]
struct FreeRule;
impl ResidueRule for FreeRule {
    #[inline(always)]
    fn step(self, _: u32, _: u64, _: u32) -> u32 {
        0
    }
}

/// Exact charges: the key is the mode's weight (its packed weight with several exact
/// charges, see [`FockSpace::packed_weights`]).
#[derive(Clone, Copy)]
struct ExactRule;
impl ResidueRule for ExactRule {
    #[inline(always)]
    fn step(self, residue: u32, key: u64, v: u32) -> u32 {
        // The images visited are valid states, so the residue never goes negative.
        (residue as u64).wrapping_sub(key.wrapping_mul(v as u64)) as u32
    }
}

#[derive(Clone, Copy)]
struct ModularRule(u64);
impl ResidueRule for ModularRule {
    #[inline(always)]
    fn step(self, residue: u32, key: u64, v: u32) -> u32 {
        let delta = key.wrapping_mul(v as u64);
        ((residue as u64 + self.0 - delta % self.0) % self.0) as u32
    }
}

/// Several charges, one of them modular: the key is the mode, and the space steps each
/// digit of the residue on its own.
#[derive(Clone, Copy)]
struct MixedRule<'a>(&'a FockSpace);
impl ResidueRule for MixedRule<'_> {
    #[inline(always)]
    fn step(self, residue: u32, key: u64, v: u32) -> u32 {
        // Valid images only (as above): the step exists.
        self.0.step(residue as usize, key as usize, v).unwrap_or(0) as u32
    }
}

/// Per mode, what [`ResidueRule::step`] takes as the key on `space`.
fn residue_keys(space: &FockSpace) -> Vec<u64> {
    match space.constraint() {
        Constraint::Several if space.all_exact() => space.packed_weights().to_vec(),
        Constraint::Several => (0..space.modes() as u64).collect(),
        _ => space.weights().iter().map(|&w| w as u64).collect(),
    }
}

#[derive(Debug, Clone, Copy)]
struct FactorPlan {
    mode: usize,
    lower: u32,
    raise: u32,
    cutoff: u32,
}

/// One mode of a term's span `lo..=hi`, with what re-ranking it needs.
#[derive(Debug, Clone, Copy)]
struct SpanStep {
    mode: usize,
    base: usize,
    width: usize,
    /// The mode's residue key (see [`residue_keys`]).
    weight: u64,
    /// Index into the term's factors, or `usize::MAX` for a mode the term leaves alone.
    factor: usize,
}

/// A term moving one quantum between two modes (`a_i† a_j` and the like): the common
/// case, with its own tight loop.
#[derive(Debug, Clone)]
struct Hop<S> {
    coef: S,
    lo: usize,
    hi: usize,
    /// Change of the occupation of `lo` and `hi` (+1 or −1).
    d_lo: i64,
    d_hi: i64,
    cut_lo: u32,
    cut_hi: u32,
    base_lo: usize,
    width_lo: usize,
    weight_lo: u64,
    /// The modes strictly between `lo` and `hi`, then `hi` itself.
    rest: Vec<SpanStep>,
}

/// Terms that remove one or two quanta from the row state, grouped by the quanta they
/// remove. Group `g` holds terms `starts[g]..starts[g + 1]`: group `i` removes one
/// quantum of mode `i`, group `m + i * m + j` (`i <= j`) one of `i` and one of `j`
/// (two of `i` when `i == j`). Within a group, terms are sorted so that their columns
/// come out ascending on every row.
#[derive(Debug, Clone)]
struct Lowering<S> {
    starts: Vec<u32>,
    coef: Vec<S>,
    /// Quanta added: up to two `(mode, power)`, sorted by mode; power 0 is unused.
    raised: Vec<[(u32, u32); 2]>,
    /// Upper bound of the entries one row gets from the index.
    row_bound: usize,
    /// Columns of the single groups by intermediate state, when they apply.
    hop_table: Option<HopTable>,
    /// With the hop table, when the single groups are dense enough: their coefficients
    /// as an `m × m` matrix, `dense_hops[j * m + i]` for the term removing a quantum of
    /// `i` and adding one of `j` (see [`ProductKernel::gather_hops`]).
    dense_hops: Option<Vec<S>>,
}

/// Columns of the single groups' terms by intermediate state. When every term of the
/// single groups moves one quantum (removes one of mode `i`, adds one of mode `j`) and
/// the sector fixes a total with equal weights, the image of row state `s` is
/// `s' + e_j` with `s' = s − e_i` a state of the sector with one quantum fewer: its
/// column is read from `cols[k * m + j]` (`k` the rank of `s'` there; `u64::MAX` past
/// a cutoff) instead of being ranked, so a row costs one look-up per entry, as a
/// stored matrix does.
#[derive(Debug, Clone)]
struct HopTable {
    inter: FockSpace,
    cols: Vec<u64>,
    /// The mode each term of the single groups adds a quantum to.
    to: Vec<u32>,
}

/// Largest intermediate table (entries) relative to the sector's dimension.
const HOP_TABLE_PER_STATE: u64 = 64;
/// Products gather the hop terms per intermediate state (one dense `m × m` product
/// each) when the single groups hold at least `m² / DENSE_HOPS_FILL` terms ...
const DENSE_HOPS_FILL: usize = 4;
/// ... and the gathered table (`m` values per intermediate state) is at most this many
/// vectors of the space.
const DENSE_HOPS_VECTORS: u64 = 4;
/// Intermediate states per parallel task of the gathering.
const GATHER_STATES: usize = 64;

/// Rank of the state with the given `(mode, occupation)` pairs (ascending modes, zero
/// occupations allowed): modes without quanta add nothing and keep the residue.
fn sparse_rank(space: &FockSpace, occupied: impl Iterator<Item = (usize, u32)>) -> u64 {
    let mut residue = space.start_residue();
    let mut rank = 0u64;
    for (mode, v) in occupied {
        if v == 0 {
            continue;
        }
        rank += space.offset(mode, residue, v);
        residue = match space.step(residue, mode, v) {
            Some(r) => r,
            None => return u64::MAX,
        };
    }
    rank
}

impl HopTable {
    /// The table for `space`, or `None` when it does not apply or would be too large.
    fn new(space: &FockSpace) -> Option<Self> {
        let m = space.modes();
        let w = *space.weights().first()?;
        let total = match space.constraint() {
            Constraint::Exact { total } => total,
            _ => return None,
        };
        if w == 0 || space.weights().iter().any(|&x| x != w) || total < w as u64 {
            return None;
        }
        let inter = FockSpace::new(
            space.cutoffs().to_vec(),
            Some(space.weights().to_vec()),
            Some(total - w as u64),
            None,
        )
        .ok()?;
        let len = inter.dim().checked_mul(m as u64)?;
        if len > HOP_TABLE_PER_STATE.saturating_mul(space.dim()).max(1 << 20) {
            return None;
        }
        let mut cols: Vec<u64> = crate::memory::try_with_capacity(len as usize, "the hop table").ok()?;
        let caps = space.caps();
        let mut row = RowState::at(&inter, 0).ok()?;
        let mut occupied: Vec<(usize, u32)> = Vec::with_capacity(16);
        let mut image: Vec<(usize, u32)> = Vec::with_capacity(17);
        for k in 0..inter.dim() {
            if k > 0 {
                row.advance(&inter);
            }
            occupied.clear();
            occupied.extend((0..m).filter(|&i| row.occ[i] > 0).map(|i| (i, row.occ[i])));
            for (j, &cap) in caps.iter().enumerate() {
                if row.occ[j] + 1 > cap {
                    cols.push(u64::MAX);
                    continue;
                }
                image.clear();
                let at = occupied.partition_point(|o| o.0 < j);
                image.extend_from_slice(&occupied[..at]);
                match occupied.get(at) {
                    Some(&(mode, v)) if mode == j => {
                        image.push((j, v + 1));
                        image.extend_from_slice(&occupied[at + 1..]);
                    }
                    _ => {
                        image.push((j, 1));
                        image.extend_from_slice(&occupied[at..]);
                    }
                }
                cols.push(sparse_rank(space, image.iter().copied()));
            }
        }
        Some(HopTable {
            inter,
            cols,
            to: Vec::new(),
        })
    }
}

/// Largest number of modes for which the pair groups are indexed by a table.
const LOWERING_MAX_MODES: usize = 1024;
/// The index is used when the candidate terms outnumber the modes this many times.
const LOWERING_TERMS_PER_MODE: usize = 8;

/// `(removed, added)` of a term in gathering form when the index can take it: one or
/// two quanta removed, at most two modes raised.
/// Quanta a term removes, `(mode, count)` by mode.
type Removed = Vec<(usize, u32)>;
/// Quanta a term adds, `(mode, power)` by mode.
type Added = Vec<(u32, u32)>;

fn lowering_shape(factors: &[FactorPlan]) -> Option<(Removed, Added)> {
    let removed: Vec<(usize, u32)> = factors
        .iter()
        .filter(|f| f.lower > 0)
        .map(|f| (f.mode, f.lower))
        .collect();
    let count: u32 = removed.iter().map(|r| r.1).sum();
    let added: Vec<(u32, u32)> = factors
        .iter()
        .filter(|f| f.raise > 0)
        .map(|f| (f.mode as u32, f.raise))
        .collect();
    ((1..=2).contains(&count) && added.len() <= 2).then_some((removed, added))
}

/// Whether `op` on `space` has enough terms for the index of the quanta they remove
/// (see the module notes); the product then prefers the row kernel to the bipartite
/// one, whose tables grow with the terms.
pub fn indexes_terms<S: Scalar>(space: &FockSpace, op: &Operator<S>) -> bool {
    let m = space.modes();
    if !(2..=LOWERING_MAX_MODES).contains(&m) {
        return false;
    }
    let mut candidates = 0usize;
    for t in 0..op.len() {
        let factors: Vec<FactorPlan> = op
            .factors(t)
            .map(|(mode, lower, raise)| FactorPlan {
                mode,
                lower,
                raise,
                cutoff: 0,
            })
            .collect();
        let single_diagonal = factors.len() <= 1 && factors.iter().all(|f| f.lower == f.raise);
        if !single_diagonal && lowering_shape(&factors).is_some() {
            candidates += 1;
        }
    }
    candidates >= LOWERING_TERMS_PER_MODE * m
}

/// The most modes a basis state of `space` can occupy at once.
fn max_occupied(space: &FockSpace) -> usize {
    let m = space.modes();
    // Each exact charge whose weights are all positive bounds the quanta, hence the
    // occupied modes.
    space
        .charges()
        .iter()
        .filter(|c| c.modulus.is_none())
        .filter_map(|c| {
            let least = c.weights.iter().copied().min().unwrap_or(0);
            (least > 0).then(|| ((c.total / least as u64) as usize).min(m))
        })
        .min()
        .unwrap_or(m)
}

impl<S: Scalar> Lowering<S> {
    fn new(space: &FockSpace, terms: Vec<(S, Removed, Added)>) -> Self {
        let m = space.modes();
        let groups = m + m * m;
        let group_of = |removed: &[(usize, u32)]| -> usize {
            match removed {
                [(i, 1)] => *i,
                [(i, 2)] => m + i * m + i,
                [(i, _), (j, _)] => m + i.min(j) * m + i.max(j),
                _ => unreachable!("lowering_shape admits one or two quanta only"),
            }
        };
        let mut keyed: Vec<(usize, Added, S)> = terms
            .into_iter()
            .map(|(coef, removed, added)| (group_of(&removed), added, coef))
            .collect();
        // Within a group, columns ascend when the added quanta, read as the list of
        // their modes with repeats, descend: a quantum in a more significant mode
        // makes a later state.
        let spelled = |added: &[(u32, u32)]| -> Vec<u32> {
            added
                .iter()
                .flat_map(|&(mode, power)| std::iter::repeat_n(mode, power as usize))
                .collect()
        };
        keyed.sort_by_cached_key(|k| (k.0, std::cmp::Reverse(spelled(&k.1))));
        let mut starts = vec![0u32; groups + 1];
        for (g, _, _) in &keyed {
            starts[g + 1] += 1;
        }
        for g in 0..groups {
            starts[g + 1] += starts[g];
        }
        // A row visits each single group at most once per occupied mode and each pair
        // group at most once per pair of them.
        let occupied = max_occupied(space);
        let bound_of = |range: std::ops::Range<usize>, slots: usize| -> usize {
            let mut sizes: Vec<usize> = range.map(|g| (starts[g + 1] - starts[g]) as usize).collect();
            sizes.sort_unstable_by(|a, b| b.cmp(a));
            sizes.iter().take(slots).sum()
        };
        let row_bound = bound_of(0..m, occupied) + bound_of(m..groups, occupied * (occupied + 1) / 2);
        let hop_like = keyed
            .iter()
            .take(starts[m] as usize)
            .all(|(_, added, _)| added.len() == 1 && added[0].1 == 1);
        let mut hop_table = if hop_like && starts[m] > 0 {
            HopTable::new(space)
        } else {
            None
        };
        if let Some(table) = hop_table.as_mut() {
            table.to = keyed[..starts[m] as usize].iter().map(|k| k.1[0].0).collect();
        }
        let dense_hops = hop_table
            .as_ref()
            .filter(|table| {
                (starts[m] as usize).saturating_mul(DENSE_HOPS_FILL) >= m * m
                    && (table.inter.dim() as u128) * (m as u128)
                        <= DENSE_HOPS_VECTORS as u128 * space.dim() as u128
            })
            .map(|table| {
                let mut dense = vec![S::ZERO; m * m];
                for i in 0..m {
                    for t in starts[i] as usize..starts[i + 1] as usize {
                        dense[table.to[t] as usize * m + i] += keyed[t].2;
                    }
                }
                dense
            });
        let mut coef = Vec::with_capacity(keyed.len());
        let mut raised = Vec::with_capacity(keyed.len());
        for (_, added, c) in keyed {
            let mut slots = [(0u32, 0u32); 2];
            for (k, a) in added.into_iter().enumerate() {
                slots[k] = a;
            }
            coef.push(c);
            raised.push(slots);
        }
        Lowering {
            starts,
            coef,
            raised,
            row_bound,
            hop_table,
            dense_hops,
        }
    }
}

#[derive(Debug, Clone)]
struct OffDiagonal<S> {
    coef: S,
    factors: Vec<FactorPlan>,
    span: Vec<SpanStep>,
    lo: usize,
    hi: usize,
}

/// An operator prepared for fast products on one space.
#[derive(Debug, Clone)]
pub struct ProductKernel<S: Scalar> {
    modes: usize,
    /// `diag_table[diag_start[i] + n]`: sum of the single-mode diagonal terms of mode
    /// `i` at occupation `n` (the identity is folded into mode 0).
    diag_start: Vec<usize>,
    diag_table: Vec<S>,
    diag_modes: Vec<usize>,
    /// Diagonal terms touching several modes (cross-Kerr and the like).
    multi_diag: Vec<(S, Vec<FactorPlan>)>,
    off: Vec<OffDiagonal<S>>,
    hops: Vec<Hop<S>>,
    /// Hops `..hops_below` land below the diagonal; they are emitted before it.
    hops_below: usize,
    /// Terms indexed by the quanta they remove (operators with many terms).
    lowering: Option<Lowering<S>>,
    /// Per mode, its residue key (see [`residue_keys`]).
    keys: Vec<u64>,
    sqrt: Vec<f64>,
    /// For an operator of gathered hops and single-mode diagonal terms only: each row's
    /// slots in the gathered table and its diagonal, made by the first product.
    quadratic: OnceLock<Option<QuadraticRows<S>>>,
}

/// The rows of an operator made of dense hop groups and single-mode diagonal terms
/// (a quadratic form `Σ t_ij a_i† a_j` on a sector of fixed total): row `s` is
/// `d(s) x[s] + Σ_e amp_e g[slot_e]`, one entry `e` per occupied mode `i` with
/// `slot_e = k(s − e_i) m + i` and `amp_e = sqrt(s_i)` (see
/// [`ProductKernel::gather_hops`]), so a product reads a few table entries a row
/// instead of unpacking the row state over every mode.
#[derive(Debug, Clone)]
struct QuadraticRows<S> {
    starts: Vec<usize>,
    slots: Vec<u64>,
    amps: Vec<f64>,
    diagonal: Vec<S>,
}

impl<S: Scalar> QuadraticRows<S> {
    fn apply(
        &self,
        gathered: &[S],
        x: &[S],
        y: &mut [S],
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        runner.for_row_chunks(y, interrupt, |first, out| {
            for (k, yr) in out.iter_mut().enumerate() {
                let r = first as usize + k;
                let mut acc = self.diagonal[r] * x[r];
                for e in self.starts[r]..self.starts[r + 1] {
                    acc += gathered[self.slots[e] as usize].scale(self.amps[e]);
                }
                *yr = acc;
            }
            Ok(())
        })
    }
}

impl<S: Scalar> ProductKernel<S> {
    /// Prepare `op` (already validated for `space`).
    pub fn new(space: &FockSpace, op: &Operator<S>) -> Self {
        let m = space.modes();
        let cut = space.caps();
        let mut diag_start = Vec::with_capacity(m);
        let mut size = 0;
        for &c in cut {
            diag_start.push(size);
            size += c as usize + 1;
        }
        let mut diag_table = vec![S::ZERO; size];
        let mut diag_used = vec![false; m];
        let mut multi_diag = Vec::new();
        let mut off = Vec::new();
        let mut hops = Vec::new();
        let index = indexes_terms(space, op);
        let keys = residue_keys(space);
        let mut indexed = Vec::new();
        for t in 0..op.len() {
            let coef = op.coef(t);
            let factors: Vec<FactorPlan> = op
                .factors(t)
                .map(|(mode, lower, raise)| FactorPlan {
                    mode,
                    lower,
                    raise,
                    cutoff: cut[mode],
                })
                .collect();
            let diagonal = factors.iter().all(|f| f.lower == f.raise);
            let shape = if index && !(diagonal && factors.len() <= 1) {
                lowering_shape(&factors)
            } else {
                None
            };
            if let Some((removed, added)) = shape {
                indexed.push((coef, removed, added));
            } else if diagonal && factors.len() <= 1 {
                let (mode, power) = factors.first().map_or((0, 0), |f| (f.mode, f.lower));
                diag_used[mode] = true;
                for n in power..=cut[mode] {
                    diag_table[diag_start[mode] + n as usize] += coef.scale(falling(n, power));
                }
            } else if diagonal {
                multi_diag.push((coef, factors));
            } else {
                let lo = factors.first().map_or(0, |f| f.mode);
                let hi = factors.last().map_or(0, |f| f.mode);
                let mut span = Vec::with_capacity(hi - lo + 1);
                let mut fi = 0;
                for (mode, &cutoff) in cut.iter().enumerate().take(hi + 1).skip(lo) {
                    let factor = if fi < factors.len() && factors[fi].mode == mode {
                        fi += 1;
                        fi - 1
                    } else {
                        usize::MAX
                    };
                    span.push(SpanStep {
                        mode,
                        base: space.offset_base(mode),
                        width: cutoff as usize + 2,
                        weight: keys[mode],
                        factor,
                    });
                }
                let unit = |f: &FactorPlan| f.lower + f.raise == 1;
                if factors.len() == 2 && factors.iter().all(unit) {
                    let (a, b) = (factors[0], factors[1]);
                    hops.push(Hop {
                        coef,
                        lo,
                        hi,
                        d_lo: a.raise as i64 - a.lower as i64,
                        d_hi: b.raise as i64 - b.lower as i64,
                        cut_lo: a.cutoff,
                        cut_hi: b.cutoff,
                        base_lo: span[0].base,
                        width_lo: span[0].width,
                        weight_lo: span[0].weight,
                        rest: span[1..].to_vec(),
                    });
                } else {
                    off.push(OffDiagonal {
                        coef,
                        factors,
                        span,
                        lo,
                        hi,
                    });
                }
            }
        }
        let diag_modes = (0..m).filter(|&i| diag_used[i]).collect();
        // Emit hops in roughly ascending column order so the per-row sort of a build
        // has little to do: in the lexicographic basis, a hop that lowers the more
        // significant mode lands below the row, further the more significant the mode
        // (and, for equal modes, the less significant the other one); one that raises
        // it lands above. The order only changes how duplicates are grouped, and it is
        // the same on every thread.
        hops.sort_by_key(|h: &Hop<S>| {
            if h.d_lo < 0 {
                (0u8, h.lo as i64, -(h.hi as i64))
            } else {
                (1u8, -(h.lo as i64), h.hi as i64)
            }
        });
        let hops_below = hops.iter().take_while(|h| h.d_lo < 0).count();
        let sqrt_len = ((space.max_cutoff() as usize + 1).pow(2) + 1).clamp(SQRT_TABLE, 1 << 20);
        let sqrt = (0..sqrt_len).map(|k| (k as f64).sqrt()).collect();
        let lowering = index.then(|| Lowering::new(space, indexed));
        ProductKernel {
            modes: m,
            diag_start,
            diag_table,
            diag_modes,
            multi_diag,
            off,
            hops,
            hops_below,
            lowering,
            keys,
            sqrt,
            quadratic: OnceLock::new(),
        }
    }

    /// `y = H x`, parallel over blocks of rows.
    ///
    /// # Errors
    /// [`CoreError::Shape`] for vectors of the wrong length; [`CoreError::Interrupted`].
    pub fn apply(
        &self,
        space: &FockSpace,
        x: &[S],
        y: &mut [S],
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        let dim = space.dim() as usize;
        if x.len() != dim || y.len() != dim {
            return Err(CoreError::Shape(format!(
                "vectors must have length {dim} to match the space (got {} and {}); pass \
                 arrays whose length is the space's dim",
                x.len(),
                y.len()
            )));
        }
        match space.constraint() {
            Constraint::Free => self.apply_with(space, FreeRule, x, y, runner, interrupt),
            Constraint::Exact { .. } => self.apply_with(space, ExactRule, x, y, runner, interrupt),
            Constraint::Modular { modulus, .. } => {
                self.apply_with(space, ModularRule(modulus), x, y, runner, interrupt)
            }
            Constraint::Several if space.all_exact() => {
                self.apply_with(space, ExactRule, x, y, runner, interrupt)
            }
            Constraint::Several => self.apply_with(space, MixedRule(space), x, y, runner, interrupt),
        }
    }

    fn apply_with<R: ResidueRule>(
        &self,
        space: &FockSpace,
        rule: R,
        x: &[S],
        y: &mut [S],
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<()> {
        let gathered = match &self.lowering {
            Some(index) => self.gather_hops(index, x, runner, interrupt)?,
            None => None,
        };
        if let (Some(g), Some(rows)) = (gathered.as_deref(), self.quadratic_rows(space, runner)?) {
            return rows.apply(g, x, y, runner, interrupt);
        }
        let hops = gathered.as_deref();
        runner.for_row_chunks(y, interrupt, |first, out| {
            let mut block = Block::new(self.modes, KERNEL_BLOCK);
            let mut row = RowState::at(space, first)?;
            let mut done = 0usize;
            while done < out.len() {
                let n = KERNEL_BLOCK.min(out.len() - done);
                block.load(space, &mut row, n, done == 0);
                let ys = &mut out[done..done + n];
                ys.fill(S::ZERO);
                self.block_entries(space, rule, &block, n, &mut ProductSink { ys, x, hops });
                done += n;
            }
            Ok(())
        })
    }

    /// Whether every term is a gathered hop or a single-mode diagonal term: products
    /// then read each row from [`QuadraticRows`], as fast as a stored matrix or faster.
    pub fn reads_quadratic_rows(&self) -> bool {
        self.gathers_hops()
            && self.lowering.as_ref().is_some_and(|index| {
                self.hops.is_empty()
                    && self.off.is_empty()
                    && self.multi_diag.is_empty()
                    && index.starts[self.modes] == index.starts[index.starts.len() - 1]
            })
    }

    /// The rows of [`QuadraticRows`] when every term is a gathered hop or a single-mode
    /// diagonal term, made once (on the first product) and kept.
    fn quadratic_rows(&self, space: &FockSpace, runner: &Runner) -> CoreResult<Option<&QuadraticRows<S>>> {
        if !self.reads_quadratic_rows() {
            return Ok(None);
        }
        let Some(table) = self.lowering.as_ref().and_then(|index| index.hop_table.as_ref()) else {
            return Ok(None);
        };
        if let Some(made) = self.quadratic.get() {
            return Ok(made.as_ref());
        }
        let made = self.make_quadratic_rows(space, table, runner)?;
        Ok(self.quadratic.get_or_init(|| Some(made)).as_ref())
    }

    fn make_quadratic_rows(
        &self,
        space: &FockSpace,
        table: &HopTable,
        runner: &Runner,
    ) -> CoreResult<QuadraticRows<S>> {
        let m = self.modes;
        let dim = space.dim() as usize;
        let kdim = table.inter.dim() as usize;
        // Entries by row: count, then fill in the order of the intermediate states.
        let mut starts: Vec<usize> = crate::memory::try_with_capacity(dim + 1, "the quadratic-form rows")?;
        starts.resize(dim + 1, 0);
        for &col in &table.cols {
            if col != u64::MAX {
                starts[col as usize + 1] += 1;
            }
        }
        for r in 0..dim {
            starts[r + 1] += starts[r];
        }
        let entries = starts[dim];
        let mut slots: Vec<u64> = crate::memory::try_with_capacity(entries, "the quadratic-form rows")?;
        slots.resize(entries, 0);
        let mut amps: Vec<f64> = crate::memory::try_with_capacity(entries, "the quadratic-form rows")?;
        amps.resize(entries, 0.0);
        let mut next = starts[..dim].to_vec();
        if kdim > 0 {
            let mut state = RowState::at(&table.inter, 0)?;
            for k in 0..kdim {
                if k > 0 {
                    state.advance(&table.inter);
                }
                for (i, &col) in table.cols[k * m..(k + 1) * m].iter().enumerate() {
                    if col == u64::MAX {
                        continue;
                    }
                    let e = &mut next[col as usize];
                    slots[*e] = (k * m + i) as u64;
                    amps[*e] = self.sqrt[state.occ[i] as usize + 1];
                    *e += 1;
                }
            }
        }
        drop(next);
        // The diagonal of every row, summed over the modes as the row kernel sums it.
        let mut diagonal: Vec<S> = crate::memory::try_with_capacity(dim, "the quadratic-form diagonal")?;
        diagonal.resize(dim, S::ZERO);
        runner.for_row_chunks(&mut diagonal, &crate::parallel::NoInterrupt, |first, out| {
            let mut row = RowState::at(space, first)?;
            for (k, d) in out.iter_mut().enumerate() {
                if k > 0 {
                    row.advance(space);
                }
                let mut sum = S::ZERO;
                for &i in &self.diag_modes {
                    sum += self.diag_table[self.diag_start[i] + row.occ[i] as usize];
                }
                *d = sum;
            }
            Ok(())
        })?;
        Ok(QuadraticRows {
            starts,
            slots,
            amps,
            diagonal,
        })
    }

    /// For the dense hop groups (see [`Lowering::dense_hops`]), the table
    /// `g[k * m + i] = Σ_j t_ij sqrt(s'_j + 1) x[s' + e_j]` over the intermediate states
    /// `s'` (rank `k`, one quantum fewer): row `s` then takes `sqrt(s_i) g[k(s − e_i), i]`
    /// for each occupied mode `i`. The hop terms of a product cost one dense `m × m`
    /// product per intermediate state (an update along `i` for every `j`, which the
    /// compiler vectorises) instead of a gather per entry: the stored matrix's work,
    /// read from a table that fits in cache. Each `s'` is summed in the same order on
    /// every thread.
    fn gather_hops(
        &self,
        index: &Lowering<S>,
        x: &[S],
        runner: &Runner,
        interrupt: &dyn Interrupt,
    ) -> CoreResult<Option<Vec<S>>> {
        let (Some(table), Some(dense)) = (&index.hop_table, &index.dense_hops) else {
            return Ok(None);
        };
        let m = self.modes;
        let kdim = table.inter.dim() as usize;
        let mut gathered: Vec<S> = crate::memory::try_with_capacity(kdim * m, "the gathered hop table")?;
        gathered.resize(kdim * m, S::ZERO);
        let sqrt = &self.sqrt;
        runner.install(|| {
            gathered
                .par_chunks_mut(m * GATHER_STATES)
                .enumerate()
                .try_for_each(|(c, part)| -> CoreResult<()> {
                    let first = c * GATHER_STATES;
                    let mut state = RowState::at(&table.inter, first as u64)?;
                    for (k, g) in part.chunks_mut(m).enumerate() {
                        if k > 0 {
                            state.advance(&table.inter);
                        }
                        let at = (first + k) * m;
                        for (j, &col) in table.cols[at..at + m].iter().enumerate() {
                            if col == u64::MAX {
                                continue;
                            }
                            let z = x[col as usize].scale(sqrt[state.occ[j] as usize + 1]);
                            for (gi, &t) in g.iter_mut().zip(&dense[j * m..(j + 1) * m]) {
                                *gi += t * z;
                            }
                        }
                    }
                    Ok(())
                })
        })?;
        if interrupt.requested() {
            return Err(CoreError::Interrupted);
        }
        Ok(Some(gathered))
    }

    /// Upper bound of the stored entries of one row.
    pub fn row_capacity(&self) -> usize {
        1 + self.hops.len() + self.off.len() + self.lowering.as_ref().map_or(0, |l| l.row_bound)
    }

    /// Whether the terms that remove one or two quanta are indexed by those quanta.
    pub fn indexes_terms(&self) -> bool {
        self.lowering.is_some()
    }

    /// Whether products gather the hop terms per intermediate state (dense hop groups,
    /// which exist only beside the hop table).
    pub fn gathers_hops(&self) -> bool {
        self.lowering.as_ref().is_some_and(|l| l.dense_hops.is_some())
    }

    /// Rows per block when a block's entries are buffered (keeps the buffer small).
    fn buffered_block_rows(&self) -> usize {
        (16_384 / self.row_capacity()).clamp(1, KERNEL_BLOCK)
    }

    /// Call `visit(row, merged_entries)` for every row of the rows `first..first+count`,
    /// in order, with the row's entries sorted by column, duplicates summed in term
    /// order and exact zeros dropped.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when `first` is out of range.
    pub fn for_each_row(
        &self,
        space: &FockSpace,
        first: u64,
        count: usize,
        mut visit: impl FnMut(u64, &[(u64, S)]),
    ) -> CoreResult<()> {
        match space.constraint() {
            Constraint::Free => self.rows_with(space, FreeRule, first, count, &mut visit),
            Constraint::Exact { .. } => self.rows_with(space, ExactRule, first, count, &mut visit),
            Constraint::Modular { modulus, .. } => {
                self.rows_with(space, ModularRule(modulus), first, count, &mut visit)
            }
            Constraint::Several if space.all_exact() => {
                self.rows_with(space, ExactRule, first, count, &mut visit)
            }
            Constraint::Several => self.rows_with(space, MixedRule(space), first, count, &mut visit),
        }
    }

    fn rows_with<R: ResidueRule>(
        &self,
        space: &FockSpace,
        rule: R,
        first: u64,
        count: usize,
        visit: &mut impl FnMut(u64, &[(u64, S)]),
    ) -> CoreResult<()> {
        let cap = self.row_capacity();
        let rows_per_block = self.buffered_block_rows();
        let mut block = Block::new(self.modes, rows_per_block);
        let mut buf = vec![(0u64, S::ZERO); rows_per_block * cap];
        let mut lens = vec![0usize; rows_per_block];
        let mut row = RowState::at(space, first)?;
        let mut done = 0usize;
        while done < count {
            let n = rows_per_block.min(count - done);
            block.load(space, &mut row, n, done == 0);
            lens[..n].fill(0);
            self.block_entries(
                space,
                rule,
                &block,
                n,
                &mut BufferSink {
                    buf: &mut buf,
                    lens: &mut lens,
                    cap,
                },
            );
            for r in 0..n {
                let entries = &mut buf[r * cap..r * cap + lens[r]];
                let kept = crate::build::merge_row(entries);
                visit(block.rank[r], &entries[..kept]);
            }
            done += n;
        }
        Ok(())
    }

    /// Emit `(row_in_block, column, value)` for every entry of the block's rows: the
    /// hops that land below the diagonal, the diagonal (when the operator has diagonal
    /// terms), the other hops, then the remaining off-diagonal terms.
    #[inline(always)]
    fn block_entries<R: ResidueRule>(
        &self,
        space: &FockSpace,
        rule: R,
        b: &Block,
        n: usize,
        sink: &mut impl Sink<S>,
    ) {
        let m = self.modes;
        let offsets = space.offset_table();
        for hop in &self.hops[..self.hops_below] {
            self.hop_rows(rule, hop, b, n, offsets, sink);
        }
        if !self.diag_modes.is_empty() || !self.multi_diag.is_empty() {
            for r in 0..n {
                let occ = &b.occ[r * m..(r + 1) * m];
                let mut d = S::ZERO;
                for &i in &self.diag_modes {
                    d += self.diag_table[self.diag_start[i] + occ[i] as usize];
                }
                for (coef, factors) in &self.multi_diag {
                    let mut amp = 1.0;
                    for f in factors {
                        let v = occ[f.mode];
                        if v < f.lower {
                            amp = 0.0;
                            break;
                        }
                        amp *= falling(v, f.lower);
                    }
                    d += coef.scale(amp);
                }
                sink.push(r, b.rank[r], d);
            }
        }
        for hop in &self.hops[self.hops_below..] {
            self.hop_rows(rule, hop, b, n, offsets, sink);
        }
        if let Some(index) = &self.lowering {
            self.indexed_rows(space, rule, index, b, n, sink);
        }
        let mut new_occ: Vec<u32> = Vec::with_capacity(8);
        for term in &self.off {
            new_occ.clear();
            new_occ.resize(term.factors.len(), 0);
            'rows: for r in 0..n {
                let occ = &b.occ[r * m..(r + 1) * m];
                let mut amp_sq = 1.0f64;
                for (k, f) in term.factors.iter().enumerate() {
                    let v = occ[f.mode];
                    if v < f.lower {
                        continue 'rows;
                    }
                    let w = v - f.lower + f.raise;
                    if w > f.cutoff {
                        continue 'rows;
                    }
                    new_occ[k] = w;
                    amp_sq *= falling(v, f.lower) * falling(w, f.raise);
                }
                let mut residue = b.res[r * m + term.lo];
                let mut part = 0u64;
                for s in &term.span {
                    let v = if s.factor == usize::MAX {
                        occ[s.mode]
                    } else {
                        new_occ[s.factor]
                    };
                    part = part.wrapping_add(offsets[s.base + residue as usize * s.width + v as usize]);
                    residue = rule.step(residue, s.weight, v);
                }
                // Wrapping: valid images by construction (see `hop_rows`).
                let p = &b.prefix[r * (m + 1)..(r + 1) * (m + 1)];
                let col = b.rank[r]
                    .wrapping_sub(p[term.hi + 1].wrapping_sub(p[term.lo]))
                    .wrapping_add(part);
                let amp = if amp_sq < self.sqrt.len() as f64 {
                    self.sqrt[amp_sq as usize]
                } else {
                    amp_sq.sqrt()
                };
                sink.push(r, col, term.coef.scale(amp));
            }
        }
    }
}

impl<S: Scalar> ProductKernel<S> {
    /// The indexed terms over a block of rows: each row visits the groups of the one or
    /// two quanta its occupied modes can give, in a fixed order (by the first removed
    /// mode, then the second).
    #[inline(always)]
    fn indexed_rows<R: ResidueRule>(
        &self,
        space: &FockSpace,
        rule: R,
        index: &Lowering<S>,
        b: &Block,
        n: usize,
        sink: &mut impl Sink<S>,
    ) {
        let m = self.modes;
        let mut occupied: Vec<usize> = Vec::with_capacity(16);
        for r in 0..n {
            let occ = &b.occ[r * m..(r + 1) * m];
            occupied.clear();
            occupied.extend((0..m).filter(|&i| occ[i] > 0));
            for (a, &i) in occupied.iter().enumerate() {
                match &index.hop_table {
                    Some(table) => self.table_entries(index, table, b, r, &occupied, i, sink),
                    None => self.group_entries(
                        space,
                        rule,
                        index,
                        b,
                        r,
                        &occupied,
                        i,
                        [(i, 1), (usize::MAX, 0)],
                        sink,
                    ),
                }
                if occ[i] >= 2 {
                    let g = m + i * m + i;
                    self.group_entries(
                        space,
                        rule,
                        index,
                        b,
                        r,
                        &occupied,
                        g,
                        [(i, 2), (usize::MAX, 0)],
                        sink,
                    );
                }
                for &j in &occupied[a + 1..] {
                    let g = m + i * m + j;
                    self.group_entries(space, rule, index, b, r, &occupied, g, [(i, 1), (j, 1)], sink);
                }
            }
        }
    }

    /// The entries of row `r` from the single group of mode `i`, columns read from the
    /// hop table.
    #[allow(clippy::too_many_arguments)]
    #[inline(always)]
    fn table_entries(
        &self,
        index: &Lowering<S>,
        table: &HopTable,
        b: &Block,
        r: usize,
        occupied: &[usize],
        i: usize,
        sink: &mut impl Sink<S>,
    ) {
        let (first, last) = (index.starts[i] as usize, index.starts[i + 1] as usize);
        if first == last {
            return;
        }
        let m = self.modes;
        let occ = &b.occ[r * m..(r + 1) * m];
        let k = sparse_rank(
            &table.inter,
            occupied
                .iter()
                .map(|&o| (o, if o == i { occ[o] - 1 } else { occ[o] })),
        ) as usize;
        let sqrt = &self.sqrt;
        let root_i = sqrt[occ[i] as usize];
        if let Some(gathered) = sink.gathered_hops() {
            let val = gathered[k * m + i].scale(root_i);
            sink.add(r, val);
            return;
        }
        let cols = &table.cols[k * m..(k + 1) * m];
        let to = &table.to[first..last];
        let coefs = &index.coef[first..last];
        // The amplitude is sqrt(n_i) sqrt(s'_j + 1), with s'_j = n_j (a group's terms
        // never add to the mode they remove from): sqrt(n_i) for an empty mode j.
        if let Some(x) = sink.input() {
            // A product: two running sums in a fixed pattern (shorter dependency
            // chains), the occupied modes' factors applied from `boost`.
            let mut sums = [S::ZERO; 2];
            for (k, (&j, &c)) in to.iter().zip(coefs).enumerate() {
                let col = cols[j as usize];
                if col == u64::MAX {
                    continue;
                }
                let v = x[col as usize];
                let w = occ[j as usize];
                let term = if w == 0 {
                    c * v
                } else {
                    c.scale(sqrt[w as usize + 1]) * v
                };
                sums[k & 1] += term;
            }
            sink.add(r, (sums[0] + sums[1]).scale(root_i));
            return;
        }
        let entries = to.iter().zip(coefs).filter_map(move |(&j, &c)| {
            let j = j as usize;
            let col = cols[j];
            if col == u64::MAX {
                return None;
            }
            let w = occ[j] as usize + 1;
            let amp = if w == 1 { root_i } else { root_i * sqrt[w] };
            Some((col, c.scale(amp)))
        });
        sink.push_all(r, entries);
    }

    /// The entries of row `r` from group `g`, whose terms remove `removed` (one or two
    /// `(mode, quanta)`, the second `usize::MAX` when unused).
    #[allow(clippy::too_many_arguments)]
    #[inline(always)]
    fn group_entries<R: ResidueRule>(
        &self,
        space: &FockSpace,
        rule: R,
        index: &Lowering<S>,
        b: &Block,
        r: usize,
        occupied: &[usize],
        g: usize,
        removed: [(usize, u32); 2],
        sink: &mut impl Sink<S>,
    ) {
        let (first, last) = (index.starts[g] as usize, index.starts[g + 1] as usize);
        if first == last {
            return;
        }
        let m = self.modes;
        let occ = &b.occ[r * m..(r + 1) * m];
        let res = &b.res[r * m..(r + 1) * m];
        let p = &b.prefix[r * (m + 1)..(r + 1) * (m + 1)];
        let caps = space.caps();
        let offsets = space.offset_table();
        let mut low_sq = 1.0;
        for &(mode, k) in &removed {
            if mode != usize::MAX {
                low_sq *= falling(occ[mode], k);
            }
        }
        let removed_at = |mode: usize| -> u32 {
            let mut k = 0;
            for &(rm, q) in &removed {
                if rm == mode {
                    k += q;
                }
            }
            k
        };
        let low_lo = removed[0].0;
        let low_hi = if removed[1].0 == usize::MAX {
            low_lo
        } else {
            removed[1].0
        };
        'terms: for t in first..last {
            let added = &index.raised[t];
            let mut amp_sq = low_sq;
            let mut lo = low_lo;
            let mut hi = low_hi;
            // New occupations of the raised modes.
            let mut new_val = [0u32; 2];
            for (k, &(mode, power)) in added.iter().enumerate() {
                if power == 0 {
                    continue;
                }
                let mode = mode as usize;
                let w = occ[mode] - removed_at(mode) + power;
                if w > caps[mode] {
                    continue 'terms;
                }
                amp_sq *= falling(w, power);
                new_val[k] = w;
                lo = lo.min(mode);
                hi = hi.max(mode);
            }
            // Rank the image from the modes in lo..=hi that hold quanta after it: the
            // row's occupied modes (less what was removed) and the raised ones.
            let mut residue = res[lo];
            let mut part = 0u64;
            let mut ai = 0usize;
            let mut oi = occupied.partition_point(|&o| o < lo);
            loop {
                let next_occ = occupied.get(oi).copied().filter(|&o| o <= hi);
                while ai < 2 && added[ai].1 == 0 {
                    ai += 1;
                }
                let next_add = (ai < 2).then(|| added[ai].0 as usize);
                let (mode, v) = match (next_occ, next_add) {
                    (None, None) => break,
                    (Some(o), Some(a)) if a == o => {
                        oi += 1;
                        ai += 1;
                        (o, new_val[ai - 1])
                    }
                    (Some(o), Some(a)) if a < o => {
                        ai += 1;
                        (a, new_val[ai - 1])
                    }
                    (None, Some(a)) => {
                        ai += 1;
                        (a, new_val[ai - 1])
                    }
                    (Some(o), _) => {
                        oi += 1;
                        (o, occ[o] - removed_at(o))
                    }
                };
                if v == 0 {
                    continue;
                }
                let base = space.offset_base(mode);
                let width = caps[mode] as usize + 2;
                part = part.wrapping_add(offsets[base + residue as usize * width + v as usize]);
                residue = rule.step(residue, self.keys[mode], v);
            }
            // Wrapping: valid images by construction (see `hop_rows`).
            let col = b.rank[r]
                .wrapping_sub(p[hi + 1].wrapping_sub(p[lo]))
                .wrapping_add(part);
            let amp = if amp_sq < self.sqrt.len() as f64 {
                self.sqrt[amp_sq as usize]
            } else {
                amp_sq.sqrt()
            };
            sink.push(r, col, index.coef[t].scale(amp));
        }
    }

    /// One hop term over a block of rows. Wrapping arithmetic: every index computed
    /// here is that of a valid basis state (checked cutoffs, conserved charge), so no
    /// intermediate can overflow, and the overflow checks would only cost branches.
    #[inline(always)]
    fn hop_rows<R: ResidueRule>(
        &self,
        rule: R,
        hop: &Hop<S>,
        b: &Block,
        n: usize,
        offsets: &[u64],
        sink: &mut impl Sink<S>,
    ) {
        let m = self.modes;
        let sqrt_len = self.sqrt.len();
        for r in 0..n {
            let occ = &b.occ[r * m..(r + 1) * m];
            let v_lo = occ[hop.lo];
            let v_hi = occ[hop.hi];
            let w_lo = (v_lo as i64).wrapping_add(hop.d_lo) as u32;
            let w_hi = (v_hi as i64).wrapping_add(hop.d_hi) as u32;
            // A negative occupation wraps to a huge u32 and fails the cutoff test too.
            if w_lo > hop.cut_lo || w_hi > hop.cut_hi {
                continue;
            }
            let amp_sq = v_lo.max(w_lo) as usize * v_hi.max(w_hi) as usize;
            let mut residue = b.res[r * m + hop.lo];
            let mut part = offsets[hop.base_lo + residue as usize * hop.width_lo + w_lo as usize];
            residue = rule.step(residue, hop.weight_lo, w_lo);
            for s in &hop.rest {
                let v = if s.factor == usize::MAX { occ[s.mode] } else { w_hi };
                part = part.wrapping_add(offsets[s.base + residue as usize * s.width + v as usize]);
                residue = rule.step(residue, s.weight, v);
            }
            let p = &b.prefix[r * (m + 1)..(r + 1) * (m + 1)];
            let col = b.rank[r]
                .wrapping_sub(p[hop.hi + 1].wrapping_sub(p[hop.lo]))
                .wrapping_add(part);
            let amp = if amp_sq < sqrt_len {
                self.sqrt[amp_sq]
            } else {
                (amp_sq as f64).sqrt()
            };
            sink.push(r, col, hop.coef.scale(amp));
        }
    }
}

/// Where the kernel sends the entries it generates.
trait Sink<S> {
    fn push(&mut self, row: usize, col: u64, val: S);
    /// The vector a product multiplies (`None` for a build).
    #[inline(always)]
    fn input(&self) -> Option<&[S]> {
        None
    }
    /// The gathered hop table of a product (see [`ProductKernel::gather_hops`]).
    #[inline(always)]
    fn gathered_hops(&self) -> Option<&[S]> {
        None
    }
    /// Add `val` to the output of `row` (products only).
    #[inline(always)]
    fn add(&mut self, _row: usize, _val: S) {}
    /// Push every `(column, value)` of `entries` to `row`, in order.
    #[inline(always)]
    fn push_all(&mut self, row: usize, entries: impl Iterator<Item = (u64, S)>) {
        for (col, val) in entries {
            self.push(row, col, val);
        }
    }
}

/// Accumulates `y[row] += val · x[col]` (a product).
struct ProductSink<'a, S> {
    ys: &'a mut [S],
    x: &'a [S],
    /// The gathered hop table of [`ProductKernel::gather_hops`], when it applies.
    hops: Option<&'a [S]>,
}

impl<S: Scalar> Sink<S> for ProductSink<'_, S> {
    #[inline(always)]
    fn push(&mut self, row: usize, col: u64, val: S) {
        self.ys[row] += val * self.x[col as usize];
    }

    #[inline(always)]
    fn input(&self) -> Option<&[S]> {
        Some(self.x)
    }

    #[inline(always)]
    fn gathered_hops(&self) -> Option<&[S]> {
        self.hops
    }

    #[inline(always)]
    fn add(&mut self, row: usize, val: S) {
        self.ys[row] += val;
    }

    /// Summed in a register, then added once (the same order as pushing one by one
    /// up to the association of the additions, which is fixed).
    #[inline(always)]
    fn push_all(&mut self, row: usize, entries: impl Iterator<Item = (u64, S)>) {
        let mut sum = S::ZERO;
        for (col, val) in entries {
            sum += val * self.x[col as usize];
        }
        self.ys[row] += sum;
    }
}

/// Buffers each row's entries (a build), `cap` slots a row.
struct BufferSink<'a, S> {
    buf: &'a mut [(u64, S)],
    lens: &'a mut [usize],
    cap: usize,
}

impl<S: Scalar> Sink<S> for BufferSink<'_, S> {
    #[inline(always)]
    fn push(&mut self, row: usize, col: u64, val: S) {
        self.buf[row * self.cap + self.lens[row]] = (col, val);
        self.lens[row] += 1;
    }
}

/// Unpacked states of consecutive rows.
struct Block {
    m: usize,
    occ: Vec<u32>,
    res: Vec<u32>,
    prefix: Vec<u64>,
    rank: Vec<u64>,
}

impl Block {
    fn new(m: usize, rows: usize) -> Self {
        Block {
            m,
            occ: vec![0; rows * m],
            res: vec![0; rows * m],
            prefix: vec![0; rows * (m + 1)],
            rank: vec![0; rows],
        }
    }

    /// Unpack `n` rows starting at `row` (advancing it first unless `at_start`).
    fn load(&mut self, space: &FockSpace, row: &mut RowState, n: usize, at_start: bool) {
        let m = self.m;
        for r in 0..n {
            if r > 0 || !at_start {
                row.advance(space);
            }
            self.occ[r * m..(r + 1) * m].copy_from_slice(&row.occ);
            for (d, &s) in self.res[r * m..(r + 1) * m].iter_mut().zip(&row.residues) {
                *d = s as u32;
            }
            self.prefix[r * (m + 1)..(r + 1) * (m + 1)].copy_from_slice(&row.prefix);
            self.rank[r] = row.rank;
        }
    }
}
