//! Where io and core meet: the pipeline file read (io) and parsed (core),
//! the pipeline's `[input]` settings turned into io's plain
//! [`CaptureLayout`] (the wavelength polynomial, or the calibration file
//! loaded by [`crate::calibration`]) and the capture opened with it, and
//! io's raw frames lent to the fast path as core's [`Samples`].

use anyhow::{Context, Result};
use std::path::Path;

use crate::io::capture::{AxisName, Capture, CaptureLayout, FileFormat, GivenMap, RawFrame, RawLayout};
use crate::io::toml_file::{self, FileKind};
use crate::pipeline::config::{self, InputConfig, PipelineConfig};
use crate::pipeline::fused::Samples;
use fringeflow_base::settings::ConfigError;

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
        (None, None) => input.wavelength_file.as_ref().map(|path| GivenMap::File { path: path.clone() }),
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
        format: input.format.map(|f| match f {
            config::CaptureFormat::Hdf5 => FileFormat::Hdf5,
            config::CaptureFormat::Npy => FileFormat::Npy,
            config::CaptureFormat::Raw => FileFormat::Raw,
            config::CaptureFormat::Tiff => FileFormat::Tiff,
            config::CaptureFormat::Npz => FileFormat::Npz,
        }),
        raw: RawLayout {
            sample_type: input.sample_type.clone(),
            big_endian: input.byte_order == Some(config::ByteOrder::Big),
            pixels: input.pixels,
            alines_per_frame: input.alines_per_frame,
            frames: input.frames,
            file_header_bytes: input.file_header_bytes.unwrap_or(0),
            frame_header_bytes: input.frame_header_bytes.unwrap_or(0),
            aline_header_bytes: input.aline_header_bytes.unwrap_or(0),
        },
        wavelength_unit_nm: match input.wavelength_unit {
            None | Some(config::WavelengthUnit::Nm) => 1.0,
            Some(config::WavelengthUnit::Um) => 1e3,
            Some(config::WavelengthUnit::M) => 1e9,
        },
        matlab_order: false,
    })
}

/// Opens and checks the capture at `path` as the pipeline's `[input]`
/// settings describe it.
pub fn open_capture(path: &Path, input: &InputConfig) -> Result<Capture> {
    let (input, sidecar) = match sidecar_of(path) {
        Some(s) => {
            let (merged, digest) = with_sidecar(input, &s)?;
            (std::borrow::Cow::Owned(merged), Some((s.display().to_string(), digest)))
        }
        None => (std::borrow::Cow::Borrowed(input), None),
    };
    let mut capture = Capture::open(path, &capture_layout(&input)?)?;
    given_facts(&mut capture, &input)?;
    capture.sidecar = sidecar;
    Ok(capture)
}

/// The sidecar of a capture: `CAPTURE.toml` beside it (e.g. `dump.bin.toml`),
/// when there is one.
pub fn sidecar_of(path: &Path) -> Option<std::path::PathBuf> {
    let mut name = path.file_name()?.to_os_string();
    name.push(".toml");
    let s = path.with_file_name(name);
    s.is_file().then_some(s)
}

/// The pipeline's `[input]` with a sidecar's keys over it (top-level keys,
/// or an `[input]` table; relative file paths from the sidecar's folder),
/// and the sidecar's "sha256:<hex>".
fn with_sidecar(input: &InputConfig, sidecar: &Path) -> Result<(InputConfig, String)> {
    let text = std::fs::read_to_string(sidecar).with_context(|| format!("sidecar {}", sidecar.display()))?;
    let digest = format!("sha256:{}", crate::io::hash::sha256_hex(text.as_bytes()));
    let mut table: toml::Table = text.parse().map_err(|e: toml::de::Error| anyhow::anyhow!("sidecar {}: {}", sidecar.display(), e.message()))?;
    if let Some(toml::Value::Table(inner)) = table.remove("input") {
        table.extend(inner);
    }
    let dir = sidecar.parent().filter(|d| !d.as_os_str().is_empty()).unwrap_or(Path::new("."));
    for key in ["wavelength_file", "background_file", "calibration"] {
        if let Some(toml::Value::String(p)) = table.get_mut(key) {
            if Path::new(p.as_str()).is_relative() {
                *p = dir.join(p.as_str()).display().to_string();
            }
        }
    }
    let mut merged = toml::Table::try_from(input).context("the pipeline's [input] as TOML")?;
    merged.extend(table);
    let config: InputConfig = toml::Value::Table(merged).try_into().map_err(|e: toml::de::Error| anyhow::anyhow!("sidecar {}: {}", sidecar.display(), e.message()))?;
    Ok((config, digest))
}

/// What the pipeline's `[input]` says of the scan, the full scale and the
/// background, over what the file records (each key it gave is listed).
fn given_facts(capture: &mut Capture, input: &InputConfig) -> Result<()> {
    let scan = &mut capture.scan;
    let given = [
        ("aline_period_us", input.aline_period_us, &mut scan.aline_period_us),
        ("frame_period_us", input.frame_period_us, &mut scan.frame_period_us),
        ("frame_spacing_um", input.frame_spacing_um, &mut scan.frame_spacing_um),
        ("repeats_per_position", input.repeats_per_position, &mut scan.repeats_per_position),
    ];
    for (key, value, slot) in given {
        if let Some(v) = value {
            *slot = Some(v);
            capture.given_by_pipeline.push(key.to_string());
        }
    }
    if let Some(fs) = input.full_scale {
        capture.full_scale = Some(fs);
        capture.given_by_pipeline.push("full_scale".into());
    }
    if let Some(path) = &input.background_file {
        let (mean, digest) = crate::io::map_file::read_background_file(Path::new(path), capture.pixels)?;
        capture.background = Some(mean);
        capture.background_file = Some((path.clone(), digest));
    }
    Ok(())
}

/// A raw frame as the fast path takes it: a view in its recorded type.
pub fn samples(frame: &RawFrame) -> Samples<'_> {
    match frame {
        RawFrame::U8(a) => Samples::U8(a.view()),
        RawFrame::U16(a) => Samples::U16(a.view()),
        RawFrame::I16(a) => Samples::I16(a.view()),
        RawFrame::U32(a) => Samples::U32(a.view()),
        RawFrame::F32(a) => Samples::F32(a.view()),
        RawFrame::F64(a) => Samples::F64(a.view()),
    }
}
