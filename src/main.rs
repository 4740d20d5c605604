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

use cli::{Cli, Command};
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
