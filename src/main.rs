//! The `fringeflow` binary: parses arguments and calls the library.
//! Errors print as one line on stderr; exit 2 for usage and settings
//! errors, 1 when a capture could not be processed.

/// Output that never panics on a closed pipe or a full device.
macro_rules! outln {
    ($($t:tt)*) => { fringeflow::output::println(&format!($($t)*)) };
}
macro_rules! out {
    ($($t:tt)*) => { fringeflow::output::print(&format!($($t)*)) };
}
macro_rules! errln {
    ($($t:tt)*) => { fringeflow::output::note(&format!($($t)*)) };
}

mod calibration_commands;
mod cli;

use anyhow::Result;
use clap::FromArgMatches;
use std::collections::BTreeMap;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use cli::{Cli, Command, MeasureCommand, PipelineCommand};
use fringeflow::pipeline::config::PipelineConfig;

pub(crate) fn fail(code: u8, message: impl std::fmt::Display) -> ExitCode {
    fringeflow::output::error(&message.to_string());
    ExitCode::from(code)
}

pub(crate) fn load_pipeline(path: Option<&Path>, overrides: &[String]) -> Result<PipelineConfig, ExitCode> {
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
pub(crate) fn check_out_dir(out: &Path) -> Result<(), ExitCode> {
    if out.exists() && !out.is_dir() {
        return Err(fail(2, format!("--out {}: is a file, not a folder", out.display())));
    }
    Ok(())
}

/// What the command line asked of `run`.
struct RunRequest<'a> {
    captures: &'a [PathBuf],
    list: Option<&'a Path>,
    pipeline: Option<&'a Path>,
    overrides: &'a [String],
    out: &'a Path,
    resume: bool,
    overwrite: bool,
    shard: Option<&'a str>,
    dry_run: bool,
    json: bool,
    progress_json: bool,
    reference_engine: bool,
    quiet: bool,
    verbose: u8,
}

