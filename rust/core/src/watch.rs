//! Reports from the long solver loops and the state they can resume from.
//!
//! A solver calls [`Watch::step`] after every step with a small [`Report`] (cheap: the
//! watcher decides itself whether anything is due, usually from the time elapsed). When
//! the watcher asks for it, the solver hands a [`Snapshot`] of its resumable state to
//! [`Watch::save`] at the next point from which it can continue exactly: a few integers,
//! short arrays of numbers and borrowed vectors (never copied here). A later call given
//! the same state back as a [`Restored`] continues from there and, for the same inputs,
//! computes the same numbers as a run that was never stopped.

use crate::error::{CoreError, CoreResult};
use crate::scalar::Scalar;
use std::collections::HashMap;

/// What a solver reports after a step.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Report {
    /// Steps so far (Lanczos steps of the ground state, products of the levels).
    pub step: usize,
    /// Matrix-vector products so far.
    pub products: usize,
    /// The current residual estimate (NaN before the first one).
    pub residual: f64,
}

/// A solver's resumable state: named integers, short number arrays and vectors
/// borrowed from the solver (`rows` vectors of equal length one after another).
#[derive(Debug)]
pub struct Snapshot<'a, S> {
    /// Which solver wrote it (`"ground"` or `"levels"`).
    pub solver: &'static str,
    /// Counters and phase markers.
    pub integers: Vec<(&'static str, u64)>,
    /// Short arrays (Lanczos coefficients, energies, the projected matrix).
    pub numbers: Vec<(&'static str, Vec<f64>)>,
    /// `(name, rows, data)`: `rows` vectors stored one after another in `data`.
    pub vectors: Vec<(&'static str, usize, &'a [S])>,
}

/// A state read back for a solver to continue from.
#[derive(Debug, Default, Clone)]
pub struct Restored<S> {
    /// As in [`Snapshot::integers`].
    pub integers: HashMap<String, u64>,
    /// As in [`Snapshot::numbers`].
    pub numbers: HashMap<String, Vec<f64>>,
    /// As in [`Snapshot::vectors`], owned.
    pub vectors: HashMap<String, Vec<S>>,
}

fn missing(what: &str, name: &str) -> CoreError {
    CoreError::InvalidArgument(format!(
        "the saved solver state has no {what} '{name}'; it was written by another version \
         or another solver: delete the checkpoint and run again"
    ))
}

impl<S: Scalar> Restored<S> {
    /// The integer `name`.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when it is missing or does not fit in `usize`.
    pub fn integer(&self, name: &str) -> CoreResult<usize> {
        let v = *self.integers.get(name).ok_or_else(|| missing("counter", name))?;
        usize::try_from(v).map_err(|_| missing("counter in range", name))
    }

    /// The number array `name`.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when it is missing.
    pub fn numbers(&self, name: &str) -> CoreResult<&[f64]> {
        self.numbers
            .get(name)
            .map(Vec::as_slice)
            .ok_or_else(|| missing("number array", name))
    }

    /// Move out the vector block `name`, which must hold `len` elements.
    ///
    /// # Errors
    /// [`CoreError::InvalidArgument`] when it is missing; [`CoreError::Shape`] for a
    /// wrong length.
    pub fn take_vector(&mut self, name: &str, len: usize) -> CoreResult<Vec<S>> {
        let v = self.vectors.remove(name).ok_or_else(|| missing("vector", name))?;
        if v.len() != len {
            return Err(CoreError::Shape(format!(
                "the saved vector '{name}' has {} elements where {len} are needed; the \
                 checkpoint belongs to another space",
                v.len()
            )));
        }
        if v.iter().any(|x| !x.is_finite()) {
            return Err(CoreError::InvalidArgument(format!(
                "the saved vector '{name}' contains NaN or inf; delete the checkpoint"
            )));
        }
        Ok(v)
    }
}

/// Receives a solver's reports and, when it asks for them, its snapshots.
pub trait Watch<S: Scalar> {
    /// Called after every step; returns whether a snapshot is wanted (the solver saves
    /// one at its next resumable point).
    ///
    /// # Errors
    /// Whatever the watcher reports (the solver stops and returns it).
    fn step(&self, report: &Report) -> CoreResult<bool>;
    /// Keep a snapshot (only called after [`Watch::step`] asked for one).
    ///
    /// # Errors
    /// Whatever the watcher reports (the solver stops and returns it).
    fn save(&self, report: &Report, snapshot: &Snapshot<'_, S>) -> CoreResult<()>;
}

/// A watcher that wants nothing.
#[derive(Debug, Default, Clone, Copy)]
pub struct Unwatched;

impl<S: Scalar> Watch<S> for Unwatched {
    fn step(&self, _: &Report) -> CoreResult<bool> {
        Ok(false)
    }
    fn save(&self, _: &Report, _: &Snapshot<'_, S>) -> CoreResult<()> {
        Ok(())
    }
}

/// Test helper: asks for one snapshot once `after` products are done, keeps it as a
/// [`Restored`], then stops the solver (as if the process had been killed).
#[cfg(test)]
pub(crate) struct Capture<S> {
    pub after: usize,
    pub saved: std::cell::RefCell<Option<Restored<S>>>,
    pub reports: std::cell::RefCell<Vec<Report>>,
}

#[cfg(test)]
impl<S: Scalar> Capture<S> {
    pub fn new(after: usize) -> Self {
        Capture {
            after,
            saved: std::cell::RefCell::new(None),
            reports: std::cell::RefCell::new(Vec::new()),
        }
    }
}

#[cfg(test)]
impl<S: Scalar> Watch<S> for Capture<S> {
    fn step(&self, report: &Report) -> CoreResult<bool> {
        self.reports.borrow_mut().push(*report);
        Ok(report.products >= self.after && self.saved.borrow().is_none())
    }
    fn save(&self, _: &Report, snapshot: &Snapshot<'_, S>) -> CoreResult<()> {
        let mut r = Restored::default();
        for (name, v) in &snapshot.integers {
            r.integers.insert(name.to_string(), *v);
        }
        for (name, v) in &snapshot.numbers {
            r.numbers.insert(name.to_string(), v.clone());
        }
        for (name, _, v) in &snapshot.vectors {
            r.vectors.insert(name.to_string(), v.to_vec());
        }
        *self.saved.borrow_mut() = Some(r);
        Err(CoreError::Interrupted)
    }
}
