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

/// A vector of `len` copies of `value`, allocated fallibly: a failed allocation (an
/// address-space limit, a cgroup limit, or plain exhaustion) becomes
/// [`CoreError::TooLarge`] instead of aborting the process. Every buffer whose size
/// depends on user input goes through this (or [`try_with_capacity`]).
///
/// # Errors
/// [`CoreError::TooLarge`] when the request exceeds the available memory or the
/// allocator refuses it.
pub fn try_filled<T: Clone>(len: usize, value: T, what: &str) -> CoreResult<Vec<T>> {
    let mut v = try_with_capacity(len, what)?;
    v.resize(len, value);
    Ok(v)
}

/// An empty vector with room for `len` elements, allocated fallibly (see [`try_filled`]).
///
/// # Errors
/// [`CoreError::TooLarge`] when the request exceeds the available memory or the
/// allocator refuses it.
pub fn try_with_capacity<T>(len: usize, what: &str) -> CoreResult<Vec<T>> {
    let bytes = len as u128 * std::mem::size_of::<T>().max(1) as u128;
    ensure_room(bytes, what)?;
    let mut v = Vec::new();
    v.try_reserve_exact(len).map_err(|_| CoreError::TooLarge {
        what: format!(
            "{what} (bytes); the allocator refused it (an address-space or container memory \
             limit is likely): use a smaller sector or cutoffs, or a method that stores less"
        ),
        requested: bytes,
        limit: available_bytes().unwrap_or(UNKNOWN_LIMIT),
    })?;
    Ok(v)
}
