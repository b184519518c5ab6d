//! Spaces: `NativeSpace` (a Fock space with its ranking tables) and
//! `NativeSymmetricSpace` (a symmetry sector of one).

use crate::arrays::{owned_copy, InVector, OwnedVector};
use crate::errors::{guarded, PyCoreError};
use crate::threads::{detached, Threads};
use fockmill_core::orbit_table::TableChoice;
use fockmill_core::symmetry::{Generator, SymmetricSpace};
use fockmill_core::{observe, Charge, CoreError, FockSpace};
use num_complex::Complex64;
use numpy::ndarray::Array2;
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray2, PyUntypedArrayMethods};
use pyo3::prelude::*;
use std::sync::Arc;

/// One conserved charge as Python gives it: `(weights, total, modulus)`.
type ChargeSpec = (Vec<u32>, u64, Option<u64>);

/// A Fock space: cutoffs, weights and an optional conserved (modular) total.
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativeSpace {
    pub(crate) inner: Arc<FockSpace>,
}

#[pymethods]
impl NativeSpace {
    #[new]
    #[pyo3(signature = (cutoffs, weights=None, total=None, modulus=None, charges=None))]
    fn new(
        cutoffs: Vec<u32>,
        weights: Option<Vec<u32>>,
        total: Option<u64>,
        modulus: Option<u64>,
        charges: Option<Vec<ChargeSpec>>,
    ) -> PyResult<Self> {
        guarded(|| {
            let inner = match charges {
                None => FockSpace::new(cutoffs, weights, total, modulus),
                Some(_) if weights.is_some() || total.is_some() || modulus.is_some() => {
                    Err(CoreError::InvalidSpace(
                        "give either charges or weights/total/modulus, not both; put the one-charge \
                         keywords into the list of charges"
                            .into(),
                    ))
                }
                Some(list) => FockSpace::with_charges(
                    cutoffs,
                    list.into_iter()
                        .map(|(weights, total, modulus)| Charge {
                            weights,
                            total,
                            modulus,
                        })
                        .collect(),
                ),
            }
            .map_err(PyCoreError)?;
            Ok(NativeSpace {
                inner: Arc::new(inner),
            })
        })
    }

    #[getter]
    fn dim(&self) -> u64 {
        self.inner.dim()
    }

    #[getter]
    fn modes(&self) -> usize {
        self.inner.modes()
    }

    #[getter]
    fn cutoffs(&self) -> Vec<u32> {
        self.inner.cutoffs().to_vec()
    }

    #[getter]
    fn weights(&self) -> Vec<u32> {
        self.inner.weights().to_vec()
    }

    /// The conserved charges as `(weights, total, modulus)`, modular totals reduced.
    #[getter]
    fn charges(&self) -> Vec<ChargeSpec> {
        self.inner
            .charges()
            .iter()
            .map(|c| (c.weights.clone(), c.total, c.modulus))
            .collect()
    }