fn run(r: RunRequest<'_>) -> ExitCode {
    use fringeflow::batch::{self, inputs};
    let config = match load_pipeline(r.pipeline, r.overrides) {
        Ok(c) => c,
        Err(code) => return code,
    };
    if let Err(code) = check_out_dir(r.out) {
        return code;
    }
    if let Some(problem) = batch::foreign_batch_files(r.out) {
        return fail(2, problem);
    }
    let all = match inputs::expand(r.captures, r.list) {
        Ok(a) => a,
        Err(e) => return fail(2, format!("{e:#}")),
    };
    if all.is_empty() {
        return fail(2, "no captures given");
    }
    let mut names = BTreeMap::new();
    for c in &all {
        if let Some(other) = names.insert(fringeflow::run::output_name(c), c) {
            return fail(2, format!("{} and {} would both write {}", other.display(), c.display(), r.out.join(fringeflow::run::output_name(c)).display()));
        }
    }
    let shard = match r.shard {
        Some(s) => inputs::Shard::parse(s),
        None => inputs::Shard::from_env(|k| std::env::var(k).ok()).map(|s| s.unwrap_or(inputs::Shard::WHOLE)),
    };
    let shard = match shard {
        Ok(s) => s,
        Err(e) => return fail(2, format!("{e:#}")),
    };
    let mine = shard.select(&all);
    let pipeline_sha = config.sha256();
    if r.verbose > 0 {
        errln!("pipeline {} (sha256 {pipeline_sha}):", r.pipeline.map_or("built-in defaults".to_string(), |p| p.display().to_string()));
        for line in toml::to_string(&config).unwrap_or_default().lines() {
            errln!("  {line}");
        }
        errln!("{} of {} captures in this shard; {} threads", mine.len(), all.len(), rayon::current_num_threads());
    }
    // Outputs another pipeline, or another capture of the same name, made
    // are not replaced without --overwrite.
    let foreign: Vec<(PathBuf, String)> = mine
        .iter()
        .filter_map(|c| {
            let dir = r.out.join(fringeflow::run::output_name(c));
            fringeflow::run::foreign_owner(&dir, c, &pipeline_sha).map(|why| (dir, why))
        })
        .collect();
    if r.dry_run {
        return dry_run(&r, &config, &mine, &foreign, shard, all.len());
    }
    if let (false, Some((dir, theirs))) = (r.overwrite, foreign.first()) {
        let more = if foreign.len() > 1 { format!(" (and {} more)", foreign.len() - 1) } else { String::new() };
        let capture = mine.iter().find(|c| r.out.join(fringeflow::run::output_name(c)) == *dir).map_or(String::new(), |c| format!("{} ", c.display()));
        return fail(
            2,
            format!(
                "{} holds {theirs}{more}; this run would write {capture}there with pipeline sha256 {pipeline_sha}: refusing to replace them; pass --overwrite, or choose another --out",
                dir.display()
            ),
        );
    }
    // Runs with another pipeline may not write into this folder at once.
    let _claim = match batch::lock::PipelineClaim::acquire(r.out, &pipeline_sha) {
        Ok(c) => c,
        Err(e) => return fail(2, format!("{e:#}")),
    };
    let stop = match batch::StopSignals::install(true) {
        Ok(s) => s,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    let options = batch::BatchOptions {
        resume: r.resume,
        quiet: r.quiet,
        terminal: std::io::stderr().is_terminal(),
        shard,
        inputs_total: all.len(),
        reference_engine: r.reference_engine,
        verbose: r.verbose > 0,
        json: r.json,
        progress_json: r.progress_json,
    };
    let report = match batch::run_batch(&mine, &config, r.out, &options, &stop) {
        Ok(rep) => rep,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    if r.json {
        let summary = r.out.join(batch::report_name(shard));
        outln!(
            "{}",
            serde_json::json!({
                "kind": "batch",
                "format_version": report.format_version,
                "summary": summary.display().to_string(),
                "pipeline_sha256": report.pipeline_sha256,
                "counts": report.counts,
                "interrupted": report.interrupted,
            })
        );
    } else if !r.quiet {
        out!("{}", report.render_counts());
    }
    if let Some((_, code)) = stop.stopped() {
        return ExitCode::from(code);
    }
    if report.counts.failed > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
}

/// `run --dry-run`: what would happen to each capture; writes nothing.
fn dry_run(r: &RunRequest<'_>, config: &PipelineConfig, mine: &[PathBuf], foreign: &[(PathBuf, String)], shard: fringeflow::batch::inputs::Shard, total: usize) -> ExitCode {
    let mut counts = BTreeMap::<&str, usize>::new();
    for c in mine {
        let dir = r.out.join(fringeflow::run::output_name(c));
        let refused = foreign.iter().find(|(d, _)| *d == dir).filter(|_| !r.overwrite);
        let (action, reason) = match (refused, fringeflow::run::would_skip(c, config, r.out, r.resume)) {
            (Some((_, theirs)), _) => ("refuse", Some(format!("holds {theirs} (--overwrite replaces them)"))),
            (None, Ok(true)) => ("skip", Some("up to date (same input digest, pipeline and calibration)".to_string())),
            (None, Ok(false)) => ("run", None),
            (None, Err(e)) => ("fail", Some(format!("{e:#}").replace('\n', " "))),
        };
        *counts.entry(action).or_default() += 1;
        if r.json {
            outln!("{}", fringeflow::json_doc::line(fringeflow::json_doc::RUN_LINE, &serde_json::json!({ "kind": "dry_run", "input": c.display().to_string(), "action": action, "output": dir.display().to_string(), "reason": reason })));
        } else {
            outln!("{action:<7} {} → {}{}", c.display(), dir.display(), reason.map(|m| format!(": {m}")).unwrap_or_default());
        }
    }
    let get = |k: &str| counts.get(k).copied().unwrap_or(0);
    if r.json {
        outln!(
            "{}",
            fringeflow::json_doc::line(fringeflow::json_doc::RUN_LINE, &serde_json::json!({ "kind": "dry_run_summary", "run": get("run"), "skip": get("skip"), "refuse": get("refuse"), "fail": get("fail"), "shard": format!("{}/{}", shard.index, shard.count), "inputs_total": total }))
        );
    } else {
        let shard_note = if shard.is_whole() { String::new() } else { format!(" (shard {}/{} of {total} captures)", shard.index, shard.count) };
        outln!("dry run: {} to run, {} to skip, {} refused, {} would fail{shard_note}; nothing written", get("run"), get("skip"), get("refuse"), get("fail"));
    }
    if get("refuse") > 0 {
        ExitCode::from(2)
    } else if get("fail") > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
}

fn rerun(log_path: &Path, out: &Path, json: bool) -> ExitCode {
    if let Err(code) = check_out_dir(out) {
        return code;
    }
    let log: serde_json::Value = match std::fs::read(log_path).map_err(anyhow::Error::from).and_then(|b| Ok(serde_json::from_slice(&b)?)) {
        Ok(v) => v,
        Err(e) => return fail(2, format!("{}: not a readable processing log: {e}", log_path.display())),
    };
    let recorded_hash = log["input_hash"].as_str().or_else(|| log["input"]["sha256"].as_str());
    let (Some(input), Some(sha)) = (log["input"]["path"].as_str(), recorded_hash) else {
        return fail(2, format!("{}: the log has no input path and input hash", log_path.display()));
    };
    let config: PipelineConfig = match serde_json::from_value(log["pipeline"].clone()) {
        Ok(c) => c,
        Err(e) => return fail(2, format!("{}: its pipeline section does not parse: {e}", log_path.display())),
    };
    // Trust nothing: the pipeline must be the one the log's hash names, and
    // pass every check a pipeline file passes.
    let recorded = log["pipeline_sha256"].as_str().unwrap_or("");
    let as_logged = fringeflow::io::hash::sha256_hex(&serde_json::to_vec(&log["pipeline"]).unwrap_or_default());
    if as_logged != recorded {
        return fail(2, format!("{}: its pipeline section does not match its pipeline_sha256 (the log was edited or damaged): refusing to rerun", log_path.display()));
    }
    if let Err(e) = config.validate(&log_path.display().to_string()) {
        return fail(2, e);
    }
    // The path as given, else (run from another directory) the absolute one.
    let mut input = PathBuf::from(input);
    if !input.exists() {
        if let Some(abs) = log["input"]["absolute_path"].as_str() {
            input = PathBuf::from(abs);
        }
    }
    let stop = match fringeflow::batch::StopSignals::install(true) {
        Ok(s) => s,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    // With the algorithm the log names (BLAKE3, or SHA-256).
    match fringeflow::io::hash::verify(sha, &input) {
        Ok((true, _)) => {}
        Ok((false, h)) => return fail(1, format!("{}: its hash is {h}, the log recorded {sha}: not the same input", input.display())),
        Err(e) => return fail(1, format!("{}: {e}", input.display())),
    }
    // The wavelength calibration file must be the one the log recorded: its
    // path is in the pipeline (and its hash), its content only here.
    if let (Some(path), Some(recorded_cal)) = (log["input"]["wavelength_map"]["path"].as_str(), log["input"]["wavelength_map"]["file_hash"].as_str()) {
        match std::fs::read(path) {
            Ok(bytes) => {
                let now = format!("sha256:{}", fringeflow::io::hash::sha256_hex(&bytes));
                if now != recorded_cal {
                    return fail(1, format!("calibration file {path}: its hash is {now}, the log recorded {recorded_cal}: the wavelength map changed since the run, so a rerun would not reproduce it"));
                }
            }
            Err(e) => return fail(1, format!("calibration file {path}: {e}")),
        }
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

fn summarize(dir: &Path, json_out: bool) -> ExitCode {
    if !dir.is_dir() {
        return fail(2, format!("{}: not a folder (give the --out folder of a run)", dir.display()));
    }
    if let Some(problem) = fringeflow::batch::foreign_batch_files(dir) {
        return fail(2, problem);
    }
    let (report, problems) = match fringeflow::batch::merge_reports(dir) {
        Ok(r) => r,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    let path = dir.join("summary.json");
    let json = fringeflow::json_doc::pretty(fringeflow::json_doc::SUMMARY, &serde_json::json!({ "report": report, "problems": problems })).into_bytes();
    if let Err(e) = fringeflow::io::staging::write_atomically(&path, |tmp| Ok(std::fs::write(tmp, &json)?)) {
        return fail(1, format!("{e:#}"));
    }
    if let Err(e) = fringeflow::batch::write_folder_index(dir, &report) {
        return fail(1, format!("{e:#}"));
    }
    if json_out {
        outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::SUMMARY, &serde_json::json!({ "summary": path.display().to_string(), "report": report, "problems": problems })));
    } else {
        out!("{}", report.render());
    }
    for p in &problems {
        errln!("fringeflow: problem: {p}");
    }
    if problems.is_empty() && report.counts.failed == 0 && report.counts.not_run == 0 {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    }
}

#[allow(clippy::too_many_arguments)]
fn slurm_script(list: &Path, pipeline: &Path, out: &Path, tasks: usize, cpus: usize, mem: &str, time: &str, partition: Option<&str>, job_name: &str) -> ExitCode {
    if tasks == 0 || cpus == 0 {
        return fail(2, "--tasks and --cpus-per-task must be at least 1");
    }
    let abs = |p: &Path| std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf());
    if let Err(code) = load_pipeline(Some(pipeline), &[]) {
        return code;
    }
    let n = match fringeflow::batch::inputs::expand(&[], Some(list)) {
        Ok(v) => v.len(),
        Err(e) => return fail(2, format!("{e:#}")),
    };
    if tasks > n {
        errln!("fringeflow: warning: {tasks} tasks for {n} captures: {} tasks will have nothing to do", tasks - n);
    }
    // Slurm opens each task's log in the output directory before the script
    // runs, so the directory must exist at submission.
    if let Err(e) = std::fs::create_dir_all(out) {
        return fail(1, format!("creating {}: {e}", out.display()));
    }
    let exe = std::env::current_exe().map(|p| abs(&p)).unwrap_or_else(|_| PathBuf::from("fringeflow"));
    let (list, pipeline, out) = (abs(list), abs(pipeline), abs(out));
    let q = |p: &Path| format!("'{}'", p.display().to_string().replace('\'', "'\\''"));
    let mut s = String::new();
    s += "#!/bin/bash\n";
    s += &format!("#SBATCH --job-name={job_name}\n#SBATCH --array=0-{}\n", tasks - 1);
    s += &format!("#SBATCH --cpus-per-task={cpus}\n#SBATCH --mem={mem}\n#SBATCH --time={time}\n");
    if let Some(p) = partition {
        s += &format!("#SBATCH --partition={p}\n");
    }
    s += &format!("#SBATCH --output={}/slurm-%A_%a.log\n", out.display());
    s += &format!(
        "# Generated by fringeflow {}: {n} captures in {tasks} array tasks; task i\n\
         # reconstructs slice i of the sorted list (from SLURM_ARRAY_TASK_ID/COUNT)\n\
         # and writes batch-i-of-{tasks}.json. Requeued or repeated tasks skip\n\
         # finished captures (--resume). When all tasks are done:\n\
         #   {} summarize {}\n",
        env!("CARGO_PKG_VERSION"),
        exe.display(),
        q(&out)
    );
    s += "set -euo pipefail\n";
    s += &format!("mkdir -p {}\n", q(&out));
    s += "export RAYON_NUM_THREADS=\"${SLURM_CPUS_PER_TASK:-1}\"\n";
    s += &format!("exec {} run --list {} --pipeline {} --out {} --resume --quiet\n", q(&exe), q(&list), q(&pipeline), q(&out));
    out!("{s}");
    ExitCode::SUCCESS
}

fn report(dirs: &[PathBuf], frame_step: Option<usize>, json: bool) -> ExitCode {
    let mut written = Vec::new();
    // `report out/all/*` also names the batch's own files beside the
    // capture folders (batch.json, index.html): those are passed over.
    let (folders, files): (Vec<&PathBuf>, Vec<&PathBuf>) = dirs.iter().partition(|d| d.is_dir() || !d.exists());
    for f in &files {
        fringeflow::output::note(&format!("skipping {}: a file, not an output folder", f.display()));
    }
    if folders.is_empty() {
        return fail(2, "no output folder among the arguments (give the capture folders a run wrote, e.g. out/all/*)");
    }
    for dir in &folders {
        if !dir.join("log.json").is_file() {
            return fail(2, format!("{}: not an output folder of `run` (no log.json)", dir.display()));
        }
    }
    for dir in folders {
        // The folder's own pipeline decides the frame step unless given.
        let step = frame_step.unwrap_or_else(|| {
            std::fs::read(dir.join("log.json"))
                .ok()
                .and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok())
                .and_then(|l| l["pipeline"]["output"]["report_frame_step"].as_u64())
                .unwrap_or(0) as usize
        });
        let out = dir.join("report.html");
        match fringeflow::report::write_report(dir, &out, step) {
            Ok(r) => {
                if !json {
                    outln!("wrote {} ({:.1} MB, {} of {} frames)", out.display(), r.bytes as f64 / 1e6, r.frames_embedded, r.frames_total);
                }
                written.push(serde_json::json!({ "report": out.display().to_string(), "bytes": r.bytes, "frames_embedded": r.frames_embedded, "frames_total": r.frames_total }));
            }
            Err(e) => return fail(1, format!("{}: {e:#}", dir.display())),
        }
    }
    if json {
        outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::REPORT, &serde_json::json!({ "reports": written })));
    }
    ExitCode::SUCCESS
}

