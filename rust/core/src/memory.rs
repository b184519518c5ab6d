//! Refuse allocations that cannot succeed, before making them: a failed allocation
//! aborts the process, which must never happen on user input.

use crate::error::{CoreError, CoreResult};

/// Bytes the system reports as available (`MemAvailable`), when it says.
pub fn available_bytes() -> Option<u128> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kib: u128 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib * 1024)
}

/// Largest allocation attempted when the available memory is unknown (128 TiB).
const UNKNOWN_LIMIT: u128 = 1 << 47;

/// Check that `bytes` more bytes for `what` can plausibly be allocated.
///
/// # Errors
/// [`CoreError::TooLarge`] with the request and the available memory.
pub fn ensure_room(bytes: u128, what: &str) -> CoreResult<()> {
    let limit = available_bytes().unwrap_or(UNKNOWN_LIMIT);
    if bytes > limit {
        return Err(CoreError::TooLarge {
            what: format!(
                "{what} (bytes); the memory available now is smaller: use a smaller sector or \
                 cutoffs, or a method that stores less"
            ),
            requested: bytes,
            limit,
        });
    }
    Ok(())
}