    /// Occupations of every basis state, shape (dim, modes), uint8 or uint16.
    #[pyo3(signature = (threads=None))]
    fn occupations<'py>(&self, py: Python<'py>, threads: Option<Threads<'_>>) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| {
            let space = self.inner.clone();
            let (dim, m) = (space.dim() as usize, space.modes());
            let len = dim.checked_mul(m).ok_or_else(|| {
                PyCoreError(CoreError::TooLarge {
                    what: "occupation table (entries)".into(),
                    requested: dim as u128 * m as u128,
                    limit: usize::MAX as u128,
                })
            })?;
            let cell = if space.max_cutoff() <= u8::MAX as u32 {
                1
            } else {
                2
            };
            fockmill_core::memory::ensure_room(
                len as u128 * cell,
                &format!("the occupations of all {dim} states of the space"),
            )
            .map_err(PyCoreError)?;
            if space.max_cutoff() <= u8::MAX as u32 {
                let table = detached(py, threads, |runner, stop| {
                    let mut out = fockmill_core::memory::try_filled(len, 0u8, "the occupation table")?;
                    observe::occupations_into(&space, &mut out, runner, stop)?;
                    Ok(out)
                })?;
                let arr = Array2::from_shape_vec((dim, m), table).expect("length checked above");
                Ok(arr.into_pyarray(py).into_any())
            } else {
                let table = detached(py, threads, |runner, stop| {
                    let mut out = fockmill_core::memory::try_filled(len, 0u16, "the occupation table")?;
                    observe::occupations_into(&space, &mut out, runner, stop)?;
                    Ok(out)
                })?;
                let arr = Array2::from_shape_vec((dim, m), table).expect("length checked above");
                Ok(arr.into_pyarray(py).into_any())
            }
        })
    }

    /// Occupations of basis state `index` (O(M log cutoff) unranking).
    fn state(&self, index: u64) -> PyResult<Vec<u32>> {
        guarded(|| {
            let m = self.inner.modes();
            let (mut occ, mut residues) = (vec![0u32; m], vec![0usize; m]);
            self.inner
                .unrank_into(index, &mut occ, &mut residues)
                .map_err(PyCoreError)?;
            Ok(occ)
        })
    }

    /// Ranks of the states in the rows of `occ` (int64, shape (n, modes)); -1 where a
    /// state is not in the space.
    #[pyo3(signature = (occ, threads=None))]
    fn index<'py>(
        &self,
        py: Python<'py>,
        occ: PyReadonlyArray2<'py, i64>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyArray1<i64>>> {
        guarded(|| {
            let shape = occ.shape();
            if shape[1] != self.inner.modes() {
                return Err(PyCoreError(CoreError::Shape(format!(
                    "occupations have {} columns but the space has {} modes",
                    shape[1],
                    self.inner.modes()
                )))
                .into());
            }
            let flat: Vec<i64> = owned_copy(
                occ.len(),
                occ.as_array().iter().copied(),
                "a copy of the occupations",
            )?;
            let space = self.inner.clone();
            let ranks = detached(py, threads, |runner, _| observe::ranks(&space, &flat, runner))?;
            Ok(ranks.into_pyarray(py))
        })
    }
}

/// A symmetry sector: orbit representatives of a group of mode permutations with a
/// one-dimensional representation given by one label per generator.
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativeSymmetricSpace {
    pub(crate) inner: Arc<SymmetricSpace>,
    pub(crate) generators: Arc<Vec<Generator>>,
}

fn complex_of(v: OwnedVector) -> Vec<Complex64> {
    match v {
        OwnedVector::Real(v) => v.into_iter().map(|re| Complex64::new(re, 0.0)).collect(),
        OwnedVector::Complex(v) => v,
    }
}

#[pymethods]
impl NativeSymmetricSpace {
    #[new]
    #[pyo3(signature = (space, generators, threads=None, orbit_table=None))]
    fn new(
        py: Python<'_>,
        space: &NativeSpace,
        generators: Vec<(Vec<usize>, u64)>,
        threads: Option<Threads<'_>>,
        orbit_table: Option<bool>,
    ) -> PyResult<Self> {
        guarded(|| {
            let gens: Vec<Generator> = generators
                .into_iter()
                .map(|(images, label)| Generator { images, label })
                .collect();
            let base = (*space.inner).clone();
            let choice = match orbit_table {
                None => TableChoice::Auto,
                Some(true) => TableChoice::Always,
                Some(false) => TableChoice::Never,
            };
            let inner = detached(py, threads, |r, s| {
                SymmetricSpace::with_table(base, &gens, choice, r, s)
            })?;
            Ok(NativeSymmetricSpace {
                inner: Arc::new(inner),
                generators: Arc::new(gens),
            })
        })
    }

    /// The label of each generator under which an operator has a definite character,
    /// `g A g⁻¹ = exp(2πi·label/order) A` (None for every generator when the operator is
    /// zero); raises `SymmetryError` when it has none.
    fn operator_labels(&self, terms: Vec<crate::arrays::InTerm>) -> PyResult<Vec<Option<u64>>> {
        guarded(|| {
            let raw = crate::arrays::raw_terms(terms, &[])?;
            Ok(fockmill_core::symmetry::labels_of_terms(&raw, &self.generators).map_err(PyCoreError)?)
        })
    }