fn measure(command: MeasureCommand) -> ExitCode {
    use fringeflow::measure::{mirror, rolloff};
    use fringeflow::plot;
    match command {
        MeasureCommand::Psf { mirror: path, pipeline, overrides, frame, group_index, plot: plot_path, json } => {
            let config = match load_pipeline(pipeline.as_deref(), &overrides) {
                Ok(c) => c,
                Err(code) => return code,
            };
            let m = match mirror::measure(&path, &config, frame, group_index) {
                Ok(m) => m,
                Err(e) => return fail(1, format!("{}: {e:#}", path.display())),
            };
            if let Some(p) = &plot_path {
                if let Err(e) = plot::psf(p, &m, &config.sha256()) {
                    return fail(1, format!("{}: {e:#}", p.display()));
                }
            }
            for w in &m.warnings {
                errln!("fringeflow: warning: {w}");
            }
            if json {
                outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::PSF, &m));
            } else {
                outln!("mirror {} frame {}: peak at {:.2} µm, {:.1} dB", m.capture, m.frame, m.peak_depth_um, m.peak_db);
                outln!("source spectrum: centre {:.2} nm, FWHM {:.2} nm → limit l_c {:.3} µm", m.source.centre_nm, m.source.fwhm_nm, m.source.coherence_length_um);
                outln!("PSF FWHM {:.3} µm in air, {:.3} µm at group index {:.3}; measured/limit {:.3}", m.fwhm_um_air, m.fwhm_um_medium, m.group_index, m.fwhm_over_limit);
                match (m.side_lobe_db, m.side_lobe_above_noise) {
                    (Some(s), true) => outln!("highest side lobe {s:.1} dB"),
                    (Some(s), false) => outln!("no side lobe above the noise (highest local maximum {s:.1} dB is noise)"),
                    (None, _) => outln!("highest side lobe: none found"),
                }
                outln!("peak SNR {:.1} dB (noise floor {:.1} dB)", m.peak_over_noise_sd_db, m.noise_floor_db);
                if let Some(p) = &plot_path {
                    outln!("wrote {}", p.display());
                }
            }
            ExitCode::SUCCESS
        }
        MeasureCommand::Rolloff { mirrors, pipeline, overrides, attenuation_db, plot: plot_path, json } => {
            let config = match load_pipeline(pipeline.as_deref(), &overrides) {
                Ok(c) => c,
                Err(code) => return code,
            };
            if mirrors.len() < 3 {
                return fail(2, format!("roll-off needs mirror captures at three or more depths, got {}", mirrors.len()));
            }
            let (report, _) = match rolloff::measure_rolloff(&mirrors, &config, attenuation_db) {
                Ok(r) => r,
                Err(e) => return fail(1, format!("{e:#}")),
            };
            if let Some(p) = &plot_path {
                if let Err(e) = plot::rolloff(p, &report, &config.sha256()) {
                    return fail(1, format!("{}: {e:#}", p.display()));
                }
            }
            for w in &report.warnings {
                errln!("fringeflow: warning: {w}");
            }
            if json {
                outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::ROLLOFF, &report));
            } else {
                outln!("{:>12} {:>10} {:>10} {:>10}  capture", "depth µm", "peak dB", "SNR dB", "FWHM µm");
                for p in &report.points {
                    outln!("{:>12.1} {:>10.2} {:>10.2} {:>10.2}  {}", p.depth_um, p.peak_db, p.peak_over_noise_sd_db, p.fwhm_um, p.capture);
                }
                let f = &report.fit;
                outln!(
                    "fit: A0 {:.2} dB, spectral response FWHM {:.4} nm, pixel width {:.3e} rad/µm, RMS residual {:.2} dB",
                    f.a0_db, f.resolution_fwhm_nm, f.pixel_dk_per_um, f.rms_residual_db
                );
                outln!("-6 dB roll-off depth {:.0} µm (in air)", f.rolloff_6db_depth_um);
                if let Some(p) = &plot_path {
                    outln!("wrote {}", p.display());
                }
                if let (Some(s), Some(a)) = (report.sensitivity_db, attenuation_db) {
                    outln!("sensitivity {s:.1} dB = SNR {:.1} dB + round-trip attenuation 2 × {a:.1} dB", report.points[0].peak_over_noise_sd_db);
                }
            }
            ExitCode::SUCCESS
        }
    }
}

