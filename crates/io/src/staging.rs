//! Writing outputs so that nothing half-written is ever left behind, and
//! nothing fringeflow did not make is ever replaced.
//!
//! A single file is written under a temporary name in its final directory
//! and renamed when complete ([`write_atomically`]). A capture's set of
//! outputs is written into a hidden staging directory beside its final one
//! and moved into place only when every file is complete ([`Staging`]);
//! if processing fails, the staging directory is removed.
//!
//! Ownership: every output directory holds [`OWNER_RECORD`], a small JSON
//! file saying fringeflow made it. An existing directory (or file) at an
//! output's path without that record is the user's own and is never
//! replaced, moved or removed ([`check_replaceable`]). Names fringeflow
//! derives from a capture's name are checked against its own files
//! ([`output_name_problem`]).
//!
//! In-flight temporary paths are registered ([`in_flight`]) so that a
//! process stopped by a second signal can remove them before it exits.

use anyhow::{bail, Context, Result};
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// The ownership record inside each output directory.
pub const OWNER_RECORD: &str = ".fringeflow-output";

static IN_FLIGHT: Mutex<BTreeSet<PathBuf>> = Mutex::new(BTreeSet::new());

/// Records a path to remove if the process is stopped before it is done.
pub fn register(p: &Path) {
    IN_FLIGHT.lock().unwrap_or_else(|e| e.into_inner()).insert(p.to_path_buf());
}

/// The path is complete (or gone): no longer removed on a stop.
pub fn unregister(p: &Path) {
    IN_FLIGHT.lock().unwrap_or_else(|e| e.into_inner()).remove(p);
}

/// Temporary files and staging directories being written right now.
pub fn in_flight() -> Vec<PathBuf> {
    IN_FLIGHT.lock().unwrap_or_else(|e| e.into_inner()).iter().cloned().collect()
}

/// Set once a stop's cleanup has begun: nothing new is created after it.
static STOPPING: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

/// Creates `p` with `create` and registers it in one step with respect to
/// a stop: once [`remove_in_flight`] has begun, nothing is created (an
/// `Interrupted` error), so no writer can leave a path behind the cleanup.
pub fn create_registered<T>(p: &Path, create: impl FnOnce() -> std::io::Result<T>) -> std::io::Result<T> {
    let mut set = IN_FLIGHT.lock().unwrap_or_else(|e| e.into_inner());
    if STOPPING.load(std::sync::atomic::Ordering::SeqCst) {
        return Err(std::io::Error::new(std::io::ErrorKind::Interrupted, "stopping on a signal"));
    }
    let made = create()?;
    set.insert(p.to_path_buf());
    Ok(made)
}

/// Removes every in-flight path (for a process about to exit on a signal).
/// Writers are stopped first: from now on nothing new is created
/// ([`create_registered`]), and each staging folder is renamed away before
/// it is removed, so a writer still working creates nothing under its
/// name (a file opened by path in it fails).
pub fn remove_in_flight() {
    let set = IN_FLIGHT.lock().unwrap_or_else(|e| e.into_inner());
    STOPPING.store(true, std::sync::atomic::Ordering::SeqCst);
    for p in set.iter() {
        if p.is_dir() {
            let aside = p.with_file_name(format!("{}.removing", p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default()));
            let gone = if std::fs::rename(p, &aside).is_ok() { &aside } else { p };
            std::fs::remove_dir_all(gone).ok();
        } else {
            std::fs::remove_file(p).ok();
        }
    }
}

/// A per-process tag for temporary names: pid and a random part, so two
/// processes with the same pid (other PID namespaces, other hosts) differ.
fn process_tag() -> &'static str {
    static TAG: std::sync::OnceLock<String> = std::sync::OnceLock::new();
    TAG.get_or_init(|| {
        let nonce: u32 = rand::random();
        format!("{}-{nonce:08x}", std::process::id())
    })
}

/// Temporary sibling name for `path`: `.<stem>.tmp-<tag>.<extension>` (the
/// extension kept, since some encoders choose the format by it).
pub fn temp_sibling(path: &Path) -> PathBuf {
    let stem = path.file_stem().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let ext = path.extension().map(|e| format!(".{}", e.to_string_lossy())).unwrap_or_default();
    path.with_file_name(format!(".{stem}.tmp-{}{ext}", process_tag()))
}

/// Writes `path` by calling `write` on a temporary sibling, then renaming it.
/// On error the temporary file is removed and `path` is untouched.
pub fn write_atomically<F>(path: &Path, write: F) -> Result<()>
where
    F: FnOnce(&Path) -> Result<()>,
{
    let tmp = temp_sibling(path);
    // A missing parent folder is created (as `run` creates its --out), and
    // the temporary file, both only while no stop is under way.
    create_registered(&tmp, || {
        if let Some(parent) = path.parent().filter(|p| !p.as_os_str().is_empty() && !p.exists()) {
            std::fs::create_dir_all(parent)?;
        }
        std::fs::File::create(&tmp).map(drop)
    })
    .with_context(|| format!("creating {}", tmp.display()))?;
    let result = write(&tmp).and_then(|()| std::fs::rename(&tmp, path).with_context(|| format!("renaming into {}", path.display())));
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    unregister(&tmp);
    result
}

/// Whether `file` (a name in an output directory) is a staging or
/// moved-aside directory of output `name`.
pub fn is_staging_of(file: &str, name: &str) -> bool {
    [format!(".{name}.partial-"), format!(".{name}.old-")].iter().any(|m| file.starts_with(m.as_str()))
}

