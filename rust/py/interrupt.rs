//! Ctrl-C for long native work: the core asks between groups of rows; we briefly
//! re-attach to the interpreter on the calling thread and let Python run its signal
//! handlers. Only the main thread sees signals, so from other threads this is a no-op.

use fockmill_core::Interrupt;
use pyo3::prelude::*;
use std::cell::RefCell;
use std::time::{Duration, Instant};

/// Polls Python's signal handlers at most every few milliseconds.
pub struct SignalCheck {
    raised: RefCell<Option<PyErr>>,
    last: RefCell<Instant>,
}

const POLL_EVERY: Duration = Duration::from_millis(20);

impl SignalCheck {
    pub fn new() -> Self {
        SignalCheck {
            raised: RefCell::new(None),
            last: RefCell::new(Instant::now()),
        }
    }

    /// The exception a signal handler raised, if any (usually `KeyboardInterrupt`).
    pub fn take(&self) -> Option<PyErr> {
        self.raised.borrow_mut().take()
    }
}

impl Interrupt for SignalCheck {
    fn requested(&self) -> bool {
        if self.raised.borrow().is_some() {
            return true;
        }
        if self.last.borrow().elapsed() < POLL_EVERY {
            return false;
        }
        *self.last.borrow_mut() = Instant::now();
        match Python::attach(|py| py.check_signals()) {
            Ok(()) => false,
            Err(e) => {
                *self.raised.borrow_mut() = Some(e);
                true
            }
        }
    }
}