fn simulate(scene_path: &Path, out: &Path, json: bool, quiet: bool) -> ExitCode {
    use fringeflow::io::toml_file::{kind_hint, sniff, FileKind};
    if let (FileKind::Hdf5, Some(hint)) = (sniff(scene_path), kind_hint(FileKind::Hdf5)) {
        return fail(2, format!("{}: not a scene file: {hint}", scene_path.display()));
    }
    if let Ok(text) = std::fs::read_to_string(scene_path) {
        for notice in fringeflow::simulate::scene::Scene::deprecations(&scene_path.display().to_string(), &text) {
            fringeflow::output::warn(&notice);
        }
    }
    let scene = match fringeflow::simulate::scene::Scene::from_file(scene_path) {
        Ok(s) => s,
        Err(e) => return fail(2, e),
    };
    if out.is_dir() {
        return fail(2, format!("--out {}: is a folder; give the capture file to write, e.g. {}", out.display(), out.join("capture.h5").display()));
    }
    let started = std::time::Instant::now();
    let bar = (!quiet && std::io::stderr().is_terminal()).then(|| {
        let b = indicatif::ProgressBar::new(scene.frames as u64);
        b.set_style(indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} frames simulated, {elapsed} elapsed, about {eta} left").unwrap());
        b
    });
    let result = fringeflow::simulate::simulate_with_progress(&scene, out, &|done| {
        if let Some(b) = &bar {
            b.set_position(done as u64);
        }
    });
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    match result {
        Ok(_) => {
            let truth = fringeflow::simulate::truth_path(out);
            if json {
                outln!(
                    "{}",
                    fringeflow::json_doc::line(fringeflow::json_doc::SIMULATE, &serde_json::json!({
                        "scene": scene_path.display().to_string(),
                        "capture": out.display().to_string(),
                        "truth": truth.display().to_string(),
                        "frames": scene.frames,
                        "alines": scene.alines,
                        "pixels": scene.spectrometer.pixels,
                        "seconds": started.elapsed().as_secs_f64(),
                    }))
                );
            } else if !quiet {
                errln!("wrote {} and {} ({:.1} s)", out.display(), truth.display(), started.elapsed().as_secs_f64());
            }
            ExitCode::SUCCESS
        }
        Err(e) => fail(1, format!("{e:#}")),
    }
}

