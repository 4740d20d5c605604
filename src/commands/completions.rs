//! `fringeflow completions`: the shell completion script, generated from the
//! same argument definitions as the parser.

use std::process::ExitCode;

use crate::cli::CompletionsArgs;

pub fn command(a: CompletionsArgs) -> ExitCode {
    let mut cmd = crate::cli::command();
    let mut buf = Vec::new();
    clap_complete::generate(a.shell, &mut cmd, "fringeflow", &mut buf);
    out!("{}", String::from_utf8_lossy(&buf));
    ExitCode::SUCCESS
}
