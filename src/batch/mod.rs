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
    /// Another live run holds the capture's lock (it does the work).
    Held,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct CaptureRecord {
    pub input: String,
    pub status: Status,
    pub reason: Option<String>,
    pub output: Option<String>,
    pub seconds: f64,
    /// Warnings the capture's log.json records (each also printed on stderr).
    #[serde(default)]
    pub warnings: usize,
    /// The kind of failure, stable for scripts (absent unless failed).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub error_kind: Option<String>,
}

#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct Counts {
    pub done: usize,
    pub skipped: usize,
    pub failed: usize,
    pub not_run: usize,
    #[serde(default)]
    pub held: usize,
    /// Warnings over all captures.
    #[serde(default)]
    pub warnings: usize,
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
                Status::Held => c.held += 1,
            }
            c.warnings += r.warnings;
        }
        c
    }
}

/// Version of the batch summary's layout (batch*.json, summary.json):
/// raised when a field changes meaning or goes away.
pub const BATCH_FORMAT_VERSION: u32 = 1;

fn format_version_before_it_was_recorded() -> u32 {
    0
}

/// Contents of batch.json.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct BatchReport {
    /// [`BATCH_FORMAT_VERSION`] of the writer (0: written before it was recorded).
    #[serde(default = "format_version_before_it_was_recorded")]
    pub format_version: u32,
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

/// How the process reacts to SIGINT, SIGTERM, SIGHUP and SIGQUIT.
///
/// Graceful (batches): the first signal sets the flags the workers poll, so
/// the capture in flight is discarded and the summary written; a second
/// signal removes every in-flight temporary file, staging directory and
/// lock, and exits at once. Not graceful (single commands): the first
/// signal does that. Either way the exit status is 128 + the signal.
#[derive(Clone, Default)]
pub struct StopSignals {
    /// The first signal received (its number), 0 while none.
    pub signal: Arc<std::sync::atomic::AtomicI32>,
    /// Set by any of them: what the workers poll.
    pub any: Arc<AtomicBool>,
}

/// The signals that stop a run, with their names.
pub const STOP_SIGNALS: [(i32, &str); 4] = [
    (signal_hook::consts::SIGINT, "SIGINT"),
    (signal_hook::consts::SIGTERM, "SIGTERM"),
    (signal_hook::consts::SIGHUP, "SIGHUP"),
    (signal_hook::consts::SIGQUIT, "SIGQUIT"),
];

impl StopSignals {
    pub fn install(graceful: bool) -> Result<StopSignals> {
        let s = StopSignals::default();
        let mut signals = signal_hook::iterator::Signals::new(STOP_SIGNALS.map(|(n, _)| n)).context("installing signal handlers")?;
        let (flag, any) = (Arc::clone(&s.signal), Arc::clone(&s.any));
        std::thread::Builder::new()
            .name("signals".into())
            .spawn(move || {
                for sig in signals.forever() {
                    let first = flag.compare_exchange(0, sig, Ordering::SeqCst, Ordering::SeqCst).is_ok();
                    any.store(true, Ordering::SeqCst);
                    crate::interrupt::request();
                    if !graceful || !first {
                        crate::io::staging::remove_in_flight();
                        std::process::exit(128 + sig);
                    }
                }
            })
            .context("starting the signal thread")?;
        Ok(s)
    }

    /// The stopping signal's name and the exit status it calls for.
    pub fn stopped(&self) -> Option<(&'static str, u8)> {
        let sig = self.signal.load(Ordering::SeqCst);
        if sig == 0 {
            return None;
        }
        let name = STOP_SIGNALS.iter().find(|(n, _)| *n == sig).map_or("signal", |(_, name)| *name);
        Some((name, (128 + sig) as u8))
    }
}

pub struct BatchOptions {
    pub resume: bool,
    pub quiet: bool,
    pub terminal: bool,
    pub shard: Shard,
    pub inputs_total: usize,
    /// Use the plain f64 stage chain instead of the fused f32 fast path.
    pub reference_engine: bool,
    /// Per-capture detail in the status lines (frames, rate, background method).
    pub verbose: bool,
    /// One JSON object per capture on stdout as it finishes.
    pub json: bool,
    /// JSON-lines progress events on stderr instead of bars and status lines.
    pub progress_json: bool,
}