#[allow(clippy::too_many_arguments)]
fn bench(capture: Option<PathBuf>, work_dir: PathBuf, alines: usize, repeats: usize, no_scaling: bool, no_end_to_end: bool, no_simulator: bool, no_sizes: bool, kernel: Option<String>, report_path: Option<PathBuf>, json: bool, quiet: bool) -> ExitCode {
    if let Some(k) = &kernel {
        match fringeflow::pipeline::kernel::Variant::parse(k) {
            Some(v) if v.supported() => fringeflow::pipeline::kernel::force(Some(v)),
            Some(v) => return fail(2, format!("--kernel {}: this CPU lacks it (it has {})", v.name(), fringeflow::pipeline::kernel::supported().iter().map(|v| v.name()).collect::<Vec<_>>().join(", "))),
            None => return fail(2, format!("--kernel {k}: not a kernel variant (avx512, avx2 or scalar)")),
        }
    }
    if let Some(c) = &capture {
        if !c.is_file() {
            return fail(2, format!("--capture {}: no such file", c.display()));
        }
    }
    let opts = fringeflow::bench::BenchOptions {
        capture,
        work_dir,
        alines,
        repeats,
        scaling: !no_scaling,
        end_to_end: !no_end_to_end,
        simulator: !no_simulator,
        progress: !quiet && std::io::stderr().is_terminal(),
        sizes: !no_sizes,
    };
    let report = match fringeflow::bench::run_bench(&opts) {
        Ok(r) => r,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    if json {
        outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::BENCH, &report));
    } else {
        out!("{}", report.render());
    }
    if let Some(path) = report_path {
        let written = fringeflow::io::staging::write_atomically(&path, |tmp| {
            std::fs::write(tmp, serde_json::to_vec_pretty(&report)?)?;
            Ok(())
        });
        if let Err(e) = written {
            return fail(1, format!("{}: {e:#}", path.display()));
        }
    }
    ExitCode::SUCCESS
}

