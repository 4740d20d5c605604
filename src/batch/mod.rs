//! Headless batches: many captures in parallel (across captures and within
//! each), failures isolated, resumable, interruptible, shardable across a
//! Slurm job array, summarised in batch.json.
//!
//! Each capture takes a lock on its output name; outputs appear only when
//! complete (see `io::staging`). SIGINT and SIGTERM stop the batch cleanly:
//! the capture in flight is discarded, the summary is written, and the
//! process exits 130 or 143.

pub mod inputs;
pub mod lock;

use anyhow::{Context, Result};
use indicatif::{MultiProgress, ProgressBar, ProgressStyle};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use crate::io::staging::write_atomically;
use crate::pipeline::config::PipelineConfig;
use crate::run::{output_name, process_capture, Interrupted, RunContext};
use inputs::Shard;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Status {
    Done,
    Skipped,
    Failed,
    /// Not processed because the batch was interrupted.
    NotRun,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct CaptureRecord {
    pub input: String,
    pub status: Status,
    pub reason: Option<String>,
    pub output: Option<String>,
    pub seconds: f64,
}

#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct Counts {
    pub done: usize,
    pub skipped: usize,
    pub failed: usize,
    pub not_run: usize,
}

impl Counts {
    pub fn tally(records: &[CaptureRecord]) -> Counts {
        let mut c = Counts::default();
        for r in records {
            match r.status {
                Status::Done => c.done += 1,
                Status::Skipped => c.skipped += 1,
                Status::Failed => c.failed += 1,
                Status::NotRun => c.not_run += 1,
            }
        }
        c
    }
}

/// Contents of batch.json.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct BatchReport {
    pub tool_version: String,
    pub shard: Shard,
    /// Captures in the whole (unsharded) input list.
    pub inputs_total: usize,
    pub pipeline_sha256: String,
    pub captures: Vec<CaptureRecord>,
    pub counts: Counts,
    /// The signal that stopped the batch, if any.
    pub interrupted: Option<String>,
}

/// Flags set by SIGINT and SIGTERM.
#[derive(Clone, Default)]
pub struct StopSignals {
    pub interrupt: Arc<AtomicBool>,
    pub terminate: Arc<AtomicBool>,
    /// Set by either: what the workers poll.
    pub any: Arc<AtomicBool>,
}

impl StopSignals {
    /// Installs handlers: the first signal asks for a clean stop; a second
    /// SIGINT or SIGTERM while stopping ends the process at once.
    pub fn install() -> Result<StopSignals> {
        use signal_hook::consts::{SIGINT, SIGTERM};
        use signal_hook::flag;
        let s = StopSignals::default();
        for sig in [SIGINT, SIGTERM] {
            flag::register_conditional_shutdown(sig, 1, Arc::clone(&s.any)).context("installing signal handler")?;
            flag::register(sig, Arc::clone(&s.any)).context("installing signal handler")?;
        }
        flag::register(SIGINT, Arc::clone(&s.interrupt))?;
        flag::register(SIGTERM, Arc::clone(&s.terminate))?;
        Ok(s)
    }

    pub fn stopped(&self) -> Option<(&'static str, u8)> {
        if self.terminate.load(Ordering::Relaxed) {
            Some(("SIGTERM", 143))
        } else if self.interrupt.load(Ordering::Relaxed) || self.any.load(Ordering::Relaxed) {
            Some(("SIGINT", 130))
        } else {
            None
        }
    }
}

pub struct BatchOptions {
    pub resume: bool,
    pub quiet: bool,
    pub terminal: bool,
    pub shard: Shard,
    pub inputs_total: usize,
    /// Use the plain f64 stage chain instead of the fused fast path.
    pub reference_engine: bool,
}

/// Name of the batch summary for a shard.
pub fn report_name(shard: Shard) -> String {
    if shard.is_whole() {
        "batch.json".into()
    } else {
        format!("batch-{}-of-{}.json", shard.index, shard.count)
    }
}

fn process_one(input: &Path, config: &PipelineConfig, out: &Path, ctx: RunContext<'_>) -> CaptureRecord {
    let name = output_name(input);
    let started = std::time::Instant::now();
    let result = lock::OutputLock::acquire(out, &name).and_then(|lock| {
        lock.clean_stale_staging(out, &name);
        process_capture(input, config, out, ctx)
    });
    let seconds = started.elapsed().as_secs_f64();
    let input = input.display().to_string();
    match result {
        Ok(o) => CaptureRecord {
            input,
            status: if o.skipped { Status::Skipped } else { Status::Done },
            reason: o.skipped.then(|| "up to date (same input SHA-256 and pipeline)".to_string()),
            output: Some(o.output_dir.display().to_string()),
            seconds,
        },
        Err(e) if e.is::<Interrupted>() => CaptureRecord { input, status: Status::NotRun, reason: Some(e.to_string()), output: None, seconds },
        Err(e) => CaptureRecord { input, status: Status::Failed, reason: Some(format!("{e:#}").replace('\n', " ")), output: None, seconds },
    }
}

