//! Normal-ordered monomials and their action on basis states.
//!
//! A term is `c · Π_i (a_i†)^{p_i} (a_i)^{q_i}`. On a truncated space the matrix of a
//! term is the normal-ordered monomial restricted to the space: lowering below zero
//! quanta or raising past a cutoff gives zero, and nothing else is truncated.

use crate::error::{CoreError, CoreResult};
use crate::scalar::Scalar;
use crate::space::{FockSpace, MAX_CUTOFF};
use std::fmt::Write;

/// A term as it arrives from a caller: coefficient parts and `(mode, p, q)` factors,
/// `p` creation and `q` annihilation powers.
#[derive(Debug, Clone, PartialEq)]
pub struct RawTerm {
    /// Real part of the coefficient.
    pub re: f64,
    /// Imaginary part of the coefficient.
    pub im: f64,
    /// `(mode, creation power, annihilation power)` per mode.
    pub factors: Vec<(usize, u32, u32)>,
}

impl RawTerm {
    /// A term from a coefficient and factors.
    pub fn new(re: f64, im: f64, factors: Vec<(usize, u32, u32)>) -> Self {
        RawTerm { re, im, factors }
    }
}

/// `(mode, creation power, annihilation power)` factors sorted by mode.
pub type Monomial = Vec<(usize, u32, u32)>;

/// Render a monomial in normal order, creators first: `a0†^2 a3† a0` for the factors
/// `[(0, 2, 1), (3, 1, 0)]` (the identity renders as `1`). Factors of different modes
/// commute, so this is the same operator as the mode-sorted factor list.
pub fn format_monomial(factors: &[(usize, u32, u32)]) -> String {
    let mut out = String::new();
    let creators = factors.iter().map(|&(mode, p, _)| (mode, p, "†"));
    let annihilators = factors.iter().map(|&(mode, _, q)| (mode, q, ""));
    for (mode, power, dagger) in creators.chain(annihilators) {
        if power == 0 {
            continue;
        }
        if !out.is_empty() {
            out.push(' ');
        }
        let _ = write!(out, "a{mode}{dagger}");
        if power > 1 {
            let _ = write!(out, "^{power}");
        }
    }
    if out.is_empty() {
        out.push('1');
    }
    out
}

fn format_term(t: &RawTerm) -> String {
    let coef = if t.im == 0.0 {
        format!("{}", t.re)
    } else {
        format!("({}{:+}j)", t.re, t.im)
    };
    format!("{coef}·{}", format_monomial(&t.factors))
}

/// Validated terms of one operator on one space, prepared for gathering rows:
/// row `r` of the matrix is obtained by applying each term's *reversed* monomial
/// (creation and annihilation powers swapped) to basis state `r`.
#[derive(Debug, Clone)]
pub struct Operator<S: Scalar> {
    coefs: Vec<S>,
    /// Range of term `t` in the factor arrays: `starts[t]..starts[t + 1]`.
    starts: Vec<u32>,
    /// Lowest and highest mode each term touches.
    spans: Vec<(u32, u32)>,
    diagonal: Vec<bool>,
    modes: Vec<u32>,
    /// Quanta removed from the row state (the term's creation power).
    lower: Vec<u32>,
    /// Quanta added to the row state (the term's annihilation power).
    raise: Vec<u32>,
}

