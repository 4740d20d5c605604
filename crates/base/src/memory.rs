//! How much memory this process may still take and how much space the
//! output file system has, and the checks that a size a file declares fits
//! before anything is allocated or written for it.

use anyhow::{bail, Result};

/// Bytes this process may still allocate: the least of the machine's
/// MemAvailable (/proc/meminfo), what its memory cgroup still allows (a
/// Slurm job's or container's limit, cgroup v2 or v1) and what its
/// address-space limit (`ulimit -v`) leaves above its present size. None
/// where none of them can be read.
pub fn available_bytes() -> Option<u64> {
    [mem_available(), cgroup_room(), address_space_room()].into_iter().flatten().min()
}

fn mem_available() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    Some(line.split_whitespace().nth(1)?.parse::<u64>().ok()? * 1024)
}

fn read_number(path: &str) -> Option<u64> {
    std::fs::read_to_string(path).ok()?.trim().parse().ok()
}

/// Limit minus usage of this process's memory cgroup (None: no limit).
fn cgroup_room() -> Option<u64> {
    let groups = std::fs::read_to_string("/proc/self/cgroup").ok()?;
    for line in groups.lines() {
        let mut parts = line.splitn(3, ':');
        let (_, controllers, path) = (parts.next()?, parts.next()?, parts.next()?);
        let (limit, usage) = if controllers.is_empty() {
            (format!("/sys/fs/cgroup{path}/memory.max"), format!("/sys/fs/cgroup{path}/memory.current"))
        } else if controllers.split(',').any(|c| c == "memory") {
            (format!("/sys/fs/cgroup/memory{path}/memory.limit_in_bytes"), format!("/sys/fs/cgroup/memory{path}/memory.usage_in_bytes"))
        } else {
            continue;
        };
        // "max" (v2) or a huge figure (v1) when there is no limit.
        if let Some(limit) = read_number(&limit).filter(|&l| l < 1 << 60) {
            return Some(limit.saturating_sub(read_number(&usage).unwrap_or(0)));
        }
    }
    None
}

/// The soft address-space limit minus the present virtual size.
fn address_space_room() -> Option<u64> {
    let limits = std::fs::read_to_string("/proc/self/limits").ok()?;
    let line = limits.lines().find(|l| l.starts_with("Max address space"))?;
    let limit: u64 = line.split_whitespace().nth(3)?.parse().ok()?; // "unlimited" fails here
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let size_kb: u64 = status.lines().find(|l| l.starts_with("VmSize:"))?.split_whitespace().nth(1)?.parse().ok()?;
    Some(limit.saturating_sub(size_kb * 1024))
}

/// Refuses to allocate `values` × `bytes_each` for `what` (a dataset, one
/// frame) when that overflows or exceeds the available memory, with both
/// figures.
pub fn check_fits(what: &str, values: u64, bytes_each: u64) -> Result<()> {
    let Some(needed) = values.checked_mul(bytes_each) else {
        bail!("{what} declares {values} values: more than any memory can hold");
    };
    if let Some(available) = available_bytes() {
        if needed > available {
            bail!(
                "{what} declares {values} values ({:.1} GB to read as {bytes_each}-byte numbers); the machine has {:.1} GB of memory available to this process",
                needed as f64 / 1e9,
                available as f64 / 1e9
            );
        }
    }
    Ok(())
}

/// Refuses `bytes` for `what` (a plan's tables) when they exceed the
/// available memory, with both figures.
pub fn check_bytes_fit(what: &str, bytes: u64) -> Result<()> {
    if let Some(available) = available_bytes() {
        if bytes > available {
            bail!("{what} needs about {:.1} GB of memory; the machine has {:.1} GB of memory available to this process", bytes as f64 / 1e9, available as f64 / 1e9);
        }
    }
    Ok(())
}

/// Bytes free to an unprivileged writer on the file system holding `dir`
/// (the nearest existing ancestor when `dir` does not exist yet); None
/// where it cannot be asked.
pub fn free_space_bytes(dir: &std::path::Path) -> Option<u64> {
    use std::os::unix::ffi::OsStrExt;
    let existing = dir.ancestors().find(|a| a.as_os_str().is_empty() || a.exists())?;
    let existing = if existing.as_os_str().is_empty() { std::path::Path::new(".") } else { existing };
    let c = std::ffi::CString::new(existing.as_os_str().as_bytes()).ok()?;
    let mut stat = std::mem::MaybeUninit::<libc::statvfs>::uninit();
    // SAFETY: `c` is a NUL-terminated path and `stat` is written by statvfs
    // before it is read (only when it returns 0).
    let stat = unsafe {
        if libc::statvfs(c.as_ptr(), stat.as_mut_ptr()) != 0 {
            return None;
        }
        stat.assume_init()
    };
    Some(stat.f_bavail as u64 * stat.f_frsize as u64)
}

/// Refuses to write `bytes` of `what` into `dir` when its file system has
/// less free space, with both figures.
pub fn check_space(what: &str, bytes: u64, dir: &std::path::Path) -> Result<()> {
    if let Some(free) = free_space_bytes(dir) {
        if bytes > free {
            bail!("{what} need about {:.1} GB; the file system of {} has {:.1} GB free", bytes as f64 / 1e9, dir.display(), free as f64 / 1e9);
        }
    }
    Ok(())
}
