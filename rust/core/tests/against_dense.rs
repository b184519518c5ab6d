//! Integration tests: the CSR build, the fast product and the Lanczos solver against an
//! independent dense reference (brute-force enumeration, direct ladder-operator action),
//! on boundary cases: cutoff 1, one mode, total 0, the maximal total, zero weights,
//! parity sectors and forced 64-bit indices.

use fockmill_core::build::{build_csr, Csr, CsrAny, CsrIndex};
use fockmill_core::lanczos::{ground_state, FockMap, LanczosOptions};
use fockmill_core::matvec::apply;
use fockmill_core::{Charge, FockSpace, NoInterrupt, Operator, RawTerm, Runner};

/// Every occupation tuple of the sector, in lexicographic order (mode 0 first).
fn enumerate(cutoffs: &[u32], weights: &[u32], total: Option<u64>, modulus: Option<u64>) -> Vec<Vec<u32>> {
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
        let mut i = cutoffs.len();
        loop {
            if i == 0 {
                return out;
            }
            i -= 1;
            if occ[i] < cutoffs[i] {
                occ[i] += 1;
                occ.iter_mut().skip(i + 1).for_each(|o| *o = 0);
                break;
            }
        }
    }
}

/// ⟨target| c Π (a†)^p a^q |state⟩ by direct action: a^q first, then (a†)^p.
fn act(term: &RawTerm, state: &[u32], cutoffs: &[u32]) -> Option<(Vec<u32>, f64)> {
    let mut out = state.to_vec();
    let mut amp = 1.0f64;
    for &(mode, p, q) in &term.factors {
        for _ in 0..q {
            if out[mode] == 0 {
                return None;
            }
            amp *= (out[mode] as f64).sqrt();
            out[mode] -= 1;
        }
        for _ in 0..p {
            out[mode] += 1;
            amp *= (out[mode] as f64).sqrt();
        }
        if out[mode] > cutoffs[mode] {
            return None;
        }
    }
    Some((out, amp * term.re))
}

fn dense(states: &[Vec<u32>], terms: &[RawTerm], cutoffs: &[u32]) -> Vec<Vec<f64>> {
    let n = states.len();
    let mut h = vec![vec![0.0; n]; n];
    for (c, s) in states.iter().enumerate() {
        for t in terms {
            if let Some((target, v)) = act(t, s, cutoffs) {
                let r = states
                    .iter()
                    .position(|x| *x == target)
                    .expect("conserving terms stay in the sector");
                h[r][c] += v;
            }
        }
    }
    h
}

fn to_dense<I: CsrIndex>(csr: &Csr<f64, I>) -> Vec<Vec<f64>> {
    let n = csr.dim as usize;
    let mut h = vec![vec![0.0; n]; n];
    for (r, row) in h.iter_mut().enumerate() {
        let (a, b) = (
            csr.indptr[r].to_u64() as usize,
            csr.indptr[r + 1].to_u64() as usize,
        );
        for e in a..b {
            row[csr.indices[e].to_u64() as usize] = csr.data[e];
        }
    }
    h
}

fn check(cutoffs: &[u32], weights: &[u32], total: Option<u64>, modulus: Option<u64>, terms: &[RawTerm]) {
    let states = enumerate(cutoffs, weights, total, modulus);
    let space = FockSpace::new(cutoffs.to_vec(), Some(weights.to_vec()), total, modulus).unwrap();
    check_on(&space, &states, cutoffs, terms);
}

/// [`check`] on a space fixing several charges: the states are those of the full
/// product space that keep every charge.
fn check_charges(cutoffs: &[u32], charges: &[Charge], terms: &[RawTerm]) {
    let states: Vec<Vec<u32>> = enumerate(cutoffs, &vec![0; cutoffs.len()], None, None)
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
        .collect();
    let space = FockSpace::with_charges(cutoffs.to_vec(), charges.to_vec()).unwrap();
    check_on(&space, &states, cutoffs, terms);
}

