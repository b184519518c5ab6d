//! Small result objects with named, read-only attributes, returned by the native
//! operator protocol instead of tuples. Arrays are moved to NumPy without copying.

use fockmill_core::build::CsrAny;
use fockmill_core::estimate::NnzEstimate as CoreEstimate;
use fockmill_core::lanczos::LanczosOutcome;
use fockmill_core::levels::LevelsOutcome;
use fockmill_core::solve::csr_size;
use fockmill_core::Scalar;
use numpy::ndarray::{Array2, ShapeBuilder};
use numpy::IntoPyArray;
use pyo3::prelude::*;

/// A Lanczos ground state.
#[pyclass(frozen, get_all, module = "fockmill._native")]
pub struct LanczosResult {
    /// Rayleigh quotient of `vector`.
    energy: f64,
    /// Unit-norm ground state, shape `(dim,)`.
    vector: Py<PyAny>,
    /// `‖Hψ − Eψ‖`, measured with a final product.
    residual: f64,
    /// Lanczos steps over all passes.
    steps: usize,
    /// Products used.
    products: usize,
    /// Restarts used.
    restarts: usize,
    /// Whether the residual met the tolerance.
    converged: bool,
    /// Whether a stored CSR matrix served the products.
    stored: bool,
}

#[pymethods]
impl LanczosResult {
    fn __repr__(&self) -> String {
        format!(
            "LanczosResult(energy={}, residual={:e}, steps={}, products={}, restarts={}, \
             converged={}, stored={})",
            self.energy,
            self.residual,
            self.steps,
            self.products,
            self.restarts,
            pybool(self.converged),
            pybool(self.stored)
        )
    }
}

impl LanczosResult {
    pub fn new<S: Scalar + numpy::Element>(py: Python<'_>, out: LanczosOutcome<S>, stored: bool) -> Self {
        LanczosResult {
            energy: out.energy,
            vector: out.vector.into_pyarray(py).into_any().unbind(),
            residual: out.residual,
            steps: out.steps,
            products: out.products,
            restarts: out.restarts,
            converged: out.converged,
            stored,
        }
    }
}

/// The lowest levels of a thick-restart Lanczos run.
#[pyclass(frozen, get_all, module = "fockmill._native")]
pub struct LevelsResult {
    /// Energies, ascending, shape `(k,)`.
    energies: Py<PyAny>,
    /// Orthonormal vectors, shape `(dim, k)` (Fortran order).
    vectors: Py<PyAny>,
    /// `‖Hv − Ev‖` of each level.
    residuals: Py<PyAny>,
    /// Products used, including the residual checks.
    products: usize,
    /// Thick restarts over all runs.
    restarts: usize,
    /// Whether every residual met the tolerance within the product budget.
    converged: bool,
    /// Whether a stored CSR matrix served the products.
    stored: bool,
}

#[pymethods]
impl LevelsResult {
    fn __repr__(&self, py: Python<'_>) -> PyResult<String> {
        Ok(format!(
            "LevelsResult(energies={}, products={}, restarts={}, converged={}, stored={})",
            self.energies.bind(py).repr()?,
            self.products,
            self.restarts,
            pybool(self.converged),
            pybool(self.stored)
        ))
    }
}

impl LevelsResult {
    pub fn new<S: Scalar + numpy::Element>(
        py: Python<'_>,
        dim: usize,
        out: LevelsOutcome<S>,
        stored: bool,
    ) -> PyResult<Self> {
        let k = out.energies.len();
        // Fortran order: the core keeps each level contiguous, so no copy is needed.
        let vectors = Array2::from_shape_vec((dim, k).f(), out.vectors)
            .map_err(|e| pyo3::exceptions::PyRuntimeError::new_err(format!("internal shape error: {e}")))?;
        Ok(LevelsResult {
            energies: out.energies.into_pyarray(py).into_any().unbind(),
            vectors: vectors.into_pyarray(py).into_any().unbind(),
            residuals: out.residuals.into_pyarray(py).into_any().unbind(),
            products: out.products,
            restarts: out.restarts,
            converged: out.converged,
            stored,
        })
    }
}

/// Estimated stored entries of a matrix and the sizes of its CSR arrays.
#[pyclass(frozen, get_all, name = "NnzEstimate", module = "fockmill._native")]
pub struct NnzEstimate {
    /// Estimated (or exact) number of stored entries.
    nnz: f64,
    /// Standard error of `nnz` (0 when exact).
    std_error: f64,
    /// Whether every row was counted.
    exact: bool,
    /// Largest number of entries in a counted row.
    max_row: u64,
    /// Whether the CSR indices need 64 bits.
    wide: bool,
    /// Bytes of the finished CSR matrix.
    csr_bytes: u128,
    /// Peak bytes while building it.
    build_peak_bytes: u128,
}

#[pymethods]
impl NnzEstimate {
    fn __repr__(&self) -> String {
        format!(
            "NnzEstimate(nnz={}, std_error={}, exact={}, max_row={}, wide={}, csr_bytes={}, \
             build_peak_bytes={})",
            self.nnz,
            self.std_error,
            pybool(self.exact),
            self.max_row,
            pybool(self.wide),
            self.csr_bytes,
            self.build_peak_bytes
        )
    }
}

impl NnzEstimate {
    /// The estimate of a `(rows, cols)` matrix with values of `value_bytes`.
    pub fn new(est: CoreEstimate, rows: u64, cols: u64, value_bytes: usize) -> Self {
        let size = csr_size(rows, cols, est.nnz, value_bytes);
        NnzEstimate {
            nnz: est.nnz,
            std_error: est.std_error,
            exact: est.exact,
            max_row: est.max_row,
            wide: size.wide,
            csr_bytes: size.csr_bytes,
            build_peak_bytes: size.build_peak_bytes,
        }
    }
}

/// The arrays of a CSR matrix (canonical: sorted columns, no duplicates, no zeros).
#[pyclass(frozen, get_all, module = "fockmill._native")]
pub struct CsrParts {
    /// Values, float64 or complex128.
    data: Py<PyAny>,
    /// Column indices, int32 or int64.
    indices: Py<PyAny>,
    /// Row pointers, int32 or int64.
    indptr: Py<PyAny>,
}

#[pymethods]
impl CsrParts {
    fn __repr__(&self, py: Python<'_>) -> PyResult<String> {
        Ok(format!(
            "CsrParts(nnz={}, rows={}, index dtype {})",
            self.data.bind(py).len()?,
            self.indptr.bind(py).len()?.saturating_sub(1),
            self.indices.bind(py).getattr("dtype")?.str()?
        ))
    }
}

impl CsrParts {
    pub fn new<S: Scalar + numpy::Element>(py: Python<'_>, csr: CsrAny<S>) -> Self {
        match csr {
            CsrAny::Narrow(c) => CsrParts {
                data: c.data.into_pyarray(py).into_any().unbind(),
                indices: c.indices.into_pyarray(py).into_any().unbind(),
                indptr: c.indptr.into_pyarray(py).into_any().unbind(),
            },
            CsrAny::Wide(c) => CsrParts {
                data: c.data.into_pyarray(py).into_any().unbind(),
                indices: c.indices.into_pyarray(py).into_any().unbind(),
                indptr: c.indptr.into_pyarray(py).into_any().unbind(),
            },
        }
    }
}

fn pybool(b: bool) -> &'static str {
    if b {
        "True"
    } else {
        "False"
    }
}
