//! Phase 1 of a run, open and check: the pipeline file read and parsed
//! (io reads the text, `pipeline::config` parses it), the pipeline's
//! `[input]` settings turned into io's plain [`CaptureLayout`] (the
//! wavelength polynomial, or the calibration file loaded by `calibration`),
//! and the capture opened and checked against the pipeline.

use anyhow::{bail, Context, Result};
use std::path::Path;

use super::{hash_algorithm, output_name, up_to_date, RunContext};
use crate::io::capture::{AxisName, Capture, CaptureLayout, GivenMap};
use crate::io::hash;
use crate::io::toml_file::{self, ConfigError, FileKind};
use crate::pipeline::config::{self, DopplerPairs, InputConfig, PipelineConfig};

/// Reads the pipeline file at `path` and parses it with `section.key=value`
/// overrides (`--set`); a capture, scene or log given instead is named.
pub fn read_pipeline(path: &Path, overrides: &[String]) -> Result<PipelineConfig, ConfigError> {
    let kind = toml_file::sniff(path);
    if matches!(kind, FileKind::Hdf5 | FileKind::Scene | FileKind::Log) {
        let hint = toml_file::kind_hint(kind).unwrap_or_default();
        return Err(ConfigError { file: path.display().to_string(), line: None, message: format!("not a pipeline file: {hint}") });
    }
    let (_, text) = toml_file::read_text(path)?;
    PipelineConfig::from_file_text(path, &text, overrides)
}

/// The capture layout the pipeline's `[input]` settings describe; loads
/// the wavelength calibration file when one is named.
pub fn capture_layout(input: &InputConfig) -> Result<CaptureLayout> {
    let given_map = match (&input.calibration, &input.wavelength_poly_nm) {
        (Some(path), _) => {
            let (cal, sha256) = crate::calibration::wavelength::WavelengthCalibration::load(Path::new(path))?;
            Some(GivenMap::Calibration { wavelength_nm: cal.wavelength_nm, path: path.clone(), file_hash: format!("sha256:{sha256}") })
        }
        (None, Some(c)) => Some(GivenMap::Polynomial(c.clone())),
        (None, None) => None,
    };
    let axis = |a: &config::AxisName| match a {
        config::AxisName::Frame => AxisName::Frame,
        config::AxisName::Aline => AxisName::Aline,
        config::AxisName::Pixel => AxisName::Pixel,
    };
    Ok(CaptureLayout {
        fringes: input.fringes.clone(),
        wavelength: input.wavelength.clone(),
        background: input.background.clone(),
        axes: input.axes.as_ref().map(|a| a.iter().map(axis).collect()),
        given_map,
    })
}

/// Opens and checks the capture at `path` as the pipeline's `[input]`
/// settings describe it.
pub fn open_capture(path: &Path, input: &InputConfig) -> Result<Capture> {
    Capture::open(path, &capture_layout(input)?)
}

/// Phase 1: the opened, checked capture and what is known before planning.
pub(super) struct Opened {
    pub(super) capture: Capture,
    pub(super) name: String,
    pub(super) pipeline_sha256: String,
    /// The input's SHA-256 when it was needed up front (resume).
    pub(super) sha_now: Option<String>,
    pub(super) positions: usize,
}

/// What opening found.
pub(super) enum Opening {
    Ready(Box<Opened>),
    /// `resume` found the outputs up to date: (frames, A-lines, the input
    /// digest that showed it).
    UpToDate(usize, usize, crate::io::hash::HashAlgorithm),
}

/// Opens and checks the capture against the pipeline.
pub(super) fn open(input: &Path, config: &PipelineConfig, out_root: &Path, ctx: &RunContext<'_>) -> Result<Opening> {
    let capture = open_capture(input, &config.input)?;
    let name = output_name(input);
    if let Some(problem) = crate::io::staging::output_name_problem(&name) {
        bail!("{problem}");
    }
    crate::io::staging::check_replaceable(&out_root.join(&name))?;
    let sha_now = if ctx.resume { Some(hash::input_hash_with(input, hash_algorithm(config)).with_context(|| format!("hashing {}", input.display()))?) } else { None };
    let pipeline_sha256 = config.sha256();
    if let Some(p) = ctx.capture_progress {
        p.set_length(capture.frames as u64);
    }
    if ctx.resume {
        if let Some(digest) = up_to_date(&out_root.join(&name), input, sha_now.as_deref().unwrap_or(""), &pipeline_sha256, &capture.wavelength_source) {
            return Ok(Opening::UpToDate(capture.frames, capture.alines, digest));
        }
    }
    let (frames, average) = (capture.frames, config.volume.average);
    if frames % average != 0 {
        bail!("the capture has {frames} frames, not a multiple of volume.average = {average} (repeated B-scans per position)");
    }
    if config.angiography.enabled() && average < 2 {
        bail!(
            "angiography needs N ≥ 2 repeated B-scans per position: set volume.average to the repeats per position (the capture has {frames} frame{})",
            if frames == 1 { "" } else { "s" }
        );
    }
    if config.doppler.enabled && config.doppler.between == DopplerPairs::Repeats && average < 2 {
        bail!("doppler.between = \"repeats\" needs repeated B-scans per position: set volume.average (now 1)");
    }
    Ok(Opening::Ready(Box::new(Opened { positions: frames / average, capture, name, pipeline_sha256, sha_now })))
}

