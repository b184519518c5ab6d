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
//!
//! # Several charges
//! A space may fix several weighted charges at once, each exactly or modulo its own
//! modulus ([`FockSpace::with_charges`]). Their residues combine into one mixed-radix
//! residue, so the tables above keep their shape with `residues` the product of the
//! charges' residue counts.

use crate::error::{CoreError, CoreResult};

/// Largest cutoff of a single mode (occupations are exported as `u16` at most).
pub const MAX_CUTOFF: u32 = 65_535;
/// Largest number of entries in the counting tables (about 512 MiB of `u64`).
pub const MAX_TABLE_ENTRIES: u128 = 1 << 26;
/// Largest number of modes.
pub const MAX_MODES: usize = 4096;
/// Largest dimension the core accepts (indices stay exact in `f64` and `i64`).
pub const MAX_DIM: u64 = 1 << 52;

/// Largest number of conserved charges a space fixes at once.
pub const MAX_CHARGES: usize = 32;

/// One conserved charge `Σ_i w_i n_i`, fixed exactly or modulo its own modulus.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Charge {
    /// Non-negative weight of each mode.
    pub weights: Vec<u32>,
    /// The conserved total (the residue class, reduced, when `modulus` is set).
    pub total: u64,
    /// Conserve the charge only modulo this (at least 2); `None` fixes it exactly.
    pub modulus: Option<u64>,
}

impl Charge {
    /// The charge in words, for messages.
    pub fn describe(&self) -> String {
        match self.modulus {
            None => format!("weighted total = {}", self.total),
            Some(m) => format!("weighted total ≡ {} mod {m}", self.total),
        }
    }

    /// Whether a change of this charge by `delta` keeps states in the sector.
    pub fn conserves(&self, delta: i64) -> bool {
        match self.modulus {
            None => delta == 0,
            Some(m) => delta.rem_euclid(m as i64) == 0,
        }
    }
}

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
    /// Two or more charges at once (see [`FockSpace::charges`]); the residue owed is
    /// their residues combined in mixed radix.
    Several,
}

/// A validated Fock space with its ranking tables.
///
/// With several charges the residue owed before a mode is one mixed-radix number
/// `Σ_c r_c · stride_c`, `r_c` the residue of charge `c` (`0..=total_c` when exact,
/// `0..modulus_c` when modular), charge 0 the least significant: the counting and
/// offset tables, [`FockSpace::step`] and everything built on them work unchanged.
#[derive(Debug, Clone)]
pub struct FockSpace {
    cutoffs: Vec<u32>,
    /// Highest occupation a state of the sector can have in each mode: the cutoff, or
    /// less when the conserved total caps it (`total / weight`). Tables use these.
    caps: Vec<u32>,
    /// The weights of the first charge (all 1 without a charge).
    weights: Vec<u32>,
    constraint: Constraint,
    /// The conserved charges (empty for the full space).
    charges: Vec<Charge>,
    /// Per charge: its number of residue classes (`total + 1`, or the modulus).
    radix: Vec<u64>,
    /// Per charge: the place value of its residue in the combined residue.
    stride: Vec<u64>,
    /// Per mode: `Σ_c w_c · stride_c`, the change of the combined residue per quantum
    /// (exact when every charge is exact: no residue of a valid state borrows).
    packed: Vec<u64>,
    /// Weights by mode, then charge (`mode * charges + c`).
    mode_weights: Vec<u32>,
    residues: usize,
    start_residue: usize,
    /// `counts[i * residues + r]`, for `i` in `0..=M`.
    counts: Vec<u64>,
    /// Start of mode `i`'s block in `offsets`; block `i` holds `residues * (c_i + 2)` entries.
    offset_base: Vec<usize>,
    offsets: Vec<u64>,
    dim: u64,
}

