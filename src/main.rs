//! The `fringeflow` binary: parses arguments and calls the library.
//! Errors print as one line on stderr; exit 2 for usage and settings
//! errors, 1 when a capture could not be processed.

mod cli;

use anyhow::Result;
use clap::Parser;
use indicatif::{ProgressBar, ProgressStyle};
use std::collections::BTreeMap;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use cli::{Cli, Command, MeasureCommand};
use fringeflow::pipeline::config::PipelineConfig;

fn fail(code: u8, message: impl std::fmt::Display) -> ExitCode {
    eprintln!("fringeflow: error: {message}");
    ExitCode::from(code)
}

fn load_pipeline(path: Option<&Path>) -> Result<PipelineConfig, ExitCode> {
    match path {
        Some(p) => PipelineConfig::from_file(p).map_err(|e| fail(2, e)),
        None => Ok(PipelineConfig::default()),
    }
}

fn frames_of(path: &Path, config: &PipelineConfig) -> u64 {
    fringeflow::io::capture::Capture::open(path, &config.input).map(|c| c.frames as u64).unwrap_or(0)
}

fn run(captures: &[PathBuf], pipeline: Option<&Path>, out: &Path, quiet: bool) -> ExitCode {
    let config = match load_pipeline(pipeline) {
        Ok(c) => c,
        Err(code) => return code,
    };
    let mut names = BTreeMap::new();
    for c in captures {
        if let Some(other) = names.insert(fringeflow::run::output_name(c), c) {
            return fail(2, format!("{} and {} would both write {}", other.display(), c.display(), out.join(fringeflow::run::output_name(c)).display()));
        }
    }
    let show = !quiet && std::io::stderr().is_terminal();
    let bar = show.then(|| {
        let total: u64 = captures.iter().map(|c| frames_of(c, &config)).sum();
        let bar = ProgressBar::new(total);
        bar.set_style(ProgressStyle::with_template("{bar:40} {pos}/{len} frames {elapsed} {msg}").unwrap());
        bar
    });
    let mut failed = 0;
    for capture in captures {
        if let Some(b) = &bar {
            b.set_message(capture.display().to_string());
        }
        match fringeflow::run::process_capture(capture, &config, out, bar.as_ref()) {
            Ok(done) => {
                if !quiet {
                    let line = format!(
                        "{}: {} frames × {} A-lines in {:.2} s ({:.0} A-lines/s) → {}",
                        capture.display(),
                        done.frames,
                        done.alines,
                        done.seconds,
                        (done.frames * done.alines) as f64 / done.seconds,
                        done.output_dir.display()
                    );
                    match &bar {
                        Some(b) => b.println(line),
                        None => eprintln!("{line}"),
                    }
                }
            }
            Err(e) => {
                failed += 1;
                let line = format!("fringeflow: error: {}: {e:#}", capture.display());
                match &bar {
                    Some(b) => b.println(line),
                    None => eprintln!("{line}"),
                }
            }
        }
    }
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    if failed > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
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
                eprintln!("fringeflow: warning: {w}");
            }
            if json {
                println!("{}", serde_json::to_string_pretty(&m).unwrap());
            } else {
                println!("mirror {} frame {}: peak at {:.2} µm, {:.1} dB", m.capture, m.frame, m.peak_depth_um, m.peak_db);
                println!("source spectrum: centre {:.2} nm, FWHM {:.2} nm → limit l_c {:.3} µm", m.source.centre_nm, m.source.fwhm_nm, m.source.coherence_length_um);
                println!("PSF FWHM {:.3} µm in air, {:.3} µm at group index {:.3}; measured/limit {:.3}", m.fwhm_um_air, m.fwhm_um_medium, m.group_index, m.fwhm_over_limit);
                match (m.side_lobe_db, m.side_lobe_above_noise) {
                    (Some(s), true) => println!("highest side lobe {s:.1} dB"),
                    (Some(s), false) => println!("no side lobe above the noise (highest local maximum {s:.1} dB is noise)"),
                    (None, _) => println!("highest side lobe: none found"),
                }
                println!("peak SNR {:.1} dB (noise floor {:.1} dB); plot {}", m.snr_db, m.noise_floor_db, plot_path.display());
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
                eprintln!("fringeflow: warning: {w}");
            }
            if json {
                println!("{}", serde_json::to_string_pretty(&report).unwrap());
            } else {
                println!("{:>12} {:>10} {:>10} {:>10}  capture", "depth µm", "peak dB", "SNR dB", "FWHM µm");
                for p in &report.points {
                    println!("{:>12.1} {:>10.2} {:>10.2} {:>10.2}  {}", p.depth_um, p.peak_db, p.snr_db, p.fwhm_um, p.capture);
                }
                let f = &report.fit;
                println!(
                    "fit: A0 {:.2} dB, spectral response FWHM {:.4} nm, pixel width {:.3e} rad/µm, RMS residual {:.2} dB",
                    f.a0_db, f.resolution_fwhm_nm, f.pixel_dk_per_um, f.rms_residual_db
                );
                println!("-6 dB roll-off depth {:.0} µm (in air); plot {}", f.rolloff_6db_depth_um, plot_path.display());
                if let (Some(s), Some(a)) = (report.sensitivity_db, attenuation_db) {
                    println!("sensitivity {s:.1} dB = SNR {:.1} dB + round-trip attenuation 2 × {a:.1} dB", report.points[0].snr_db);
                }
            }
            ExitCode::SUCCESS
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Run { captures, pipeline, out, quiet } => run(&captures, pipeline.as_deref(), &out, quiet),
        Command::Simulate { scene, out } => {
            let scene = match fringeflow::simulate::scene::Scene::from_file(&scene) {
                Ok(s) => s,
                Err(e) => return fail(2, e),
            };
            match fringeflow::simulate::simulate(&scene, &out) {
                Ok(_) => {
                    eprintln!("wrote {} and {}", out.display(), fringeflow::simulate::truth_path(&out).display());
                    ExitCode::SUCCESS
                }
                Err(e) => fail(1, format!("{e:#}")),
            }
        }
        Command::Measure(m) => measure(m),
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
                println!("{}", serde_json::to_string_pretty(&report).unwrap());
            } else {
                print!("{}", report.render());
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
                    print!("{}", report.render(&capture));
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