fn check_on(space: &FockSpace, states: &[Vec<u32>], cutoffs: &[u32], terms: &[RawTerm]) {
    let space = space.clone();
    assert_eq!(space.dim() as usize, states.len());
    let op = Operator::<f64>::new(&space, terms).unwrap();
    let expected = dense(states, terms, cutoffs);
    for threads in [1, 2] {
        let runner = Runner::with_threads(Some(threads)).unwrap();
        for wide in [false, true] {
            let got = match build_csr(&space, &op, &runner, &NoInterrupt, wide).unwrap() {
                CsrAny::Narrow(c) => {
                    assert!(!wide);
                    to_dense(&c)
                }
                CsrAny::Wide(c) => {
                    assert!(wide);
                    to_dense(&c)
                }
            };
            for (r, (g, e)) in got.iter().zip(&expected).enumerate() {
                for (c, (a, b)) in g.iter().zip(e).enumerate() {
                    assert!((a - b).abs() < 1e-12, "entry ({r},{c}): {a} vs {b}");
                }
            }
        }
        let x: Vec<f64> = (0..states.len()).map(|i| (i as f64 * 0.37).sin()).collect();
        let mut y = vec![0.0; states.len()];
        apply(&space, &op, &x, &mut y, &runner, &NoInterrupt).unwrap();
        for (r, row) in expected.iter().enumerate() {
            let want: f64 = row.iter().zip(&x).map(|(a, b)| a * b).sum();
            assert!((want - y[r]).abs() < 1e-10, "row {r}: {want} vs {}", y[r]);
        }
    }
}

fn hop(i: usize, j: usize, t: f64) -> [RawTerm; 2] {
    let (a, b) = if i < j { (i, j) } else { (j, i) };
    [
        RawTerm::new(-t, 0.0, vec![(a, 1, 0), (b, 0, 1)]),
        RawTerm::new(-t, 0.0, vec![(a, 0, 1), (b, 1, 0)]),
    ]
}

fn ring(l: usize, u: f64) -> Vec<RawTerm> {
    let mut t = Vec::new();
    for i in 0..l {
        t.extend(hop(i, (i + 1) % l, 1.0));
        t.push(RawTerm::new(u / 2.0, 0.0, vec![(i, 2, 2)]));
    }
    t
}

#[test]
fn bose_hubbard_sectors() {
    check(&[4; 4], &[1; 4], Some(4), None, &ring(4, 3.0));
    check(&[2; 5], &[1; 5], Some(5), None, &ring(5, 1.5)); // cutoff below the total
    check(&[3; 3], &[1; 3], None, None, &ring(3, 0.7)); // full truncated space
}

#[test]
fn hard_core_bosons_cutoff_one() {
    check(&[1; 6], &[1; 6], Some(3), None, &ring(6, 0.0));
}

#[test]
fn single_mode_and_extreme_totals() {
    // One mode: a Kerr oscillator with a constant.
    let kerr = vec![
        RawTerm::new(2.0, 0.0, vec![(0, 1, 1)]),
        RawTerm::new(0.25, 0.0, vec![(0, 2, 2)]),
        RawTerm::new(-1.0, 0.0, vec![]),
    ];
    check(&[7], &[1], None, None, &kerr);
    check(&[7], &[1], Some(3), None, &kerr);
    // Total 0 and the maximal total: one state each.
    check(&[3; 3], &[1; 3], Some(0), None, &ring(3, 1.0));
    check(&[3; 3], &[1; 3], Some(9), None, &ring(3, 1.0));
}

#[test]
fn weighted_and_parity_sectors() {
    // Cavity (weight 1) coupled to an emitter (weight 1) and a spectator mode of weight 0.
    let mut terms = vec![
        RawTerm::new(1.0, 0.0, vec![(0, 1, 1)]),
        RawTerm::new(0.5, 0.0, vec![(2, 1, 1)]),
    ];
    terms.extend(hop(0, 1, 0.3));
    terms.push(RawTerm::new(0.2, 0.0, vec![(2, 1, 0)]));
    terms.push(RawTerm::new(0.2, 0.0, vec![(2, 0, 1)]));
    check(&[4, 1, 3], &[1, 1, 0], Some(2), None, &terms);
    // Two-photon drive keeps parity.
    let squeeze = vec![
        RawTerm::new(1.0, 0.0, vec![(0, 1, 1)]),
        RawTerm::new(0.3, 0.0, vec![(0, 2, 0)]),
        RawTerm::new(0.3, 0.0, vec![(0, 0, 2)]),
        RawTerm::new(0.1, 0.0, vec![(0, 1, 0), (1, 1, 0)]),
        RawTerm::new(0.1, 0.0, vec![(0, 0, 1), (1, 0, 1)]),
    ];
    check(&[6, 5], &[1, 1], Some(0), Some(2), &squeeze);
    check(&[6, 5], &[1, 1], Some(1), Some(2), &squeeze);
    // Weights 2 and 1: a pair on mode 1 converts to one quantum of mode 0.
    let convert = vec![
        RawTerm::new(0.4, 0.0, vec![(0, 1, 0), (1, 0, 2)]),
        RawTerm::new(0.4, 0.0, vec![(0, 0, 1), (1, 2, 0)]),
    ];
    check(&[3, 6], &[2, 1], Some(6), None, &convert);
}

