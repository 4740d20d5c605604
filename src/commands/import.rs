//! `fringeflow import`: a capture in any format fringeflow reads, written as
//! a fringeflow HDF5 capture (frames chunked one per chunk, optionally
//! deflated), with the source file's digest and the import settings.

use std::process::ExitCode;

use super::{fail, load_pipeline};
use crate::cli::ImportArgs;

pub fn command(a: ImportArgs) -> ExitCode {
    let ImportArgs { capture, out, pipeline, overrides, deflate, json } = a;
    let config = match load_pipeline(pipeline.as_deref(), &overrides) {
        Ok(c) => c,
        Err(code) => return code,
    };
    if out.exists() {
        return fail(2, format!("--out {}: exists; give a new file", out.display()));
    }
    let opened = match fringeflow::run::open_capture(&capture, &config.input) {
        Ok(c) => c,
        Err(e) => return fail(1, format!("{}: {e:#}", capture.display())),
    };
    let digest = match fringeflow::io::hash::input_hash(&capture) {
        Ok(d) => d,
        Err(e) => return fail(1, format!("{}: {e}", capture.display())),
    };
    let settings = serde_json::to_string(&config.input).unwrap_or_default();
    let provenance = [
        ("source_path", std::path::absolute(&capture).unwrap_or_else(|_| capture.clone()).display().to_string()),
        ("source_digest", digest),
        ("source_format", opened.format_detail.clone().unwrap_or_else(|| "HDF5".into())),
        ("import_settings", settings),
        ("imported_by", concat!("fringeflow ", env!("CARGO_PKG_VERSION")).to_string()),
    ];
    match fringeflow::io::import::import(&opened, &out, fringeflow::io::import::ImportOptions { deflate }, &provenance) {
        Ok(s) => {
            if json {
                outln!("{}", serde_json::json!({ "capture": capture.display().to_string(), "out": out.display().to_string(), "frames": s.frames, "alines": s.alines, "pixels": s.pixels, "bytes": s.bytes }));
            } else {
                outln!("wrote {} ({} frames × {} A-lines × {} pixels, {} bytes)", out.display(), s.frames, s.alines, s.pixels, s.bytes);
            }
            ExitCode::SUCCESS
        }
        Err(e) => fail(1, format!("{}: {e:#}", out.display())),
    }
}
