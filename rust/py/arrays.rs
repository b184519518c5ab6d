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

/// Array-backed terms as they come from Python: `(creators, modes, re, im)`, row `r`
/// of `modes` holding the creation modes (first `creators` columns) then the
/// annihilation modes of term `r`, a mode repeated for a power above one.
#[derive(FromPyObject)]
pub struct InTermBlock<'py>(
    usize,
    PyReadonlyArray2<'py, i64>,
    PyReadonlyArray1<'py, f64>,
    PyReadonlyArray1<'py, f64>,
);

/// The core's raw terms of Python's terms and term blocks.
///
/// # Errors
/// `ValueError` for a block whose shapes disagree or that holds a negative mode.
pub fn raw_terms(terms: Vec<InTerm>, blocks: &[InTermBlock<'_>]) -> PyResult<Vec<RawTerm>> {
    let total = terms.len() + blocks.iter().map(|b| b.2.len()).sum::<usize>();
    let mut out: Vec<RawTerm> = memory::try_with_capacity(total, "the terms").map_err(PyCoreError)?;
    out.extend(terms.into_iter().map(|(re, im, f)| RawTerm::new(re, im, f)));
    for InTermBlock(creators, modes, re, im) in blocks {
        let (modes, re, im) = (modes.as_array(), re.as_array(), im.as_array());
        let (rows, width) = modes.dim();
        if re.len() != rows || im.len() != rows || *creators > width {
            return Err(pyo3::exceptions::PyValueError::new_err(format!(
                "a term block has {rows} rows of {width} modes, {} and {} coefficient parts                  and {creators} creators; pass matching arrays",
                re.len(),
                im.len()
            )));
        }
        for r in 0..rows {
            let mut factors: Vec<(usize, u32, u32)> = Vec::with_capacity(width);
            for c in 0..width {
                let mode = modes[[r, c]];
                if mode < 0 {
                    return Err(pyo3::exceptions::PyValueError::new_err(format!(
                        "a term block holds the mode {mode}; modes are numbered 0, 1, 2, ..."
                    )));
                }
                let mode = mode as usize;
                let slot = match factors.iter_mut().position(|f| f.0 == mode) {
                    Some(k) => k,
                    None => {
                        factors.push((mode, 0, 0));
                        factors.len() - 1
                    }
                };
                if c < *creators {
                    factors[slot].1 += 1;
                } else {
                    factors[slot].2 += 1;
                }
            }
            factors.sort_unstable();
            out.push(RawTerm::new(re[r], im[r], factors));
        }
    }
    Ok(out)
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
