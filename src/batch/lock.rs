//! One lock per capture output (and one for the batch summary), so that
//! runs sharing an output directory, on one host or on several hosts of a
//! shared filesystem, never work on the same capture at once.
//!
//! `<out>/.<name>.lock` is taken in one atomic step with an exclusive OS
//! lock on the file (`flock`), which the kernel releases when its holder
//! dies, in any PID namespace. The file records who holds it: host name,
//! boot identity (`/proc/sys/kernel/random/boot_id`), pid, and a heartbeat:
//! the holder touches the file every [`HEARTBEAT`]. Liveness never rests
//! on a pid, so a reused pid is no obstacle:
//!
//! - the OS lock is held → a live run has it;
//! - the OS lock is free and the record is this host's (same boot) → its
//!   holder died: taken over;
//! - the OS lock is free but the record is another host's and its heartbeat
//!   is younger than [`LEASE`] → a live run on a host whose locks this
//!   filesystem may not share (some network filesystems do not pass
//!   `flock` between hosts): held;
//! - an older heartbeat, or another boot of this host → stale: taken over.
//!
//! Where the filesystem refuses OS locks altogether, the record decides
//! alone (held while its heartbeat is younger than the lease). Released on
//! drop: the file is removed while still locked. An opener that locked a
//! file since removed notices (the path no longer names its file) and
//! tries again.

use anyhow::{Context, Result};
use serde::{Deserialize, Serialize};
use std::fs::{File, OpenOptions, TryLockError};
use std::io::{Read, Seek, Write};
use std::os::unix::fs::MetadataExt;
use std::path::{Path, PathBuf};
use std::time::{Duration, SystemTime};

/// How often a holder touches its lock file.
pub const HEARTBEAT: Duration = Duration::from_secs(10);
/// A lock from another host whose heartbeat is older than this is stale.
pub const LEASE: Duration = Duration::from_secs(120);

/// Who holds a lock, as written in the lock file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Holder {
    pub host: String,
    pub boot_id: String,
    pub pid: u32,
    pub tool: String,
}

impl Holder {
    pub fn this_process() -> Holder {
        Holder { host: host_name(), boot_id: boot_id(), pid: std::process::id(), tool: concat!("fringeflow ", env!("CARGO_PKG_VERSION")).into() }
    }

    fn same_boot(&self, other: &Holder) -> bool {
        self.host == other.host && self.boot_id == other.boot_id
    }

    pub fn describe(&self) -> String {
        format!("pid {} on {}", self.pid, self.host)
    }
}

pub fn host_name() -> String {
    std::fs::read_to_string("/proc/sys/kernel/hostname").map(|s| s.trim().to_string()).unwrap_or_else(|_| "unknown-host".into())
}

pub fn boot_id() -> String {
    std::fs::read_to_string("/proc/sys/kernel/random/boot_id").map(|s| s.trim().to_string()).unwrap_or_default()
}

/// The lock is held by a live run.
#[derive(Debug, thiserror::Error)]
#[error("output '{name}' is being written by another run ({holder})")]
pub struct HeldByAnother {
    pub name: String,
    pub holder: String,
}

pub struct OutputLock {
    path: PathBuf,
    file: Option<File>,
    stop: Option<std::sync::mpsc::Sender<()>>,
    heartbeat: Option<std::thread::JoinHandle<()>>,
}

/// Outcome of one attempt at a lock file.
enum Attempt {
    Taken(File),
    Held(String),
    /// The file changed under us (removed or replaced): try again.
    Retry,
}

fn read_holder(file: &mut File) -> Option<Holder> {
    let mut text = String::new();
    file.seek(std::io::SeekFrom::Start(0)).ok()?;
    file.read_to_string(&mut text).ok()?;
    serde_json::from_str(&text).ok()
}

fn heartbeat_age(meta: &std::fs::Metadata) -> Duration {
    meta.modified().ok().and_then(|m| SystemTime::now().duration_since(m).ok()).unwrap_or(Duration::ZERO)
}

fn attempt(path: &Path, me: &Holder) -> Result<Attempt> {
    let open = || OpenOptions::new().read(true).write(true).create(true).truncate(false).open(path);
    // A lock file this process creates is registered as it is created, so
    // a stop's cleanup never misses it (nor finds one being created).
    let created = !path.exists();
    let file = if created { crate::io::staging::create_registered(path, open) } else { open() }.with_context(|| format!("opening lock {}", path.display()))?;
    let result = attempt_on(file, path, me);
    if created && !matches!(result, Ok(Attempt::Taken(_))) {
        crate::io::staging::unregister(path);
    }
    result
}

