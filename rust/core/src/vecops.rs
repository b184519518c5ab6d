//! Parallel vector kernels with a fixed reduction order, so that results are the same
//! for every thread count (the Lanczos rebuild pass relies on that).

use crate::scalar::Scalar;
use rayon::prelude::*;

/// Elements per reduction chunk; partial sums are added in chunk order.
const CHUNK: usize = 1 << 14;

/// Real part of `⟨x, y⟩ = Σ conj(x_i) y_i`.
pub fn dot_re<S: Scalar>(x: &[S], y: &[S]) -> f64 {
    let parts: Vec<f64> = x
        .par_chunks(CHUNK)
        .zip(y.par_chunks(CHUNK))
        .map(|(a, b)| a.iter().zip(b).map(|(&p, &q)| (p.conj() * q).re()).sum())
        .collect();
    parts.iter().sum()
}

/// Euclidean norm.
pub fn norm<S: Scalar>(x: &[S]) -> f64 {
    let parts: Vec<f64> = x
        .par_chunks(CHUNK)
        .map(|a| a.iter().map(|v| v.norm_sqr()).sum())
        .collect();
    parts.iter().sum::<f64>().sqrt()
}

/// `y += a x` for real `a`.
pub fn axpy<S: Scalar>(a: f64, x: &[S], y: &mut [S]) {
    y.par_chunks_mut(CHUNK)
        .zip(x.par_chunks(CHUNK))
        .for_each(|(ys, xs)| ys.iter_mut().zip(xs).for_each(|(yv, &xv)| *yv += xv.scale(a)));
}

/// `x *= a` for real `a`.
pub fn scale<S: Scalar>(a: f64, x: &mut [S]) {
    x.par_chunks_mut(CHUNK)
        .for_each(|xs| xs.iter_mut().for_each(|v| *v = v.scale(a)));
}

/// `w = w − a x − b z` for real `a`, `b` (one pass over memory).
pub fn sub2<S: Scalar>(w: &mut [S], a: f64, x: &[S], b: f64, z: &[S]) {
    w.par_chunks_mut(CHUNK)
        .zip(x.par_chunks(CHUNK))
        .zip(z.par_chunks(CHUNK))
        .for_each(|((ws, xs), zs)| {
            for ((wv, &xv), &zv) in ws.iter_mut().zip(xs).zip(zs) {
                *wv = *wv - xv.scale(a) - zv.scale(b);
            }
        });
}

/// Copy `src` into `dst`.
pub fn copy<S: Scalar>(src: &[S], dst: &mut [S]) {
    dst.par_chunks_mut(CHUNK)
        .zip(src.par_chunks(CHUNK))
        .for_each(|(d, s)| d.copy_from_slice(s));
}

/// Set every element to zero.
pub fn zero<S: Scalar>(x: &mut [S]) {
    x.par_chunks_mut(CHUNK).for_each(|xs| xs.fill(S::ZERO));
}

/// A reproducible pseudo-random vector with entries in `[-0.5, 0.5)`, element `i`
/// depending only on `seed` and `i` (SplitMix64 of the pair).
pub fn seeded_vector<S: Scalar>(seed: u64, dim: usize) -> Vec<S> {
    (0..dim)
        .into_par_iter()
        .map(|i| {
            let z = splitmix64(seed ^ splitmix64(i as u64));
            let u = (z >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
            S::from_parts(u, 0.0).expect("real parts are valid for every element type")
        })
        .collect()
}

/// Fill `out` in place with the same reproducible entries as [`seeded_vector`]
/// (element `i` depends only on `seed` and `i`), without allocating.
pub fn fill_seeded<S: Scalar>(seed: u64, out: &mut [S]) {
    out.par_chunks_mut(CHUNK).enumerate().for_each(|(c, xs)| {
        for (o, x) in xs.iter_mut().enumerate() {
            let i = (c * CHUNK + o) as u64;
            let z = splitmix64(seed ^ splitmix64(i));
            let u = (z >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
            *x = S::from_parts(u, 0.0).expect("real parts are valid for every element type");
        }
    });
}

/// Weight of the seeded noise mixed into a caller's start vector (relative to its
/// norm): enough that every symmetry sector has weight in the Krylov space, small
/// enough to keep most of a warm start's advantage.
pub const START_NOISE: f64 = 1e-4;

/// Normalise `v`, add [`START_NOISE`] times a unit seeded noise vector (drawn into
/// `scratch`, same length) and normalise again. Returns `false` (and leaves `v`
/// unnormalised) when `v` is zero.
pub fn mix_start_noise<S: Scalar>(v: &mut [S], scratch: &mut [S], seed: u64) -> bool {
    let nv = norm(v);
    if nv == 0.0 {
        return false;
    }
    fill_seeded(seed ^ 0x6E01_5E00_D15E_A5E5, scratch);
    let ng = norm(scratch);
    scale(1.0 / nv, v);
    if ng > 0.0 {
        axpy(START_NOISE / ng, scratch, v);
    }
    let n = norm(v);
    scale(1.0 / n, v);
    true
}

/// SplitMix64 finaliser (Steele, Lea & Flood 2014).
pub fn splitmix64(x: u64) -> u64 {
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}