/// One line of the `--progress-json` stream on stderr.
fn progress_event(event: &str, fields: serde_json::Value) {
    let mut object = serde_json::Map::new();
    object.insert("event".into(), event.into());
    if let serde_json::Value::Object(f) = fields {
        object.extend(f);
    }
    crate::output::note(&serde_json::Value::Object(object).to_string());
}

/// Name of the batch summary for a shard.
pub fn report_name(shard: Shard) -> String {
    if shard.is_whole() {
        "batch.json".into()
    } else {
        format!("batch-{}-of-{}.json", shard.index, shard.count)
    }
}

fn process_one(input: &Path, config: &PipelineConfig, out: &Path, ctx: RunContext<'_>) -> (CaptureRecord, Option<String>) {
    let name = output_name(input);
    let started = std::time::Instant::now();
    let result = match crate::io::staging::output_name_problem(&name) {
        Some(problem) => Err(anyhow::anyhow!("{problem}")),
        None => lock::OutputLock::acquire(out, &name).and_then(|lock| {
            lock.clean_stale_staging(out, &name);
            process_capture(input, config, out, ctx)
        }),
    };
    let seconds = started.elapsed().as_secs_f64();
    let input = input.display().to_string();
    let record = |status, reason: Option<String>, output: Option<String>, warnings: usize| CaptureRecord { input: input.clone(), status, reason, output, seconds, warnings, error_kind: None };
    match result {
        Ok(o) => {
            for w in &o.warnings {
                crate::output::warn(&format!("{input}: {w}"));
            }
            let detail = o.skipped.is_none().then(|| {
                format!(
                    "{} frames × {} A-lines, {:.0} A-lines/s, background {}",
                    o.frames,
                    o.alines,
                    (o.frames * o.alines) as f64 / o.seconds.max(1e-9),
                    o.background_method.as_deref().unwrap_or("-")
                )
            });
            let r = record(
                if o.skipped.is_some() { Status::Skipped } else { Status::Done },
                o.skipped.map(|digest| {
                    let name = match digest {
                        crate::io::hash::HashAlgorithm::Blake3 => "BLAKE3",
                        crate::io::hash::HashAlgorithm::Sha256 => "SHA-256",
                    };
                    format!("up to date (same input {name} digest, pipeline and calibration)")
                }),
                Some(o.output_dir.display().to_string()),
                o.warnings.len(),
            );
            (r, detail)
        }
        Err(e) if e.is::<Interrupted>() => (record(Status::NotRun, Some(e.to_string()), None, 0), None),
        Err(e) if e.is::<lock::HeldByAnother>() => (record(Status::Held, Some(format!("held by another run: {e}")), None, 0), None),
        Err(e) => {
            let mut r = record(Status::Failed, Some(format!("{e:#}").replace('\n', " ")), None, 0);
            r.error_kind = Some(crate::errors::kind_of(&e).to_string());
            (r, None)
        }
    }
}

