//! Writing outputs so that nothing half-written is ever left behind.
//!
//! A single file is written under a temporary name in its final directory
//! and renamed when complete ([`write_atomically`]). A capture's set of
//! outputs is written into a hidden staging directory beside its final one
//! and moved into place only when every file is complete ([`Staging`]);
//! if processing fails, the staging directory is removed.

use anyhow::{Context, Result};
use std::path::{Path, PathBuf};

/// Temporary sibling name for `path`: `.<stem>.tmp-<pid>.<extension>` (the
/// extension kept, since some encoders choose the format by it).
pub fn temp_sibling(path: &Path) -> PathBuf {
    let stem = path.file_stem().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let ext = path.extension().map(|e| format!(".{}", e.to_string_lossy())).unwrap_or_default();
    path.with_file_name(format!(".{stem}.tmp-{}{ext}", std::process::id()))
}

/// Writes `path` by calling `write` on a temporary sibling, then renaming it.
/// On error the temporary file is removed and `path` is untouched.
pub fn write_atomically<F>(path: &Path, write: F) -> Result<()>
where
    F: FnOnce(&Path) -> Result<()>,
{
    let tmp = temp_sibling(path);
    let result = write(&tmp).and_then(|()| {
        std::fs::rename(&tmp, path).with_context(|| format!("renaming into {}", path.display()))
    });
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result
}

/// A hidden directory collecting one capture's outputs until they are complete.
pub struct Staging {
    dir: PathBuf,
    final_dir: PathBuf,
    committed: bool,
}

impl Staging {
    /// Creates `<out_root>/.<name>.partial-<pid>` for outputs that will end up
    /// in `<out_root>/<name>`.
    pub fn new(out_root: &Path, name: &str) -> Result<Self> {
        std::fs::create_dir_all(out_root).with_context(|| format!("creating {}", out_root.display()))?;
        let dir = out_root.join(format!(".{name}.partial-{}", std::process::id()));
        if dir.exists() {
            std::fs::remove_dir_all(&dir).ok();
        }
        std::fs::create_dir(&dir).with_context(|| format!("creating {}", dir.display()))?;
        Ok(Staging { dir, final_dir: out_root.join(name), committed: false })
    }

    /// Path of an output file while it is being written.
    pub fn path(&self, file: &str) -> PathBuf {
        self.dir.join(file)
    }

    /// Moves the complete set of outputs into the final directory, replacing
    /// an earlier one. Returns the final directory.
    pub fn commit(mut self) -> Result<PathBuf> {
        let old = self.final_dir.with_file_name(format!(
            ".{}.old-{}",
            self.final_dir.file_name().unwrap().to_string_lossy(),
            std::process::id()
        ));
        let replaced = self.final_dir.exists();
        if replaced {
            std::fs::rename(&self.final_dir, &old)
                .with_context(|| format!("moving aside {}", self.final_dir.display()))?;
        }
        std::fs::rename(&self.dir, &self.final_dir)
            .with_context(|| format!("moving outputs into {}", self.final_dir.display()))?;
        self.committed = true;
        if replaced {
            std::fs::remove_dir_all(&old).ok();
        }
        Ok(self.final_dir.clone())
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_dir_all(&self.dir);
        }
    }
}
