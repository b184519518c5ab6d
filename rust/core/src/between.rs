//! Operators that carry one space's states into another space over the same modes:
//! `a_0` from the N-quanta sector to the N − 1 sector, `a_0† a_1†` from N to N + 2,
//! anything from a sector into the full truncated space.
//!
//! The matrix has shape `(target.dim, source.dim)`. Row `r` is gathered from target
//! basis state `r`: each term's reversed monomial (creation and annihilation powers
//! swapped) turns the row state into a source occupation, which is ranked in the source
//! space (O(M)). Entries whose source occupation is not a source basis state vanish,
//! which is exactly the restriction `P_target X P_source` of the normal-ordered
//! monomials. Construction refuses terms whose image leaves the target sector.

use crate::build::{apply_rows, build_rows, counts_of, CsrAny, RowVisitor, SparseRows};
use crate::error::{CoreError, CoreResult};
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::space::{Constraint, FockSpace, MAX_CUTOFF};
use crate::terms::{format_monomial, Monomial, RawTerm};

/// Validated, merged terms of an operator from a source space to a target space.
#[derive(Debug, Clone)]
pub struct Between<S: Scalar> {
    coefs: Vec<S>,
    /// `(mode, quanta removed from the row state, quanta added)` per term, by mode.
    factors: Vec<Monomial>,
}

/// Whether every state of `source`, changed in each charge by `deltas`, lies in
/// `target`'s sector (so that no part of the image is lost). The charges are compared
/// one by one (the spaces have the same list of weights, checked before).
fn lands_in(source: &FockSpace, target: &FockSpace, deltas: &[i64]) -> bool {
    if target.charges().is_empty() {
        return true;
    }
    if source.charges().len() != target.charges().len() {
        return false;
    }
    source
        .charges()
        .iter()
        .zip(target.charges())
        .zip(deltas)
        .all(|((s, t), &delta)| {
            let moved = s.total as i128 + delta as i128;
            match (s.modulus, t.modulus) {
                (None, None) => moved == t.total as i128,
                (None, Some(m)) => moved.rem_euclid(m as i128) == t.total as i128,
                (Some(ms), Some(mt)) => ms % mt == 0 && moved.rem_euclid(mt as i128) == t.total as i128,
                (Some(_), None) => false,
            }
        })
}

fn describe(space: &FockSpace) -> String {
    match space.constraint() {
        Constraint::Free => "the full truncated space (no conserved total)".into(),
        _ => space.describe_constraint(),
    }
}

