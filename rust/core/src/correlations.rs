//! Density–density correlations `⟨n_i n_j⟩` of a state, for every pair of modes at once,
//! in one pass over the basis.
//!
//! Every basis state is an eigenstate of every number operator, so
//! `⟨ψ| n_i n_j |ψ⟩ = Σ_states |ψ_s|² n_i(s) n_j(s)`: no operator is applied, and the
//! diagonal gives `⟨n_i²⟩`.

use crate::error::{CoreError, CoreResult};
use crate::memory::try_filled;
use crate::parallel::{Interrupt, Runner, BLOCK_ROWS};
use crate::scalar::Scalar;
use crate::space::FockSpace;
use crate::terms::RowState;

/// Upper bound on the partial sums held at once (in `f64` entries), so that many modes
/// do not make the per-block partial triangles outgrow memory.
const PARTIAL_ENTRIES: usize = 1 << 24;

/// Index of `(i, j)`, `i <= j`, in a row-major upper triangle of an `m × m` matrix.
fn triangle_index(m: usize, i: usize, j: usize) -> usize {
    i * m - i * (i + 1) / 2 + j
}

/// `Σ_s |ψ_s|² n_i(s) n_j(s)` for all modes `i, j`: a row-major `modes × modes`
/// symmetric matrix, not normalised (divide by `‖ψ‖²`).
///
/// Rows are summed in fixed blocks and the blocks added in order, so the result is
/// bit-identical for any thread count.
///
/// # Errors
/// [`CoreError::Shape`] when `psi` does not have the space's dimension;
/// [`CoreError::TooLarge`] when the result or the partial sums do not fit in memory;
/// [`CoreError::Interrupted`] when `interrupt` fires.
pub fn density_correlations<S: Scalar>(
    space: &FockSpace,
    psi: &[S],
    runner: &Runner,
    interrupt: &dyn Interrupt,
) -> CoreResult<Vec<f64>> {
    if psi.len() as u64 != space.dim() {
        return Err(CoreError::Shape(format!(
            "state vector has length {} but the space has dim {}; pass a vector of the \
             space's dimension",
            psi.len(),
            space.dim()
        )));
    }
    let m = space.modes();
    let triangle = m * (m + 1) / 2;
    let mut total = try_filled(triangle, 0.0f64, "density correlation matrix")?;
    let blocks_per_group = (PARTIAL_ENTRIES / triangle.max(1)).clamp(1, 256) as u64;
    let group_rows = blocks_per_group * BLOCK_ROWS;
    let dim = space.dim();
    let mut start = 0u64;
    while start < dim {
        let rows_here = group_rows.min(dim - start);
        let parts = runner.map_blocks(rows_here, interrupt, |first, rows| {
            let mut acc = try_filled(triangle, 0.0f64, "density correlation partial sums")?;
            let mut occupied: Vec<(usize, f64)> = Vec::with_capacity(m);
            let mut row = RowState::at(space, start + first)?;
            for r in 0..rows {
                if r > 0 {
                    row.advance(space);
                }
                let w = psi[row.rank as usize].norm_sqr();
                if w == 0.0 {
                    continue;
                }
                occupied.clear();
                occupied.extend(
                    row.occ
                        .iter()
                        .enumerate()
                        .filter(|&(_, &n)| n > 0)
                        .map(|(i, &n)| (i, f64::from(n))),
                );
                for (a, &(i, ni)) in occupied.iter().enumerate() {
                    let wi = w * ni;
                    for &(j, nj) in &occupied[a..] {
                        acc[triangle_index(m, i, j)] += wi * nj;
                    }
                }
            }
            Ok(acc)
        })?;
        for part in parts {
            for (t, v) in total.iter_mut().zip(part) {
                *t += v;
            }
        }
        start += rows_here;
    }
    let mut full = try_filled(m * m, 0.0f64, "density correlation matrix")?;
    for i in 0..m {
        for j in i..m {
            let v = total[triangle_index(m, i, j)];
            full[i * m + j] = v;
            full[j * m + i] = v;
        }
    }
    Ok(full)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::NoInterrupt;

    #[test]
    fn basis_state_gives_products_of_occupations() {
        // |1, 0, 2⟩: ⟨n_i n_j⟩ = n_i n_j exactly (number states; common practice, no source).
        let space = FockSpace::new(vec![2, 2, 2], None, Some(3), None).unwrap();
        let k = space.rank(&[1, 0, 2]).unwrap() as usize;
        let mut psi = vec![0.0f64; space.dim() as usize];
        psi[k] = 1.0;
        let c = density_correlations(&space, &psi, &Runner::global(), &NoInterrupt).unwrap();
        assert_eq!(c, vec![1.0, 0.0, 2.0, 0.0, 0.0, 0.0, 2.0, 0.0, 4.0]);
    }

    #[test]
    fn superposition_against_hand_sum_and_thread_counts() {
        let space = FockSpace::new(vec![3, 3, 3, 3], None, Some(4), None).unwrap();
        let dim = space.dim() as usize;
        let psi: Vec<f64> = (0..dim).map(|s| ((s * 7 + 3) % 11) as f64 - 5.0).collect();
        let mut expected = vec![0.0; 16];
        let mut occ = vec![0u32; 4];
        let mut residues = vec![0usize; 4];
        for (s, amp) in psi.iter().enumerate() {
            space.unrank_into(s as u64, &mut occ, &mut residues).unwrap();
            for i in 0..4 {
                for j in 0..4 {
                    expected[i * 4 + j] += amp * amp * f64::from(occ[i] * occ[j]);
                }
            }
        }
        let one = Runner::with_threads(Some(1)).unwrap();
        let two = Runner::with_threads(Some(2)).unwrap();
        let a = density_correlations(&space, &psi, &one, &NoInterrupt).unwrap();
        let b = density_correlations(&space, &psi, &two, &NoInterrupt).unwrap();
        assert_eq!(a, b);
        for (x, y) in a.iter().zip(&expected) {
            assert!((x - y).abs() <= 1e-9 * y.abs().max(1.0), "{x} vs {y}");
        }
    }

    #[test]
    fn wrong_length_is_refused() {
        let space = FockSpace::new(vec![1, 1], None, None, None).unwrap();
        let e = density_correlations(&space, &[1.0f64], &Runner::global(), &NoInterrupt);
        assert!(matches!(e, Err(CoreError::Shape(_))));
    }
}
