//! A table from every base state to its orbit's state in a symmetric sector, so that a
//! sector product finds an image's column with one read instead of a search for the
//! smallest image followed by a ranking and an index look-up (the representative
//! tables of A. W. Sandvik, AIP Conf. Proc. 1297, 135 (2010), kept here for every base
//! state when they fit in memory).
//!
//! For a base rank `s`: `column[s]` is the sector index of the orbit of `s`, or
//! [`OUTSIDE`] when the orbit has no sector state (its stabiliser carries a nontrivial
//! character); `element[s]`, kept only when some character differs from 1, is the
//! group element `h` with `h s = r`, `r` the orbit's representative, whose character
//! the sector's matrix elements carry. Per sector state, `ties` holds the order of the
//! stabiliser (the number of elements fixing the representative).
//!
//! The images of one row are ranked incrementally by [`RowRanks`]: a term changes only
//! the modes it touches, so only the rank contributions of the modes from the first to
//! the last of them change.

use crate::error::{CoreError, CoreResult};
use crate::memory::{available_bytes, ensure_room, try_with_capacity};
use crate::parallel::{Interrupt, Runner};
use crate::space::FockSpace;
use rayon::prelude::*;
use std::sync::atomic::{AtomicU32, AtomicU8, Ordering};

/// Marks a base state whose orbit has no state in the sector.
pub const OUTSIDE: u32 = u32::MAX;
/// Marks a base state the scan has not reached yet (never left after construction).
const UNSEEN: u32 = u32::MAX - 1;
/// Largest group order whose elements fit the table's one byte per state.
pub const MAX_TABLE_ORDER: usize = 256;
/// [`TableChoice::Auto`] builds the table when it takes at most this share (1/4) of the
/// memory available, leaving the rest to vectors and stored matrices.
const AUTO_SHARE: u128 = 4;
/// [`TableChoice::Auto`]'s limit when the memory available is unknown (1 GiB).
const AUTO_UNKNOWN: u128 = 1 << 30;
/// Representatives handled between two interruption checks.
const REPS_PER_CHECK: usize = 1 << 18;
/// Representatives per parallel task.
const REPS_PER_TASK: usize = 4096;
/// Base states scanned between two interruption checks.
const STATES_PER_CHECK: u64 = 1 << 22;

/// Whether a sector keeps an [`OrbitTable`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TableChoice {
    /// When the group's order is at most [`MAX_TABLE_ORDER`] and the table takes at most
    /// a quarter of the memory available.
    Auto,
    /// Always (refused with the size when it cannot be built).
    Always,
    /// Never: products search each image's smallest image instead.
    Never,
}

/// The look-up from base states to sector states (see the module's documentation).
#[derive(Debug)]
pub struct OrbitTable {
    column: Vec<AtomicU32>,
    element: Option<Vec<AtomicU8>>,
    ties: Vec<u16>,
}

/// The images `(base rank, element)` of one representative under every element of the
/// group, written by a closure the sector provides.
pub type Images = Vec<(u64, u32)>;

impl OrbitTable {
    /// Bytes of the table for a base space of `base_dim` states (sector states not
    /// counted: two bytes each).
    pub fn bytes(base_dim: u64, with_elements: bool) -> u128 {
        base_dim as u128 * (4 + with_elements as u128)
    }

    /// Whether to build the table for a base of `base_dim` states and a group of `order`
    /// elements (`with_elements`: whether some character differs from 1).
    ///
    /// # Errors
    /// With [`TableChoice::Always`]: [`CoreError::InvalidArgument`] when the group or the
    /// base is too large for the table's entries, [`CoreError::TooLarge`] when it does
    /// not fit in memory.
    pub fn wanted(choice: TableChoice, base_dim: u64, order: usize, with_elements: bool) -> CoreResult<bool> {
        let representable = order <= MAX_TABLE_ORDER && base_dim < UNSEEN as u64;
        let bytes = Self::bytes(base_dim, with_elements);
        match choice {
            TableChoice::Never => Ok(false),
            TableChoice::Auto => {
                Ok(representable
                    && available_bytes().map_or(bytes <= AUTO_UNKNOWN, |a| bytes * AUTO_SHARE <= a))
            }
            TableChoice::Always => {
                if !representable {
                    return Err(CoreError::InvalidArgument(format!(
                        "an orbit table needs a group of at most {MAX_TABLE_ORDER} elements and \
                         fewer than {UNSEEN} base states (got {order} elements and {base_dim} \
                         states); let the sector choose (no table) instead"
                    )));
                }
                ensure_room(bytes, "orbit table of the sector (one entry per base state)")?;
                Ok(true)
            }
        }
    }

