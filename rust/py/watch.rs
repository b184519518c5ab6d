//! Progress reports and checkpoints of the native solvers, handed to Python.
//!
//! The core calls [`PyWatch::step`] after every solver step. The interpreter is taken
//! back only when something is due: a progress report at most every `report_every`
//! seconds, a snapshot at most every `save_every` seconds. A snapshot is streamed to a
//! Python sink in chunks of at most [`CHUNK_BYTES`] (the vectors are never copied whole:
//! a checkpoint of a 77.6 M-state run holds vectors of 0.6 GB each), as
//! `sink.begin(solver, integers, numbers, vectors, dtype, report)`, then
//! `sink.write(name, data)` per chunk, then `sink.commit()`. A Python exception from a
//! callback stops the solver cleanly (the core sees [`CoreError::Interrupted`]) and is
//! raised to the caller. Saved states come back through a loader object with
//! `integers`, `numbers`, `vectors` (names) and `load(name)` (one vector block at a time,
//! released before the next is read).

use crate::arrays::{owned_copy, FromInput, InVector};
use fockmill_core::watch::{Report, Restored, Snapshot, Watch};
use fockmill_core::{CoreError, CoreResult, Scalar};
use num_complex::Complex64;
use numpy::PyUntypedArrayMethods;
use pyo3::prelude::*;
use pyo3::types::{PyBytes, PyDict};
use std::cell::{Cell, RefCell};
use std::collections::HashMap;
use std::time::{Duration, Instant};

/// Largest piece of a vector handed to the sink at once.
pub const CHUNK_BYTES: usize = 8 << 20;

/// Elements as little-endian bytes (the checkpoint's byte order on every machine).
pub trait LeBytes: Scalar {
    /// Bytes per element.
    const SIZE: usize;
    /// NumPy's name of the element type.
    const DTYPE: &'static str;
    /// Append the element's bytes.
    fn put(&self, out: &mut Vec<u8>);
}

impl LeBytes for f64 {
    const SIZE: usize = 8;
    const DTYPE: &'static str = "<f8";
    fn put(&self, out: &mut Vec<u8>) {
        out.extend_from_slice(&self.to_le_bytes());
    }
}

impl LeBytes for Complex64 {
    const SIZE: usize = 16;
    const DTYPE: &'static str = "<c16";
    fn put(&self, out: &mut Vec<u8>) {
        out.extend_from_slice(&self.re.to_le_bytes());
        out.extend_from_slice(&self.im.to_le_bytes());
    }
}

/// The Python side of a watched solve: a progress callable and a checkpoint sink, with
/// their intervals (owned references: usable from the detached section).
pub struct Hooks {
    pub progress: Option<Py<PyAny>>,
    pub sink: Option<Py<PyAny>>,
    pub report_every: Duration,
    pub save_every: Duration,
}

impl Hooks {
    /// Hooks from the keyword arguments (intervals in seconds, refused when negative or
    /// not finite).
    pub fn new(
        progress: Option<Bound<'_, PyAny>>,
        sink: Option<Bound<'_, PyAny>>,
        report_every: f64,
        save_every: f64,
    ) -> PyResult<Self> {
        let seconds = |v: f64, what: &str| {
            Duration::try_from_secs_f64(v).map_err(|_| {
                pyo3::exceptions::PyValueError::new_err(format!(
                    "{what} must be a number of seconds >= 0; got {v}"
                ))
            })
        };
        Ok(Hooks {
            progress: progress.map(Bound::unbind),
            sink: sink.map(Bound::unbind),
            report_every: seconds(report_every, "report_every")?,
            save_every: seconds(save_every, "checkpoint_every")?,
        })
    }
}

/// The watcher the core talks to during one detached solve (made inside the detached
/// section; it holds the first Python error a callback raised).
pub struct PyWatch<'h> {
    hooks: &'h Hooks,
    last_report: Cell<Instant>,
    last_save: Cell<Instant>,
    raised: RefCell<Option<PyErr>>,
}

impl<'h> PyWatch<'h> {
    pub fn new(hooks: &'h Hooks) -> Self {
        let now = Instant::now();
        PyWatch {
            hooks,
            last_report: Cell::new(now),
            last_save: Cell::new(now),
            raised: RefCell::new(None),
        }
    }

