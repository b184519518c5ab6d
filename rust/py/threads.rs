//! Where native work runs: `threads=` as Python passes it (None, a count or a kept
//! [`NativePool`]), and [`detached`], which runs core work with the interpreter released
//! and Ctrl-C polled between groups of rows.

use crate::errors::{guarded, PyCoreError};
use crate::interrupt::SignalCheck;
use crate::watch::{Hooks, PyWatch};
use fockmill_core::{CoreError, CoreResult, Interrupt, Runner};
use pyo3::exceptions::PyKeyboardInterrupt;
use pyo3::prelude::*;
use std::sync::Arc;

/// A thread pool kept between calls, so that repeated products do not start threads
/// each time (a prepared problem holds one).
#[pyclass(frozen, module = "fockmill._native")]
pub struct NativePool {
    runner: Arc<Runner>,
}

#[pymethods]
impl NativePool {
    #[new]
    #[pyo3(signature = (threads=None))]
    fn new(threads: Option<usize>) -> PyResult<Self> {
        guarded(|| {
            let runner = Runner::with_threads(threads).map_err(PyCoreError)?;
            Ok(NativePool {
                runner: Arc::new(runner),
            })
        })
    }

    /// Number of threads work in this pool uses.
    #[getter]
    fn threads(&self) -> usize {
        self.runner.threads()
    }
}

/// `threads=` as Python passes it: a count (0: rayon's global pool) or a kept pool.
#[derive(FromPyObject)]
pub enum Threads<'py> {
    Pool(Bound<'py, NativePool>),
    Count(usize),
}

impl Threads<'_> {
    fn runner(threads: Option<Threads<'_>>) -> PyResult<Arc<Runner>> {
        match threads {
            Some(Threads::Pool(pool)) => Ok(pool.get().runner.clone()),
            Some(Threads::Count(n)) => Ok(Arc::new(Runner::with_threads(Some(n)).map_err(PyCoreError)?)),
            None => Ok(Arc::new(Runner::global())),
        }
    }
}

/// Run core work with the interpreter released, on `threads` (None: rayon's global
/// pool; a count: a pool of that size; a `NativePool`: that pool), polling for Ctrl-C
/// between groups of rows.
pub fn detached<T: Send>(
    py: Python<'_>,
    threads: Option<Threads<'_>>,
    work: impl FnOnce(&Runner, &dyn Interrupt) -> CoreResult<T> + Send,
) -> PyResult<T> {
    let runner = Threads::runner(threads)?;
    let runner = runner.as_ref();
    let (result, raised) = py.detach(|| {
        let check = SignalCheck::new();
        let result = work(runner, &check);
        (result, check.take())
    });
    match result {
        Ok(v) => Ok(v),
        Err(CoreError::Interrupted) => {
            Err(raised.unwrap_or_else(|| PyKeyboardInterrupt::new_err("interrupted")))
        }
        Err(e) => Err(PyCoreError(e).into()),
    }
}

/// [`detached`] for a solver that reports to `hooks` (progress and checkpoints, see
/// [`crate::watch`]): a Python exception raised by a callback stops the solver and is
/// raised here.
pub fn detached_watched<T: Send>(
    py: Python<'_>,
    threads: Option<Threads<'_>>,
    hooks: &Hooks,
    work: impl FnOnce(&Runner, &dyn Interrupt, &PyWatch<'_>) -> CoreResult<T> + Send,
) -> PyResult<T> {
    let runner = Threads::runner(threads)?;
    let runner = runner.as_ref();
    let (result, raised) = py.detach(|| {
        let check = SignalCheck::new();
        let watch = PyWatch::new(hooks);
        let result = work(runner, &check, &watch);
        (result, watch.take().or_else(|| check.take()))
    });
    match result {
        Ok(v) => Ok(v),
        Err(CoreError::Interrupted) => {
            Err(raised.unwrap_or_else(|| PyKeyboardInterrupt::new_err("interrupted")))
        }
        Err(e) => Err(PyCoreError(e).into()),
    }
}

/// Number of threads rayon's global pool uses (RAYON_NUM_THREADS or the core count).
#[pyfunction]
pub fn default_threads() -> usize {
    rayon::current_num_threads()
}