/// Why a capture name cannot be an output name in a batch directory, if it
/// cannot: hidden names (they could meet fringeflow's own hidden files)
/// and the names of fringeflow's own files.
pub fn output_name_problem(name: &str) -> Option<String> {
    let reserved = name == "summary.json"
        || name == "index.html"
        || (name.starts_with("batch") && name.ends_with(".json"))
        || (name.starts_with("slurm-") && name.ends_with(".log"));
    if name.is_empty() || name.starts_with('.') {
        Some(format!("its output name '{name}' would be hidden among fringeflow's own staging and lock files; rename the capture"))
    } else if reserved {
        Some(format!("its output name '{name}' is the name of one of fringeflow's own files in the output directory; rename the capture"))
    } else {
        None
    }
}

/// Fails unless `path` is free or an output directory fringeflow made.
pub fn check_replaceable(path: &Path) -> Result<()> {
    match std::fs::symlink_metadata(path) {
        Err(_) => Ok(()),
        Ok(m) if m.is_dir() && path.join(OWNER_RECORD).is_file() => Ok(()),
        Ok(m) if m.is_dir() => bail!(
            "{} exists and was not made by fringeflow (no {OWNER_RECORD} record): refusing to replace it; move it away or choose another --out",
            path.display()
        ),
        Ok(_) => bail!("{} exists and is not a fringeflow output directory: refusing to replace it; move it away or choose another --out", path.display()),
    }
}

/// A hidden directory collecting one capture's outputs until they are complete.
pub struct Staging {
    dir: PathBuf,
    final_dir: PathBuf,
    committed: bool,
}

impl Staging {
    /// Creates `<out_root>/.<name>.partial-<tag>` for outputs that will end
    /// up in `<out_root>/<name>`, with its ownership record. Fails when the
    /// final directory exists and is not fringeflow's.
    pub fn new(out_root: &Path, name: &str) -> Result<Self> {
        std::fs::create_dir_all(out_root).with_context(|| format!("creating {}", out_root.display()))?;
        let final_dir = out_root.join(name);
        check_replaceable(&final_dir)?;
        // Unique per staging, not only per process: two stagings of one name
        // in a process (without the capture's lock) must not share a folder.
        static NEXT: std::sync::atomic::AtomicUsize = std::sync::atomic::AtomicUsize::new(0);
        let n = NEXT.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        let dir = out_root.join(format!(".{name}.partial-{}-{n}", process_tag()));
        if dir.exists() {
            std::fs::remove_dir_all(&dir).ok();
        }
        create_registered(&dir, || std::fs::create_dir(&dir)).with_context(|| format!("creating {}", dir.display()))?;
        let staging = Staging { dir, final_dir, committed: false };
        let record = serde_json::json!({
            "made_by": concat!("fringeflow ", env!("CARGO_PKG_VERSION")),
            "note": "this directory is a fringeflow output; fringeflow replaces it only when this record is here",
        });
        std::fs::write(staging.path(OWNER_RECORD), serde_json::to_vec_pretty(&record)?).with_context(|| format!("writing {}", staging.path(OWNER_RECORD).display()))?;
        Ok(staging)
    }

    /// Path of an output file while it is being written.
    pub fn path(&self, file: &str) -> PathBuf {
        self.dir.join(file)
    }

    /// Moves the complete set of outputs into the final directory, replacing
    /// an earlier fringeflow output (never anything else). Returns the
    /// final directory.
    pub fn commit(mut self) -> Result<PathBuf> {
        check_replaceable(&self.final_dir)?;
        let old = self.final_dir.with_file_name(format!(".{}.old-{}", self.final_dir.file_name().unwrap().to_string_lossy(), process_tag()));
        let replaced = self.final_dir.exists();
        if replaced {
            std::fs::rename(&self.final_dir, &old).with_context(|| format!("moving aside {}", self.final_dir.display()))?;
            register(&old);
        }
        if let Err(e) = std::fs::rename(&self.dir, &self.final_dir) {
            if replaced {
                // Put the earlier output back.
                std::fs::rename(&old, &self.final_dir).ok();
                unregister(&old);
            }
            return Err(e).with_context(|| format!("moving outputs into {}", self.final_dir.display()));
        }
        unregister(&self.dir);
        self.committed = true;
        if replaced {
            std::fs::remove_dir_all(&old).ok();
            unregister(&old);
        }
        Ok(self.final_dir.clone())
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_dir_all(&self.dir);
            unregister(&self.dir);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn never_replaces_what_fringeflow_did_not_make() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::create_dir(dir.path().join("good")).unwrap();
        std::fs::write(dir.path().join("good/notes.txt"), "n").unwrap();
        let e = Staging::new(dir.path(), "good").err().expect("refused");
        assert!(e.to_string().contains("not made by fringeflow"), "{e}");
        assert_eq!(std::fs::read_to_string(dir.path().join("good/notes.txt")).unwrap(), "n");
        std::fs::write(dir.path().join("file"), "x").unwrap();
        assert!(Staging::new(dir.path(), "file").is_err());
        // Its own output is replaced.
        let s = Staging::new(dir.path(), "mine").unwrap();
        std::fs::write(s.path("a"), "1").unwrap();
        s.commit().unwrap();
        let s = Staging::new(dir.path(), "mine").unwrap();
        std::fs::write(s.path("a"), "2").unwrap();
        s.commit().unwrap();
        assert_eq!(std::fs::read_to_string(dir.path().join("mine/a")).unwrap(), "2");
        assert!(in_flight().iter().all(|p| !p.starts_with(dir.path())), "{:?}", in_flight());
    }

    #[test]
    fn derived_names_that_meet_fringeflows_own_files_are_refused() {
        for bad in [".hidden", "batch", "batch.json", "batch-0-of-2.json", "summary.json", "index.html", "slurm-1_2.log"] {
            assert_eq!(output_name_problem(bad).is_some(), bad != "batch", "{bad}");
        }
        assert!(output_name_problem("capture-01").is_none());
    }
}