    /// The Python error a callback raised, if any.
    pub fn take(&self) -> Option<PyErr> {
        self.raised.borrow_mut().take()
    }

    /// Keep a callback's error and stop the solver.
    fn fail(&self, e: PyErr) -> CoreError {
        let mut slot = self.raised.borrow_mut();
        if slot.is_none() {
            *slot = Some(e);
        }
        CoreError::Interrupted
    }
}

fn report_dict<'py>(py: Python<'py>, r: &Report) -> PyResult<Bound<'py, PyDict>> {
    let d = PyDict::new(py);
    d.set_item("step", r.step)?;
    d.set_item("products", r.products)?;
    d.set_item("residual", r.residual)?;
    Ok(d)
}

fn send_snapshot<S: LeBytes>(
    py: Python<'_>,
    sink: &Bound<'_, PyAny>,
    report: &Report,
    snap: &Snapshot<'_, S>,
) -> PyResult<()> {
    let integers = PyDict::new(py);
    for (name, v) in &snap.integers {
        integers.set_item(name, v)?;
    }
    let numbers = PyDict::new(py);
    for (name, v) in &snap.numbers {
        numbers.set_item(name, v.clone())?;
    }
    let vectors: Vec<(&str, usize, usize)> = snap
        .vectors
        .iter()
        .map(|(name, rows, data)| (*name, *rows, data.len()))
        .collect();
    sink.call_method1(
        "begin",
        (
            snap.solver,
            integers,
            numbers,
            vectors,
            S::DTYPE,
            report_dict(py, report)?,
        ),
    )?;
    let per_chunk = (CHUNK_BYTES / S::SIZE).max(1);
    let mut buf: Vec<u8> = Vec::with_capacity(per_chunk * S::SIZE);
    for (name, _, data) in &snap.vectors {
        for piece in data.chunks(per_chunk) {
            buf.clear();
            piece.iter().for_each(|x| x.put(&mut buf));
            sink.call_method1("write", (*name, PyBytes::new(py, &buf)))?;
        }
    }
    sink.call_method0("commit")?;
    Ok(())
}

impl<S: LeBytes> Watch<S> for PyWatch<'_> {
    fn step(&self, report: &Report) -> CoreResult<bool> {
        if let Some(progress) = &self.hooks.progress {
            if self.last_report.get().elapsed() >= self.hooks.report_every {
                Python::attach(|py| progress.bind(py).call1((report_dict(py, report)?,)).map(drop))
                    .map_err(|e| self.fail(e))?;
                self.last_report.set(Instant::now());
            }
        }
        Ok(self.hooks.sink.is_some() && self.last_save.get().elapsed() >= self.hooks.save_every)
    }

    fn save(&self, report: &Report, snapshot: &Snapshot<'_, S>) -> CoreResult<()> {
        if let Some(sink) = &self.hooks.sink {
            Python::attach(|py| send_snapshot(py, sink.bind(py), report, snapshot))
                .map_err(|e| self.fail(e))?;
        }
        // The interval counts from the end of a write.
        self.last_save.set(Instant::now());
        Ok(())
    }
}

/// A saved state read back through the loader object (see the module documentation).
pub fn restored<S: FromInput>(loader: &Bound<'_, PyAny>) -> PyResult<Restored<S>> {
    let integers: HashMap<String, u64> = loader.getattr("integers")?.extract()?;
    let numbers: HashMap<String, Vec<f64>> = loader.getattr("numbers")?.extract()?;
    let names: Vec<String> = loader.getattr("vectors")?.extract()?;
    let mut vectors = HashMap::new();
    for name in names {
        let what = "the saved vectors";
        let loaded = loader.call_method1("load", (name.as_str(),))?;
        let v: Vec<S> = match loaded.extract::<InVector<'_>>()? {
            InVector::Real(a) => owned_copy(a.len(), a.as_array().iter().map(|&x| S::from_real(x)), what)?,
            InVector::Complex(a) => {
                owned_copy(a.len(), a.as_array().iter().map(|&x| S::from_complex(x)), what)?
            }
        };
        drop(loaded);
        vectors.insert(name, v);
    }
    Ok(Restored {
        integers,
        numbers,
        vectors,
    })
}