    fn filled<T>(len: u64, make: impl Fn() -> T, what: &str) -> CoreResult<Vec<T>> {
        let mut v = try_with_capacity(len as usize, what)?;
        v.extend((0..len).map(|_| make()));
        Ok(v)
    }

    /// The table of a sector whose representatives `reps` (ascending base ranks, one per
    /// sector state) are known: each orbit is generated from its representative by
    /// `images(scratch, rep, out)`, which lists `(base rank of g·rep, g)` for every
    /// element `g`; `inverse[g]` is `g⁻¹`. Orbits are disjoint, so each entry is written
    /// by one task.
    ///
    /// # Errors
    /// [`CoreError::TooLarge`] when the table does not fit; [`CoreError::Interrupted`].
    #[allow(clippy::too_many_arguments)]
    pub fn from_representatives<W: Send>(
        base_dim: u64,
        reps: &[u64],
        inverse: &[u32],
        with_elements: bool,
        runner: &Runner,
        interrupt: &dyn Interrupt,
        scratch: impl Fn() -> W + Sync + Send,
        images: impl Fn(&mut W, u64, &mut Images) + Sync + Send,
    ) -> CoreResult<Self> {
        let what = "orbit table of the sector (one entry per base state)";
        let column = Self::filled(base_dim, || AtomicU32::new(OUTSIDE), what)?;
        let element = if with_elements {
            Some(Self::filled(base_dim, || AtomicU8::new(0), what)?)
        } else {
            None
        };
        let mut ties = crate::memory::try_filled(reps.len(), 0u16, "stabiliser orders of the sector")?;
        for (g, (rep_group, tie_group)) in reps
            .chunks(REPS_PER_CHECK)
            .zip(ties.chunks_mut(REPS_PER_CHECK))
            .enumerate()
        {
            let first = g * REPS_PER_CHECK;
            runner.install(|| {
                rep_group
                    .par_chunks(REPS_PER_TASK)
                    .zip(tie_group.par_chunks_mut(REPS_PER_TASK))
                    .enumerate()
                    .for_each_init(
                        || (scratch(), Vec::new()),
                        |(w, buf), (t, (rs, ts))| {
                            for (k, (&r, tie)) in rs.iter().zip(ts.iter_mut()).enumerate() {
                                let idx = (first + t * REPS_PER_TASK + k) as u32;
                                buf.clear();
                                images(w, r, buf);
                                let mut fixed = 0u16;
                                for &(s, h) in buf.iter() {
                                    fixed += (s == r) as u16;
                                    column[s as usize].store(idx, Ordering::Relaxed);
                                    if let Some(e) = &element {
                                        e[s as usize].store(inverse[h as usize] as u8, Ordering::Relaxed);
                                    }
                                }
                                *tie = fixed;
                            }
                        },
                    )
            });
            if interrupt.requested() {
                return Err(CoreError::Interrupted);
            }
        }
        Ok(OrbitTable {
            column,
            element,
            ties,
        })
    }

