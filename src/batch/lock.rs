//! One lock file per capture output, so two runs writing the same output
//! directory never work on the same capture at once.
//!
//! `<out>/.<name>.lock` is created exclusively and holds the owner's pid. A
//! lock whose pid no longer runs is stale and taken over. Released on drop.

use anyhow::{bail, Context, Result};
use std::io::Write;
use std::path::{Path, PathBuf};

pub struct OutputLock {
    path: PathBuf,
}

fn pid_alive(pid: u32) -> bool {
    Path::new(&format!("/proc/{pid}")).exists()
}

impl OutputLock {
    pub fn acquire(out_root: &Path, name: &str) -> Result<OutputLock> {
        std::fs::create_dir_all(out_root).with_context(|| format!("creating {}", out_root.display()))?;
        let path = out_root.join(format!(".{name}.lock"));
        for _ in 0..2 {
            match std::fs::OpenOptions::new().write(true).create_new(true).open(&path) {
                Ok(mut f) => {
                    if let Err(e) = write!(f, "{}", std::process::id()) {
                        // e.g. a full disk: do not leave an empty lock behind.
                        std::fs::remove_file(&path).ok();
                        return Err(e).with_context(|| format!("writing {}", path.display()));
                    }
                    return Ok(OutputLock { path });
                }
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {
                    let owner = std::fs::read_to_string(&path).ok().and_then(|s| s.trim().parse::<u32>().ok());
                    match owner {
                        Some(pid) if pid != std::process::id() && pid_alive(pid) => {
                            bail!("output '{name}' is being written by another run (pid {pid}, lock {})", path.display())
                        }
                        _ => {
                            // Stale: its owner is gone. Take it over.
                            std::fs::remove_file(&path).ok();
                        }
                    }
                }
                Err(e) => return Err(e).with_context(|| format!("creating lock {}", path.display())),
            }
        }
        bail!("could not take the lock {}", path.display())
    }

    /// Removes staging leftovers of earlier runs that died (their pid is gone).
    pub fn clean_stale_staging(&self, out_root: &Path, name: &str) {
        let Ok(entries) = std::fs::read_dir(out_root) else { return };
        for e in entries.flatten() {
            let file = e.file_name().to_string_lossy().into_owned();
            for marker in [format!(".{name}.partial-"), format!(".{name}.old-")] {
                if let Some(pid) = file.strip_prefix(&marker).and_then(|p| p.parse::<u32>().ok()) {
                    if pid != std::process::id() && !pid_alive(pid) {
                        std::fs::remove_dir_all(e.path()).ok();
                    }
                }
            }
        }
    }
}

impl Drop for OutputLock {
    fn drop(&mut self) {
        std::fs::remove_file(&self.path).ok();
    }
}
