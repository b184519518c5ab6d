//! Multi-mode truncated Fock spaces, optionally restricted to a conserved charge,
//! with O(M) ranking and unranking from tables of completion counts.
//!
//! # Basis order
//! Basis states are the occupation tuples `(n_0, …, n_{M-1})` with `0 <= n_i <= c_i`
//! that satisfy the constraint, sorted lexicographically ascending with mode 0 most
//! significant. Index 0 is therefore the state with the smallest `n_0`, then the
//! smallest `n_1`, and so on. The order is the relative order of the full product
//! basis (the one `kron` produces), restricted to the sector.
//!
//! # Ranking
//! `count[i][r]` is the number of ways to fill modes `i..M` when a residual charge
//! `r` is still owed; `offset[i][r][v] = Σ_{u<v} count[i+1][r − w_i u]`. The rank of a
//! state is `Σ_i offset[i][r_i][n_i]`, where `r_i` is the residual before mode `i`:
//! the table method for combinatorial ranking of bounded compositions.

use crate::error::{CoreError, CoreResult};

/// Largest cutoff of a single mode (occupations are exported as `u16` at most).
pub const MAX_CUTOFF: u32 = 65_535;
/// Largest number of entries in the counting tables (about 512 MiB of `u64`).
pub const MAX_TABLE_ENTRIES: u128 = 1 << 26;
/// Largest number of modes.
pub const MAX_MODES: usize = 4096;
/// Largest dimension the core accepts (indices stay exact in `f64` and `i64`).
pub const MAX_DIM: u64 = 1 << 52;

/// What a sector conserves.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Constraint {
    /// The full truncated product space.
    Free,
    /// `Σ w_i n_i == total`.
    Exact {
        /// The conserved total.
        total: u64,
    },
    /// `Σ w_i n_i ≡ total (mod modulus)`.
    Modular {
        /// The residue class, already reduced (`0 <= total < modulus`).
        total: u64,
        /// The modulus, at least 2.
        modulus: u64,
    },
}

/// A validated Fock space with its ranking tables.
#[derive(Debug, Clone)]
pub struct FockSpace {
    cutoffs: Vec<u32>,
    /// Highest occupation a state of the sector can have in each mode: the cutoff, or
    /// less when the conserved total caps it (`total / weight`). Tables use these.
    caps: Vec<u32>,
    weights: Vec<u32>,
    constraint: Constraint,
    residues: usize,
    start_residue: usize,
    /// `counts[i * residues + r]`, for `i` in `0..=M`.
    counts: Vec<u64>,
    /// Start of mode `i`'s block in `offsets`; block `i` holds `residues * (c_i + 2)` entries.
    offset_base: Vec<usize>,
    offsets: Vec<u64>,
    dim: u64,
}