impl<S: Scalar> Operator<S> {
    /// Validate and merge terms for a space.
    ///
    /// Identical monomials are summed in the order given; terms whose coefficient is
    /// then exactly zero are dropped.
    ///
    /// # Errors
    /// [`CoreError::NonFinite`] for NaN or infinite coefficients;
    /// [`CoreError::InvalidArgument`] for a complex coefficient when `S` is real, repeated
    /// modes in one term or powers beyond the largest cutoff;
    /// [`CoreError::ModeOutOfRange`]; [`CoreError::ChargeViolation`].
    pub fn new(space: &FockSpace, terms: &[RawTerm]) -> CoreResult<Self> {
        let mut merged: Vec<(Monomial, f64, f64)> = Vec::new();
        let mut lookup: std::collections::HashMap<Monomial, usize> = std::collections::HashMap::new();
        for t in terms {
            if !t.re.is_finite() || !t.im.is_finite() {
                return Err(CoreError::NonFinite(format!(
                    "term {} has a coefficient that is not finite; coefficients must be \
                     finite numbers (check for NaN or inf parameters)",
                    format_term(t)
                )));
            }
            let mut factors: Vec<(usize, u32, u32)> =
                t.factors.iter().copied().filter(|f| f.1 > 0 || f.2 > 0).collect();
            factors.sort_unstable();
            for w in factors.windows(2) {
                if w[0].0 == w[1].0 {
                    return Err(CoreError::InvalidArgument(format!(
                        "term {} lists mode {} twice; give one (mode, p, q) factor per mode",
                        format_term(t),
                        w[0].0
                    )));
                }
            }
            for &(mode, p, q) in &factors {
                if mode >= space.modes() {
                    return Err(CoreError::ModeOutOfRange {
                        mode,
                        modes: space.modes(),
                        term: format_term(t),
                    });
                }
                if p > MAX_CUTOFF || q > MAX_CUTOFF {
                    return Err(CoreError::InvalidArgument(format!(
                        "term {} has a power above {MAX_CUTOFF}; such powers are not supported",
                        format_term(t)
                    )));
                }
            }
            let deltas = space.charge_deltas(factors.iter().map(|&(mode, p, q)| (mode, p as i64 - q as i64)));
            if let Some(c) = space.broken_charge(&deltas) {
                return Err(CoreError::ChargeViolation {
                    term: format_term(t),
                    charge: deltas[c],
                    conserved: space.describe_charge(c),
                });
            }
            match lookup.get(&factors) {
                Some(&k) => {
                    merged[k].1 += t.re;
                    merged[k].2 += t.im;
                }
                None => {
                    lookup.insert(factors.clone(), merged.len());
                    merged.push((factors, t.re, t.im));
                }
            }
        }
        let mut op = Operator {
            coefs: Vec::new(),
            starts: vec![0],
            spans: Vec::new(),
            diagonal: Vec::new(),
            modes: Vec::new(),
            lower: Vec::new(),
            raise: Vec::new(),
        };
        for (factors, re, im) in merged {
            if re == 0.0 && im == 0.0 {
                continue;
            }
            let coef = S::from_parts(re, im).ok_or_else(|| {
                CoreError::InvalidArgument(format!(
                    "term {} has a complex coefficient but a real operator was requested; \
                     use the complex element type",
                    format_term(&RawTerm::new(re, im, factors.clone()))
                ))
            })?;
            let lo = factors.first().map_or(0, |f| f.0) as u32;
            let hi = factors.last().map_or(0, |f| f.0) as u32;
            op.diagonal.push(factors.iter().all(|f| f.1 == f.2));
            for &(mode, p, q) in &factors {
                op.modes.push(mode as u32);
                op.lower.push(p);
                op.raise.push(q);
            }
            op.coefs.push(coef);
            op.spans.push((lo, hi));
            op.starts.push(op.modes.len() as u32);
        }
        Ok(op)
    }

    /// Number of (merged, nonzero) terms.
    pub fn len(&self) -> usize {
        self.coefs.len()
    }

    /// Whether the operator has no terms (it is the zero operator).
    pub fn is_empty(&self) -> bool {
        self.coefs.is_empty()
    }