fn attempt_on(mut file: File, path: &Path, me: &Holder) -> Result<Attempt> {
    let os_lock = match file.try_lock() {
        Ok(()) => true,
        Err(TryLockError::WouldBlock) => {
            let who = read_holder(&mut file).map(|h| h.describe()).unwrap_or_else(|| "holder not recorded yet".into());
            return Ok(Attempt::Held(who));
        }
        // The filesystem has no OS locks: the record alone decides.
        Err(TryLockError::Error(_)) => false,
    };
    // The path must still name the file we locked (a holder removes its
    // file on release, and another opener may have created a new one).
    let (ours, now) = (file.metadata()?, std::fs::metadata(path));
    match now {
        Ok(m) if m.ino() == ours.ino() && m.dev() == ours.dev() => {}
        _ => return Ok(Attempt::Retry),
    }
    if let Some(holder) = read_holder(&mut file) {
        let fresh = heartbeat_age(&ours) < LEASE;
        // A record of this host from an earlier boot died with that boot,
        // however fresh its heartbeat looks: only another host's can be live.
        let live_elsewhere = holder.host != me.host && fresh;
        let live_here_without_os_lock = !os_lock && holder.same_boot(me) && holder.pid != me.pid && fresh;
        if live_elsewhere || live_here_without_os_lock {
            return Ok(Attempt::Held(holder.describe()));
        }
    }
    // Ours: record who holds it. If that fails (a full disk), leave no
    // empty lock file behind: it is ours to remove.
    let recorded = (|| -> std::io::Result<()> {
        file.set_len(0)?;
        file.seek(std::io::SeekFrom::Start(0))?;
        file.write_all(serde_json::to_string(me).unwrap_or_default().as_bytes())?;
        file.flush()
    })();
    if let Err(e) = recorded {
        std::fs::remove_file(path).ok();
        return Err(e).with_context(|| format!("writing {}", path.display()));
    }
    Ok(Attempt::Taken(file))
}

impl OutputLock {
    /// Takes `<out_root>/.<name>.lock`, or fails with [`HeldByAnother`].
    pub fn acquire(out_root: &Path, name: &str) -> Result<OutputLock> {
        std::fs::create_dir_all(out_root).with_context(|| format!("creating {}", out_root.display()))?;
        let path = out_root.join(format!(".{name}.lock"));
        let me = Holder::this_process();
        for _ in 0..20 {
            match attempt(&path, &me) {
                Ok(Attempt::Taken(file)) => {
                    crate::io::staging::register(&path);
                    return Ok(OutputLock::start(path, file));
                }
                Ok(Attempt::Held(holder)) => return Err(HeldByAnother { name: name.to_string(), holder }.into()),
                Ok(Attempt::Retry) => continue,
                Err(e) => {
                    // e.g. a full disk while recording: leave no empty lock behind.
                    return Err(e.context(format!("taking the lock {}", path.display())));
                }
            }
        }
        anyhow::bail!("could not take the lock {}: it kept changing", path.display())
    }

    fn start(path: PathBuf, file: File) -> OutputLock {
        // The heartbeat wakes every HEARTBEAT, or at once when told to stop
        // (the sender dropped on release).
        let (stop, wake) = std::sync::mpsc::channel::<()>();
        let heartbeat = {
            let file = file.try_clone().ok();
            std::thread::Builder::new()
                .name("lock-heartbeat".into())
                .spawn(move || {
                    while let Err(std::sync::mpsc::RecvTimeoutError::Timeout) = wake.recv_timeout(HEARTBEAT) {
                        if let Some(f) = &file {
                            f.set_modified(SystemTime::now()).ok();
                        }
                    }
                })
                .ok()
        };
        OutputLock { path, file: Some(file), stop: Some(stop), heartbeat }
    }

    /// Removes staging leftovers of this output: while the lock is held no
    /// live run can own any, so whatever is there belongs to a run that died.
    pub fn clean_stale_staging(&self, out_root: &Path, name: &str) {
        let Ok(entries) = std::fs::read_dir(out_root) else { return };
        for e in entries.flatten() {
            let file = e.file_name().to_string_lossy().into_owned();
            if crate::io::staging::is_staging_of(&file, name) {
                std::fs::remove_dir_all(e.path()).ok();
            }
        }
    }
}

impl Drop for OutputLock {
    fn drop(&mut self) {
        self.stop.take();
        if let Some(h) = self.heartbeat.take() {
            h.join().ok();
        }
        // Removed while still locked, then unlocked by closing.
        std::fs::remove_file(&self.path).ok();
        crate::io::staging::unregister(&self.path);
        self.file.take();
    }
}

/// A run's claim on its output directory for one pipeline: runs with the
/// same pipeline share `<out>/.pipeline.lock` (a shared OS lock, held for
/// the whole run), a run with another pipeline is refused while any of
/// them is live, so two pipelines never interleave their outputs in one
/// folder. The file records the pipeline hash of the runs holding it; the
/// last run to leave removes it.
pub struct PipelineClaim {
    file: Option<File>,
    path: PathBuf,
}

