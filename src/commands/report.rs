//! `fringeflow report`: write (or rewrite) report.html for output folders.

use std::path::PathBuf;
use std::process::ExitCode;

use super::fail;
use crate::cli::ReportArgs;

pub fn command(a: ReportArgs) -> ExitCode {
    report(&a.dirs, a.frame_step, a.json)
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