fn pipeline_command(command: PipelineCommand) -> ExitCode {
    use fringeflow::pipeline::defaults;
    match command {
        PipelineCommand::Defaults => {
            out!("{}", defaults::defaults_text());
            ExitCode::SUCCESS
        }
        PipelineCommand::Check { file, overrides } => match load_pipeline(Some(&file), &overrides) {
            Ok(c) => {
                outln!("{}: valid (pipeline sha256 {})", file.display(), c.sha256());
                ExitCode::SUCCESS
            }
            Err(code) => code,
        },
        PipelineCommand::Show { file, overrides, json } => {
            let config = match load_pipeline(file.as_deref(), &overrides) {
                Ok(c) => c,
                Err(code) => return code,
            };
            if json {
                outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::PIPELINE, &serde_json::json!({ "pipeline": config, "pipeline_sha256": config.sha256() })));
            } else {
                let title = format!(
                    "Resolved pipeline{}{} (sha256 {}): every key with the value `run` uses.",
                    file.as_ref().map(|f| format!(" {}", f.display())).unwrap_or_else(|| " (built-in defaults)".into()),
                    if overrides.is_empty() { String::new() } else { format!(" with --set {}", overrides.join(" --set ")) },
                    config.sha256()
                );
                out!("{}", defaults::commented(&config, &title));
            }
            ExitCode::SUCCESS
        }
    }
}