impl PipelineClaim {
    pub fn acquire(out_root: &Path, pipeline_sha256: &str) -> Result<PipelineClaim> {
        std::fs::create_dir_all(out_root).with_context(|| format!("creating {}", out_root.display()))?;
        let path = out_root.join(".pipeline.lock");
        for _ in 0..20 {
            let mut file = OpenOptions::new().read(true).write(true).create(true).truncate(false).open(&path).with_context(|| format!("opening {}", path.display()))?;
            match file.try_lock() {
                // No live run: the folder is ours to claim for this pipeline.
                Ok(()) => {
                    file.set_len(0)?;
                    file.seek(std::io::SeekFrom::Start(0))?;
                    file.write_all(pipeline_sha256.as_bytes())?;
                    file.flush()?;
                    file.unlock()?;
                }
                Err(TryLockError::WouldBlock) => {}
                // A filesystem without OS locks: no claim is possible; the
                // per-capture locks still keep runs off each other's captures.
                Err(TryLockError::Error(_)) => return Ok(PipelineClaim { file: None, path }),
            }
            // Share it; another pipeline may have claimed it in between, so
            // the record is read again once shared.
            file.lock_shared().with_context(|| format!("locking {}", path.display()))?;
            // The path must still name this file (the last run removes it).
            let (ours, now) = (file.metadata()?, std::fs::metadata(&path));
            if !now.is_ok_and(|m| m.ino() == ours.ino() && m.dev() == ours.dev()) {
                continue;
            }
            let mut theirs = String::new();
            file.seek(std::io::SeekFrom::Start(0))?;
            file.read_to_string(&mut theirs)?;
            let theirs = theirs.trim();
            if theirs != pipeline_sha256 {
                anyhow::bail!(
                    "another live run is writing into {} with pipeline sha256 {theirs} (this run's is sha256 {pipeline_sha256}): runs with different pipelines cannot share an output folder at once; wait for it, or choose another --out",
                    out_root.display()
                );
            }
            // A second signal's cleanup removes it (that run exits at once).
            crate::io::staging::register(&path);
            return Ok(PipelineClaim { file: Some(file), path });
        }
        anyhow::bail!("{}: could not be claimed (it kept changing)", path.display())
    }
}

impl Drop for PipelineClaim {
    fn drop(&mut self) {
        // The last holder (the exclusive lock is to be had) removes the file.
        if let Some(file) = self.file.take() {
            crate::io::staging::unregister(&self.path);
            if file.try_lock().is_ok() {
                std::fs::remove_file(&self.path).ok();
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exclusive_then_free_after_release() {
        let dir = tempfile::tempdir().unwrap();
        let a = OutputLock::acquire(dir.path(), "x").unwrap();
        let e = OutputLock::acquire(dir.path(), "x").err().expect("second lock refused");
        assert!(e.is::<HeldByAnother>(), "{e}");
        drop(a);
        assert!(!dir.path().join(".x.lock").exists());
        OutputLock::acquire(dir.path(), "x").unwrap();
    }

    #[test]
    fn a_record_of_a_dead_run_here_is_stale_and_another_hosts_fresh_one_is_not() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join(".y.lock");
        // This host, this boot, a pid that may even be alive: no OS lock
        // held, so its holder is gone.
        let mut dead = Holder::this_process();
        dead.pid = 1;
        std::fs::write(&path, serde_json::to_string(&dead).unwrap()).unwrap();
        drop(OutputLock::acquire(dir.path(), "y").unwrap());
        // Another host with a fresh heartbeat: held.
        let mut other = Holder::this_process();
        other.host = "another-host".into();
        other.boot_id = "another-boot".into();
        std::fs::write(&path, serde_json::to_string(&other).unwrap()).unwrap();
        let e = OutputLock::acquire(dir.path(), "y").err().expect("held by the other host");
        assert!(e.to_string().contains("on another-host"), "{e}");
        // The same after the lease: stale.
        let old = SystemTime::now() - LEASE - Duration::from_secs(5);
        File::options().write(true).open(&path).unwrap().set_modified(old).unwrap();
        drop(OutputLock::acquire(dir.path(), "y").unwrap());
        // This host, an earlier boot, a heartbeat of just now: stale at once.
        let mut earlier = Holder::this_process();
        earlier.boot_id = "an-earlier-boot".into();
        std::fs::write(&path, serde_json::to_string(&earlier).unwrap()).unwrap();
        drop(OutputLock::acquire(dir.path(), "y").expect("a record of an earlier boot of this host is taken over at once"));
    }
}
