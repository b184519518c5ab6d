//! Core errors to Python exceptions. The exception classes live in
//! `fockmill.exceptions` (pure Python, so they can subclass two builtins); this file
//! looks them up by name and falls back to the builtin base when that module is missing.

use fockmill_core::CoreError;
use pyo3::exceptions::{PyKeyboardInterrupt, PyMemoryError, PyRuntimeError, PyValueError};
use pyo3::prelude::*;

/// A core error on its way to Python (local type: the orphan rule forbids `From` on
/// foreign types).
pub struct PyCoreError(pub CoreError);

impl From<CoreError> for PyCoreError {
    fn from(e: CoreError) -> Self {
        PyCoreError(e)
    }
}

fn raise(class: &str, message: String, fallback: fn(String) -> PyErr) -> PyErr {
    Python::attach(|py| {
        let made = py
            .import("fockmill.exceptions")
            .and_then(|m| m.getattr(class))
            .and_then(|cls| cls.call1((message.clone(),)));
        match made {
            Ok(instance) => PyErr::from_value(instance),
            Err(_) => fallback(message),
        }
    })
}

impl From<PyCoreError> for PyErr {
    fn from(e: PyCoreError) -> Self {
        let message = e.0.to_string();
        match e.0 {
            CoreError::InvalidSpace(_) | CoreError::EmptySpace(_) => {
                raise("SpaceError", message, PyValueError::new_err::<String>)
            }
            CoreError::TooLarge { .. } => raise("SizeLimitError", message, PyMemoryError::new_err::<String>),
            CoreError::ModeOutOfRange { .. } => {
                raise("ModeIndexError", message, PyValueError::new_err::<String>)
            }
            CoreError::ChargeViolation { .. } => {
                raise("ChargeError", message, PyValueError::new_err::<String>)
            }
            CoreError::NonFinite(_) | CoreError::Shape(_) | CoreError::InvalidArgument(_) => {
                PyValueError::new_err(message)
            }
            CoreError::Interrupted => PyKeyboardInterrupt::new_err("interrupted"),
            CoreError::Symmetry(_) => raise("SymmetryError", message, PyValueError::new_err::<String>),
            CoreError::NotConverged(_) => {
                raise("ConvergenceError", message, PyRuntimeError::new_err::<String>)
            }
        }
    }
}

/// Run `f`, turning a Rust panic into a Python `RuntimeError` instead of letting it
/// unwind into the interpreter.
pub fn guarded<T>(f: impl FnOnce() -> PyResult<T>) -> PyResult<T> {
    match std::panic::catch_unwind(std::panic::AssertUnwindSafe(f)) {
        Ok(result) => result,
        Err(payload) => {
            let what = payload
                .downcast_ref::<&str>()
                .map(|s| s.to_string())
                .or_else(|| payload.downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "unknown panic".into());
            Err(PyRuntimeError::new_err(format!(
                "internal error in fockmill's native core ({what}); this is a bug, please \
                 report it with the call that caused it"
            )))
        }
    }
}