impl FockSpace {
    /// Build a space from per-mode cutoffs, per-mode weights and an optional conserved
    /// total (optionally modulo `modulus`).
    ///
    /// # Errors
    /// [`CoreError::InvalidSpace`] for inconsistent arguments, [`CoreError::EmptySpace`]
    /// when no state satisfies the constraint, [`CoreError::TooLarge`] when the tables
    /// or the dimension exceed the core's limits.
    pub fn new(
        cutoffs: Vec<u32>,
        weights: Option<Vec<u32>>,
        total: Option<u64>,
        modulus: Option<u64>,
    ) -> CoreResult<Self> {
        let modes = cutoffs.len();
        if modes == 0 {
            return Err(CoreError::InvalidSpace(
                "a Fock space needs at least one mode; pass modes >= 1".into(),
            ));
        }
        if modes > MAX_MODES {
            return Err(CoreError::InvalidSpace(format!(
                "{modes} modes requested; at most {MAX_MODES} are supported"
            )));
        }
        for (i, &c) in cutoffs.iter().enumerate() {
            if c < 1 {
                return Err(CoreError::InvalidSpace(format!(
                    "cutoff of mode {i} is {c}; every cutoff must be >= 1 \
                     (a two-level emitter has cutoff 1)"
                )));
            }
            if c > MAX_CUTOFF {
                return Err(CoreError::InvalidSpace(format!(
                    "cutoff of mode {i} is {c}; at most {MAX_CUTOFF} is supported"
                )));
            }
        }
        let weights = match weights {
            Some(w) if w.len() != modes => {
                return Err(CoreError::InvalidSpace(format!(
                    "{} weights given for {modes} modes; pass one non-negative weight per mode",
                    w.len()
                )))
            }
            Some(w) => w,
            None => vec![1; modes],
        };
        let max_charge: u128 = cutoffs
            .iter()
            .zip(&weights)
            .map(|(&c, &w)| c as u128 * w as u128)
            .sum();
        let constraint = match (total, modulus) {
            (None, None) => Constraint::Free,
            (None, Some(_)) => {
                return Err(CoreError::InvalidSpace(
                    "a modulus needs a total (the residue class); pass total=0 or total=1 \
                     for the even or odd parity sector"
                        .into(),
                ))
            }
            (Some(total), None) => Constraint::Exact { total },
            (Some(total), Some(modulus)) => {
                if modulus < 2 {
                    return Err(CoreError::InvalidSpace(format!(
                        "modulus {modulus} is not allowed; pass an integer >= 2 or None"
                    )));
                }
                Constraint::Modular {
                    total: total % modulus,
                    modulus,
                }
            }
        };
        let residues: u128 = match constraint {
            Constraint::Free => 1,
            Constraint::Exact { total } => {
                if total as u128 > max_charge {
                    return Err(CoreError::EmptySpace(format!(
                        "no state has total {total}: the largest reachable weighted total is \
                         {max_charge}; lower the total or raise the cutoffs"
                    )));
                }
                total as u128 + 1
            }
            Constraint::Modular { modulus, .. } => modulus as u128,
        };
        let caps: Vec<u32> = cutoffs
            .iter()
            .zip(&weights)
            .map(|(&c, &w)| match constraint {
                Constraint::Exact { total } if w > 0 => c.min((total / w as u64).min(u32::MAX as u64) as u32),
                _ => c,
            })
            .collect();
        let entries: u128 =
            caps.iter().map(|&c| residues * (c as u128 + 2)).sum::<u128>() + residues * (modes as u128 + 1);
        if entries > MAX_TABLE_ENTRIES {
            return Err(CoreError::TooLarge {
                what: "ranking tables for this total, weights and cutoffs (entries); use a \
                       smaller total or cutoffs, or weights with a smaller common scale"
                    .into(),
                requested: entries,
                limit: MAX_TABLE_ENTRIES,
            });
        }
        let residues = residues as usize;
        let start_residue = match constraint {
            Constraint::Free => 0,
            Constraint::Exact { total } => total as usize,
            Constraint::Modular { total, .. } => total as usize,
        };
        let mut space = FockSpace {
            cutoffs,
            caps,
            weights,
            constraint,
            residues,
            start_residue,
            counts: crate::memory::try_filled(residues * (modes + 1), 0, "the space's counting table")?,
            offset_base: Vec::with_capacity(modes),
            offsets: Vec::new(),
            dim: 0,
        };
        space.fill_tables()?;
        space.dim = space.counts[start_residue];
        if space.dim == 0 {
            return Err(CoreError::EmptySpace(format!(
                "no state satisfies the constraint ({}) with cutoffs {:?} and weights {:?}; \
                 change the total, the weights or the cutoffs",
                space.describe_constraint(),
                space.cutoffs,
                space.weights
            )));
        }
        Ok(space)
    }

    fn fill_tables(&mut self) -> CoreResult<()> {
        let modes = self.cutoffs.len();
        let r_count = self.residues;
        self.counts[modes * r_count] = 1; // only residue 0 is accepted at the end
                                          // Counts of residues that no prefix reaches may exceed u64 even when the
                                          // space is small, so saturate here and check only the dimension itself.
        for i in (0..modes).rev() {
            for r in 0..r_count {
                let mut acc: u64 = 0;
                for v in 0..=self.caps[i] {
                    match self.step(r, i, v) {
                        Some(r2) => acc = acc.saturating_add(self.counts[(i + 1) * r_count + r2]),
                        None => break,
                    }
                }
                self.counts[i * r_count + r] = acc;
            }
        }
        let dim = self.counts[self.start_residue];
        if dim > MAX_DIM {
            return Err(CoreError::TooLarge {
                what: "dimension of the space (states)".into(),
                requested: dim as u128,
                limit: MAX_DIM as u128,
            });
        }
        let mut base = 0usize;
        for i in 0..modes {
            self.offset_base.push(base);
            base += r_count * (self.caps[i] as usize + 2);
        }
        self.offsets = crate::memory::try_filled(base, 0, "the space's ranking offsets")?;
        for i in 0..modes {
            let width = self.caps[i] as usize + 2;
            for r in 0..r_count {
                let row = self.offset_base[i] + r * width;
                let mut acc = 0u64;
                for v in 0..=self.caps[i] {
                    self.offsets[row + v as usize] = acc;
                    if let Some(r2) = self.step(r, i, v) {
                        acc = acc.saturating_add(self.counts[(i + 1) * r_count + r2]);
                    }
                }
                self.offsets[row + width - 1] = acc;
            }
        }
        Ok(())
    }