    /// Factors of term `t` in gathering form: `(mode, quanta removed, quanta added)`
    /// from the row state, sorted by mode.
    pub fn factors(&self, t: usize) -> impl Iterator<Item = (usize, u32, u32)> + '_ {
        let (a, b) = (self.starts[t] as usize, self.starts[t + 1] as usize);
        (a..b).map(move |f| (self.modes[f] as usize, self.lower[f], self.raise[f]))
    }

    /// Coefficient of term `t`.
    pub fn coef(&self, t: usize) -> S {
        self.coefs[t]
    }

    /// Visit the entries of one row: for each term that does not vanish on the row
    /// state, call `visit(term, column, amplitude)`; the matrix entry is
    /// `coef(term) * amplitude`. Entries are visited in term order.
    #[inline]
    pub fn for_each_in_row(&self, space: &FockSpace, row: &RowState, mut visit: impl FnMut(usize, u64, f64)) {
        let cutoffs = space.caps();
        'terms: for t in 0..self.coefs.len() {
            let (a, b) = (self.starts[t] as usize, self.starts[t + 1] as usize);
            // Product of the integer factors n!/(n−lower)! · m!/(n−lower)!, exact in f64 for
            // realistic cutoffs, then one correctly rounded square root: diagonal
            // entries such as ⟨n|a†a|n⟩ come out as exact integers.
            let mut amp_sq = 1.0f64;
            for f in a..b {
                let mode = self.modes[f] as usize;
                let n = row.occ[mode];
                let lower = self.lower[f];
                if n < lower {
                    continue 'terms;
                }
                let mid = n - lower;
                let m = mid + self.raise[f];
                if m > cutoffs[mode] {
                    continue 'terms;
                }
                for k in mid + 1..=n {
                    amp_sq *= k as f64;
                }
                for k in mid + 1..=m {
                    amp_sq *= k as f64;
                }
            }
            let col = if self.diagonal[t] {
                row.rank
            } else {
                let (lo, hi) = (self.spans[t].0 as usize, self.spans[t].1 as usize);
                let mut residue = row.residues[lo];
                let mut new_part = 0u64;
                let mut f = a;
                for i in lo..=hi {
                    let v = if f < b && self.modes[f] as usize == i {
                        let v = row.occ[i] - self.lower[f] + self.raise[f];
                        f += 1;
                        v
                    } else {
                        row.occ[i]
                    };
                    new_part += space.offset(i, residue, v);
                    residue = match space.step(residue, i, v) {
                        Some(r) => r,
                        None => unreachable!("a charge-conserving image stays in the space"),
                    };
                }
                row.rank - (row.prefix[hi + 1] - row.prefix[lo]) + new_part
            };
            visit(t, col, amp_sq.sqrt());
        }
    }
}

/// A basis state with what ranking its neighbours needs: occupations, the residue
/// owed before each mode, and prefix sums of the rank contributions.
#[derive(Debug, Clone)]
pub struct RowState {
    /// Occupation of each mode.
    pub occ: Vec<u32>,
    /// Residue owed before each mode.
    pub residues: Vec<usize>,
    /// `prefix[i] = Σ_{j<i}` rank contribution of mode `j`; `prefix[M]` is the rank.
    pub prefix: Vec<u64>,
    /// Rank of the state.
    pub rank: u64,
}

impl RowState {
    /// The state at `index`.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when `index` is out of range.
    pub fn at(space: &FockSpace, index: u64) -> CoreResult<Self> {
        let m = space.modes();
        let mut s = RowState {
            occ: vec![0; m],
            residues: vec![0; m],
            prefix: vec![0; m + 1],
            rank: index,
        };
        space.unrank_into(index, &mut s.occ, &mut s.residues)?;
        s.refresh_prefix(space, 0);
        Ok(s)
    }

    fn refresh_prefix(&mut self, space: &FockSpace, from: usize) {
        for i in from..space.modes() {
            self.prefix[i + 1] = self.prefix[i] + space.offset(i, self.residues[i], self.occ[i]);
        }
        debug_assert_eq!(self.prefix[space.modes()], self.rank);
    }

    /// Move to the next basis state; returns `false` after the last one.
    pub fn advance(&mut self, space: &FockSpace) -> bool {
        match space.advance(&mut self.occ, &mut self.residues) {
            Some(i) => {
                self.rank += 1;
                self.refresh_prefix(space, i);
                true
            }
            None => false,
        }
    }
}