impl<S: Scalar> Between<S> {
    /// Validate and merge `terms` for an operator from `source` into `target`.
    ///
    /// Identical monomials are summed in the order given; terms whose coefficient is
    /// then exactly zero are dropped. With `project`, terms whose image leaves the
    /// target are kept and the part outside the target is dropped (`P_target X`),
    /// which is what the adjoint of a checked operator needs.
    ///
    /// # Errors
    /// [`CoreError::InvalidSpace`] when the two spaces differ in modes or cutoffs, or
    /// (both being sectors) in weights; [`CoreError::NonFinite`];
    /// [`CoreError::InvalidArgument`] for complex coefficients when `S` is real, repeated
    /// modes in a term or powers above the largest cutoff; [`CoreError::ModeOutOfRange`];
    /// [`CoreError::ChargeViolation`] naming the term and both sectors when a term
    /// carries source states outside the target (unless `project`).
    pub fn new(source: &FockSpace, target: &FockSpace, terms: &[RawTerm], project: bool) -> CoreResult<Self> {
        if source.cutoffs() != target.cutoffs() {
            return Err(CoreError::InvalidSpace(format!(
                "the source space has cutoffs {:?} and the target {:?}; an operator between \
                 spaces needs the same modes and cutoffs in both (change only the total)",
                source.cutoffs(),
                target.cutoffs()
            )));
        }
        let constrained = |s: &FockSpace| !matches!(s.constraint(), Constraint::Free);
        if constrained(source) && constrained(target) {
            let weights =
                |s: &FockSpace| -> Vec<Vec<u32>> { s.charges().iter().map(|c| c.weights.clone()).collect() };
            let (ws, wt) = (weights(source), weights(target));
            if ws.len() != wt.len() {
                return Err(CoreError::InvalidSpace(format!(
                    "the source space fixes {} conserved charges and the target {}; an operator \
                     between sectors needs the same charges (same weights) in both, differing \
                     only in their totals",
                    ws.len(),
                    wt.len()
                )));
            }
            if ws != wt {
                return Err(CoreError::InvalidSpace(if ws.len() == 1 {
                    format!(
                        "the source space has weights {:?} and the target {:?}; the conserved \
                         charges must be the same to compare sectors",
                        ws[0], wt[0]
                    )
                } else {
                    format!(
                        "the source space's charges have weights {ws:?} and the target's \
                         {wt:?}; the conserved charges must be the same (in the same order) to \
                         compare sectors"
                    )
                }));
            }
        }
        let mut merged: Vec<(Monomial, f64, f64)> = Vec::new();
        let mut lookup: std::collections::HashMap<Monomial, usize> = std::collections::HashMap::new();
        for t in terms {
            let mut factors: Vec<(usize, u32, u32)> =
                t.factors.iter().copied().filter(|f| f.1 > 0 || f.2 > 0).collect();
            factors.sort_unstable();
            let name = format_monomial(&factors);
            if !t.re.is_finite() || !t.im.is_finite() {
                return Err(CoreError::NonFinite(format!(
                    "term {name} has a coefficient that is not finite; coefficients must be \
                     finite numbers (check for NaN or inf parameters)"
                )));
            }
            for w in factors.windows(2) {
                if w[0].0 == w[1].0 {
                    return Err(CoreError::InvalidArgument(format!(
                        "term {name} lists mode {} twice; give one (mode, p, q) factor per mode",
                        w[0].0
                    )));
                }
            }
            for &(mode, p, q) in &factors {
                if mode >= source.modes() {
                    return Err(CoreError::ModeOutOfRange {
                        mode,
                        modes: source.modes(),
                        term: name,
                    });
                }
                if p > MAX_CUTOFF || q > MAX_CUTOFF {
                    return Err(CoreError::InvalidArgument(format!(
                        "term {name} has a power above {MAX_CUTOFF}; such powers are not supported"
                    )));
                }
            }
            let charged = if source.charges().is_empty() {
                target
            } else {
                source
            };
            let deltas =
                charged.charge_deltas(factors.iter().map(|&(mode, p, q)| (mode, p as i64 - q as i64)));
            if !project && !lands_in(source, target, &deltas) {
                let delta = deltas.first().copied().unwrap_or(0);
                let advice = if deltas.len() > 1 {
                    format!("choose the target whose totals are the source's shifted by {deltas:?}")
                } else {
                    format!("choose the target whose total is the source's plus {delta}")
                };
                return Err(CoreError::ChargeViolation {
                    term: name,
                    charge: delta,
                    conserved: format!(
                        "it carries the source sector ({}) outside the target sector ({}); \
                         {advice}",
                        describe(source),
                        describe(target)
                    ),
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
        let mut op = Between {
            coefs: Vec::new(),
            factors: Vec::new(),
        };
        for (factors, re, im) in merged {
            if re == 0.0 && im == 0.0 {
                continue;
            }
            let coef = S::from_parts(re, im).ok_or_else(|| {
                CoreError::InvalidArgument(format!(
                    "term {} has a complex coefficient but a real operator was requested; \
                     use the complex element type",
                    format_monomial(&factors)
                ))
            })?;
            op.coefs.push(coef);
            op.factors.push(factors);
        }
        Ok(op)
    }

    /// Number of merged nonzero terms.
    pub fn len(&self) -> usize {
        self.coefs.len()
    }

    /// Whether there are no terms (the zero operator).
    pub fn is_empty(&self) -> bool {
        self.coefs.is_empty()
    }

    /// Coefficient of term `t`.
    pub fn coef(&self, t: usize) -> S {
        self.coefs[t]
    }

    /// Factors of term `t` in gathering form, `(mode, quanta removed from the row
    /// state, quanta added)`, sorted by mode (the sector kernel gathers rows from them).
    pub fn factors(&self, t: usize) -> &[(usize, u32, u32)] {
        &self.factors[t]
    }

    /// The merged, nonzero entries of the row whose target state is `occ`, sorted by
    /// source column, left in `entries`; `work` is scratch of length M.
    fn row_entries(&self, source: &FockSpace, occ: &[u32], work: &mut [u32], entries: &mut Vec<(u64, S)>) {
        entries.clear();
        let cutoffs = source.cutoffs();
        'terms: for (t, factors) in self.factors.iter().enumerate() {
            let mut amp_sq = 1.0f64;
            work.copy_from_slice(occ);
            for &(mode, p, q) in factors {
                // Row state n; the term's creation power p is removed, its annihilation
                // power q added: the source state is n − p + q.
                let n = occ[mode];
                if n < p {
                    continue 'terms;
                }
                let mid = n - p;
                let m = mid + q;
                if m > cutoffs[mode] {
                    continue 'terms;
                }
                // Integer factors n!/mid! · m!/mid!, then one rounded square root.
                for k in mid + 1..=n {
                    amp_sq *= k as f64;
                }
                for k in mid + 1..=m {
                    amp_sq *= k as f64;
                }
                work[mode] = m;
            }
            if let Some(col) = source.rank(work) {
                entries.push((col, self.coefs[t].scale(amp_sq.sqrt())));
            }
        }
        let kept = crate::build::merge_row(entries);
        entries.truncate(kept);
    }

    /// Call `visit(entries)` for target rows `first..first + rows` in order.
    fn for_each_row(
        &self,
        source: &FockSpace,
        target: &FockSpace,
        first: u64,
        rows: usize,
        mut visit: impl FnMut(&[(u64, S)]),
    ) -> CoreResult<()> {
        let m = target.modes();
        let (mut occ, mut residues, mut work) = (vec![0u32; m], vec![0usize; m], vec![0u32; m]);
        let mut entries = Vec::with_capacity(self.len());
        target.unrank_into(first, &mut occ, &mut residues)?;
        for i in 0..rows {
            if i > 0 {
                target.advance(&mut occ, &mut residues);
            }
            self.row_entries(source, &occ, &mut work, &mut entries);
            visit(&entries);
        }
        Ok(())
    }
}

fn check_dims(source: &FockSpace, target: &FockSpace) -> CoreResult<()> {
    if source.modes() != target.modes() {
        return Err(CoreError::InvalidSpace(format!(
            "the source space has {} modes and the target {}; an operator between spaces \
             needs the same modes",
            source.modes(),
            target.modes()
        )));
    }
    Ok(())
}

/// The operator's rows as the two-pass build lists them.
struct Listing<'a, S: Scalar> {
    source: &'a FockSpace,
    target: &'a FockSpace,
    op: &'a Between<S>,
}

impl<S: Scalar> SparseRows<S> for Listing<'_, S> {
    fn shape(&self) -> (u64, u64) {
        (self.target.dim(), self.source.dim())
    }
    fn rows(&self, first: u64, count: usize, visit: &mut RowVisitor<S>) -> CoreResult<()> {
        let mut row = first;
        self.op
            .for_each_row(self.source, self.target, first, count, |entries| {
                visit(row, entries);
                row += 1;
            })
    }
}

/// Stored entries of each target row.
fn row_counts<S: Scalar>(
    source: &FockSpace,
    target: &FockSpace,
    op: &Between<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<u64>> {
    counts_of(&Listing { source, target, op }, runner, interrupt)
}

/// Build the `(target.dim, source.dim)` CSR matrix of `op` in two passes (count, fill):
/// its `dim` is the number of rows, `target.dim`.
///
/// Indices are `i32` when both dimensions and the number of entries fit (unless
/// `force_wide`), else `i64`.
///
/// # Errors
/// [`CoreError::InvalidSpace`] when the spaces have different numbers of modes;
/// [`CoreError::Interrupted`]; [`CoreError::TooLarge`] when the matrix does not fit.
pub fn build_csr<S: Scalar>(
    source: &FockSpace,
    target: &FockSpace,
    op: &Between<S>,
    runner: &Runner,
    interrupt: &dyn Interrupt,
    force_wide: bool,
) -> CoreResult<CsrAny<S>> {
    check_dims(source, target)?;
    build_rows(&Listing { source, target, op }, runner, interrupt, force_wide)
}

/// `Y = A X` for `k` source vectors stored row-major (`X[c, j]` at `x[c * k + j]`);
/// `y` holds `target.dim × k` values. Each output row is written by one thread in a
/// fixed order, so results do not depend on the thread count.
///
/// # Errors
/// [`CoreError::Shape`] for wrong lengths; [`CoreError::InvalidSpace`] when the spaces
/// have different numbers of modes; [`CoreError::Interrupted`].
#[allow(clippy::too_many_arguments)]
pub fn apply_many<S: Scalar>(
    source: &FockSpace,
    target: &FockSpace,
    op: &Between<S>,
    x: &[S],
    y: &mut [S],
    k: usize,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<()> {
    check_dims(source, target)?;
    let (cols, rows) = (source.dim() as usize, target.dim() as usize);
    let ok = k > 0 && cols.checked_mul(k) == Some(x.len()) && rows.checked_mul(k) == Some(y.len());
    if !ok {
        return Err(CoreError::Shape(format!(
            "the input must have shape ({cols}, {k}) (the source space's dim) and the output \
             ({rows}, {k}) (the target's); got {} and {} elements",
            x.len(),
            y.len()
        )));
    }
    apply_rows(&Listing { source, target, op }, x, y, k, runner, interrupt)
}

/// `(nnz, standard error, exact, largest counted row)` of the matrix: every row when
/// the target has at most `4 × samples` states, else one row from each of `samples`
/// equal strata of the target basis.
///
/// # Errors
/// [`CoreError::Interrupted`] during an exact count; [`CoreError::InvalidSpace`] when
/// the spaces have different numbers of modes.
pub fn estimate_nnz<S: Scalar>(
    source: &FockSpace,
    target: &FockSpace,
    op: &Between<S>,
    samples: usize,
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<(f64, f64, bool, u64)> {
    check_dims(source, target)?;
    let e = crate::estimate::estimate_from_rows(
        target.dim(),
        samples,
        runner,
        || row_counts(source, target, op, runner, interrupt),
        || (),
        |_, idx| {
            let mut n = 0u64;
            let _ = op.for_each_row(source, target, idx, 1, |e| n = e.len() as u64);
            n
        },
    )?;
    Ok((e.nnz, e.std_error, e.exact, e.max_row))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::NoInterrupt;

    fn dense(source: &FockSpace, target: &FockSpace, op: &Between<f64>) -> Vec<Vec<f64>> {
        let runner = Runner::with_threads(Some(2)).unwrap();
        let csr = match build_csr(source, target, op, &runner, &NoInterrupt, false).unwrap() {
            CsrAny::Narrow(c) => c,
            CsrAny::Wide(_) => panic!("small matrices use narrow indices"),
        };
        let mut out = vec![vec![0.0; source.dim() as usize]; target.dim() as usize];
        for (r, row) in out.iter_mut().enumerate() {
            for e in csr.indptr[r] as usize..csr.indptr[r + 1] as usize {
                row[csr.indices[e] as usize] = csr.data[e];
            }
        }
        out
    }

    #[test]
    fn lowering_one_mode_between_sectors() {
        // a|n⟩ = √n |n−1⟩ (Dirac, The Principles of Quantum Mechanics, 4th ed. 1958,
        // §34; from memory). Two modes with cutoff 2: N=2 is {02, 11, 20}, N=1 is {01, 10}.
        let n2 = FockSpace::new(vec![2, 2], None, Some(2), None).unwrap();
        let n1 = FockSpace::new(vec![2, 2], None, Some(1), None).unwrap();
        let op = Between::<f64>::new(&n2, &n1, &[RawTerm::new(1.0, 0.0, vec![(0, 0, 1)])], false).unwrap();
        let m = dense(&n2, &n1, &op);
        assert_eq!(m, vec![vec![0.0, 1.0, 0.0], vec![0.0, 0.0, 2f64.sqrt()]]);
    }

    #[test]
    fn refuses_terms_that_leave_the_target() {
        let n2 = FockSpace::new(vec![2, 2], None, Some(2), None).unwrap();
        let n1 = FockSpace::new(vec![2, 2], None, Some(1), None).unwrap();
        let e = Between::<f64>::new(&n2, &n1, &[RawTerm::new(1.0, 0.0, vec![(0, 1, 0)])], false).unwrap_err();
        let text = e.to_string();
        assert!(
            matches!(e, CoreError::ChargeViolation { charge: 1, .. }),
            "{text}"
        );
        assert!(
            text.contains("a0†") && text.contains("= 2") && text.contains("= 1"),
            "{text}"
        );
        // Into the full space anything lands.
        let full = FockSpace::new(vec![2, 2], None, None, None).unwrap();
        assert!(Between::<f64>::new(&n2, &full, &[RawTerm::new(1.0, 0.0, vec![(0, 1, 0)])], false).is_ok());
        // From the full space into a sector nothing does.
        assert!(Between::<f64>::new(&full, &n2, &[RawTerm::new(1.0, 0.0, vec![(0, 1, 1)])], false).is_err());
        let other = FockSpace::new(vec![3, 2], None, Some(1), None).unwrap();
        assert!(matches!(
            Between::<f64>::new(&n2, &other, &[], false),
            Err(CoreError::InvalidSpace(_))
        ));
    }

    #[test]
    fn lowering_one_species_between_two_charge_sectors() {
        // Two species on two sites (modes 0, 1: species A; 2, 3: species B), both numbers
        // fixed. a_0 takes (N_A, N_B) = (2, 1) to (1, 1) with a|n⟩ = √n |n−1⟩ (Dirac,
        // 1958, §34; from memory); the dense reference ranks each image by brute force.
        let species = |na: u64, nb: u64| {
            FockSpace::with_charges(
                vec![2; 4],
                vec![
                    crate::space::Charge {
                        weights: vec![1, 1, 0, 0],
                        total: na,
                        modulus: None,
                    },
                    crate::space::Charge {
                        weights: vec![0, 0, 1, 1],
                        total: nb,
                        modulus: None,
                    },
                ],
            )
            .unwrap()
        };
        let (src, dst) = (species(2, 1), species(1, 1));
        let op = Between::<f64>::new(&src, &dst, &[RawTerm::new(1.0, 0.0, vec![(0, 0, 1)])], false).unwrap();
        let m = dense(&src, &dst, &op);
        let mut expected = vec![vec![0.0; src.dim() as usize]; dst.dim() as usize];
        let (mut occ, mut res) = (vec![0u32; 4], vec![0usize; 4]);
        for k in 0..src.dim() {
            src.unrank_into(k, &mut occ, &mut res).unwrap();
            if occ[0] > 0 {
                let n = occ[0];
                occ[0] -= 1;
                let r = dst.rank(&occ).unwrap();
                expected[r as usize][k as usize] = (n as f64).sqrt();
            }
        }
        assert_eq!(m, expected);
        // A hop of species B keeps both numbers: it maps the source to itself only.
        let hop = [RawTerm::new(1.0, 0.0, vec![(2, 0, 1), (3, 1, 0)])];
        assert!(Between::<f64>::new(&src, &src, &hop, false).is_ok());
        assert!(Between::<f64>::new(&src, &dst, &hop, false).is_err());
        // Raising species B needs the target with one more B.
        assert!(Between::<f64>::new(
            &src,
            &species(2, 2),
            &[RawTerm::new(1.0, 0.0, vec![(2, 1, 0)])],
            false
        )
        .is_ok());
        let e =
            Between::<f64>::new(&src, &dst, &[RawTerm::new(1.0, 0.0, vec![(2, 1, 0)])], false).unwrap_err();
        assert!(matches!(e, CoreError::ChargeViolation { .. }), "{e}");
        // A one-charge target cannot be compared with a two-charge source.
        let one = FockSpace::new(vec![2; 4], None, Some(2), None).unwrap();
        assert!(matches!(
            Between::<f64>::new(&src, &one, &[], false),
            Err(CoreError::InvalidSpace(_))
        ));
    }

    #[test]
    fn products_equal_the_built_matrix() {
        let src = FockSpace::new(vec![3; 4], None, Some(3), None).unwrap();
        let dst = FockSpace::new(vec![3; 4], None, Some(5), None).unwrap();
        let terms = vec![
            RawTerm::new(0.7, 0.0, vec![(0, 1, 0), (2, 1, 0)]),
            RawTerm::new(-1.3, 0.0, vec![(1, 2, 0)]),
            RawTerm::new(0.4, 0.0, vec![(3, 2, 0), (1, 1, 1)]),
        ];
        let op = Between::<f64>::new(&src, &dst, &terms, false).unwrap();
        let m = dense(&src, &dst, &op);
        let x: Vec<f64> = (0..src.dim()).map(|i| ((i * 37) % 11) as f64 - 5.0).collect();
        let mut y = vec![0.0; dst.dim() as usize];
        let runner = Runner::with_threads(Some(3)).unwrap();
        apply_many(&src, &dst, &op, &x, &mut y, 1, &runner, &NoInterrupt).unwrap();
        for (r, row) in m.iter().enumerate() {
            let expect: f64 = row.iter().zip(&x).map(|(a, b)| a * b).sum();
            assert!((expect - y[r]).abs() < 1e-12);
        }
        let (nnz, _, exact, _) = estimate_nnz(&src, &dst, &op, 2048, &runner, &NoInterrupt).unwrap();
        let counted = m.iter().flatten().filter(|v| **v != 0.0).count();
        assert!(exact && nnz as usize == counted);
    }
}