/// Runs every capture, in parallel, and writes the batch summary.
pub fn run_batch(captures: &[PathBuf], config: &PipelineConfig, out: &Path, opts: &BatchOptions, stop: &StopSignals) -> Result<BatchReport> {
    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    let show_bars = opts.terminal && !opts.quiet && !opts.progress_json;
    if opts.progress_json {
        progress_event("start", serde_json::json!({ "captures": captures.len(), "out": out.display().to_string() }));
    }
    let multi = MultiProgress::new();
    let overall = show_bars.then(|| {
        let total: u64 = captures
            .iter()
            .map(|c| crate::run::open_capture(c, &config.input).map(|c| c.frames as u64).unwrap_or(0))
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
                return CaptureRecord { input: input.display().to_string(), status: Status::NotRun, reason: Some("batch interrupted".into()), output: None, seconds: 0.0, warnings: 0, error_kind: None };
            }
            let own = show_bars.then(|| {
                let b = multi.add(ProgressBar::new(0));
                b.set_style(ProgressStyle::with_template("  {bar:20} {pos:>5}/{len:5} {msg}").unwrap());
                b.set_message(input.display().to_string());
                b
            });
            let name = input.display().to_string();
            let tell = |done: usize, total: usize| progress_event("frame", serde_json::json!({ "input": name, "done": done, "frames": total }));
            if opts.progress_json {
                progress_event("capture_start", serde_json::json!({ "input": name }));
            }
            let ctx = RunContext {
                progress: overall.as_ref(),
                capture_progress: own.as_ref(),
                cancel: Some(&stop.any),
                resume: opts.resume,
                reference_engine: opts.reference_engine,
                on_frame: opts.progress_json.then_some(&tell as &(dyn Fn(usize, usize) + Sync)),
            };
            let (record, detail) = process_one(input, config, out, ctx);
            if opts.progress_json {
                progress_event("capture_end", serde_json::to_value(&record).unwrap_or_default());
            }
            if opts.json {
                let mut line = serde_json::Map::new();
                line.insert("kind".into(), "capture".into());
                if let Ok(serde_json::Value::Object(fields)) = serde_json::to_value(&record) {
                    line.extend(fields);
                }
                crate::output::println(&crate::json_doc::line(crate::json_doc::RUN_LINE, &serde_json::Value::Object(line)));
            }
            if let Some(b) = own {
                b.finish_and_clear();
                multi.remove(&b);
            }
            // One status line per capture on stderr; failures even when quiet
            // (the JSON-lines stream carries them instead).
            if !opts.progress_json && (!opts.quiet || matches!(record.status, Status::Failed)) {
                let line = match record.status {
                    Status::Done if opts.verbose => format!("done    {} → {} ({:.2} s; {})", record.input, record.output.as_deref().unwrap_or(""), record.seconds, detail.as_deref().unwrap_or("")),
                    Status::Done => format!("done    {} → {} ({:.2} s)", record.input, record.output.as_deref().unwrap_or(""), record.seconds),
                    Status::Skipped => format!("skipped {}: {}", record.input, record.reason.as_deref().unwrap_or("")),
                    Status::Failed => format!("fringeflow: error: {}: {}", record.input, record.reason.as_deref().unwrap_or("")),
                    Status::NotRun => format!("not run {}: interrupted", record.input),
                    Status::Held => format!("held    {}: {}", record.input, record.reason.as_deref().unwrap_or("")),
                };
                if show_bars {
                    multi.println(line).ok();
                } else {
                    crate::output::note(&line);
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
        format_version: BATCH_FORMAT_VERSION,
        tool_version: env!("CARGO_PKG_VERSION").into(),
        shard: opts.shard,
        inputs_total: opts.inputs_total,
        pipeline_sha256: config.sha256(),
        captures: records,
        counts,
        interrupted: stop.stopped().map(|(name, _)| name.to_string()),
    };
    let path = out.join(report_name(opts.shard));
    let report = write_report(&path, report)?;
    if opts.progress_json {
        progress_event("end", serde_json::json!({ "counts": report.counts, "summary": path.display().to_string(), "interrupted": report.interrupted }));
    }
    Ok(report)
}

/// Writes this run's summary (its own inputs only: what it printed and
/// what its exit status says) under the summary's own lock, then the
/// folder's page ([`write_folder_index`]). Returns what was written.
fn write_report(path: &Path, report: BatchReport) -> Result<BatchReport> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let lock_name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    // Another run may hold the summary's lock briefly: wait for it.
    let started = std::time::Instant::now();
    let _lock = loop {
        match lock::OutputLock::acquire(dir, &lock_name) {
            Ok(l) => break l,
            Err(e) if e.is::<lock::HeldByAnother>() && started.elapsed() < std::time::Duration::from_secs(60) => std::thread::sleep(std::time::Duration::from_millis(20)),
            Err(e) => return Err(e),
        }
    };
    let json = serde_json::to_vec_pretty(&report)?;
    write_atomically(path, |tmp| Ok(std::fs::write(tmp, &json)?)).with_context(|| format!("writing {}", path.display()))?;
    write_folder_index(dir, &report)?;
    Ok(report)
}

/// The batch folder's page: the records of `report` (this run, or the
/// merged shards), then every other output folder in `dir` with a
/// log.json, as made by an earlier run (`earlier`, naming its pipeline) or
/// `stale` when its input is gone or changed since it was processed. Only
/// the report's records are counted.
pub fn write_folder_index(dir: &Path, report: &BatchReport) -> Result<()> {
    let mut value = serde_json::to_value(report)?;
    let ours: std::collections::BTreeSet<String> =
        report.captures.iter().filter_map(|r| r.output.as_deref().and_then(|o| Path::new(o).file_name()).map(|n| n.to_string_lossy().into_owned())).collect();
    let mut folders: Vec<_> = std::fs::read_dir(dir).map(|rd| rd.flatten().map(|e| e.path()).filter(|p| p.join("log.json").is_file()).collect()).unwrap_or_default();
    folders.sort();
    let (mut earlier, mut stale) = (0usize, 0usize);
    let rows = value["captures"].as_array_mut().expect("captures");
    for folder in folders {
        let name = folder.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        if name.starts_with('.') || ours.contains(&name) {
            continue;
        }
        let Some(log) = std::fs::read(folder.join("log.json")).ok().and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok()) else { continue };
        let input = log["input"]["absolute_path"].as_str().or(log["input"]["path"].as_str()).unwrap_or("?").to_string();
        let pipeline = log["pipeline_sha256"].as_str().unwrap_or("?");
        let logged = std::fs::metadata(folder.join("log.json")).and_then(|m| m.modified()).ok();
        let (status, reason) = match std::fs::metadata(&input) {
            Err(_) => ("stale", format!("its input {input} is gone; made with pipeline sha256 {pipeline}")),
            Ok(m) if m.modified().ok().zip(logged).is_some_and(|(changed, made)| changed > made) => ("stale", format!("its input changed since it was processed; made with pipeline sha256 {pipeline}")),
            Ok(_) => ("earlier", format!("made by an earlier run with pipeline sha256 {pipeline}")),
        };
        if status == "stale" {
            stale += 1;
        } else {
            earlier += 1;
        }
        rows.push(serde_json::json!({
            "input": input,
            "status": status,
            "reason": reason,
            "output": folder.display().to_string(),
            "seconds": 0.0,
            "warnings": log["warnings"].as_array().map_or(0, |w| w.len()),
        }));
    }
    value["folder_note"] = serde_json::json!(format!("The counts are this run's; the folder also holds {earlier} output folder(s) of earlier runs and {stale} stale one(s), listed below and not counted."));
    crate::report::write_index(dir, &value).with_context(|| format!("writing {}", dir.join("index.html").display()))
}