fn man(out_dir: Option<&Path>, quiet: bool) -> ExitCode {
    let cmd = cli::command();
    let render = |c: clap::Command| -> std::io::Result<Vec<u8>> {
        let mut buf = Vec::new();
        clap_mangen::Man::new(c).render(&mut buf)?;
        Ok(buf)
    };
    let Some(dir) = out_dir else {
        return match render(cmd) {
            Ok(b) => {
                out!("{}", String::from_utf8_lossy(&b));
                ExitCode::SUCCESS
            }
            Err(e) => fail(1, e),
        };
    };
    if let Err(e) = std::fs::create_dir_all(dir) {
        return fail(1, format!("creating {}: {e}", dir.display()));
    }
    let mut cmd = cmd;
    cmd.build();
    let mut pages: Vec<(String, clap::Command)> = vec![("fringeflow.1".into(), cmd.clone())];
    for sub in cmd.get_subcommands() {
        let name = format!("fringeflow-{}", sub.get_name());
        pages.push((format!("{name}.1"), sub.clone().name(name)));
    }
    for (file, c) in pages {
        let path = dir.join(&file);
        let written = render(c).map_err(anyhow::Error::from).and_then(|b| fringeflow::io::staging::write_atomically(&path, |tmp| Ok(std::fs::write(tmp, &b)?)));
        if let Err(e) = written {
            return fail(1, format!("{}: {e:#}", path.display()));
        }
        if !quiet {
            errln!("wrote {}", path.display());
        }
    }
    ExitCode::SUCCESS
}

