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
use clap::Parser;
use std::collections::BTreeMap;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use cli::{Cli, Command, MeasureCommand};
use fringeflow::pipeline::config::PipelineConfig;

pub(crate) fn fail(code: u8, message: impl std::fmt::Display) -> ExitCode {
    fringeflow::output::error(&message.to_string());
    ExitCode::from(code)
}

pub(crate) fn load_pipeline(path: Option<&Path>) -> Result<PipelineConfig, ExitCode> {
    let config = match path {
        Some(p) => PipelineConfig::from_file(p).map_err(|e| fail(2, e))?,
        None => PipelineConfig::default(),
    };
    for notice in &config.deprecations {
        fringeflow::output::warn(notice);
    }
    Ok(config)
}

#[allow(clippy::too_many_arguments)]
fn run(captures: &[PathBuf], list: Option<&Path>, pipeline: Option<&Path>, out: &Path, resume: bool, shard: Option<&str>, quiet: bool, reference_engine: bool) -> ExitCode {
    use fringeflow::batch::{self, inputs};
    let config = match load_pipeline(pipeline) {
        Ok(c) => c,
        Err(code) => return code,
    };
    let all = match inputs::expand(captures, list) {
        Ok(a) => a,
        Err(e) => return fail(2, format!("{e:#}")),
    };
    if all.is_empty() {
        return fail(2, "no captures given");
    }
    let mut names = BTreeMap::new();
    for c in &all {
        if let Some(other) = names.insert(fringeflow::run::output_name(c), c) {
            return fail(2, format!("{} and {} would both write {}", other.display(), c.display(), out.join(fringeflow::run::output_name(c)).display()));
        }
    }
    let shard = match shard {
        Some(s) => inputs::Shard::parse(s),
        None => inputs::Shard::from_env(|k| std::env::var(k).ok()).map(|s| s.unwrap_or(inputs::Shard::WHOLE)),
    };
    let shard = match shard {
        Ok(s) => s,
        Err(e) => return fail(2, format!("{e:#}")),
    };
    let mine = shard.select(&all);
    let stop = match batch::StopSignals::install(true) {
        Ok(s) => s,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    let options = batch::BatchOptions { resume, quiet, terminal: std::io::stderr().is_terminal(), shard, inputs_total: all.len(), reference_engine };
    let report = match batch::run_batch(&mine, &config, out, &options, &stop) {
        Ok(r) => r,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    if !quiet {
        out!("{}", report.render());
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

fn rerun(log_path: &Path, out: &Path) -> ExitCode {
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
    match fringeflow::io::hash::input_hash(&input) {
        Ok(h) if fringeflow::io::hash::same_input(sha, &h) => {}
        Ok(h) => return fail(1, format!("{}: its hash is {h}, the log recorded {sha}: not the same input", input.display())),
        Err(e) => return fail(1, format!("{}: {e}", input.display())),
    }
    let name = fringeflow::run::output_name(&input);
    let lock = match fringeflow::batch::lock::OutputLock::acquire(out, &name) {
        Ok(l) => l,
        Err(e) => return fail(1, format!("{}: {e:#}", input.display())),
    };
    lock.clean_stale_staging(out, &name);
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
            fringeflow::output::note(&format!("reproduced {} → {}", input.display(), o.output_dir.display()));
            ExitCode::SUCCESS
        }
        Err(e) => fail(1, format!("{}: {e:#}", input.display())),
    }
}

fn summarize(dir: &Path) -> ExitCode {
    let (report, problems) = match fringeflow::batch::merge_reports(dir) {
        Ok(r) => r,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    let path = dir.join("summary.json");
    let json = serde_json::to_vec_pretty(&serde_json::json!({ "report": report, "problems": problems })).unwrap();
    if let Err(e) = fringeflow::io::staging::write_atomically(&path, |tmp| Ok(std::fs::write(tmp, &json)?)) {
        return fail(1, format!("{e:#}"));
    }
    out!("{}", report.render());
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
    if let Err(e) = PipelineConfig::from_file(pipeline) {
        return fail(2, e);
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

fn measure(command: MeasureCommand) -> ExitCode {
    use fringeflow::measure::{mirror, plot, rolloff};
    match command {
        MeasureCommand::Psf { mirror: path, pipeline, frame, group_index, plot: plot_path, json } => {
            let config = match load_pipeline(pipeline.as_deref()) {
                Ok(c) => c,
                Err(code) => return code,
            };
            let m = match mirror::measure(&path, &config, frame, group_index) {
                Ok(m) => m,
                Err(e) => return fail(1, format!("{}: {e:#}", path.display())),
            };
            if let Err(e) = plot::psf(&plot_path, &m) {
                return fail(1, format!("{}: {e:#}", plot_path.display()));
            }
            for w in &m.warnings {
                errln!("fringeflow: warning: {w}");
            }
            if json {
                outln!("{}", serde_json::to_string_pretty(&m).unwrap());
            } else {
                outln!("mirror {} frame {}: peak at {:.2} µm, {:.1} dB", m.capture, m.frame, m.peak_depth_um, m.peak_db);
                outln!("source spectrum: centre {:.2} nm, FWHM {:.2} nm → limit l_c {:.3} µm", m.source.centre_nm, m.source.fwhm_nm, m.source.coherence_length_um);
                outln!("PSF FWHM {:.3} µm in air, {:.3} µm at group index {:.3}; measured/limit {:.3}", m.fwhm_um_air, m.fwhm_um_medium, m.group_index, m.fwhm_over_limit);
                match (m.side_lobe_db, m.side_lobe_above_noise) {
                    (Some(s), true) => outln!("highest side lobe {s:.1} dB"),
                    (Some(s), false) => outln!("no side lobe above the noise (highest local maximum {s:.1} dB is noise)"),
                    (None, _) => outln!("highest side lobe: none found"),
                }
                outln!("peak SNR {:.1} dB (noise floor {:.1} dB); plot {}", m.peak_over_noise_sd_db, m.noise_floor_db, plot_path.display());
            }
            ExitCode::SUCCESS
        }
        MeasureCommand::Rolloff { mirrors, pipeline, attenuation_db, plot: plot_path, json } => {
            let config = match load_pipeline(pipeline.as_deref()) {
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
            if let Err(e) = plot::rolloff(&plot_path, &report) {
                return fail(1, format!("{}: {e:#}", plot_path.display()));
            }
            for w in &report.warnings {
                errln!("fringeflow: warning: {w}");
            }
            if json {
                outln!("{}", serde_json::to_string_pretty(&report).unwrap());
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
                outln!("-6 dB roll-off depth {:.0} µm (in air); plot {}", f.rolloff_6db_depth_um, plot_path.display());
                if let (Some(s), Some(a)) = (report.sensitivity_db, attenuation_db) {
                    outln!("sensitivity {s:.1} dB = SNR {:.1} dB + round-trip attenuation 2 × {a:.1} dB", report.points[0].peak_over_noise_sd_db);
                }
            }
            ExitCode::SUCCESS
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    // Single commands stop at the first signal (removing what they were
    // writing); `run` and `rerun` install their own graceful handling.
    if !matches!(cli.command, Command::Run { .. } | Command::Rerun { .. }) {
        if let Err(e) = fringeflow::batch::StopSignals::install(false) {
            return fail(1, format!("{e:#}"));
        }
    }
    match cli.command {
        Command::Run { captures, list, pipeline, out, resume, shard, quiet, engine } => {
            run(&captures, list.as_deref(), pipeline.as_deref(), &out, resume, shard.as_deref(), quiet, engine == cli::Engine::Reference)
        }
        Command::Rerun { log, out } => rerun(&log, &out),
        Command::Summarize { dir } => summarize(&dir),
        Command::SlurmScript { list, pipeline, out, tasks, cpus_per_task, mem, time, partition, job_name } => {
            slurm_script(&list, &pipeline, &out, tasks, cpus_per_task, &mem, &time, partition.as_deref(), &job_name)
        }
        Command::Simulate { scene, out } => {
            if let Ok(text) = std::fs::read_to_string(&scene) {
                for notice in fringeflow::simulate::scene::Scene::deprecations(&scene.display().to_string(), &text) {
                    fringeflow::output::warn(&notice);
                }
            }
            let scene = match fringeflow::simulate::scene::Scene::from_file(&scene) {
                Ok(s) => s,
                Err(e) => return fail(2, e),
            };
            match fringeflow::simulate::simulate(&scene, &out) {
                Ok(_) => {
                    errln!("wrote {} and {}", out.display(), fringeflow::simulate::truth_path(&out).display());
                    ExitCode::SUCCESS
                }
                Err(e) => fail(1, format!("{e:#}")),
            }
        }
        Command::Measure(m) => measure(m),
        Command::Bench { capture, work_dir, alines, repeats, no_scaling, no_end_to_end, json } => {
            let opts = fringeflow::throughput::BenchOptions { capture, work_dir, alines, repeats, scaling: !no_scaling, end_to_end: !no_end_to_end };
            match fringeflow::throughput::run_bench(&opts) {
                Ok(report) => {
                    out!("{}", report.render());
                    if let Some(path) = json {
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
                Err(e) => fail(1, format!("{e:#}")),
            }
        }
        Command::Calibrate(c) => calibration_commands::calibrate(c),
        Command::Dispersion(c) => calibration_commands::dispersion(c),
        Command::Design { centre_nm, fwhm_nm, span_nm, pixel_width_nm, pixels, group_index, resolution_nm, json } => {
            let span = span_nm.unwrap_or_else(|| pixel_width_nm.unwrap_or(0.0) * pixels as f64);
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
                outln!("{}", serde_json::to_string_pretty(&report).unwrap());
            } else {
                out!("{}", report.render());
            }
            ExitCode::SUCCESS
        }
        Command::Inspect { capture, pipeline } => {
            let config = match load_pipeline(pipeline.as_deref()) {
                Ok(c) => c,
                Err(code) => return code,
            };
            match fringeflow::inspect::inspect(&capture, &config.input) {
                Ok(report) => {
                    out!("{}", report.render(&capture));
                    if report.problems.is_empty() {
                        ExitCode::SUCCESS
                    } else {
                        ExitCode::from(1)
                    }
                }
                Err(e) => fail(1, format!("{}: {e:#}", capture.display())),
            }
        }
    }
}