    /// Residue owed after putting `v` quanta in mode `i`, or `None` when impossible.
    #[inline(always)]
    pub fn step(&self, residue: usize, mode: usize, v: u32) -> Option<usize> {
        let delta = self.weights[mode] as u64 * v as u64;
        match self.constraint {
            Constraint::Free => Some(0),
            Constraint::Exact { .. } => (residue as u64).checked_sub(delta).map(|r| r as usize),
            Constraint::Modular { modulus, .. } => {
                Some(((residue as u64 + modulus - delta % modulus) % modulus) as usize)
            }
        }
    }

    /// The rank contribution of mode `mode` holding `v` quanta with residue `residue` owed.
    #[inline(always)]
    pub fn offset(&self, mode: usize, residue: usize, v: u32) -> u64 {
        let width = self.caps[mode] as usize + 2;
        self.offsets[self.offset_base[mode] + residue * width + v as usize]
    }

    /// The flat table of rank contributions; mode `i`, residue `r`, value `v` is at
    /// `offset_base(i) + r * (cutoff_i + 2) + v`.
    pub fn offset_table(&self) -> &[u64] {
        &self.offsets
    }

    /// Start of mode `mode`'s block in [`FockSpace::offset_table`].
    pub fn offset_base(&self, mode: usize) -> usize {
        self.offset_base[mode]
    }

    /// Number of completions of modes `mode..M` when `residue` is owed.
    #[inline(always)]
    pub fn completions(&self, mode: usize, residue: usize) -> u64 {
        self.counts[mode * self.residues + residue]
    }

    /// Number of modes.
    pub fn modes(&self) -> usize {
        self.cutoffs.len()
    }
    /// Number of basis states.
    pub fn dim(&self) -> u64 {
        self.dim
    }
    /// Per-mode cutoffs.
    pub fn cutoffs(&self) -> &[u32] {
        &self.cutoffs
    }
    /// Highest occupation each mode reaches in the sector (the cutoff, or less when
    /// the conserved total caps it). Products and tables work with these.
    pub fn caps(&self) -> &[u32] {
        &self.caps
    }
    /// Per-mode weights of the conserved charge.
    pub fn weights(&self) -> &[u32] {
        &self.weights
    }
    /// The constraint defining the sector.
    pub fn constraint(&self) -> Constraint {
        self.constraint
    }
    /// Residue owed before mode 0.
    pub fn start_residue(&self) -> usize {
        self.start_residue
    }
    /// Largest cutoff over the modes.
    pub fn max_cutoff(&self) -> u32 {
        self.caps.iter().copied().max().unwrap_or(0)
    }

    /// The constraint in words, for messages.
    pub fn describe_constraint(&self) -> String {
        match self.constraint {
            Constraint::Free => "no conserved total".into(),
            Constraint::Exact { total } => format!("weighted total = {total}"),
            Constraint::Modular { total, modulus } => {
                format!("weighted total ≡ {total} mod {modulus}")
            }
        }
    }

    /// Whether a change of the weighted total by `charge` keeps states in the sector.
    pub fn conserves(&self, charge: i64) -> bool {
        match self.constraint {
            Constraint::Free => true,
            Constraint::Exact { .. } => charge == 0,
            Constraint::Modular { modulus, .. } => charge.rem_euclid(modulus as i64) == 0,
        }
    }