/// Runs every capture, in parallel, and writes the batch summary.
pub fn run_batch(captures: &[PathBuf], config: &PipelineConfig, out: &Path, opts: &BatchOptions, stop: &StopSignals) -> Result<BatchReport> {
    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    let show_bars = opts.terminal && !opts.quiet;
    let multi = MultiProgress::new();
    let overall = show_bars.then(|| {
        let total: u64 = captures
            .iter()
            .map(|c| crate::io::capture::Capture::open(c, &config.input).map(|c| c.frames as u64).unwrap_or(0))
            .sum();
        let bar = multi.add(ProgressBar::new(total));
        bar.set_style(ProgressStyle::with_template("{bar:40} {pos}/{len} frames, {elapsed} elapsed, about {eta} left").unwrap());
        bar
    });
    let records: Vec<CaptureRecord> = captures
        .par_iter()
        .with_max_len(1)
        .map(|input| {
            if stop.any.load(Ordering::Relaxed) {
                return CaptureRecord { input: input.display().to_string(), status: Status::NotRun, reason: Some("batch interrupted".into()), output: None, seconds: 0.0 };
            }
            let own = show_bars.then(|| {
                let b = multi.add(ProgressBar::new(0));
                b.set_style(ProgressStyle::with_template("  {bar:20} {pos:>5}/{len:5} {msg}").unwrap());
                b.set_message(input.display().to_string());
                b
            });
            let ctx = RunContext { progress: overall.as_ref(), capture_progress: own.as_ref(), cancel: Some(&stop.any), resume: opts.resume, reference_engine: opts.reference_engine };
            let record = process_one(input, config, out, ctx);
            if let Some(b) = own {
                b.finish_and_clear();
                multi.remove(&b);
            }
            // Failures are reported even when quiet.
            if !opts.quiet || matches!(record.status, Status::Failed) {
                let line = match record.status {
                    Status::Done => format!("done    {} → {} ({:.2} s)", record.input, record.output.as_deref().unwrap_or(""), record.seconds),
                    Status::Skipped => format!("skipped {}: {}", record.input, record.reason.as_deref().unwrap_or("")),
                    Status::Failed => format!("fringeflow: error: {}: {}", record.input, record.reason.as_deref().unwrap_or("")),
                    Status::NotRun => format!("not run {}: interrupted", record.input),
                };
                if show_bars {
                    multi.println(line).ok();
                } else {
                    eprintln!("{line}");
                }
            }
            record
        })
        .collect();
    if let Some(b) = overall {
        b.finish_and_clear();
    }
    let counts = Counts::tally(&records);
    let report = BatchReport {
        tool_version: env!("CARGO_PKG_VERSION").into(),
        shard: opts.shard,
        inputs_total: opts.inputs_total,
        pipeline_sha256: config.sha256(),
        captures: records,
        counts,
        interrupted: stop.stopped().map(|(name, _)| name.to_string()),
    };
    let path = out.join(report_name(opts.shard));
    let json = serde_json::to_vec_pretty(&report)?;
    write_atomically(&path, |tmp| Ok(std::fs::write(tmp, &json)?)).with_context(|| format!("writing {}", path.display()))?;
    Ok(report)
}

impl BatchReport {
    /// The end-of-run table.
    pub fn render(&self) -> String {
        let mut s = String::new();
        for r in &self.captures {
            let status = match r.status {
                Status::Done => "done",
                Status::Skipped => "skipped",
                Status::Failed => "FAILED",
                Status::NotRun => "not run",
            };
            s += &format!("{status:<8} {}{}\n", r.input, r.reason.as_ref().filter(|_| r.status != Status::Done).map(|m| format!(": {m}")).unwrap_or_default());
        }
        let c = &self.counts;
        s += &format!("{} done, {} skipped, {} failed, {} not run", c.done, c.skipped, c.failed, c.not_run);
        if !self.shard.is_whole() {
            s += &format!(" (shard {}/{} of {} captures)", self.shard.index, self.shard.count, self.inputs_total);
        }
        if let Some(sig) = &self.interrupted {
            s += &format!("; stopped by {sig}");
        }
        s.push('\n');
        s
    }
}

/// Merges the batch summaries of a directory (one per shard) into one
/// report, checking that no capture appears twice.
pub fn merge_reports(dir: &Path) -> Result<(BatchReport, Vec<String>)> {
    let mut reports = Vec::new();
    for e in std::fs::read_dir(dir).with_context(|| format!("reading {}", dir.display()))? {
        let p = e?.path();
        let n = p.file_name().unwrap().to_string_lossy().into_owned();
        if n.starts_with("batch") && n.ends_with(".json") {
            let r: BatchReport = serde_json::from_slice(&std::fs::read(&p)?).with_context(|| format!("reading {}", p.display()))?;
            reports.push(r);
        }
    }
    anyhow::ensure!(!reports.is_empty(), "no batch*.json in {}", dir.display());
    reports.sort_by_key(|r| r.shard.index);
    let mut captures: Vec<CaptureRecord> = reports.iter().flat_map(|r| r.captures.clone()).collect();
    captures.sort_by(|a, b| a.input.cmp(&b.input));
    let mut problems = Vec::new();
    for w in captures.windows(2) {
        if w[0].input == w[1].input {
            problems.push(format!("{} was processed by more than one shard", w[0].input));
        }
    }
    let count = reports[0].shard.count;
    let seen: std::collections::BTreeSet<usize> = reports.iter().map(|r| r.shard.index).collect();
    if seen.len() != count || reports.iter().any(|r| r.shard.count != count) {
        problems.push(format!("expected {count} shard summaries, found shards {seen:?}"));
    }
    if captures.len() != reports[0].inputs_total {
        problems.push(format!("{} captures reported, {} in the input list", captures.len(), reports[0].inputs_total));
    }
    let counts = Counts::tally(&captures);
    let merged = BatchReport {
        tool_version: reports[0].tool_version.clone(),
        shard: Shard::WHOLE,
        inputs_total: reports[0].inputs_total,
        pipeline_sha256: reports[0].pipeline_sha256.clone(),
        captures,
        counts,
        interrupted: reports.iter().find_map(|r| r.interrupted.clone()),
    };
    Ok((merged, problems))
}
