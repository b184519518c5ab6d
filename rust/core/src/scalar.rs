//! The two element types of matrices and vectors: `f64` and `Complex64`.

use num_complex::Complex64;
use std::fmt::Debug;
use std::ops::{Add, AddAssign, Mul, Sub};

/// A field element the core can build matrices and run products over.
pub trait Scalar:
    Copy
    + Send
    + Sync
    + Debug
    + PartialEq
    + Default
    + Add<Output = Self>
    + AddAssign
    + Sub<Output = Self>
    + Mul<Output = Self>
    + 'static
{
    /// The additive identity.
    const ZERO: Self;
    /// Whether the type carries an imaginary part.
    const IS_COMPLEX: bool;
    /// Build from real and imaginary parts; `None` when a real type is given `im != 0`.
    fn from_parts(re: f64, im: f64) -> Option<Self>;
    /// Multiply by a real number.
    fn scale(self, k: f64) -> Self;
    /// Complex conjugate (identity for reals).
    fn conj(self) -> Self;
    /// Real part.
    fn re(self) -> f64;
    /// Imaginary part (0 for reals).
    fn im(self) -> f64;
    /// |z|².
    fn norm_sqr(self) -> f64;
    /// Whether both parts are finite.
    fn is_finite(self) -> bool;
}

impl Scalar for f64 {
    const ZERO: Self = 0.0;
    const IS_COMPLEX: bool = false;
    #[inline]
    fn from_parts(re: f64, im: f64) -> Option<Self> {
        (im == 0.0).then_some(re)
    }
    #[inline]
    fn scale(self, k: f64) -> Self {
        self * k
    }
    #[inline]
    fn conj(self) -> Self {
        self
    }
    #[inline]
    fn re(self) -> f64 {
        self
    }
    #[inline]
    fn im(self) -> f64 {
        0.0
    }
    #[inline]
    fn norm_sqr(self) -> f64 {
        self * self
    }
    #[inline]
    fn is_finite(self) -> bool {
        f64::is_finite(self)
    }
}

impl Scalar for Complex64 {
    const ZERO: Self = Complex64 { re: 0.0, im: 0.0 };
    const IS_COMPLEX: bool = true;
    #[inline]
    fn from_parts(re: f64, im: f64) -> Option<Self> {
        Some(Complex64::new(re, im))
    }
    #[inline]
    fn scale(self, k: f64) -> Self {
        Complex64::new(self.re * k, self.im * k)
    }
    #[inline]
    fn conj(self) -> Self {
        Complex64::conj(&self)
    }
    #[inline]
    fn re(self) -> f64 {
        self.re
    }
    #[inline]
    fn im(self) -> f64 {
        self.im
    }
    #[inline]
    fn norm_sqr(self) -> f64 {
        Complex64::norm_sqr(&self)
    }
    #[inline]
    fn is_finite(self) -> bool {
        self.re.is_finite() && self.im.is_finite()
    }
}
