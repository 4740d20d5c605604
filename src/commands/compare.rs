//! `fringeflow compare`: one page comparing two outputs of one capture.

use std::process::ExitCode;

use super::fail;
use crate::cli::CompareArgs;

pub fn command(a: CompareArgs) -> ExitCode {
    let CompareArgs { a, b, out } = a;
    for d in [&a, &b] {
        if !d.join("log.json").is_file() || !d.join("volume.h5").is_file() {
            return fail(2, format!("{}: not an output folder of `run` with a volume (needs log.json and volume.h5)", d.display()));
        }
    }
    if out.is_dir() {
        return fail(2, format!("--out {}: is a folder; give the page to write, e.g. {}", out.display(), out.join("compare.html").display()));
    }
    match fringeflow::report::write_comparison(&a, &b, &out) {
        Ok(()) => {
            outln!("wrote {}", out.display());
            ExitCode::SUCCESS
        }
        Err(e) => fail(1, format!("{e:#}")),
    }
}
