//! Lowest eigenpair of a real symmetric tridiagonal matrix: Sturm-sequence bisection
//! for the eigenvalue, inverse iteration for the eigenvector.

/// Number of eigenvalues of `T` strictly below `x` (Sturm count).
fn count_below(alpha: &[f64], beta: &[f64], x: f64) -> usize {
    let tiny = f64::MIN_POSITIVE.sqrt();
    let mut count = 0;
    let mut d = 1.0f64;
    for i in 0..alpha.len() {
        let off = if i == 0 {
            0.0
        } else {
            beta[i - 1] * beta[i - 1] / d
        };
        d = alpha[i] - x - off;
        if d == 0.0 {
            d = -tiny;
        }
        if d < 0.0 {
            count += 1;
        }
    }
    count
}

/// The `k`-th smallest eigenvalue (0-based) of the tridiagonal matrix with diagonal
/// `alpha` and off-diagonal `beta` (`beta.len() + 1 == alpha.len()`).
pub fn eigenvalue(alpha: &[f64], beta: &[f64], k: usize) -> f64 {
    let n = alpha.len();
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for i in 0..n {
        let r = if i > 0 { beta[i - 1].abs() } else { 0.0 } + if i + 1 < n { beta[i].abs() } else { 0.0 };
        lo = lo.min(alpha[i] - r);
        hi = hi.max(alpha[i] + r);
    }
    let span = (hi - lo).max(f64::MIN_POSITIVE);
    lo -= 1e-12 * span;
    hi += 1e-12 * span;
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        if count_below(alpha, beta, mid) > k {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Lowest eigenvalue and its unit eigenvector.
pub fn lowest_pair(alpha: &[f64], beta: &[f64]) -> (f64, Vec<f64>) {
    let n = alpha.len();
    let theta = eigenvalue(alpha, beta, 0);
    if n == 1 {
        return (theta, vec![1.0]);
    }
    let scale = alpha
        .iter()
        .chain(beta)
        .fold(0.0f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    // Shift just below the lowest eigenvalue: T − σI is then positive definite, so the
    // elimination below needs no pivoting.
    let sigma = theta - 1e-10 * scale;
    let mut y = vec![1.0f64; n];
    let mut diag = vec![0.0f64; n];
    for _ in 0..3 {
        // Forward elimination (Thomas algorithm) of (T − σI) z = y, overwriting y with z.
        diag[0] = alpha[0] - sigma;
        for i in 1..n {
            let l = beta[i - 1] / diag[i - 1];
            diag[i] = alpha[i] - sigma - l * beta[i - 1];
            y[i] -= l * y[i - 1];
        }
        y[n - 1] /= diag[n - 1];
        for i in (0..n - 1).rev() {
            y[i] = (y[i] - beta[i] * y[i + 1]) / diag[i];
        }
        let nrm = y.iter().map(|v| v * v).sum::<f64>().sqrt();
        y.iter_mut().for_each(|v| *v /= nrm);
    }
    (theta, y)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn free_chain_spectrum() {
        // Path graph of n sites with hopping -1: eigenvalues -2 cos(k π / (n + 1)),
        // eigenvectors sin(j k π / (n + 1)) (common practice, no source).
        let n = 40;
        let alpha = vec![0.0; n];
        let beta = vec![-1.0; n - 1];
        let pi = std::f64::consts::PI;
        for k in 0..5 {
            let expected = -2.0 * (((k + 1) as f64) * pi / (n as f64 + 1.0)).cos();
            assert!((eigenvalue(&alpha, &beta, k) - expected).abs() < 1e-12);
        }
        let (theta, v) = lowest_pair(&alpha, &beta);
        assert!((theta + 2.0 * (pi / (n as f64 + 1.0)).cos()).abs() < 1e-12);
        let norm: f64 = (1..=n)
            .map(|j| ((j as f64) * pi / (n as f64 + 1.0)).sin().powi(2))
            .sum::<f64>()
            .sqrt();
        let sign = v[0].signum();
        for (j, vj) in v.iter().enumerate() {
            let e = ((j + 1) as f64 * pi / (n as f64 + 1.0)).sin() / norm;
            assert!((sign * vj - e).abs() < 1e-9);
        }
    }
}