#[test]
fn long_range_and_multi_mode_terms() {
    let terms = vec![
        RawTerm::new(0.7, 0.0, vec![(0, 1, 0), (4, 0, 1)]),
        RawTerm::new(0.7, 0.0, vec![(0, 0, 1), (4, 1, 0)]),
        RawTerm::new(0.3, 0.0, vec![(1, 1, 1), (3, 1, 1)]),
        RawTerm::new(0.2, 0.0, vec![(0, 1, 0), (2, 1, 0), (1, 0, 1), (4, 0, 1)]),
        RawTerm::new(0.2, 0.0, vec![(0, 0, 1), (2, 0, 1), (1, 1, 0), (4, 1, 0)]),
        RawTerm::new(0.1, 0.0, vec![(1, 2, 0), (3, 0, 2)]),
        RawTerm::new(0.1, 0.0, vec![(1, 0, 2), (3, 2, 0)]),
    ];
    check(&[2, 3, 2, 3, 2], &[1; 5], Some(4), None, &terms);
}

#[test]
fn lanczos_matches_dense_ground_energy() {
    // Two-site Bose–Hubbard with two bosons: E0 = U/2 − sqrt(U²/4 + 4J²)
    // (common practice, no source; J = 1, U = 3 here).
    let space = FockSpace::new(vec![2, 2], None, Some(2), None).unwrap();
    let mut terms = hop(0, 1, 1.0).to_vec();
    terms.push(RawTerm::new(1.5, 0.0, vec![(0, 2, 2)]));
    terms.push(RawTerm::new(1.5, 0.0, vec![(1, 2, 2)]));
    let op = Operator::<f64>::new(&space, &terms).unwrap();
    let out = ground_state(
        &FockMap::new(&space, &op),
        None,
        &LanczosOptions::default(),
        &Runner::global(),
        &NoInterrupt,
    )
    .unwrap();
    let exact = 1.5 - (2.25f64 + 4.0).sqrt();
    assert!((out.energy - exact).abs() < 1e-12, "{} vs {exact}", out.energy);
}

/// Normal-ordered `a_c1† … a_a1 …` as a raw term (modes may repeat).
fn monomial(coef: f64, creators: &[usize], annihilators: &[usize]) -> RawTerm {
    let mut factors: Vec<(usize, u32, u32)> = Vec::new();
    for (list, is_creator) in [(creators, true), (annihilators, false)] {
        for &mode in list {
            let slot = match factors.iter().position(|f| f.0 == mode) {
                Some(k) => k,
                None => {
                    factors.push((mode, 0, 0));
                    factors.len() - 1
                }
            };
            if is_creator {
                factors[slot].1 += 1;
            } else {
                factors[slot].2 += 1;
            }
        }
    }
    factors.sort_unstable();
    RawTerm::new(coef, 0.0, factors)
}

/// Pseudo-random numbers in [−0.5, 0.5) from a linear congruential generator
/// (Knuth's MMIX constants): reproducible coefficients without a dependency.
fn uniform_draws(seed: u64) -> impl FnMut() -> f64 {
    let mut state = seed;
    move || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((state >> 11) as f64 / (1u64 << 53) as f64) - 0.5
    }
}

/// All-to-all one- and two-body terms with pseudo-random real coefficients, Hermitian
/// (each term with its adjoint), repeated indices included: far more terms than modes,
/// so the product indexes them by the quanta they remove.
fn all_to_all(m: usize, seed: u64) -> Vec<RawTerm> {
    let mut draw = uniform_draws(seed);
    let mut terms = Vec::new();
    for i in 0..m {
        for j in 0..m {
            let t = draw();
            terms.push(monomial(t, &[i], &[j]));
            terms.push(monomial(t, &[j], &[i]));
        }
    }
    for i in 0..m {
        for j in 0..m {
            for k in 0..m {
                for l in 0..m {
                    if (i + 2 * j + 3 * k + 5 * l) % 3 == 0 {
                        let v = draw();
                        terms.push(monomial(v, &[i, j], &[k, l]));
                        terms.push(monomial(v, &[l, k], &[j, i]));
                    }
                }
            }
        }
    }
    terms
}