    /// The table and the kept representatives of a sector found by one pass over the
    /// base states in rank order: a state not reached by an earlier orbit is the first
    /// (smallest) of its own; its orbit (`images(occupations, out)`, as in
    /// [`OrbitTable::from_representatives`]) is kept when every element fixing it has
    /// phase 0 (`trivial(g)`), and marked. One orbit generation per orbit replaces a
    /// search over the group for every base state.
    ///
    /// # Errors
    /// [`CoreError::TooLarge`] when the table does not fit; [`CoreError::Interrupted`].
    pub fn by_scan(
        base: &FockSpace,
        inverse: &[u32],
        with_elements: bool,
        interrupt: &dyn Interrupt,
        trivial: impl Fn(u32) -> bool,
        mut images: impl FnMut(&[u32], &mut Images),
    ) -> CoreResult<(Self, Vec<u64>)> {
        let what = "orbit table of the sector (one entry per base state)";
        let dim = base.dim();
        let column = Self::filled(dim, || AtomicU32::new(UNSEEN), what)?;
        let element = if with_elements {
            Some(Self::filled(dim, || AtomicU8::new(0), what)?)
        } else {
            None
        };
        let m = base.modes();
        let mut occ = vec![0u32; m];
        let mut residues = vec![0usize; m];
        base.unrank_into(0, &mut occ, &mut residues)?;
        let mut reps: Vec<u64> = Vec::new();
        let mut ties: Vec<u16> = Vec::new();
        let mut buf = Vec::new();
        for s in 0..dim {
            if s > 0 {
                base.advance(&mut occ, &mut residues);
                if s % STATES_PER_CHECK == 0 && interrupt.requested() {
                    return Err(CoreError::Interrupted);
                }
            }
            if column[s as usize].load(Ordering::Relaxed) != UNSEEN {
                continue;
            }
            buf.clear();
            images(&occ, &mut buf);
            let kept = buf.iter().all(|&(x, h)| x != s || trivial(h));
            let value = if kept {
                if reps.len() == reps.capacity() {
                    reps.try_reserve(reps.len().max(1024))
                        .and_then(|()| ties.try_reserve(ties.len().max(1024)))
                        .map_err(|_| CoreError::TooLarge {
                            what: "list of the sector's representatives (bytes)".into(),
                            requested: (reps.len() as u128 * 2).max(1024) * 10,
                            limit: available_bytes().unwrap_or(u128::MAX),
                        })?;
                }
                reps.push(s);
                ties.push(buf.iter().filter(|&&(x, _)| x == s).count() as u16);
                (reps.len() - 1) as u32
            } else {
                OUTSIDE
            };
            for &(x, h) in &buf {
                column[x as usize].store(value, Ordering::Relaxed);
                if let Some(e) = &element {
                    e[x as usize].store(inverse[h as usize] as u8, Ordering::Relaxed);
                }
            }
        }
        reps.shrink_to_fit();
        ties.shrink_to_fit();
        Ok((
            OrbitTable {
                column,
                element,
                ties,
            },
            reps,
        ))
    }

    /// The sector index of base state `rank`'s orbit, or [`OUTSIDE`].
    #[inline(always)]
    pub fn column(&self, rank: u64) -> u32 {
        self.column[rank as usize].load(Ordering::Relaxed)
    }

    /// The element taking base state `rank` to its representative (0 when every
    /// character is 1 and elements are not kept).
    #[inline(always)]
    pub fn element(&self, rank: u64) -> u32 {
        match &self.element {
            Some(e) => e[rank as usize].load(Ordering::Relaxed) as u32,
            None => 0,
        }
    }

    /// The stabiliser's order of sector state `index`.
    #[inline(always)]
    pub fn ties(&self, index: u64) -> usize {
        self.ties[index as usize] as usize
    }

    /// Bytes held.
    pub fn held_bytes(&self) -> u128 {
        Self::bytes(self.column.len() as u64, self.element.is_some()) + 2 * self.ties.len() as u128
    }
}

/// The rank contributions of one state, mode by mode, so that the rank of a state that
/// differs from it only in modes `a..=b` costs `b − a + 1` table reads.
#[derive(Debug, Clone)]
pub struct RowRanks {
    /// `residues[i]`: the residue owed before mode `i` (`residues[M]`: after the last).
    residues: Vec<usize>,
    contributions: Vec<u64>,
    rank: u64,
}

impl RowRanks {
    /// Buffers for states of `modes` modes.
    pub fn new(modes: usize) -> Self {
        RowRanks {
            residues: vec![0; modes + 1],
            contributions: vec![0; modes],
            rank: 0,
        }
    }

