//! `fringeflow summarize`: merge the batch summaries (one per shard) of an
//! output folder.

use std::path::Path;
use std::process::ExitCode;

use super::fail;
use crate::cli::SummarizeArgs;

pub fn command(a: SummarizeArgs) -> ExitCode {
    summarize(&a.dir, a.json)
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