#[test]
fn many_terms_indexed_by_removed_quanta() {
    use fockmill_core::kernel::ProductKernel;
    let terms = all_to_all(5, 7);
    // Number-conserving sectors, with cutoffs below and above the total.
    for (cutoffs, total) in [([3u32; 5], 3u64), ([1; 5], 2), ([2, 3, 1, 4, 2], 4)] {
        let space = FockSpace::new(cutoffs.to_vec(), None, Some(total), None).unwrap();
        let op = Operator::<f64>::new(&space, &terms).unwrap();
        assert!(ProductKernel::new(&space, &op).indexes_terms());
        check(&cutoffs, &[1; 5], Some(total), None, &terms);
    }
    // Pairs only: terms that change the number by two, kept by a parity sector and
    // the whole truncated space.
    let mut pairs = terms.clone();
    for i in 0..5 {
        for j in 0..5 {
            pairs.push(monomial(0.1 * (i + j) as f64 + 0.05, &[i, j], &[]));
            pairs.push(monomial(0.1 * (i + j) as f64 + 0.05, &[], &[j, i]));
        }
    }
    check(&[2; 5], &[1; 5], Some(0), Some(2), &pairs);
    check(&[2; 5], &[1; 5], None, None, &terms);
}

#[test]
fn many_terms_with_weighted_charge() {
    // Orbitals of angular momentum m with the charge Σ m n_m conserved: two-body terms
    // keeping m1 + m2 = m3 + m4 (a lowest-Landau-level-like interaction).
    let m = 6;
    let mut terms = Vec::new();
    for i in 0..m {
        for j in 0..m {
            for k in 0..m {
                for l in 0..m {
                    if i + j == k + l {
                        let v = 1.0 / (1.0 + (i * j + k * l) as f64);
                        terms.push(monomial(v, &[i, j], &[k, l]));
                    }
                }
            }
        }
    }
    for i in 0..m {
        terms.push(monomial(0.3 * i as f64, &[i], &[i]));
    }
    let weights: Vec<u32> = (0..m as u32).collect();
    check(&[3; 6], &weights, Some(6), None, &terms);
    check(&[2; 6], &weights, Some(5), None, &terms);
}

fn exact(weights: Vec<u32>, total: u64) -> Charge {
    Charge {
        weights,
        total,
        modulus: None,
    }
}

/// Momentum-space pair interaction Σ a†_{k+q} a†_{p−q} a_p a_k on a ring of `l`
/// momenta (indices mod l) plus a dispersion: every term keeps the number and the
/// momentum modulo l.
fn momentum_ring(l: usize, u: f64) -> Vec<RawTerm> {
    let mut terms = Vec::new();
    for k in 0..l {
        let eps = -2.0 * (2.0 * std::f64::consts::PI * k as f64 / l as f64).cos();
        terms.push(monomial(eps, &[k], &[k]));
        for p in 0..l {
            for q in 0..l {
                terms.push(monomial(
                    u / (2.0 * l as f64),
                    &[(k + q) % l, (p + l - q) % l],
                    &[p, k],
                ));
            }
        }
    }
    terms
}

#[test]
fn several_charges_number_and_momentum() {
    use fockmill_core::kernel::ProductKernel;
    for (l, n) in [(4usize, 3u64), (5, 3), (3, 4)] {
        let terms = momentum_ring(l, 1.3);
        let ks: Vec<u32> = (0..l as u32).collect();
        for k in 0..l as u64 {
            let charges = [
                exact(vec![1; l], n),
                Charge {
                    weights: ks.clone(),
                    total: k,
                    modulus: Some(l as u64),
                },
            ];
            let space = FockSpace::with_charges(vec![n as u32; l], charges.to_vec()).unwrap();
            let op = Operator::<f64>::new(&space, &terms).unwrap();
            // Merged, the pair terms outnumber 8 L (the index threshold) from L = 5 on.
            assert_eq!(ProductKernel::new(&space, &op).indexes_terms(), op.len() >= 8 * l);
            check_charges(&vec![n as u32; l], &charges, &terms);
        }
    }
}