/// Validate the cutoffs (at least one mode, each `1..=MAX_CUTOFF`).
fn check_cutoffs(cutoffs: &[u32]) -> CoreResult<()> {
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
    Ok(())
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
        check_cutoffs(&cutoffs)?;
        let modes = cutoffs.len();
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
        let charges = match (total, modulus) {
            (None, None) => Vec::new(),
            (None, Some(_)) => {
                return Err(CoreError::InvalidSpace(
                    "a modulus needs a total (the residue class); pass total=0 or total=1 \
                     for the even or odd parity sector"
                        .into(),
                ))
            }
            (Some(total), None) => vec![Charge {
                weights: weights.clone(),
                total,
                modulus: None,
            }],
            (Some(total), Some(modulus)) => {
                if modulus < 2 {
                    return Err(CoreError::InvalidSpace(format!(
                        "modulus {modulus} is not allowed; pass an integer >= 2 or None"
                    )));
                }
                vec![Charge {
                    weights: weights.clone(),
                    total: total % modulus,
                    modulus: Some(modulus),
                }]
            }
        };
        Self::build(cutoffs, weights, charges)
    }

    /// Build a space that fixes every charge of `charges` at once (none: the full
    /// truncated space; one: the same space as [`FockSpace::new`]). Modular totals are
    /// reduced.
    ///
    /// # Errors
    /// As [`FockSpace::new`]; [`CoreError::InvalidSpace`] names the charge whose weights
    /// have the wrong length or whose modulus is below 2, and refuses more than
    /// [`MAX_CHARGES`] charges; [`CoreError::TooLarge`] when the product of the residue
    /// counts makes the tables too large (with the estimate).
    pub fn with_charges(cutoffs: Vec<u32>, mut charges: Vec<Charge>) -> CoreResult<Self> {
        check_cutoffs(&cutoffs)?;
        let modes = cutoffs.len();
        if charges.len() > MAX_CHARGES {
            return Err(CoreError::InvalidSpace(format!(
                "{} charges given; at most {MAX_CHARGES} can be fixed at once (merge charges \
                 that always change together)",
                charges.len()
            )));
        }
        for (c, charge) in charges.iter_mut().enumerate() {
            if charge.weights.len() != modes {
                return Err(CoreError::InvalidSpace(format!(
                    "charge {c} has {} weights for {modes} modes; give one non-negative weight \
                     per mode",
                    charge.weights.len()
                )));
            }
            if let Some(m) = charge.modulus {
                if m < 2 {
                    return Err(CoreError::InvalidSpace(format!(
                        "charge {c} has modulus {m}, which is not allowed; pass an integer >= 2, \
                         or no modulus to fix the charge exactly"
                    )));
                }
                charge.total %= m;
            }
        }
        let weights = charges
            .first()
            .map_or_else(|| vec![1; modes], |c| c.weights.clone());
        Self::build(cutoffs, weights, charges)
    }

    fn build(cutoffs: Vec<u32>, weights: Vec<u32>, charges: Vec<Charge>) -> CoreResult<Self> {
        let modes = cutoffs.len();
        let several = charges.len() > 1;
        for (c, charge) in charges.iter().enumerate() {
            if charge.modulus.is_some() {
                continue;
            }
            let max_charge: u128 = cutoffs
                .iter()
                .zip(&charge.weights)
                .map(|(&n, &w)| n as u128 * w as u128)
                .sum();
            if charge.total as u128 > max_charge {
                let total = charge.total;
                return Err(CoreError::EmptySpace(if several {
                    format!(
                        "no state has charge {c} equal to {total}: its largest reachable value \
                         is {max_charge}; lower that total or raise the cutoffs"
                    )
                } else {
                    format!(
                        "no state has total {total}: the largest reachable weighted total is \
                         {max_charge}; lower the total or raise the cutoffs"
                    )
                }));
            }
        }
        let constraint = match charges.as_slice() {
            [] => Constraint::Free,
            [one] => match one.modulus {
                None => Constraint::Exact { total: one.total },
                Some(modulus) => Constraint::Modular {
                    total: one.total,
                    modulus,
                },
            },
            _ => Constraint::Several,
        };
        let mut radix_wide: Vec<u128> = Vec::with_capacity(charges.len());
        let mut residues: u128 = 1;
        for charge in &charges {
            let r = match charge.modulus {
                None => charge.total as u128 + 1,
                Some(m) => m as u128,
            };
            radix_wide.push(r);
            residues = residues.saturating_mul(r);
        }
        let caps: Vec<u32> = (0..modes)
            .map(|i| {
                let mut cap = cutoffs[i];
                for charge in charges.iter().filter(|c| c.modulus.is_none()) {
                    let w = charge.weights[i];
                    if w > 0 {
                        cap = cap.min((charge.total / w as u64).min(u32::MAX as u64) as u32);
                    }
                }
                cap
            })
            .collect();
        let entries: u128 = caps
            .iter()
            .map(|&c| residues.saturating_mul(c as u128 + 2))
            .fold(0u128, |a, b| a.saturating_add(b))
            .saturating_add(residues.saturating_mul(modes as u128 + 1));
        if entries > MAX_TABLE_ENTRIES {
            let what = if several {
                let factors: Vec<String> = radix_wide.iter().map(|r| r.to_string()).collect();
                format!(
                    "ranking tables for these charges (entries: {residues} residue classes = {}, \
                     the total + 1 of each exact charge times the modulus of each modular one, \
                     each times the occupations of every mode); use smaller totals, moduli or \
                     cutoffs, or fewer charges",
                    factors.join(" x ")
                )
            } else {
                "ranking tables for this total, weights and cutoffs (entries); use a \
                 smaller total or cutoffs, or weights with a smaller common scale"
                    .into()
            };
            return Err(CoreError::TooLarge {
                what,
                requested: entries,
                limit: MAX_TABLE_ENTRIES,
            });
        }
        // Every residue count and their product fit in 2^26 now.
        let radix: Vec<u64> = radix_wide.iter().map(|&r| r as u64).collect();
        let mut stride = Vec::with_capacity(radix.len());
        let mut place = 1u64;
        for &r in &radix {
            stride.push(place);
            place *= r;
        }
        let residues = residues as usize;
        let start_residue: u64 = charges.iter().zip(&stride).map(|(c, &s)| c.total * s).sum();
        let k = charges.len();
        let mut mode_weights = Vec::with_capacity(modes * k);
        let mut packed = Vec::with_capacity(modes);
        for i in 0..modes {
            let mut p = 0u64;
            for (charge, &s) in charges.iter().zip(&stride) {
                mode_weights.push(charge.weights[i]);
                p = p.saturating_add((charge.weights[i] as u64).saturating_mul(s));
            }
            packed.push(p);
        }
        let mut space = FockSpace {
            cutoffs,
            caps,
            weights,
            constraint,
            charges,
            radix,
            stride,
            packed,
            mode_weights,
            residues,
            start_residue: start_residue as usize,
            counts: crate::memory::try_filled(residues * (modes + 1), 0, "the space's counting table")?,
            offset_base: Vec::with_capacity(modes),
            offsets: Vec::new(),
            dim: 0,
        };
        space.fill_tables()?;
        space.dim = space.counts[space.start_residue];
        if space.dim == 0 {
            return Err(CoreError::EmptySpace(if several {
                format!(
                    "no state satisfies all the charges ({}) with cutoffs {:?}; change a total, \
                     a modulus, the weights or the cutoffs",
                    space.describe_constraint(),
                    space.cutoffs
                )
            } else {
                format!(
                    "no state satisfies the constraint ({}) with cutoffs {:?} and weights {:?}; \
                     change the total, the weights or the cutoffs",
                    space.describe_constraint(),
                    space.cutoffs,
                    space.weights
                )
            }));
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
            Constraint::Several => self.step_several(residue, mode, v),
        }
    }

    /// [`FockSpace::step`] with several charges: each residue digit steps on its own.
    #[inline]
    fn step_several(&self, residue: usize, mode: usize, v: u32) -> Option<usize> {
        let k = self.charges.len();
        let weights = &self.mode_weights[mode * k..(mode + 1) * k];
        let mut rest = residue as u64;
        let mut out = 0u64;
        let digits = self
            .charges
            .iter()
            .zip(&self.radix)
            .zip(&self.stride)
            .zip(weights);
        for (((charge, &radix), &stride), &w) in digits {
            let digit = rest % radix;
            rest /= radix;
            let delta = w as u64 * v as u64;
            let next = match charge.modulus {
                None => digit.checked_sub(delta)?,
                Some(m) => (digit + m - delta % m) % m,
            };
            out += next * stride;
        }
        Some(out as usize)
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
    /// Per-mode weights of the conserved charge (all 1 without one). With several
    /// charges these are the first charge's weights: use [`FockSpace::charges`].
    pub fn weights(&self) -> &[u32] {
        &self.weights
    }
    /// The conserved charges: none for the full space, one for a sector of
    /// [`FockSpace::new`], or those given to [`FockSpace::with_charges`].
    pub fn charges(&self) -> &[Charge] {
        &self.charges
    }
    /// Whether every conserved charge is fixed exactly (no modulus).
    pub fn all_exact(&self) -> bool {
        self.charges.iter().all(|c| c.modulus.is_none())
    }
    /// Per mode, the change of the combined residue per quantum, `Σ_c w_c · stride_c`
    /// (the weight itself with one charge). When [`FockSpace::all_exact`], the residue
    /// owed after mode `i` is the residue before it minus `packed_weights()[i] · n_i` for
    /// every state of the space (no digit borrows).
    pub fn packed_weights(&self) -> &[u64] {
        &self.packed
    }
    /// Number of residue classes the tables hold (the product over the charges of
    /// `total + 1` or the modulus; 1 without a charge).
    pub fn residue_count(&self) -> usize {
        self.residues
    }
    /// Whether two modes carry the same weight in every conserved charge (and the same
    /// cutoff): what a mode permutation must preserve to map the space to itself.
    pub fn modes_alike(&self, i: usize, j: usize) -> bool {
        let k = self.charges.len();
        self.cutoffs[i] == self.cutoffs[j]
            && self.weights[i] == self.weights[j]
            && self.mode_weights[i * k..(i + 1) * k] == self.mode_weights[j * k..(j + 1) * k]
    }
    /// The change of each charge when the occupations change by `changes`
    /// (`(mode, Δn)` pairs); one entry per charge (none for the full space).
    pub fn charge_deltas(&self, changes: impl IntoIterator<Item = (usize, i64)>) -> Vec<i64> {
        let k = self.charges.len();
        let mut deltas = vec![0i64; k];
        for (mode, dn) in changes {
            for (c, d) in deltas.iter_mut().enumerate() {
                *d += self.mode_weights[mode * k + c] as i64 * dn;
            }
        }
        deltas
    }
    /// The first charge that changes by `deltas` (from [`FockSpace::charge_deltas`])
    /// breaks, or `None` when every charge is kept.
    pub fn broken_charge(&self, deltas: &[i64]) -> Option<usize> {
        self.charges
            .iter()
            .zip(deltas)
            .position(|(c, &d)| !c.conserves(d))
    }
    /// Charge `c` in words, naming it among several.
    pub fn describe_charge(&self, c: usize) -> String {
        if self.charges.len() == 1 {
            return self.charges[0].describe();
        }
        format!(
            "charge {c} of {}: {} with weights {:?}",
            self.charges.len(),
            self.charges[c].describe(),
            self.charges[c].weights
        )
    }
    /// The residue owed by a state whose charges exceed by `deltas` those of a state
    /// owing `residue` (each digit shifted on its own), or `None` when no such residue
    /// exists (an exact digit outside `0..=total`).
    pub fn shift_residue(&self, residue: usize, deltas: &[i64]) -> Option<usize> {
        let mut rest = residue as i128;
        let mut out = 0i128;
        for (c, charge) in self.charges.iter().enumerate() {
            let radix = self.radix[c] as i128;
            let digit = rest % radix;
            rest /= radix;
            let shifted = digit + deltas[c] as i128;
            let next = match charge.modulus {
                None => {
                    if shifted < 0 || shifted > charge.total as i128 {
                        return None;
                    }
                    shifted
                }
                Some(m) => shifted.rem_euclid(m as i128),
            };
            out += next * self.stride[c] as i128;
        }
        Some(out as usize)
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
            Constraint::Several => {
                let parts: Vec<String> = self
                    .charges
                    .iter()
                    .enumerate()
                    .map(|(c, q)| format!("charge {c}: {} with weights {:?}", q.describe(), q.weights))
                    .collect();
                parts.join("; ")
            }
        }
    }

    /// Whether a change of the weighted total by `charge` keeps states in the sector
    /// (one charge; with several use [`FockSpace::charge_deltas`] and
    /// [`FockSpace::broken_charge`]: here every charge must accept the change).
    pub fn conserves(&self, charge: i64) -> bool {
        match self.constraint {
            Constraint::Free => true,
            Constraint::Exact { .. } => charge == 0,
            Constraint::Modular { modulus, .. } => charge.rem_euclid(modulus as i64) == 0,
            Constraint::Several => self.charges.iter().all(|c| c.conserves(charge)),
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
        walk_matches(&space.unwrap(), &expected, |_, _| {});
    }

    /// The space lists exactly `expected`, in order: `rank`, `unrank_into` and
    /// `advance` agree with it state by state; `also` sees each state with its residues.
    fn walk_matches(space: &FockSpace, expected: &[Vec<u32>], also: impl Fn(&[u32], &[usize])) {
        assert_eq!(space.dim() as usize, expected.len());
        let m = space.modes();
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
            also(state, &res);
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

    /// Every state of the product space that keeps all `charges`, in basis order.
    fn brute_charges(cutoffs: &[u32], charges: &[Charge]) -> Vec<Vec<u32>> {
        let everything = brute(cutoffs, &vec![0; cutoffs.len()], None, None);
        everything
            .into_iter()
            .filter(|occ| {
                charges.iter().all(|c| {
                    let q: u64 = occ
                        .iter()
                        .zip(&c.weights)
                        .map(|(&n, &w)| n as u64 * w as u64)
                        .sum();
                    match c.modulus {
                        None => q == c.total,
                        Some(m) => q % m == c.total % m,
                    }
                })
            })
            .collect()
    }

    fn check_charges(cutoffs: &[u32], charges: Vec<Charge>) {
        let expected = brute_charges(cutoffs, &charges);
        let space = FockSpace::with_charges(cutoffs.to_vec(), charges.clone());
        if expected.is_empty() {
            assert!(matches!(space, Err(CoreError::EmptySpace(_))), "{charges:?}");
            return;
        }
        let space = space.unwrap();
        assert_eq!(space.dim() as usize, expected.len(), "{charges:?}");
        let m = cutoffs.len();
        walk_matches(&space, &expected, |state, res| {
            if space.all_exact() {
                // The packed weights step the combined residue of valid states exactly.
                for (i, &n) in state.iter().enumerate() {
                    let next = res.get(i + 1).map_or(0, |&r| r as u64);
                    assert_eq!(res[i] as u64 - space.packed_weights()[i] * n as u64, next);
                }
            }
        });
        // A state breaking one charge only is not ranked.
        for state in brute(cutoffs, &vec![0; m], None, None) {
            if !expected.contains(&state) {
                assert_eq!(space.rank(&state), None);
            }
        }
    }

    fn exact(weights: &[u32], total: u64) -> Charge {
        Charge {
            weights: weights.to_vec(),
            total,
            modulus: None,
        }
    }

    fn modular(weights: &[u32], total: u64, modulus: u64) -> Charge {
        Charge {
            weights: weights.to_vec(),
            total,
            modulus: Some(modulus),
        }
    }

    #[test]
    fn several_charges_match_brute_force_enumeration() {
        // Number and momentum mod 4 on a 4-mode ring (common practice, no source).
        for n in 0..=4 {
            for k in 0..4 {
                check_charges(
                    &[4, 4, 4, 4],
                    vec![exact(&[1, 1, 1, 1], n), modular(&[0, 1, 2, 3], k, 4)],
                );
            }
        }
        // Two species, each number fixed.
        for (na, nb) in [(0, 0), (1, 2), (2, 1), (3, 3), (2, 0)] {
            check_charges(
                &[3, 3, 3, 3, 3, 3],
                vec![exact(&[1, 1, 1, 0, 0, 0], na), exact(&[0, 0, 0, 1, 1, 1], nb)],
            );
        }
        // Mixed weights, three charges, a modular one first.
        check_charges(
            &[2, 3, 2, 1],
            vec![
                modular(&[1, 2, 0, 1], 1, 3),
                exact(&[1, 1, 2, 0], 3),
                modular(&[1, 1, 1, 1], 0, 2),
            ],
        );
        check_charges(&[2, 2, 2], vec![exact(&[2, 0, 1], 2), exact(&[0, 3, 1], 3)]);
        // Weights above a total leave a mode empty; zero weights leave it free.
        check_charges(&[3, 3, 3], vec![exact(&[5, 1, 0], 2), exact(&[1, 0, 0], 0)]);
        // No state: the charges contradict each other.
        check_charges(&[2, 2], vec![exact(&[1, 1], 1), exact(&[1, 1], 2)]);
        // Moduli are reduced.
        check_charges(&[3, 3], vec![modular(&[1, 1], 7, 3), modular(&[1, 2], 5, 2)]);
        // Zero and one charge: the same spaces as `new`.
        check_charges(&[2, 1, 2], vec![]);
        check_charges(&[2, 1, 2], vec![exact(&[1, 1, 1], 2)]);
    }

    #[test]
    fn one_charge_through_with_charges_is_new() {
        let a = FockSpace::new(vec![3, 3, 3], Some(vec![1, 2, 3]), Some(7), Some(4)).unwrap();
        let b = FockSpace::with_charges(vec![3, 3, 3], vec![modular(&[1, 2, 3], 7, 4)]).unwrap();
        assert_eq!(a.constraint(), b.constraint());
        assert_eq!(a.dim(), b.dim());
        assert_eq!(a.offset_table(), b.offset_table());
        let two =
            FockSpace::with_charges(vec![3, 3, 3], vec![exact(&[1, 1, 1], 3), exact(&[0, 1, 2], 3)]).unwrap();
        assert_eq!(two.constraint(), Constraint::Several);
        assert_eq!(two.residue_count(), 16);
    }

    #[test]
    fn several_charges_reject_bad_specs() {
        let bad_len = FockSpace::with_charges(vec![2, 2], vec![exact(&[1], 1), exact(&[1, 1], 1)]);
        assert!(
            matches!(bad_len, Err(CoreError::InvalidSpace(ref m)) if m.contains("charge 0 has 1 weights"))
        );
        let bad_mod = FockSpace::with_charges(vec![2, 2], vec![exact(&[1, 1], 1), modular(&[1, 1], 0, 1)]);
        assert!(
            matches!(bad_mod, Err(CoreError::InvalidSpace(ref m)) if m.contains("charge 1 has modulus 1"))
        );
        let unreachable = FockSpace::with_charges(vec![2, 2], vec![exact(&[1, 1], 1), exact(&[0, 1], 3)]);
        assert!(matches!(unreachable, Err(CoreError::EmptySpace(ref m)) if m.contains("charge 1")));
        // 2^13 x 2^13 residue classes: refused before any table is allocated.
        let huge = FockSpace::with_charges(
            vec![10; 8],
            vec![
                modular(&[1; 8], 0, 1 << 13),
                modular(&[0, 1, 2, 3, 4, 5, 6, 7], 0, 1 << 13),
            ],
        );
        assert!(matches!(huge, Err(CoreError::TooLarge { ref what, .. }) if what.contains("8192 x 8192")));
        let many = FockSpace::with_charges(vec![1; 2], vec![exact(&[0, 0], 0); MAX_CHARGES + 1]);
        assert!(matches!(many, Err(CoreError::InvalidSpace(_))));
    }

    #[test]
    fn charge_deltas_and_residue_shifts() {
        let s = FockSpace::with_charges(
            vec![2, 2, 2],
            vec![exact(&[1, 1, 1], 2), modular(&[0, 1, 2], 1, 3)],
        )
        .unwrap();
        let d = s.charge_deltas([(0, -1), (2, 1)]);
        assert_eq!(d, vec![0, 2]);
        assert_eq!(s.broken_charge(&d), Some(1));
        assert_eq!(s.broken_charge(&s.charge_deltas([(0, 1), (1, -2), (2, 1)])), None);
        // Residue (n owed 1, k owed 2) = 1 + 3 * 2 = 7; shifted by (+1, +2) -> (2, 1) = 5.
        assert_eq!(s.shift_residue(7, &[1, 2]), Some(2 + 3));
        assert_eq!(s.shift_residue(7, &[2, 0]), None);
        assert!(s.modes_alike(0, 0));
        assert!(!s.modes_alike(0, 1));
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
