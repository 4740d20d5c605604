//! `fringeflow rerun`: reproduce an output from its log.json alone, after
//! checking that the input, pipeline and calibration are the logged ones.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use super::{check_out_dir, fail};
use crate::cli::RerunArgs;
use fringeflow::pipeline::config::PipelineConfig;

pub fn command(a: RerunArgs) -> ExitCode {
    rerun(&a.log, &a.out, a.json)
}

fn rerun(log_path: &Path, out: &Path, json: bool) -> ExitCode {
    if let Err(code) = check_out_dir(out) {
        return code;
    }
    let Logged { log, input, sha, recorded, config } = match read_log(log_path) {
        Ok(l) => l,
        Err(code) => return code,
    };
    let (sha, recorded) = (sha.as_str(), recorded.as_str());
    let stop = match fringeflow::batch::StopSignals::install(true) {
        Ok(s) => s,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    if let Err(code) = check_inputs(&log, &input, sha) {
        return code;
    }
    let name = fringeflow::run::output_name(&input);
    // As `run`: outputs of another pipeline or capture are not replaced.
    if let Some(theirs) = fringeflow::run::foreign_owner(&out.join(&name), &input, recorded) {
        return fail(2, format!("{} holds {theirs}; the log's pipeline is sha256 {recorded}: refusing to replace them; choose another --out", out.join(&name).display()));
    }
    let lock = match fringeflow::batch::lock::OutputLock::acquire(out, &name) {
        Ok(l) => l,
        Err(e) => return fail(1, format!("{}: {e:#}", input.display())),
    };
    lock.clean_stale_staging(out, &name);
    // The kernel variant the log names, where this CPU has it (so the
    // rerun computes the same bits), unless FRINGEFLOW_KERNEL says otherwise.
    if fringeflow::pipeline::kernel::forced().is_none() {
        if let Some(v) = log["kernel"].as_str().and_then(fringeflow::pipeline::kernel::Variant::parse).filter(|v| v.supported()) {
            fringeflow::pipeline::kernel::force(Some(v));
        }
    }
    let ctx = fringeflow::run::RunContext { reference_engine: log["engine"] == "reference", cancel: Some(&stop.any), ..Default::default() };
    let result = fringeflow::run::process_capture(&input, &config, out, ctx);
    drop(lock);
    if let Some((_, code)) = stop.stopped() {
        return ExitCode::from(code);
    }
    match result {
        Ok(o) => {
            for w in &o.warnings {
                fringeflow::output::warn(&format!("{}: {w}", input.display()));
            }
            if json {
                outln!(
                    "{}",
                    fringeflow::json_doc::line(fringeflow::json_doc::RERUN, &serde_json::json!({
                        "input": input.display().to_string(),
                        "input_hash": sha,
                        "pipeline_sha256": recorded,
                        "output": o.output_dir.display().to_string(),
                        "frames": o.frames,
                        "alines": o.alines,
                        "seconds": o.seconds,
                        "warnings": o.warnings,
                    }))
                );
            } else {
                fringeflow::output::note(&format!("reproduced {} → {}", input.display(), o.output_dir.display()));
            }
            ExitCode::SUCCESS
        }
        Err(e) => fail(1, format!("{}: {e:#}", input.display())),
    }
}

/// What a rerun takes from the log: the log itself, the input (the path as
/// given, else the absolute one), its recorded hash, the pipeline's recorded
/// sha256 and the pipeline, checked against that hash and validated.
struct Logged {
    log: serde_json::Value,
    input: PathBuf,
    sha: String,
    recorded: String,
    config: PipelineConfig,
}

fn read_log(log_path: &Path) -> Result<Logged, ExitCode> {
    let log: serde_json::Value = match std::fs::read(log_path).map_err(anyhow::Error::from).and_then(|b| Ok(serde_json::from_slice(&b)?)) {
        Ok(v) => v,
        Err(e) => return Err(fail(2, format!("{}: not a readable processing log: {e}", log_path.display()))),
    };
    let recorded_hash = log["input_hash"].as_str().or_else(|| log["input"]["sha256"].as_str());
    let (Some(input), Some(sha)) = (log["input"]["path"].as_str(), recorded_hash) else {
        return Err(fail(2, format!("{}: the log has no input path and input hash", log_path.display())));
    };
    let config: PipelineConfig = match serde_json::from_value(log["pipeline"].clone()) {
        Ok(c) => c,
        Err(e) => return Err(fail(2, format!("{}: its pipeline section does not parse: {e}", log_path.display()))),
    };
    // Trust nothing: the pipeline must be the one the log's hash names, and
    // pass every check a pipeline file passes.
    let recorded = log["pipeline_sha256"].as_str().unwrap_or("");
    let as_logged = fringeflow::io::hash::sha256_hex(&serde_json::to_vec(&log["pipeline"]).unwrap_or_default());
    if as_logged != recorded {
        return Err(fail(2, format!("{}: its pipeline section does not match its pipeline_sha256 (the log was edited or damaged): refusing to rerun", log_path.display())));
    }
    if let Err(e) = config.validate(&log_path.display().to_string()) {
        return Err(fail(2, e));
    }
    // The path as given, else (run from another directory) the absolute one.
    let mut input = PathBuf::from(input);
    if !input.exists() {
        if let Some(abs) = log["input"]["absolute_path"].as_str() {
            input = PathBuf::from(abs);
        }
    }
    let (sha, recorded) = (sha.to_string(), recorded.to_string());
    Ok(Logged { log, input, sha, recorded, config })
}

/// The input and the calibration file must be the ones the log recorded.
fn check_inputs(log: &serde_json::Value, input: &Path, sha: &str) -> Result<(), ExitCode> {
    // With the algorithm the log names (BLAKE3, or SHA-256).
    match fringeflow::io::hash::verify(sha, input) {
        Ok((true, _)) => {}
        Ok((false, h)) => return Err(fail(1, format!("{}: its hash is {h}, the log recorded {sha}: not the same input", input.display()))),
        Err(e) => return Err(fail(1, format!("{}: {e}", input.display()))),
    }
    // The wavelength calibration (or map) file and the background file must
    // be the ones the log recorded: their paths are in the pipeline, their
    // content only here.
    for (record, what) in [(&log["input"]["wavelength_map"], "the wavelength map"), (&log["input"]["background_file"], "the background"), (&log["input"]["sidecar"], "the capture's sidecar")] {
        let (Some(path), Some(recorded_file)) = (record["path"].as_str(), record["file_hash"].as_str()) else { continue };
        let kind = if record["kind"] == "calibration" { "calibration file" } else { "file" };
        match std::fs::read(path) {
            Ok(bytes) => {
                let now = format!("sha256:{}", fringeflow::io::hash::sha256_hex(&bytes));
                if now != recorded_file {
                    return Err(fail(1, format!("{kind} {path}: its hash is {now}, the log recorded {recorded_file}: {what} changed since the run, so a rerun would not reproduce it")));
                }
            }
            Err(e) => return Err(fail(1, format!("{kind} {path}: {e}"))),
        }
    }
    Ok(())
}