fn main() -> ExitCode {
    let matches = cli::command().get_matches();
    let cli = match Cli::from_arg_matches(&matches) {
        Ok(c) => c,
        Err(e) => e.exit(),
    };
    if let Err(e) = fringeflow::pipeline::kernel::check_env().and_then(|_| fringeflow::pipeline::fused::tune::check_env()) {
        return fail(2, e);
    }
    // Threads beyond 4 per logical CPU only add switching and memory (each
    // worker holds its own buffers): refused, as is the same in RAYON_NUM_THREADS.
    let cpus = std::thread::available_parallelism().map_or(1, |n| n.get());
    let most = 4 * cpus;
    let from_env = std::env::var("RAYON_NUM_THREADS").ok().and_then(|v| v.trim().parse::<usize>().ok());
    for (what, n) in [("--threads", cli.threads), ("RAYON_NUM_THREADS", from_env)] {
        if let Some(n) = n.filter(|&n| n > most) {
            return fail(2, format!("{what} {n}: at most {most} (4 per logical CPU; this machine has {cpus})"));
        }
    }
    if let Some(n) = cli.threads {
        if n == 0 {
            return fail(2, "--threads: give a whole number of at least 1");
        }
        if let Err(e) = rayon::ThreadPoolBuilder::new().num_threads(n).build_global() {
            return fail(1, format!("--threads: {e}"));
        }
    }
    // Single commands stop at the first signal (removing what they were
    // writing); `run` and `rerun` install their own graceful handling.
    if !matches!(cli.command, Command::Run { .. } | Command::Rerun { .. }) {
        if let Err(e) = fringeflow::batch::StopSignals::install(false) {
            return fail(1, format!("{e:#}"));
        }
    }
    let (quiet, verbose) = (cli.quiet, cli.verbose);
    match cli.command {
        Command::Run { captures, list, pipeline, overrides, out, resume, overwrite, shard, dry_run, json, progress_json, engine } => run(RunRequest {
            captures: &captures,
            list: list.as_deref(),
            pipeline: pipeline.as_deref(),
            overrides: &overrides,
            out: &out,
            resume,
            overwrite,
            shard: shard.as_deref(),
            dry_run,
            json,
            progress_json,
            reference_engine: engine == cli::Engine::Reference,
            quiet,
            verbose,
        }),
        Command::Rerun { log, out, json } => rerun(&log, &out, json),
        Command::Report { dirs, frame_step, json } => report(&dirs, frame_step, json),
        Command::Compare { a, b, out } => {
            for d in [&a, &b] {
                if !d.join("log.json").is_file() || !d.join("volume.h5").is_file() {
                    return fail(2, format!("{}: not an output folder of `run` with a volume (needs log.json and volume.h5)", d.display()));
                }
            }
            if out.is_dir() {
                return fail(2, format!("--out {}: is a folder; give the page to write, e.g. {}", out.display(), out.join("compare.html").display()));
            }
            match fringeflow::report::write_comparison(&a, &b, &out) {
                Ok(()) => {
                    outln!("wrote {}", out.display());
                    ExitCode::SUCCESS
                }
                Err(e) => fail(1, format!("{e:#}")),
            }
        }
        Command::Summarize { dir, json } => summarize(&dir, json),
        Command::SlurmScript { list, pipeline, out, tasks, cpus_per_task, mem, time, partition, job_name } => {
            slurm_script(&list, &pipeline, &out, tasks, cpus_per_task, &mem, &time, partition.as_deref(), &job_name)
        }
        Command::Simulate { scene, out, json } => simulate(&scene, &out, json, quiet),
        Command::Measure(m) => measure(m),
        Command::Bench { capture, work_dir, alines, repeats, no_scaling, no_end_to_end, no_simulator, no_sizes, kernel, report, json } => {
            bench(capture, work_dir, alines, repeats, no_scaling, no_end_to_end, no_simulator, no_sizes, kernel, report, json, quiet)
        }
        Command::Calibrate(c) => calibration_commands::calibrate(c),
        Command::Dispersion(c) => calibration_commands::dispersion(c),
        Command::Design { centre_nm, fwhm_nm, span_nm, pixel_width_nm, pixels, group_index, resolution_nm, json } => {
            let span = match (span_nm, pixel_width_nm) {
                (Some(s), None) => s,
                (None, Some(w)) => w * pixels as f64,
                _ => return fail(2, "design: give one of --span-nm, --pixel-width-nm"),
            };
            let values = [centre_nm, fwhm_nm, span, group_index, resolution_nm.unwrap_or(1.0)];
            if values.iter().any(|v| !(v.is_finite() && *v > 0.0)) || pixels < 2 {
                return fail(2, "design: wavelengths, span, group index and resolution must be positive numbers, and pixels at least 2");
            }
            let report = fringeflow::design::design(fringeflow::design::DesignInput {
                centre_nm,
                source_fwhm_nm: fwhm_nm,
                span_nm: span,
                pixels,
                group_index,
                resolution_nm: resolution_nm.unwrap_or(span / pixels as f64),
            });
            if json {
                outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::DESIGN, &report));
            } else {
                out!("{}", report.render());
            }
            ExitCode::SUCCESS
        }
        Command::Inspect { capture, pipeline, json } => {
            let config = match load_pipeline(pipeline.as_deref(), &[]) {
                Ok(c) => c,
                Err(code) => return code,
            };
            match fringeflow::inspect::inspect(&capture, &config.input) {
                Ok(report) => {
                    if json {
                        outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::INSPECT, &serde_json::json!({ "capture": capture.display().to_string(), "inspection": report })));
                    } else {
                        out!("{}", report.render(&capture));
                    }
                    if report.problems.is_empty() {
                        ExitCode::SUCCESS
                    } else {
                        ExitCode::from(1)
                    }
                }
                Err(e) => fail(1, format!("{}: {e:#}", capture.display())),
            }
        }
        Command::Pipeline(c) => pipeline_command(c),
        Command::Completions { shell } => {
            let mut cmd = cli::command();
            let mut buf = Vec::new();
            clap_complete::generate(shell, &mut cmd, "fringeflow", &mut buf);
            out!("{}", String::from_utf8_lossy(&buf));
            ExitCode::SUCCESS
        }
        Command::Man { out_dir } => man(out_dir.as_deref(), quiet),
    }
}
