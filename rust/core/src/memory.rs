//! Refuse allocations that cannot succeed, before making them: a failed allocation
//! aborts the process, which must never happen on user input.

use crate::error::{CoreError, CoreResult};

/// Bytes this process can still allocate, when the system says: the smallest of
/// the available physical memory (`MemAvailable` in `/proc/meminfo`), the room left
/// under a cgroup memory limit (v2 `memory.max`, v1 `memory.limit_in_bytes`, for the
/// process's own cgroup and its ancestors, counting reclaimable page cache as free),
/// and the room left under the address-space limit (`RLIMIT_AS`, as batch schedulers
/// and `ulimit -v` set it, minus the current `VmSize`).
pub fn available_bytes() -> Option<u128> {
    [meminfo_available(), cgroup_room(), address_space_room()]
        .into_iter()
        .flatten()
        .min()
}

fn meminfo_available() -> Option<u128> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kib: u128 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib * 1024)
}

/// Limits at or above this are "no limit" (cgroup v1 reports 2^63 rounded to a page).
const NO_LIMIT: u128 = 1 << 60;

fn read_number(path: &std::path::Path) -> Option<u128> {
    std::fs::read_to_string(path).ok()?.trim().parse().ok()
}

fn stat_value(path: &std::path::Path, key: &str) -> Option<u128> {
    let text = std::fs::read_to_string(path).ok()?;
    text.lines().find_map(|l| {
        let mut parts = l.split_whitespace();
        (parts.next()? == key).then(|| parts.next()?.parse().ok())?
    })
}

/// Room under the memory limit of one cgroup directory (v2 or v1 file names).
fn cgroup_dir_room(dir: &std::path::Path) -> Option<u128> {
    let (limit, usage, cache) = if dir.join("memory.max").exists() {
        let limit = std::fs::read_to_string(dir.join("memory.max")).ok()?;
        let limit: u128 = limit.trim().parse().ok()?; // "max" fails here: no limit
        let usage = read_number(&dir.join("memory.current"))?;
        (
            limit,
            usage,
            stat_value(&dir.join("memory.stat"), "inactive_file"),
        )
    } else {
        let limit = read_number(&dir.join("memory.limit_in_bytes"))?;
        let usage = read_number(&dir.join("memory.usage_in_bytes"))?;
        (
            limit,
            usage,
            stat_value(&dir.join("memory.stat"), "total_inactive_file"),
        )
    };
    if limit >= NO_LIMIT {
        return None;
    }
    let used = usage.saturating_sub(cache.unwrap_or(0));
    Some(limit.saturating_sub(used))
}

/// Smallest room under any memory limit of this process's cgroups: its own cgroup
/// directory and every ancestor (limits are hierarchical), plus the mount roots
/// (inside a cgroup namespace the root is the process's own cgroup).
fn cgroup_room() -> Option<u128> {
    use std::path::{Path, PathBuf};
    let text = std::fs::read_to_string("/proc/self/cgroup").unwrap_or_default();
    let mut dirs: Vec<PathBuf> = vec![
        PathBuf::from("/sys/fs/cgroup"),
        PathBuf::from("/sys/fs/cgroup/memory"),
    ];
    for line in text.lines() {
        let mut parts = line.splitn(3, ':');
        let (_, controllers, path) = match (parts.next(), parts.next(), parts.next()) {
            (Some(a), Some(b), Some(c)) => (a, b, c),
            _ => continue,
        };
        let base = if controllers.is_empty() {
            Path::new("/sys/fs/cgroup")
        } else if controllers.split(',').any(|c| c == "memory") {
            Path::new("/sys/fs/cgroup/memory")
        } else {
            continue;
        };
        let mut dir = base.join(path.trim_start_matches('/'));
        while dir.starts_with(base) && dir != base {
            dirs.push(dir.clone());
            if !dir.pop() {
                break;
            }
        }
    }
    dirs.iter().filter_map(|d| cgroup_dir_room(d)).min()
}

/// Room under the soft address-space limit (`RLIMIT_AS`): the limit minus `VmSize`.
fn address_space_room() -> Option<u128> {
    let limits = std::fs::read_to_string("/proc/self/limits").ok()?;
    let line = limits.lines().find(|l| l.starts_with("Max address space"))?;
    let soft: u128 = line
        .trim_start_matches("Max address space")
        .split_whitespace()
        .next()?
        .parse()
        .ok()?; // "unlimited" fails here: no limit
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let size_kib: u128 = status
        .lines()
        .find(|l| l.starts_with("VmSize:"))
        .and_then(|l| l.split_whitespace().nth(1)?.parse().ok())
        .unwrap_or(0);
    Some(soft.saturating_sub(size_kib * 1024))
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
            what: format!("{what} (bytes); use a smaller sector or cutoffs, or a method that stores less"),
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
    let mut v = Vec::new();
    try_reserve_for(&mut v, len, what)?;
    Ok(v)
}

/// Room for `len` elements in the empty or short vector `v` (nothing when it has it
/// already), allocated fallibly (see [`try_filled`]).
///
/// # Errors
/// [`CoreError::TooLarge`] when the request exceeds the available memory or the
/// allocator refuses it.
pub fn try_reserve_for<T>(v: &mut Vec<T>, len: usize, what: &str) -> CoreResult<()> {
    if v.capacity() >= len {
        return Ok(());
    }
    let bytes = len as u128 * std::mem::size_of::<T>().max(1) as u128;
    ensure_room(bytes, what)?;
    v.try_reserve_exact(len - v.len())
        .map_err(|_| CoreError::TooLarge {
            what: format!(
                "{what} (bytes); the allocator refused it (an address-space or container memory \
             limit is likely): use a smaller sector or cutoffs, or a method that stores less"
            ),
            requested: bytes,
            limit: available_bytes().unwrap_or(UNKNOWN_LIMIT),
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cgroup_files_are_read_as_a_limit_minus_usage() {
        // cgroup v2 interface files (kernel documentation, Documentation/admin-guide/
        // cgroup-v2.rst): memory.max, memory.current, memory.stat; v1 uses
        // memory.limit_in_bytes and memory.usage_in_bytes.
        let dir = std::env::temp_dir().join(format!("fockmill-cgroup-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        std::fs::write(dir.join("memory.max"), "1000000\n").unwrap();
        std::fs::write(dir.join("memory.current"), "400000\n").unwrap();
        std::fs::write(dir.join("memory.stat"), "anon 1\ninactive_file 100000\n").unwrap();
        assert_eq!(cgroup_dir_room(&dir), Some(700_000));
        std::fs::write(dir.join("memory.max"), "max\n").unwrap();
        assert_eq!(cgroup_dir_room(&dir), None);
        std::fs::remove_file(dir.join("memory.max")).unwrap();
        std::fs::write(dir.join("memory.limit_in_bytes"), "9223372036854771712\n").unwrap();
        std::fs::write(dir.join("memory.usage_in_bytes"), "5\n").unwrap();
        assert_eq!(cgroup_dir_room(&dir), None);
        std::fs::write(dir.join("memory.limit_in_bytes"), "2000\n").unwrap();
        std::fs::write(dir.join("memory.stat"), "total_inactive_file 5\n").unwrap();
        assert_eq!(cgroup_dir_room(&dir), Some(2000));
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn absurd_requests_are_refused_not_aborted() {
        let e = try_filled::<u64>(usize::MAX / 16, 0, "a test buffer").unwrap_err();
        assert!(matches!(e, CoreError::TooLarge { .. }));
    }
}