    /// Rank of an occupation tuple, or `None` when it is not in the space.
    pub fn rank(&self, occ: &[u32]) -> Option<u64> {
        if occ.len() != self.modes() {
            return None;
        }
        let mut residue = self.start_residue;
        let mut rank = 0u64;
        for (i, &v) in occ.iter().enumerate() {
            if v > self.caps[i] {
                return None;
            }
            rank += self.offset(i, residue, v);
            residue = self.step(residue, i, v)?;
        }
        (residue == 0).then_some(rank)
    }

    /// Occupations of basis state `index`, written to `occ`, with the residues owed
    /// before each mode written to `residues` (both of length M).
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when `index >= dim`.
    pub fn unrank_into(&self, index: u64, occ: &mut [u32], residues: &mut [usize]) -> CoreResult<()> {
        if index >= self.dim {
            return Err(CoreError::InvalidArgument(format!(
                "basis index {index} is out of range for a space of dimension {}",
                self.dim
            )));
        }
        let mut k = index;
        let mut residue = self.start_residue;
        for i in 0..self.modes() {
            let width = self.caps[i] as usize + 2;
            let row = &self.offsets[self.offset_base[i] + residue * width..][..width];
            // Number of offsets <= k; offsets are non-decreasing and row[0] = 0 <= k.
            let v = row.partition_point(|&o| o <= k) - 1;
            k -= row[v];
            occ[i] = v as u32;
            residues[i] = residue;
            residue = self
                .step(residue, i, v as u32)
                .expect("unrank follows only reachable residues");
        }
        Ok(())
    }

    /// Move `occ` to the next basis state in order, keeping `residues` in step.
    /// Returns the lowest mode that changed, or `None` when `occ` was the last state.
    pub fn advance(&self, occ: &mut [u32], residues: &mut [usize]) -> Option<usize> {
        let modes = self.modes();
        for i in (0..modes).rev() {
            let r = residues[i];
            let mut v = occ[i] + 1;
            while v <= self.caps[i] {
                match self.step(r, i, v) {
                    Some(r2) if self.completions(i + 1, r2) > 0 => {
                        occ[i] = v;
                        self.fill_smallest(i + 1, r2, occ, residues);
                        return Some(i);
                    }
                    Some(_) => v += 1,
                    None => break,
                }
            }
        }
        None
    }