#[test]
fn several_exact_charges_two_species_and_angular_momentum() {
    // Two species on a 3-site chain (modes 0..3: A, 3..6: B): hops within each
    // species, on-site repulsion and an A-B density coupling.
    let mut terms = Vec::new();
    for s in [0, 3] {
        for i in 0..2 {
            terms.extend(hop(s + i, s + i + 1, 0.8 + 0.1 * s as f64));
        }
        for i in 0..3 {
            terms.push(monomial(0.6 + 0.2 * i as f64, &[s + i, s + i], &[s + i, s + i]));
        }
    }
    for i in 0..3 {
        terms.push(RawTerm::new(0.45, 0.0, vec![(i, 1, 1), (i + 3, 1, 1)]));
    }
    for (na, nb) in [(2u64, 1u64), (2, 2), (0, 3), (3, 3)] {
        check_charges(
            &[3; 6],
            &[
                exact(vec![1, 1, 1, 0, 0, 0], na),
                exact(vec![0, 0, 0, 1, 1, 1], nb),
            ],
            &terms,
        );
    }
    // The number and the angular momentum Σ m n_m both fixed (all exact: the packed
    // residue path), many two-body terms.
    let m = 6;
    let mut lll = Vec::new();
    for i in 0..m {
        for j in 0..m {
            for k in 0..m {
                for l in 0..m {
                    if i + j == k + l {
                        lll.push(monomial(1.0 / (1.0 + (i * j + k * l) as f64), &[i, j], &[k, l]));
                    }
                }
            }
        }
    }
    let weights: Vec<u32> = (0..m as u32).collect();
    for (n, lz) in [(3u64, 6u64), (4, 5), (2, 4)] {
        check_charges(&[4; 6], &[exact(vec![1; 6], n), exact(weights.clone(), lz)], &lll);
    }
}

/// `Σ_ij t_ij a_i† a_j` with pseudo-random Hermitian `t` (complex off the diagonal when
/// `complex`), every pair of modes coupled.
fn quadratic_form(m: usize, seed: u64, complex: bool) -> Vec<RawTerm> {
    let mut draw = uniform_draws(seed);
    let mut terms = Vec::new();
    for i in 0..m {
        terms.push(monomial(draw(), &[i], &[i]));
        for j in i + 1..m {
            let (re, im) = (draw(), if complex { draw() } else { 0.0 });
            let mut ij = monomial(re, &[i], &[j]);
            ij = RawTerm::new(re, im, ij.factors.clone());
            let ji = RawTerm::new(re, -im, monomial(re, &[j], &[i]).factors);
            terms.push(ij);
            terms.push(ji);
        }
    }
    terms
}

#[test]
#[allow(clippy::needless_range_loop)]
fn quadratic_forms_gather_hops_by_intermediate_state() {
    use fockmill_core::kernel::ProductKernel;
    use num_complex::Complex64;
    // Real: against the dense reference (the gathered product, every thread count).
    for (cutoffs, total) in [(vec![3u32; 12], 3u64), (vec![1; 12], 3), (vec![2; 12], 4)] {
        let terms = quadratic_form(12, 11, false);
        let space = FockSpace::new(cutoffs.clone(), None, Some(total), None).unwrap();
        let op = Operator::<f64>::new(&space, &terms).unwrap();
        assert!(
            ProductKernel::new(&space, &op).gathers_hops(),
            "{cutoffs:?} {total}"
        );
        check(&cutoffs, &[1; 12], Some(total), None, &terms);
    }
    // Complex: the gathered product against the product with the built matrix (whose
    // entries come from the per-term path), bit-identical for 1 and 2 threads.
    let terms = quadratic_form(10, 5, true);
    let space = FockSpace::new(vec![3; 10], None, Some(3), None).unwrap();
    let op = Operator::<Complex64>::new(&space, &terms).unwrap();
    assert!(ProductKernel::new(&space, &op).gathers_hops());
    let dim = space.dim() as usize;
    let x: Vec<Complex64> = (0..dim)
        .map(|i| Complex64::new((i as f64 * 0.37).sin(), (i as f64 * 0.11).cos()))
        .collect();
    let mut first: Option<Vec<Complex64>> = None;
    for threads in [1, 2] {
        let runner = Runner::with_threads(Some(threads)).unwrap();
        let mut y = vec![Complex64::new(0.0, 0.0); dim];
        apply(&space, &op, &x, &mut y, &runner, &NoInterrupt).unwrap();
        let csr = match build_csr(&space, &op, &runner, &NoInterrupt, false).unwrap() {
            CsrAny::Narrow(c) => c,
            CsrAny::Wide(_) => panic!("small matrix must use narrow indices"),
        };
        for r in 0..dim {
            let (a, b) = (csr.indptr[r] as usize, csr.indptr[r + 1] as usize);
            let want: Complex64 = (a..b).map(|e| csr.data[e] * x[csr.indices[e] as usize]).sum();
            assert!((want - y[r]).norm() < 1e-12, "row {r}: {want} vs {}", y[r]);
        }
        match &first {
            None => first = Some(y),
            Some(y1) => assert!(y1 == &y, "the product depends on the thread count"),
        }
    }
}
