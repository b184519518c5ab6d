//! Arguments as they come from Python (vectors, blocks, start vectors, terms, CSR
//! arrays) and their owned copies: the interpreter is released during core calls, and
//! another Python thread could write to a borrowed NumPy buffer meanwhile, so every
//! input is copied (fallibly) first.

use crate::errors::PyCoreError;
use fockmill_core::build::CsrIndex;
use fockmill_core::{memory, RawTerm, Scalar};
use num_complex::Complex64;
use numpy::{PyReadonlyArray1, PyReadonlyArray2, PyUntypedArrayMethods};
use pyo3::prelude::*;

/// Terms as they come from Python: (re, im, [(mode, p, q), ...]).
pub type InTerm = (f64, f64, Vec<(usize, u32, u32)>);

/// The core's raw terms of Python's terms.
pub fn raw_terms(terms: Vec<InTerm>) -> Vec<RawTerm> {
    terms
        .into_iter()
        .map(|(re, im, f)| RawTerm::new(re, im, f))
        .collect()
}

/// A vector handed in from Python: float64 or complex128, any strides.
#[derive(FromPyObject)]
pub enum InVector<'py> {
    Real(PyReadonlyArray1<'py, f64>),
    Complex(PyReadonlyArray1<'py, Complex64>),
}

/// A row-major (n, k) block of vectors handed in from Python.
#[derive(FromPyObject)]
pub enum InBlock<'py> {
    Real(PyReadonlyArray2<'py, f64>),
    Complex(PyReadonlyArray2<'py, Complex64>),
}

/// A start vector (`(dim,)`) or block (`(dim, b)`), float64 or complex128.
#[derive(FromPyObject)]
pub enum InStart<'py> {
    Real(PyReadonlyArray1<'py, f64>),
    Complex(PyReadonlyArray1<'py, Complex64>),
    RealBlock(PyReadonlyArray2<'py, f64>),
    ComplexBlock(PyReadonlyArray2<'py, Complex64>),
}

/// Owned copy of a vector.
pub enum OwnedVector {
    Real(Vec<f64>),
    Complex(Vec<Complex64>),
}

/// A copy of `items` (`len` of them) allocated fallibly.
pub fn owned_copy<T>(len: usize, items: impl Iterator<Item = T>, what: &str) -> PyResult<Vec<T>> {
    let mut out = memory::try_with_capacity(len, what).map_err(PyCoreError)?;
    out.extend(items);
    Ok(out)
}

impl OwnedVector {
    /// As complex numbers (a real vector is copied, fallibly).
    pub fn into_complex(self) -> PyResult<Vec<Complex64>> {
        match self {
            OwnedVector::Real(v) => owned_copy(
                v.len(),
                v.into_iter().map(|re| Complex64::new(re, 0.0)),
                "a complex copy of the vector",
            ),
            OwnedVector::Complex(v) => Ok(v),
        }
    }
}

impl InVector<'_> {
    /// Owned copy, allocated fallibly.
    pub fn to_owned_vec(&self) -> PyResult<OwnedVector> {
        let what = "a copy of the input vector";
        Ok(match self {
            InVector::Real(a) => OwnedVector::Real(owned_copy(a.len(), a.as_array().iter().copied(), what)?),
            InVector::Complex(a) => {
                OwnedVector::Complex(owned_copy(a.len(), a.as_array().iter().copied(), what)?)
            }
        })
    }
}

/// Element conversions for start vectors: a real solver takes the real part.
pub trait FromInput: Scalar + numpy::Element {
    fn from_real(v: f64) -> Self;
    fn from_complex(v: Complex64) -> Self;
}
impl FromInput for f64 {
    fn from_real(v: f64) -> Self {
        v
    }
    fn from_complex(v: Complex64) -> Self {
        v.re
    }
}
impl FromInput for Complex64 {
    fn from_real(v: f64) -> Self {
        Complex64::new(v, 0.0)
    }
    fn from_complex(v: Complex64) -> Self {
        v
    }
}

impl InStart<'_> {
    /// Owned copy (vector after vector) in the solver's element type, allocated
    /// fallibly.
    pub fn owned<S: FromInput>(&self) -> PyResult<Vec<S>> {
        let what = "a copy of the start vectors";
        match self {
            InStart::Real(a) => owned_copy(a.len(), a.as_array().iter().map(|&v| S::from_real(v)), what),
            InStart::Complex(a) => {
                owned_copy(a.len(), a.as_array().iter().map(|&v| S::from_complex(v)), what)
            }
            // Column after column: the core takes one vector after another.
            InStart::RealBlock(a) => {
                let a = a.as_array();
                owned_copy(a.len(), a.t().iter().map(|&v| S::from_real(v)), what)
            }
            InStart::ComplexBlock(a) => {
                let a = a.as_array();
                owned_copy(a.len(), a.t().iter().map(|&v| S::from_complex(v)), what)
            }
        }
    }
}

/// Column indices or row pointers handed in from Python.
#[derive(FromPyObject)]
pub enum InIndex<'py> {
    Narrow(PyReadonlyArray1<'py, i32>),
    Wide(PyReadonlyArray1<'py, i64>),
}

impl InIndex<'_> {
    pub fn is_wide(&self) -> bool {
        matches!(self, InIndex::Wide(_))
    }

    /// Owned copy in the index type `I`.
    pub fn owned<I: CsrIndex>(&self) -> PyResult<Vec<I>> {
        let what = "a copy of the CSR index arrays";
        match self {
            // Negative values map above every valid index and are refused by the check.
            InIndex::Narrow(a) => owned_copy(
                a.len(),
                a.as_array().iter().map(|&v| I::from_u64(v as i64 as u64)),
                what,
            ),
            InIndex::Wide(a) => {
                owned_copy(a.len(), a.as_array().iter().map(|&v| I::from_u64(v as u64)), what)
            }
        }
    }
}

/// CSR values handed in from Python.
#[derive(FromPyObject)]
pub enum InData<'py> {
    Real(PyReadonlyArray1<'py, f64>),
    Complex(PyReadonlyArray1<'py, Complex64>),
}