    /// Fill modes `from..M` with the smallest completion owing `residue`.
    fn fill_smallest(&self, from: usize, mut residue: usize, occ: &mut [u32], residues: &mut [usize]) {
        for j in from..self.modes() {
            residues[j] = residue;
            let mut v = 0;
            loop {
                if let Some(r2) = self.step(residue, j, v) {
                    if self.completions(j + 1, r2) > 0 {
                        occ[j] = v;
                        residue = r2;
                        break;
                    }
                }
                v += 1;
                debug_assert!(v <= self.caps[j], "a reachable residue has a completion");
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn brute(cutoffs: &[u32], weights: &[u32], total: Option<u64>, modulus: Option<u64>) -> Vec<Vec<u32>> {
        let mut out = Vec::new();
        let mut occ = vec![0u32; cutoffs.len()];
        loop {
            let charge: u64 = occ.iter().zip(weights).map(|(&n, &w)| n as u64 * w as u64).sum();
            let keep = match (total, modulus) {
                (None, _) => true,
                (Some(t), None) => charge == t,
                (Some(t), Some(m)) => charge % m == t % m,
            };
            if keep {
                out.push(occ.clone());
            }
            // lexicographic increment, last mode fastest
            let mut i = cutoffs.len();
            loop {
                if i == 0 {
                    return out;
                }
                i -= 1;
                if occ[i] < cutoffs[i] {
                    occ[i] += 1;
                    for o in occ.iter_mut().skip(i + 1) {
                        *o = 0;
                    }
                    break;
                }
            }
        }
    }

    fn check(cutoffs: &[u32], weights: &[u32], total: Option<u64>, modulus: Option<u64>) {
        let expected = brute(cutoffs, weights, total, modulus);
        let space = FockSpace::new(cutoffs.to_vec(), Some(weights.to_vec()), total, modulus);
        if expected.is_empty() {
            assert!(matches!(space, Err(CoreError::EmptySpace(_))));
            return;
        }
        let space = space.unwrap();
        assert_eq!(space.dim() as usize, expected.len());
        let m = cutoffs.len();
        let mut occ = vec![0; m];
        let mut res = vec![0; m];
        space.unrank_into(0, &mut occ, &mut res).unwrap();
        for (k, state) in expected.iter().enumerate() {
            assert_eq!(&occ, state, "advance at {k}");
            assert_eq!(space.rank(state), Some(k as u64));
            let mut o2 = vec![0; m];
            let mut r2 = vec![0; m];
            space.unrank_into(k as u64, &mut o2, &mut r2).unwrap();
            assert_eq!(&o2, state);
            assert_eq!(r2, res);
            let next = space.advance(&mut occ, &mut res);
            assert_eq!(next.is_none(), k + 1 == expected.len());
        }
    }

    #[test]
    fn matches_brute_force_enumeration() {
        check(&[2, 3, 1], &[1, 1, 1], None, None);
        check(&[2, 3, 1], &[1, 1, 1], Some(3), None);
        check(&[3, 3, 3, 3], &[1, 1, 1, 1], Some(4), None);
        check(&[2, 2, 2], &[1, 2, 0], Some(3), None);
        check(&[3, 2, 4], &[1, 1, 1], Some(1), Some(2));
        check(&[3, 2, 4], &[2, 1, 3], Some(2), Some(3));
        check(&[1], &[1], Some(1), None);
        check(&[1], &[1], Some(0), None);
        check(&[5], &[1], None, None);
        check(&[1, 1, 1, 1, 1], &[1, 1, 1, 1, 1], Some(2), None);
        check(&[2, 2], &[0, 0], Some(0), None);
    }

    #[test]
    fn unit_filling_sector_size_is_binomial() {
        // Bosons: C(N + L - 1, N) states for N quanta on L modes with cutoff N
        // (stars and bars; common practice, no source).
        let s = FockSpace::new(vec![11; 11], None, Some(11), None).unwrap();
        assert_eq!(s.dim(), 352_716);
        let s = FockSpace::new(vec![15; 15], None, Some(15), None).unwrap();
        assert_eq!(s.dim(), 77_558_760);
    }

    #[test]
    fn rejects_bad_specs() {
        assert!(matches!(
            FockSpace::new(vec![], None, None, None),
            Err(CoreError::InvalidSpace(_))
        ));
        assert!(matches!(
            FockSpace::new(vec![0, 2], None, None, None),
            Err(CoreError::InvalidSpace(_))
        ));
        assert!(matches!(
            FockSpace::new(vec![2, 2], Some(vec![1]), None, None),
            Err(CoreError::InvalidSpace(_))
        ));
        assert!(matches!(
            FockSpace::new(vec![2, 2], None, Some(5), None),
            Err(CoreError::EmptySpace(_))
        ));
        assert!(matches!(
            FockSpace::new(vec![2, 2], None, None, Some(2)),
            Err(CoreError::InvalidSpace(_))
        ));
        assert!(matches!(
            FockSpace::new(vec![2, 2], None, Some(0), Some(1)),
            Err(CoreError::InvalidSpace(_))
        ));
        assert!(matches!(
            FockSpace::new(vec![2, 2], Some(vec![2, 2]), Some(1), None),
            Err(CoreError::EmptySpace(_))
        ));
        assert!(matches!(
            FockSpace::new(vec![1000; 40], None, None, None),
            Err(CoreError::TooLarge { .. })
        ));
        assert!(matches!(
            FockSpace::new(vec![60_000; 3000], None, Some(1_000_000), None),
            Err(CoreError::TooLarge { .. })
        ));
    }

    #[test]
    fn a_total_caps_the_tables() {
        // Weight 2 and total 6: mode 0 never holds more than 3 quanta.
        let s = FockSpace::new(vec![65_535, 65_535], Some(vec![2, 1]), Some(6), None).unwrap();
        assert_eq!(s.caps(), &[3, 6]);
        assert_eq!(s.dim(), 4);
    }

    #[test]
    fn rank_rejects_states_outside() {
        let s = FockSpace::new(vec![2, 2, 2], None, Some(2), None).unwrap();
        assert_eq!(s.rank(&[1, 1, 1]), None);
        assert_eq!(s.rank(&[3, 0, 0]), None);
        assert_eq!(s.rank(&[1, 1]), None);
        assert_eq!(s.rank(&[0, 0, 2]), Some(0));
        assert_eq!(s.rank(&[2, 0, 0]), Some(s.dim() - 1));
    }
}