    /// Take the state `occ` of `base` (which must be one of its states) as the reference;
    /// returns its rank.
    #[inline]
    pub fn load(&mut self, base: &FockSpace, occ: &[u32]) -> u64 {
        let mut r = base.start_residue();
        let mut rank = 0u64;
        for (i, &v) in occ.iter().enumerate() {
            self.residues[i] = r;
            let c = base.offset(i, r, v);
            self.contributions[i] = c;
            rank = rank.wrapping_add(c);
            r = base.step(r, i, v).unwrap_or(usize::MAX);
        }
        self.residues[occ.len()] = r;
        self.rank = rank;
        rank
    }

    /// The rank of the reference state with the occupation of each mode of `span` changed
    /// by its delta: `span` lists `(mode, delta)` for every mode from the first changed
    /// one to the last, ascending, and the new occupations must be within the caps.
    /// `None` when the change breaks the constraint.
    #[inline(always)]
    pub fn shifted(&self, base: &FockSpace, occ: &[u32], span: &[(u32, i32)]) -> Option<u64> {
        let (first, _) = *span.first()?;
        let mut r = self.residues[first as usize];
        let mut rank = self.rank;
        let mut last = first as usize;
        for &(mode, delta) in span {
            let i = mode as usize;
            let v = (occ[i] as i32 + delta) as u32;
            rank = rank
                .wrapping_sub(self.contributions[i])
                .wrapping_add(base.offset(i, r, v));
            r = base.step(r, i, v)?;
            last = i;
        }
        (r == self.residues[last + 1]).then_some(rank)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn each_state(base: &FockSpace, mut f: impl FnMut(&[u32], u64)) {
        let m = base.modes();
        let mut occ = vec![0u32; m];
        let mut res = vec![0usize; m];
        base.unrank_into(0, &mut occ, &mut res).unwrap();
        for s in 0..base.dim() {
            if s > 0 {
                base.advance(&mut occ, &mut res);
            }
            f(&occ, s);
        }
    }

    /// Shifted ranks equal ranks from scratch for every hop between two modes of spaces
    /// with an exact, a modular and no total (common practice, no source: the rank is
    /// the space's own).
    #[test]
    fn shifted_ranks_equal_ranks_from_scratch() {
        let spaces = [
            FockSpace::new(vec![3; 5], None, Some(4), None).unwrap(),
            FockSpace::new(vec![2, 3, 2, 3], Some(vec![1, 2, 1, 2]), Some(5), None).unwrap(),
            FockSpace::new(vec![2; 4], None, Some(1), Some(3)).unwrap(),
            FockSpace::new(vec![1, 2, 1], None, None, None).unwrap(),
        ];
        for base in &spaces {
            let m = base.modes();
            let mut rr = RowRanks::new(m);
            let mut checked = 0;
            each_state(base, |occ, s| {
                assert_eq!(rr.load(base, occ), s);
                for a in 0..m {
                    for b in 0..m {
                        if a == b {
                            continue;
                        }
                        // Move one quantum's worth of charge: lower a by w_b, raise b by w_a
                        // (a hop for equal weights).
                        let (wa, wb) = (base.weights()[a] as i32, base.weights()[b] as i32);
                        let mut new = occ.to_vec();
                        let (na, nb) = (occ[a] as i32 - wb, occ[b] as i32 + wa);
                        if na < 0 || nb as u32 > base.caps()[b] {
                            continue;
                        }
                        new[a] = na as u32;
                        new[b] = nb as u32;
                        let (lo, hi) = (a.min(b), a.max(b));
                        let span: Vec<(u32, i32)> = (lo..=hi)
                            .map(|i| (i as u32, new[i] as i32 - occ[i] as i32))
                            .collect();
                        let expect = base.rank(&new);
                        assert_eq!(rr.shifted(base, occ, &span), expect, "{occ:?} -> {new:?}");
                        checked += 1;
                    }
                }
            });
            assert!(checked > 0);
        }
    }
}
