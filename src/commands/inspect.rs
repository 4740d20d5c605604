//! `fringeflow inspect`: a capture's datasets, shapes, value ranges and
//! problems (exit 1 when there are problems).

use std::process::ExitCode;

use super::{fail, load_pipeline};
use crate::cli::InspectArgs;

pub fn command(a: InspectArgs) -> ExitCode {
    let InspectArgs { capture, pipeline, json } = a;
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
