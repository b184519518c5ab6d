//! Per-state quantities computed in one pass over the basis, without building a matrix:
//! occupation tables, ranks of given states, expectation values of monomials and the
//! occupation distribution of every mode.

use crate::error::{CoreError, CoreResult};
use crate::parallel::{Interrupt, Runner};
use crate::scalar::Scalar;
use crate::space::FockSpace;
use crate::symmetry::SymmetricSpace;
use crate::terms::{Operator, RawTerm, RowState};
use num_complex::Complex64;

/// Element types for occupation tables.
pub trait Occupation: Copy + Send + Sync + Default + 'static {
    /// Convert an occupation known to fit.
    fn from_u32(v: u32) -> Self;
}
impl Occupation for u8 {
    fn from_u32(v: u32) -> Self {
        v as u8
    }
}
impl Occupation for u16 {
    fn from_u32(v: u32) -> Self {
        v as u16
    }
}

/// Fill `out` (row-major, `dim × modes`) with the occupations of every basis state.
///
/// # Errors
/// [`CoreError::Shape`] when `out` has the wrong length; [`CoreError::Interrupted`].
pub fn occupations_into<T: Occupation>(
    space: &FockSpace,
    out: &mut [T],
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<()> {
    let m = space.modes();
    if out.len() as u64 != space.dim() * m as u64 {
        return Err(CoreError::Shape("occupation table has the wrong size".into()));
    }
    let mut rows: Vec<&mut [T]> = out.chunks_mut(m).collect();
    runner.for_row_chunks(&mut rows, interrupt, |first, chunk| {
        let mut row = RowState::at(space, first)?;
        for (i, dst) in chunk.iter_mut().enumerate() {
            if i > 0 {
                row.advance(space);
            }
            for (d, &v) in dst.iter_mut().zip(&row.occ) {
                *d = T::from_u32(v);
            }
        }
        Ok(())
    })
}

/// Ranks of `count` states given row-major in `occ` (`count × modes`); `-1` for a state
/// that is not in the space (negative or too large occupations, or outside the sector).
///
/// # Errors
/// [`CoreError::Shape`] when `occ.len()` is not `count × modes`; [`CoreError::TooLarge`]
/// when the result does not fit in memory.
pub fn ranks(space: &FockSpace, occ: &[i64], runner: &Runner) -> CoreResult<Vec<i64>> {
    let m = space.modes();
    if occ.len() % m != 0 {
        return Err(CoreError::Shape(format!(
            "occupations must have {m} columns (one per mode); got {} values",
            occ.len()
        )));
    }
    use rayon::prelude::*;
    let mut out = crate::memory::try_filled(occ.len() / m, 0i64, "the ranks of the given states")?;
    runner.install(|| {
        out.par_iter_mut().zip(occ.par_chunks(m)).for_each_init(
            || vec![0u32; m],
            |buf, (dst, state)| {
                *dst = if buf.iter_mut().zip(state).all(|(b, &v)| {
                    *b = v.clamp(0, u32::MAX as i64) as u32;
                    (0..=u32::MAX as i64).contains(&v)
                }) {
                    space.rank(buf).map_or(-1, |r| r as i64)
                } else {
                    -1
                };
            },
        )
    });
    Ok(out)
}

/// `⟨ψ| m_t |ψ⟩` for each monomial `m_t` (coefficient 1), in the order given.
///
/// # Errors
/// [`CoreError::InvalidArgument`] when two monomials are equal; the errors of
/// [`Operator::new`]; [`CoreError::Shape`] when `psi` has the wrong length.
pub fn monomial_expectations<S: Scalar>(
    space: &FockSpace,
    monomials: &[Vec<(usize, u32, u32)>],
    psi: &[S],
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<Complex64>> {
    let raw: Vec<RawTerm> = monomials
        .iter()
        .map(|f| RawTerm::new(1.0, 0.0, f.clone()))
        .collect();
    let op = Operator::<S>::new(space, &raw)?;
    if op.len() != monomials.len() {
        return Err(CoreError::InvalidArgument(
            "monomials for expectation values must be distinct".into(),
        ));
    }
    check_len(space, psi.len())?;
    let parts = runner.map_blocks(space.dim(), interrupt, |first, rows| {
        let mut acc = vec![Complex64::new(0.0, 0.0); op.len()];
        let mut row = RowState::at(space, first)?;
        for i in 0..rows {
            if i > 0 {
                row.advance(space);
            }
            let bra = psi[row.rank as usize].conj();
            if bra == S::ZERO {
                continue;
            }
            op.for_each_in_row(space, &row, |t, col, amp| {
                let z = bra * psi[col as usize];
                acc[t] += Complex64::new(z.re(), z.im()) * amp;
            });
        }
        Ok(acc)
    })?;
    // Summed in block order: the result does not depend on the thread count.
    let mut total = vec![Complex64::new(0.0, 0.0); op.len()];
    for part in parts {
        for (t, v) in total.iter_mut().zip(part) {
            *t += v;
        }
    }
    Ok(total)
}

/// Occupation distributions `P_i(n) = Σ_states |ψ|² [n_i = n]`, concatenated over modes
/// (mode `i` occupies `c_i + 1` entries).
///
/// # Errors
/// [`CoreError::Shape`] when `psi` has the wrong length; [`CoreError::Interrupted`].
pub fn occupation_distributions<S: Scalar>(
    space: &FockSpace,
    psi: &[S],
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<f64>> {
    check_len(space, psi.len())?;
    let mut starts = Vec::with_capacity(space.modes());
    let mut size = 0usize;
    for &c in space.cutoffs() {
        starts.push(size);
        size += c as usize + 1;
    }
    let parts = runner.map_blocks(space.dim(), interrupt, |first, rows| {
        let mut hist = crate::memory::try_filled(size, 0.0f64, "an occupation histogram")?;
        let mut row = RowState::at(space, first)?;
        for i in 0..rows {
            if i > 0 {
                row.advance(space);
            }
            let w = psi[row.rank as usize].norm_sqr();
            for (s, &n) in starts.iter().zip(&row.occ) {
                hist[s + n as usize] += w;
            }
        }
        Ok(hist)
    })?;
    let mut total = crate::memory::try_filled(size, 0.0f64, "the occupation distributions")?;
    for part in parts {
        for (t, v) in total.iter_mut().zip(part) {
            *t += v;
        }
    }
    Ok(total)
}

/// The occupation distributions of a state of a symmetry sector: what
/// [`occupation_distributions`] gives for its expansion into the base space, from one
/// pass over the sector's representatives instead of the (`|G|` times larger) base
/// space, and with no base-space vector.
///
/// A sector basis state spreads its weight `|ψ_r|²` evenly over the orbit of its
/// representative `r` (a one-dimensional representation gives every orbit element the
/// same modulus), and averaging over the orbit is averaging over the group (`g ↦ g·r`
/// hits each orbit element `|stabiliser|` times). So with `Q_j(n) = Σ_r |ψ_r|²
/// [n_j(r) = n]`, the histogram of the representatives, and `T_jk` the fraction of
/// group elements that carry mode `j` to mode `k`, `P_k(n) = Σ_j T_jk Q_j(n)`
/// (averaging over a group, common practice, no source).
///
/// # Errors
/// [`CoreError::Shape`] when `psi` does not have the sector's dimension;
/// [`CoreError::Interrupted`].
pub fn sector_occupation_distributions<S: Scalar>(
    sector: &SymmetricSpace,
    psi: &[S],
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<f64>> {
    if psi.len() as u64 != sector.dim() {
        return Err(CoreError::Shape(format!(
            "state vector has length {} but the sector has dim {}; pass a vector of the \
             sector's dimension",
            psi.len(),
            sector.dim()
        )));
    }
    let space = sector.base();
    let m = space.modes();
    let mut starts = Vec::with_capacity(m);
    let mut size = 0usize;
    for &c in space.cutoffs() {
        starts.push(size);
        size += c as usize + 1;
    }
    let reps = sector.representatives();
    let parts = runner.map_blocks(sector.dim(), interrupt, |first, rows| {
        let mut hist = crate::memory::try_filled(size, 0.0f64, "an occupation histogram")?;
        let (mut occ, mut residues) = (vec![0u32; m], vec![0usize; m]);
        for i in first..first + rows {
            space.unrank_into(reps[i as usize], &mut occ, &mut residues)?;
            let w = psi[i as usize].norm_sqr();
            for (s, &n) in starts.iter().zip(&occ) {
                hist[s + n as usize] += w;
            }
        }
        Ok(hist)
    })?;
    let mut reps_hist = vec![0.0f64; size];
    for part in parts {
        for (t, v) in reps_hist.iter_mut().zip(part) {
            *t += v;
        }
    }
    // carried[j * m + k]: group elements that carry mode j to mode k.
    let order = sector.order();
    let mut carried = vec![0u64; m * m];
    for h in 0..order {
        for (j, &k) in sector.element_images(h).iter().enumerate() {
            carried[j * m + k] += 1;
        }
    }
    let cutoffs = space.cutoffs();
    let mut total = crate::memory::try_filled(size, 0.0f64, "the occupation distributions")?;
    for j in 0..m {
        for k in 0..m {
            let c = carried[j * m + k];
            if c == 0 {
                continue;
            }
            let f = c as f64 / order as f64;
            // The group maps the space to itself, so modes it connects have equal cutoffs.
            for n in 0..=cutoffs[j].min(cutoffs[k]) as usize {
                total[starts[k] + n] += f * reps_hist[starts[j] + n];
            }
        }
    }
    Ok(total)
}

fn check_len(space: &FockSpace, len: usize) -> CoreResult<()> {
    if len as u64 != space.dim() {
        return Err(CoreError::Shape(format!(
            "state vector has length {len} but the space has dim {}; pass a vector of the \
             space's dimension",
            space.dim()
        )));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::NoInterrupt;

    #[test]
    fn populations_of_a_basis_state() {
        let space = FockSpace::new(vec![2, 2, 2], None, Some(3), None).unwrap();
        let k = space.rank(&[1, 0, 2]).unwrap() as usize;
        let mut psi = vec![0.0f64; space.dim() as usize];
        psi[k] = 1.0;
        let r = Runner::global();
        let mons = vec![
            vec![(0, 1, 1)],
            vec![(1, 1, 1)],
            vec![(2, 1, 1)],
            vec![(0, 1, 0), (2, 0, 1)],
        ];
        let e = monomial_expectations(&space, &mons, &psi, &r, &NoInterrupt).unwrap();
        assert_eq!(
            e.iter().map(|z| z.re).collect::<Vec<_>>(),
            vec![1.0, 0.0, 2.0, 0.0]
        );
        let h = occupation_distributions(&space, &psi, &r, &NoInterrupt).unwrap();
        assert_eq!(h, vec![0.0, 1.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0]);
        let ranks = ranks(&space, &[1, 0, 2, 1, 1, 1, -1, 0, 0], &r).unwrap();
        assert_eq!(ranks, vec![k as i64, space.rank(&[1, 1, 1]).unwrap() as i64, -1]);
    }

    #[test]
    fn sector_distributions_equal_those_of_the_expanded_state() {
        // Reference: the distributions of the state expanded into the base space (a
        // direct sum over base states, common practice, no source). A ring of 5 sites,
        // cutoff 2, 5 quanta; translations with each momentum label, and with a
        // reflection (labels 0 and 1); a complex and a real state.
        use crate::symmetry::Generator;
        let base = FockSpace::new(vec![2; 5], None, Some(5), None).unwrap();
        let shift: Vec<usize> = (0..5).map(|i| (i + 1) % 5).collect();
        let mirror: Vec<usize> = (0..5).map(|i| 4 - i).collect();
        let r = Runner::global();
        let mut cases: Vec<Vec<Generator>> = (0..5)
            .map(|q| {
                vec![Generator {
                    images: shift.clone(),
                    label: q,
                }]
            })
            .collect();
        for p in 0..2 {
            cases.push(vec![
                Generator {
                    images: shift.clone(),
                    label: 0,
                },
                Generator {
                    images: mirror.clone(),
                    label: p,
                },
            ]);
        }
        for gens in cases {
            let sector = SymmetricSpace::new(base.clone(), &gens, &r, &NoInterrupt).unwrap();
            let d = sector.dim() as usize;
            assert!(d > 0);
            let v: Vec<Complex64> = (0..d)
                .map(|i| Complex64::new((i as f64 * 0.7).sin() + 0.3, (i as f64 * 1.3).cos()))
                .collect();
            let mut w = vec![Complex64::new(0.0, 0.0); base.dim() as usize];
            sector.expand(&v, &mut w, &r, &NoInterrupt).unwrap();
            let want = occupation_distributions(&base, &w, &r, &NoInterrupt).unwrap();
            let got = sector_occupation_distributions(&sector, &v, &r, &NoInterrupt).unwrap();
            assert_eq!(got.len(), want.len());
            for (a, b) in got.iter().zip(&want) {
                assert!((a - b).abs() < 1e-12, "{got:?} != {want:?}");
            }
        }
        let sector = SymmetricSpace::new(base.clone(), &[], &r, &NoInterrupt);
        if let Ok(sector) = sector {
            let v = vec![1.0f64; sector.dim() as usize];
            let got = sector_occupation_distributions(&sector, &v, &r, &NoInterrupt).unwrap();
            let want = occupation_distributions(&base, &v, &r, &NoInterrupt).unwrap();
            assert_eq!(got, want);
        }
        assert!(matches!(
            sector_occupation_distributions(
                &SymmetricSpace::new(base.clone(), &cases_first(&shift), &r, &NoInterrupt).unwrap(),
                &[0.0f64; 1],
                &r,
                &NoInterrupt
            ),
            Err(CoreError::Shape(_))
        ));
    }

    fn cases_first(shift: &[usize]) -> Vec<crate::symmetry::Generator> {
        vec![crate::symmetry::Generator {
            images: shift.to_vec(),
            label: 0,
        }]
    }
}
