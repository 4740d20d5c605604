//! `fringeflow run`: captures through the pipeline into one output folder
//! each, with batch summaries; `--dry-run` says what would happen.

use std::collections::BTreeMap;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use super::{check_out_dir, fail, load_pipeline};
use crate::cli::{Engine, RunArgs};
use fringeflow::pipeline::config::PipelineConfig;

pub fn command(a: RunArgs, quiet: bool, verbose: u8) -> ExitCode {
    run(RunRequest {
        captures: &a.captures,
        list: a.list.as_deref(),
        pipeline: a.pipeline.as_deref(),
        overrides: &a.overrides,
        out: &a.out,
        resume: a.resume,
        overwrite: a.overwrite,
        shard: a.shard.as_deref(),
        dry_run: a.dry_run,
        json: a.json,
        progress_json: a.progress_json,
        reference_engine: a.engine == Engine::Reference,
        quiet,
        verbose,
    })
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
    use fringeflow::batch;
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
    let (all, shard) = match inputs_and_shard(&r) {
        Ok(x) => x,
        Err(code) => return code,
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

/// The captures the command line names (expanded, each with an output name
/// of its own) and the shard of them this process runs.
fn inputs_and_shard(r: &RunRequest<'_>) -> Result<(Vec<PathBuf>, fringeflow::batch::inputs::Shard), ExitCode> {
    use fringeflow::batch::inputs;
    let all = match inputs::expand(r.captures, r.list) {
        Ok(a) => a,
        Err(e) => return Err(fail(2, format!("{e:#}"))),
    };
    if all.is_empty() {
        return Err(fail(2, "no captures given"));
    }
    let mut names = BTreeMap::new();
    for c in &all {
        if let Some(other) = names.insert(fringeflow::run::output_name(c), c) {
            return Err(fail(2, format!("{} and {} would both write {}", other.display(), c.display(), r.out.join(fringeflow::run::output_name(c)).display())));
        }
    }
    let shard = match r.shard {
        Some(s) => inputs::Shard::parse(s),
        None => inputs::Shard::from_env(|k| std::env::var(k).ok()).map(|s| s.unwrap_or(inputs::Shard::WHOLE)),
    };
    let shard = match shard {
        Ok(s) => s,
        Err(e) => return Err(fail(2, format!("{e:#}"))),
    };
    Ok((all, shard))
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
