//! One file per command: each takes its parsed arguments (`crate::cli`),
//! calls the library, prints, and returns the exit status. The helpers here
//! are the ones several commands share: the one-line error, the pipeline
//! loaded once, the `--out` check, and the process-wide setup.

pub mod bench;
pub mod calibrate;
pub mod compare;
pub mod completions;
pub mod design;
pub mod dispersion;
pub mod import;
pub mod inspect;
pub mod man;
pub mod measure;
pub mod pipeline;
pub mod report;
pub mod rerun;
pub mod run;
pub mod simulate;
pub mod slurm_script;
pub mod summarize;

use std::path::Path;
use std::process::ExitCode;

use crate::cli::{Cli, Command};
use fringeflow::pipeline::config::PipelineConfig;

pub fn fail(code: u8, message: impl std::fmt::Display) -> ExitCode {
    fringeflow::output::error(&message.to_string());
    ExitCode::from(code)
}

pub fn load_pipeline(path: Option<&Path>, overrides: &[String]) -> Result<PipelineConfig, ExitCode> {
    let config = match path {
        Some(p) => fringeflow::run::read_pipeline(p, overrides).map_err(|e| fail(2, e))?,
        None if !overrides.is_empty() => PipelineConfig::from_overrides(overrides).map_err(|e| fail(2, e))?,
        None => PipelineConfig::default(),
    };
    for notice in &config.deprecations {
        fringeflow::output::warn(notice);
    }
    // A named calibration file is loaded and checked once, up front: a bad
    // one is a settings error, not a failure of every capture.
    if let Some(cal) = &config.input.calibration {
        fringeflow::calibration::wavelength::WavelengthCalibration::load(Path::new(cal)).map_err(|e| fail(2, format!("input.calibration: {e:#}")))?;
    }
    Ok(config)
}

/// `--out DIR` must be a folder or not exist yet (exit 2 otherwise).
pub fn check_out_dir(out: &Path) -> Result<(), ExitCode> {
    if out.exists() && !out.is_dir() {
        return Err(fail(2, format!("--out {}: is a file, not a folder", out.display())));
    }
    Ok(())
}

/// What every command needs before it starts: the kernel settings of the
/// environment checked, the worker threads bounded and built, and (for
/// single commands) the first signal stopping the process.
pub fn prepare(cli: &Cli) -> Result<(), ExitCode> {
    if let Err(e) = fringeflow::pipeline::kernel::check_env().and_then(|_| fringeflow::pipeline::fused::tune::check_env()) {
        return Err(fail(2, e));
    }
    // Threads beyond 4 per logical CPU only add switching and memory (each
    // worker holds its own buffers): refused, as is the same in RAYON_NUM_THREADS.
    let cpus = std::thread::available_parallelism().map_or(1, |n| n.get());
    let most = 4 * cpus;
    let from_env = std::env::var("RAYON_NUM_THREADS").ok().and_then(|v| v.trim().parse::<usize>().ok());
    for (what, n) in [("--threads", cli.threads), ("RAYON_NUM_THREADS", from_env)] {
        if let Some(n) = n.filter(|&n| n > most) {
            return Err(fail(2, format!("{what} {n}: at most {most} (4 per logical CPU; this machine has {cpus})")));
        }
    }
    if let Some(n) = cli.threads {
        if n == 0 {
            return Err(fail(2, "--threads: give a whole number of at least 1"));
        }
        if let Err(e) = rayon::ThreadPoolBuilder::new().num_threads(n).build_global() {
            return Err(fail(1, format!("--threads: {e}")));
        }
    }
    // Single commands stop at the first signal (removing what they were
    // writing); `run` and `rerun` install their own graceful handling.
    if !matches!(cli.command, Command::Run(_) | Command::Rerun(_)) {
        if let Err(e) = fringeflow::batch::StopSignals::install(false) {
            return Err(fail(1, format!("{e:#}")));
        }
    }
    Ok(())
}
