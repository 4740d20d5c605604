//! `fringeflow pipeline defaults|check|show`: pipeline files without a
//! capture.

use std::process::ExitCode;

use super::load_pipeline;
use crate::cli::PipelineCommand;

pub fn command(c: PipelineCommand) -> ExitCode {
    pipeline_command(c)
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
