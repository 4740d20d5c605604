//! How much memory the machine has for a read, and the check that a size a
//! file declares fits before anything is allocated for it.

use anyhow::{bail, Result};

/// MemAvailable of /proc/meminfo, bytes (None where it cannot be read).
pub fn available_bytes() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    Some(line.split_whitespace().nth(1)?.parse::<u64>().ok()? * 1024)
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
                "{what} declares {values} values ({:.1} GB to read as {bytes_each}-byte numbers); the machine has {:.1} GB of memory available",
                needed as f64 / 1e9,
                available as f64 / 1e9
            );
        }
    }
    Ok(())
}