    /// Number of sector states.
    #[getter]
    fn dim(&self) -> u64 {
        self.inner.dim()
    }

    /// Bytes of the orbit table (one entry per base state), 0 without one.
    #[getter]
    fn orbit_table_bytes(&self) -> u64 {
        self.inner.orbit_table_bytes() as u64
    }

    /// Order of the group.
    #[getter]
    fn order(&self) -> usize {
        self.inner.order()
    }

    /// Whether every character is real (±1).
    #[getter]
    fn is_real(&self) -> bool {
        self.inner.is_real()
    }

    /// Base ranks of the representatives, in sector order (uint64).
    fn representatives<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<u64>> {
        self.inner.representatives().to_vec().into_pyarray(py)
    }

    /// Occupation distributions of a sector state (as `occupation_distributions` of its
    /// expansion, concatenated over modes, not normalised), from one pass over the
    /// representatives: no base-space vector is made.
    #[pyo3(signature = (psi, threads=None))]
    fn occupation_distributions<'py>(
        &self,
        py: Python<'py>,
        psi: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        guarded(|| {
            let sector = &self.inner;
            let values = match psi.to_owned_vec()? {
                OwnedVector::Real(v) => detached(py, threads, |r, s| {
                    observe::sector_occupation_distributions(sector, &v, r, s)
                })?,
                OwnedVector::Complex(v) => detached(py, threads, |r, s| {
                    observe::sector_occupation_distributions(sector, &v, r, s)
                })?,
            };
            Ok(values.into_pyarray(py))
        })
    }

    /// The base-space vector of a sector vector (norm-preserving).
    #[pyo3(signature = (v, threads=None))]
    fn expand<'py>(
        &self,
        py: Python<'py>,
        v: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| {
            let sector = &self.inner;
            let n = sector.base().dim() as usize;
            match v.to_owned_vec()? {
                OwnedVector::Real(x) if sector.is_real() => {
                    let w = detached(py, threads, |r, s| {
                        let mut w = fockmill_core::memory::try_filled(n, 0.0, "the expanded vector")?;
                        sector.expand(&x, &mut w, r, s).map(|_| w)
                    })?;
                    Ok(w.into_pyarray(py).into_any())
                }
                owned => {
                    let x = complex_of(owned);
                    let w = detached(py, threads, |r, s| {
                        let mut w =
                            fockmill_core::memory::try_filled(n, Complex64::ZERO, "the expanded vector")?;
                        sector.expand(&x, &mut w, r, s).map(|_| w)
                    })?;
                    Ok(w.into_pyarray(py).into_any())
                }
            }
        })
    }

    /// The sector components of a base-space vector (the adjoint of `expand`).
    #[pyo3(signature = (w, threads=None))]
    fn project<'py>(
        &self,
        py: Python<'py>,
        w: InVector<'py>,
        threads: Option<Threads<'_>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        guarded(|| {
            let sector = &self.inner;
            let n = sector.dim() as usize;
            match w.to_owned_vec()? {
                OwnedVector::Real(x) if sector.is_real() => {
                    let v = detached(py, threads, |r, s| {
                        let mut v = fockmill_core::memory::try_filled(n, 0.0, "the projected vector")?;
                        sector.project(&x, &mut v, r, s).map(|_| v)
                    })?;
                    Ok(v.into_pyarray(py).into_any())
                }
                owned => {
                    let x = complex_of(owned);
                    let v = detached(py, threads, |r, s| {
                        let mut v =
                            fockmill_core::memory::try_filled(n, Complex64::ZERO, "the projected vector")?;
                        sector.project(&x, &mut v, r, s).map(|_| v)
                    })?;
                    Ok(v.into_pyarray(py).into_any())
                }
            }
        })
    }
}