/// The batch-level files fringeflow writes into `--out` (index.html,
/// batch*.json, summary.json): where one exists that fringeflow did not
/// write, the error naming it (nothing of the user's is overwritten).
pub fn foreign_batch_files(dir: &Path) -> Option<String> {
    let entries = std::fs::read_dir(dir).ok()?;
    for e in entries.flatten() {
        let (path, name) = (e.path(), e.file_name().to_string_lossy().into_owned());
        let ours = if name == "index.html" {
            let mark: &[u8] = b"<meta name=\"generator\" content=\"fringeflow";
            std::fs::read(&path).is_ok_and(|b| b[..b.len().min(4096)].windows(mark.len()).any(|w| w == mark))
        } else if name == "summary.json" {
            std::fs::read(&path).ok().and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok()).is_some_and(|v| v.get("report").and_then(|r| r.get("captures")).is_some())
        } else if name.starts_with("batch") && name.ends_with(".json") {
            std::fs::read(&path).ok().and_then(|b| serde_json::from_slice::<BatchReport>(&b).ok()).is_some()
        } else {
            continue;
        };
        if !ours {
            return Some(format!("{} was not written by fringeflow: refusing to overwrite it; move it, or choose another --out", path.display()));
        }
    }
    None
}

impl BatchReport {
    /// The counts line `run` prints at the end (the captures were each
    /// reported on stderr as they finished).
    pub fn render_counts(&self) -> String {
        let c = &self.counts;
        let mut s = format!("{} done, {} skipped, {} failed, {} not run", c.done, c.skipped, c.failed, c.not_run);
        if c.held > 0 {
            s += &format!(", {} held by another run", c.held);
        }
        if c.warnings > 0 {
            s += &format!(", {} warnings", c.warnings);
        }
        if !self.shard.is_whole() {
            s += &format!(" (shard {}/{} of {} captures)", self.shard.index, self.shard.count, self.inputs_total);
        }
        if let Some(sig) = &self.interrupted {
            s += &format!("; stopped by {sig}");
        }
        s.push('\n');
        s
    }

    /// The table `summarize` prints: a line per capture, then the counts.
    pub fn render(&self) -> String {
        let mut s = String::new();
        for r in &self.captures {
            let status = match r.status {
                Status::Done => "done",
                Status::Skipped => "skipped",
                Status::Failed => "FAILED",
                Status::NotRun => "not run",
                Status::Held => "held",
            };
            s += &format!("{status:<8} {}{}\n", r.input, r.reason.as_ref().filter(|_| r.status != Status::Done).map(|m| format!(": {m}")).unwrap_or_default());
        }
        s += &self.render_counts();
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
        format_version: BATCH_FORMAT_VERSION,
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