/// The falling factorial `n (n-1) … (n-k+1)` as `f64` (1 for `k = 0`, 0 for `k > n`):
/// the squared amplitude factor of `a^k` on `|n⟩` is `falling(n, k)`. The one helper
/// of every kernel (row, bipartite, sector), so that they round alike.
#[inline(always)]
pub(crate) fn falling(n: u32, k: u32) -> f64 {
    let mut p = 1.0;
    for j in 0..k {
        if j >= n {
            return 0.0;
        }
        p *= (n - j) as f64;
    }
    p
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_monomials() {
        assert_eq!(format_monomial(&[(0, 2, 1), (3, 1, 0)]), "a0†^2 a3† a0");
        assert_eq!(format_monomial(&[(0, 0, 1), (1, 1, 0)]), "a1† a0");
        assert_eq!(format_monomial(&[]), "1");
    }

    #[test]
    fn huge_powers_are_refused_not_overflowed() {
        // Found by the fuzz test: powers of 2³¹ on both sides (their sum overflows u32).
        let space = FockSpace::new(vec![1], None, None, None).unwrap();
        let big = 1u32 << 31;
        let terms = [RawTerm::new(1.0, 0.0, vec![(0, 0, 0), (0, 0, 0), (0, big, big)])];
        let e = Operator::<f64>::new(&space, &terms).unwrap_err();
        assert!(e.to_string().contains("power above"), "{e}");
        let terms = [RawTerm::new(1.0, 0.0, vec![(0, u32::MAX, u32::MAX)])];
        assert!(Operator::<f64>::new(&space, &terms).is_err());
    }

    #[test]
    fn rejects_charge_violation_and_bad_modes() {
        let space = FockSpace::new(vec![2, 2], None, Some(2), None).unwrap();
        let e = Operator::<f64>::new(&space, &[RawTerm::new(1.0, 0.0, vec![(0, 1, 0)])]).unwrap_err();
        assert!(e.to_string().contains("a0†"), "{e}");
        assert!(matches!(e, CoreError::ChargeViolation { charge: 1, .. }));
        let e = Operator::<f64>::new(&space, &[RawTerm::new(1.0, 0.0, vec![(2, 1, 1)])]).unwrap_err();
        assert!(matches!(e, CoreError::ModeOutOfRange { mode: 2, .. }));
        let e = Operator::<f64>::new(&space, &[RawTerm::new(f64::NAN, 0.0, vec![(0, 1, 1)])]).unwrap_err();
        assert!(matches!(e, CoreError::NonFinite(_)));
        let e = Operator::<f64>::new(&space, &[RawTerm::new(1.0, 1.0, vec![(0, 1, 1)])]).unwrap_err();
        assert!(matches!(e, CoreError::InvalidArgument(_)));
        let parity = FockSpace::new(vec![3, 3], None, Some(0), Some(2)).unwrap();
        assert!(Operator::<f64>::new(&parity, &[RawTerm::new(1.0, 0.0, vec![(0, 2, 0)])]).is_ok());
        assert!(Operator::<f64>::new(&parity, &[RawTerm::new(1.0, 0.0, vec![(0, 1, 0)])]).is_err());
        // Number and momentum mod 3: a hop keeps the number but moves momentum by 1;
        // a pair hop k, k -> k+1, k-1 keeps both (common practice, no source).
        let ring = FockSpace::with_charges(
            vec![3, 3, 3],
            vec![
                crate::space::Charge {
                    weights: vec![1, 1, 1],
                    total: 3,
                    modulus: None,
                },
                crate::space::Charge {
                    weights: vec![0, 1, 2],
                    total: 0,
                    modulus: Some(3),
                },
            ],
        )
        .unwrap();
        let e =
            Operator::<f64>::new(&ring, &[RawTerm::new(1.0, 0.0, vec![(0, 0, 1), (1, 1, 0)])]).unwrap_err();
        assert!(matches!(e, CoreError::ChargeViolation { charge: 1, .. }), "{e}");
        assert!(e.to_string().contains("charge 1 of 2"), "{e}");
        let pair = vec![(0, 1, 0), (1, 0, 2), (2, 1, 0)];
        assert!(Operator::<f64>::new(&ring, &[RawTerm::new(1.0, 0.0, pair)]).is_ok());
        let e = Operator::<f64>::new(&ring, &[RawTerm::new(1.0, 0.0, vec![(0, 1, 0)])]).unwrap_err();
        assert!(matches!(e, CoreError::ChargeViolation { charge: 1, .. }), "{e}");
    }

    #[test]
    fn merges_and_drops_cancelled_terms() {
        let space = FockSpace::new(vec![2, 2], None, Some(2), None).unwrap();
        let op = Operator::<f64>::new(
            &space,
            &[
                RawTerm::new(1.0, 0.0, vec![(0, 1, 1)]),
                RawTerm::new(-1.0, 0.0, vec![(0, 1, 1)]),
                RawTerm::new(2.0, 0.0, vec![(1, 1, 0), (0, 0, 1)]),
            ],
        )
        .unwrap();
        assert_eq!(op.len(), 1);
    }
}
