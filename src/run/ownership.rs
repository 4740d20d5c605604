//! Whose an output folder is: its name from the capture, the pipeline and
//! capture its log.json records, whether `--resume` finds it up to date,
//! and what `--dry-run` says `run` would do with a capture.

use anyhow::{bail, Context, Result};
use std::path::Path;

use crate::io::hash;
use crate::pipeline::config::PipelineConfig;

/// Name of the output directory of a capture: its file stem.
pub fn output_name(capture: &Path) -> String {
    capture.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "capture".into())
}

/// The pipeline hash recorded by an existing output directory's log.json,
/// when there is one (what `run` compares before replacing outputs).
pub fn recorded_pipeline(dir: &Path) -> Option<String> {
    let bytes = std::fs::read(dir.join("log.json")).ok()?;
    let log = serde_json::from_slice::<serde_json::Value>(&bytes).ok()?;
    log["pipeline_sha256"].as_str().map(String::from)
}

/// Why the output folder `dir` is not `input`'s to replace under this
/// pipeline, when its log.json records another pipeline or another
/// capture (one with the same stem elsewhere); None when it is (or holds
/// no log).
pub fn foreign_owner(dir: &Path, input: &Path, pipeline_sha256: &str) -> Option<String> {
    let bytes = std::fs::read(dir.join("log.json")).ok()?;
    let log = serde_json::from_slice::<serde_json::Value>(&bytes).ok()?;
    if let Some(recorded) = log["input"]["absolute_path"].as_str() {
        let same = |a: &Path, b: &Path| match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
            (Ok(x), Ok(y)) => x == y,
            _ => std::path::absolute(a).ok() == std::path::absolute(b).ok(),
        };
        if !same(Path::new(recorded), input) {
            return Some(format!("outputs of another capture with the same name, {recorded}"));
        }
    }
    match log["pipeline_sha256"].as_str() {
        Some(h) if h != pipeline_sha256 => Some(format!("outputs of pipeline sha256 {h}")),
        _ => None,
    }
}

/// What `run` would do with `input` (for `--dry-run`): Ok(true) when
/// `--resume` would skip it as up to date, Ok(false) when it would be
/// processed, Err when it would fail before processing (the reason).
pub fn would_skip(input: &Path, config: &PipelineConfig, out_root: &Path, resume: bool) -> Result<bool> {
    let capture = crate::run::open_capture(input, &config.input)?;
    let name = output_name(input);
    if let Some(problem) = crate::io::staging::output_name_problem(&name) {
        bail!("{problem}");
    }
    crate::io::staging::check_replaceable(&out_root.join(&name))?;
    let frames = capture.frames;
    if frames % config.volume.average != 0 {
        bail!("the capture has {frames} frames, not a multiple of volume.average = {}", config.volume.average);
    }
    if !resume {
        return Ok(false);
    }
    let sha = hash::input_hash_with(input, hash_algorithm(config)).with_context(|| format!("hashing {}", input.display()))?;
    Ok(up_to_date(&out_root.join(&name), input, &sha, &config.sha256(), &capture).is_some())
}

/// The digest `[output] input_hash` asks for.
pub fn hash_algorithm(config: &PipelineConfig) -> hash::HashAlgorithm {
    match config.output.input_hash {
        crate::pipeline::config::InputHash::Blake3 => hash::HashAlgorithm::Blake3,
        crate::pipeline::config::InputHash::Sha256 => hash::HashAlgorithm::Sha256,
    }
}

/// `now` is the input's hash with the configured algorithm; a log made with
/// the other one is checked by hashing the input again with it. Up to date
/// also means the same wavelength map: the same calibration file content
/// (its digest, which the pipeline hash, naming only the path, does not
/// cover). Returns the digest that decided (the log's), when up to date.
pub(super) fn up_to_date(dir: &Path, input: &Path, now: &str, pipeline_sha256: &str, capture: &crate::io::capture::Capture) -> Option<hash::HashAlgorithm> {
    let map = &capture.wavelength_source;
    let bytes = std::fs::read(dir.join("log.json")).ok()?;
    let log = serde_json::from_slice::<serde_json::Value>(&bytes).ok()?;
    let recorded = log["input_hash"].as_str().or_else(|| log["input"]["sha256"].as_str()).unwrap_or("");
    let same = if hash::HashAlgorithm::of(recorded) == hash::HashAlgorithm::of(now) { hash::same_input(recorded, now) } else { hash::verify(recorded, input).is_ok_and(|(same, _)| same) };
    let same_map = match map {
        crate::io::capture::WavelengthSource::Calibration { file_hash, .. } | crate::io::capture::WavelengthSource::File { file_hash, .. } => log["input"]["wavelength_map"]["file_hash"].as_str() == Some(file_hash.as_str()),
        _ => true,
    };
    let same_background = log["input"]["background_file"]["file_hash"].as_str() == capture.background_file.as_ref().map(|(_, h)| h.as_str())
        && log["input"]["sidecar"]["file_hash"].as_str() == capture.sidecar.as_ref().map(|(_, h)| h.as_str());
    (same
        && same_map
        && same_background
        && log["pipeline_sha256"] == pipeline_sha256
        && log["outputs"].as_array().is_some_and(|o| o.iter().all(|n| n.as_str().is_some_and(|n| dir.join(n).is_file()))))
    .then(|| hash::HashAlgorithm::of(recorded))
    .flatten()
}

