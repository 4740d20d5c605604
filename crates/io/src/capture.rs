//! Reading captures: the HDF5 fringe dataset, the wavelength map and the
//! background spectra, with every check a capture must pass before any
//! processing starts (see docs/capture-format.md).
//!
//! Frames are read one at a time as hyperslabs; the whole dataset is never
//! loaded. The file is opened read-only. Not for: writing (see `volume`).

use anyhow::{anyhow, bail, Context, Result};
use hdf5::types::{FloatSize, IntSize, TypeDescriptor};
use hdf5::{Dataset, Hyperslab, SliceOrIndex};
use ndarray::{Array2, ArrayD, Axis, Ix2};
use serde::Serialize;
use std::path::{Path, PathBuf};

pub use super::capture_layout::{AxisName, CaptureLayout, FileFormat, GivenMap, RawLayout};
use crate::capture_array::detect_format;

/// Sample types a fringe dataset may have (also what the simulator writes).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SampleType {
    U8,
    U16,
    I16,
    U32,
    F32,
    F64,
}

impl SampleType {
    fn from_descriptor(d: &TypeDescriptor) -> Option<Self> {
        Some(match d {
            TypeDescriptor::Unsigned(IntSize::U1) => SampleType::U8,
            TypeDescriptor::Unsigned(IntSize::U2) => SampleType::U16,
            TypeDescriptor::Integer(IntSize::U2) => SampleType::I16,
            TypeDescriptor::Unsigned(IntSize::U4) => SampleType::U32,
            TypeDescriptor::Float(FloatSize::U4) => SampleType::F32,
            TypeDescriptor::Float(FloatSize::U8) => SampleType::F64,
            _ => return None,
        })
    }

    /// Largest value an integer type can hold (its saturation level).
    pub fn integer_max(self) -> Option<f64> {
        match self {
            SampleType::U8 => Some(u8::MAX as f64),
            SampleType::U16 => Some(u16::MAX as f64),
            SampleType::I16 => Some(i16::MAX as f64),
            SampleType::U32 => Some(u32::MAX as f64),
            SampleType::F32 | SampleType::F64 => None,
        }
    }

    pub fn is_float(self) -> bool {
        matches!(self, SampleType::F32 | SampleType::F64)
    }
}

/// Where the wavelength map came from.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum WavelengthSource {
    Dataset { path: String },
    Polynomial { coefficients_nm: Vec<f64> },
    Calibration { path: String, file_hash: String },
    File { path: String, file_hash: String },
}

/// One frame of spectra (A-lines × pixels, standard layout) in the type it
/// is stored in.
#[derive(Debug, Clone)]
pub enum RawFrame {
    U8(Array2<u8>),
    U16(Array2<u16>),
    I16(Array2<i16>),
    U32(Array2<u32>),
    F32(Array2<f32>),
    F64(Array2<f64>),
}

impl RawFrame {
    /// The frame as f64 (for the reference path).
    pub fn to_f64(&self) -> Array2<f64> {
        match self {
            RawFrame::U8(a) => a.mapv(|v| v as f64),
            RawFrame::U16(a) => a.mapv(|v| v as f64),
            RawFrame::I16(a) => a.mapv(|v| v as f64),
            RawFrame::U32(a) => a.mapv(|v| v as f64),
            RawFrame::F32(a) => a.mapv(|v| v as f64),
            RawFrame::F64(a) => a.clone(),
        }
    }
}

/// An opened, validated capture.
pub struct Capture {
    pub path: PathBuf,
    pub(crate) source: Source,
    /// The file format and, for an array file, its stored sample type and
    /// order in words (for the log and `inspect`).
    pub format: FileFormat,
    pub format_detail: Option<String>,
    /// Dataset path of the fringes.
    pub fringes_path: String,
    /// Stored shape of the fringe dataset.
    pub shape: Vec<usize>,
    /// Axis order of the stored dataset.
    pub axes: Vec<AxisName>,
    pub sample_type: SampleType,
    pub frames: usize,
    pub alines: usize,
    pub pixels: usize,
    /// Per-pixel wavelength, nm.
    pub wavelength_nm: Vec<f64>,
    pub wavelength_source: WavelengthSource,
    /// The capture's own wavelength dataset when the map in use comes from
    /// elsewhere (a calibration file or the pipeline's polynomial), for
    /// plots of the change.
    pub dataset_wavelength_nm: Option<Vec<f64>>,
    /// Mean of the background spectra, when the capture has them.
    pub background: Option<Vec<f64>>,
    /// Detector full scale (attribute `full_scale` of the fringes, else the
    /// integer type's maximum); samples at or above it count as saturated.
    pub full_scale: Option<f64>,
    /// Scan timing and geometry from attributes of the fringe dataset, when
    /// the capture records them.
    pub scan: ScanAttributes,
    /// Scan facts and the full scale given by the pipeline instead of the
    /// file (their key names).
    pub given_by_pipeline: Vec<String>,
    /// The background file used instead of the capture's dataset: its path
    /// and "sha256:<hex>".
    pub background_file: Option<(String, String)>,
    /// The sidecar file whose keys described the capture: path and
    /// "sha256:<hex>".
    pub sidecar: Option<(String, String)>,
}

/// Optional attributes of the fringe dataset that describe the scan.
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize)]
pub struct ScanAttributes {
    /// `aline_period_us`: time from one A-line to the next.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub aline_period_us: Option<f64>,
    /// `frame_period_us`: time from one B-scan to the next.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub frame_period_us: Option<f64>,
    /// `aline_spacing_um`: lateral step between A-lines.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub aline_spacing_um: Option<f64>,
    /// `frame_spacing_um`: step between slow-axis positions.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub frame_spacing_um: Option<f64>,
    /// `repeats_per_position`: B-scans recorded at each slow-axis position.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub repeats_per_position: Option<f64>,
}

impl ScanAttributes {
    pub fn is_empty(&self) -> bool {
        *self == ScanAttributes::default()
    }

    /// Slow-axis step between stored frames that each average `average`
    /// input frames (µm), when the frames form a uniform axis: the repeats
    /// at one position must be averaged together.
    pub fn stored_frame_spacing_um(&self, average: usize) -> Option<f64> {
        let spacing = self.frame_spacing_um?;
        let repeats = self.repeats_per_position.unwrap_or(1.0).round().max(1.0) as usize;
        average.is_multiple_of(repeats).then(|| spacing * (average / repeats) as f64)
    }
}

/// A positive finite numeric attribute; absent → None; present but not a
/// positive number → an error naming it.
fn positive_attr(ds: &Dataset, name: &str) -> Result<Option<f64>> {
    match ds.attr(name) {
        Err(_) => Ok(None),
        Ok(a) => {
            let v = a.read_scalar::<f64>().with_context(|| format!("reading attribute {name}"))?;
            if v.is_finite() && v > 0.0 {
                Ok(Some(v))
            } else {
                bail!("attribute {name} of the fringes is {v}; it must be a positive number")
            }
        }
    }
}

/// Where the frames are read from.
pub(crate) enum Source {
    Hdf5 { file: hdf5::File, fringes: Dataset },
    Array(crate::array_file::ArrayFile),
    Tiff(crate::tiff_pages::TiffPages),
}

impl std::fmt::Debug for Capture {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Capture").field("path", &self.path).field("shape", &self.shape).finish()
    }
}

/// Opens an HDF5 file read-only with a clear message for the usual failures.
pub fn open_hdf5(path: &Path) -> Result<hdf5::File> {
    open_hdf5_with(path, None)
}

/// The same with a raw-data chunk cache of (bytes, slots) for its datasets.
fn open_hdf5_with(path: &Path, chunk_cache: Option<(usize, usize)>) -> Result<hdf5::File> {
    let meta = std::fs::metadata(path).map_err(|e| match e.kind() {
        std::io::ErrorKind::NotFound => anyhow!("no such file"),
        _ => anyhow!("cannot read: {e}"),
    })?;
    if meta.is_dir() {
        bail!("is a directory, not a capture file");
    }
    let opened = match chunk_cache {
        None => hdf5::File::open(path),
        Some((bytes, slots)) => hdf5::File::with_options().with_fapl(|p| p.chunk_cache(slots, bytes, 1.0)).open(path),
    };
    opened.map_err(|e| {
        let detail = e.to_string();
        if detail.contains("signature not found") {
            match crate::toml_file::kind_hint(crate::toml_file::sniff(path)) {
                Some(hint) => anyhow!("not an HDF5 file (no HDF5 signature): {hint}"),
                None => anyhow!("not an HDF5 file (no HDF5 signature)"),
            }
        } else if detail.contains("truncated file") {
            anyhow!("truncated HDF5 file ({} bytes on disk, fewer than its header records)", meta.len())
        } else if detail.contains("superblock") || detail.contains("bad object header") || detail.contains("unable to load") || detail.contains("checksum") {
            anyhow!("not a valid HDF5 file (damaged superblock or header): {}", concise_detail(&detail))
        } else if detail.contains("Resource temporarily unavailable") || detail.contains("unable to lock file") {
            anyhow!("HDF5 file is locked by another program (set HDF5_USE_FILE_LOCKING=FALSE to read it anyway)")
        } else {
            anyhow!("cannot open as HDF5: {}", concise_detail(&detail))
        }
    })
}

/// Whether the file is a MATLAB v7.3 MAT-file (its 128-byte text header,
/// then HDF5 after the 512-byte user block).
fn is_matlab(path: &Path) -> bool {
    use std::io::Read;
    let mut head = [0u8; 19];
    std::fs::File::open(path).and_then(|mut f| f.read_exact(&mut head)).is_ok() && &head == b"MATLAB 7.3 MAT-file"
}

/// The first line of an HDF5 error message.
fn concise_detail(detail: &str) -> String {
    detail.lines().next().unwrap_or(detail).trim().to_string()
}

/// The raw-data chunk cache that reading one frame at a time needs: every
/// chunk that holds part of a frame stays cached until the frames it spans
/// are read (HDF5's default of 1 MiB holds less than one chunk of most
/// captures stored in chunks of several frames, so each frame re-reads, and
/// re-decompresses, whole chunks). None when the default suffices.
fn frame_chunk_cache(ds: &Dataset, axes: &[AxisName]) -> Option<(usize, usize)> {
    let chunk = ds.chunk()?;
    let shape = ds.shape();
    let element = ds.dtype().ok()?.size();
    let frame_axis = axes.iter().position(|&a| a == AxisName::Frame)?;
    if chunk.get(frame_axis).copied().unwrap_or(1) <= 1 {
        return None;
    }
    let chunk_bytes: usize = chunk.iter().product::<usize>() * element;
    let per_frame: usize = shape.iter().zip(&chunk).enumerate().filter(|(i, _)| *i != frame_axis).map(|(_, (n, c))| n.div_ceil(*c)).product();
    let bytes = chunk_bytes.saturating_mul(per_frame).saturating_add(chunk_bytes);
    if bytes <= 1 << 20 {
        return None;
    }
    // At most 4 GiB; slots a prime well above the chunk count (HDF5's advice).
    let bytes = bytes.min(4 << 30);
    let slots = [10_007usize, 100_003, 1_000_003].into_iter().find(|&p| p >= 100 * per_frame.max(1)).unwrap_or(1_000_003);
    Some((bytes, slots))
}
/// The capture's 2-D and 3-D datasets and the key that names the fringes,
/// for a "dataset not found" error.
fn dataset_hint(file: &hdf5::File) -> String {
    let mut sets = Vec::new();
    super::h5::collect_datasets(file, "", &mut sets, &mut Vec::new());
    let multi: Vec<_> = sets.iter().filter(|(_, d)| matches!(d.ndim(), 2 | 3)).collect();
    let candidates: Vec<String> = multi.iter().map(|(n, d)| format!("{n} {:?}", d.shape())).collect();
    // The likeliest fringes: the largest of them (a background is a few lines).
    let largest = multi.iter().max_by_key(|(_, d)| d.shape().iter().product::<usize>()).map(|(n, _)| n.clone());
    match largest {
        None => "the capture has no 2-D or 3-D dataset (fringes are (A-lines, pixels) or (frames, A-lines, pixels))".to_string(),
        Some(name) => {
            format!(
                "the capture's 2-D/3-D datasets: {}; name the fringes with `fringes = \"{name}\"` in the pipeline's [input] section (or --set input.fringes={name})",
                candidates.join(", ")
            )
        }
    }
}

/// A numeric attribute named "OBJECT@ATTRIBUTE" (e.g.
/// "/fringes@wavelength_nm", "/@lambda" for the file's root), as its values
/// and shape; `key` names the setting for the messages.
fn read_numeric_attribute(file: &hdf5::File, spec: &str, key: &str) -> Result<(Vec<f64>, Vec<usize>)> {
    let (object, name) = spec.rsplit_once('@').expect("has @");
    let object = if object.is_empty() { "/" } else { object };
    let attr = if object == "/" {
        file.attr(name)
    } else if let Ok(ds) = file.dataset(object) {
        ds.attr(name)
    } else {
        file.group(object).and_then(|g| g.attr(name))
    }
    .map_err(|_| anyhow!("{key} = \"{spec}\": no attribute '{name}' on '{object}'"))?;
    let shape = attr.shape();
    let v: Vec<f64> = attr.read_raw::<f64>().with_context(|| format!("{key} = \"{spec}\": not a numeric attribute"))?;
    Ok((v, shape))
}

/// A wavelength map kept as an attribute: `input.wavelength` written as
/// "OBJECT@ATTRIBUTE", a numeric vector.
fn read_map_attribute(file: &hdf5::File, spec: &str) -> Result<Vec<f64>> {
    Ok(read_numeric_attribute(file, spec, "input.wavelength")?.0)
}

/// The capture's 1-D datasets (or 1×N / N×1) with one value per pixel: the
/// likely wavelength maps, for the message when the named one is missing.
fn map_candidates(file: &hdf5::File, pixels: usize) -> String {
    let mut sets = Vec::new();
    super::h5::collect_datasets(file, "", &mut sets, &mut Vec::new());
    let found: Vec<String> = sets
        .iter()
        .filter(|(_, d)| {
            let s = d.shape();
            s.iter().product::<usize>() == pixels && s.iter().filter(|&&n| n > 1).count() == 1
        })
        .map(|(n, d)| format!("{n} {:?}", d.shape()))
        .collect();
    if found.is_empty() {
        format!(" (the capture has no 1-D dataset of {pixels} values)")
    } else {
        format!(" (the capture's datasets of {pixels} values: {})", found.join(", "))
    }
}

/// A suggestion of `input.axes` when the fringe dataset looks transposed:
/// the spectra seem to run along another axis (the longest one, or the one
/// as long as the wavelength map). For 3-D data the other two axes keep
/// the order labs write them in: spectra first means a column-major
/// (MATLAB, Fortran) array of (pixel, A-line, frame), the full reversal of
/// (frame, A-line, pixel); spectra in the middle means one (pixel × A-line)
/// image per frame. The alternative order is named too.
fn transposed_hint(shape: &[usize], axes: &[AxisName], map_len: Option<usize>, matlab: bool) -> String {
    let pixel_axis = match map_len {
        Some(n) => shape.iter().position(|&s| s == n),
        None => shape.iter().enumerate().max_by_key(|(_, s)| **s).map(|(i, _)| i),
    };
    let Some(p) = pixel_axis.filter(|&p| axes.get(p) != Some(&AxisName::Pixel)) else { return String::new() };
    // For a MATLAB file, in the order MATLAB shows the array (reversed).
    let list = |order: &[&str]| {
        let mut o: Vec<&str> = order.to_vec();
        if matlab {
            o.reverse();
        }
        o.iter().map(|a| format!("\"{a}\"")).collect::<Vec<_>>().join(", ")
    };
    let (likely, other): (Vec<&str>, Option<Vec<&str>>) = match (shape.len(), p) {
        (3, 0) => (vec!["pixel", "aline", "frame"], Some(vec!["pixel", "frame", "aline"])),
        (3, 1) => (vec!["frame", "pixel", "aline"], Some(vec!["aline", "pixel", "frame"])),
        (3, _) => (vec!["frame", "aline", "pixel"], Some(vec!["aline", "frame", "pixel"])),
        (_, 0) => (vec!["pixel", "aline"], None),
        _ => (vec!["aline", "pixel"], None),
    };
    let alternative = other.map_or_else(String::new, |o| format!(" (or `axes = [{}]` if the other two axes are the other way round)", list(&o)));
    if matlab {
        let shown: Vec<usize> = shape.iter().rev().copied().collect();
        let dim = shape.len() - p;
        return format!("; the MATLAB array of size {shown:?} looks transposed (spectra along dimension {dim}): set `axes = [{}]` (in MATLAB's order) in the pipeline's [input] section{alternative}", list(&likely));
    }
    format!("; the layout {shape:?} looks transposed (spectra along axis {p}): set `axes = [{}]` in the pipeline's [input] section{alternative}", list(&likely))
}

fn open_dataset(file: &hdf5::File, name: &str) -> Option<Dataset> {
    if file.link_exists(name.trim_start_matches('/')) || file.link_exists(name) {
        file.dataset(name).ok()
    } else {
        None
    }
}

/// Reads a numeric dataset as f64 (any numeric type; HDF5 converts),
/// once its declared size is known to fit in memory.
fn read_f64(ds: &Dataset) -> Result<ArrayD<f64>> {
    super::memory::check_fits(&format!("dataset '{}'", ds.name()), ds.size() as u64, 8)?;
    Ok(ds.read_dyn::<f64>()?)
}

/// Wavelengths a spectrometer for OCT can plausibly record, nm: from the
/// near ultraviolet to the mid infrared (a bound of our own, wide enough
/// for every OCT band in use, 400–1700 nm being common practice).
pub const PLAUSIBLE_WAVELENGTH_NM: [f64; 2] = [200.0, 20_000.0];

/// What a map outside the plausible range probably is.
pub fn unit_hint(lo: f64, hi: f64) -> String {
    let fits = |scale: f64| lo * scale >= PLAUSIBLE_WAVELENGTH_NM[0] && hi * scale <= PLAUSIBLE_WAVELENGTH_NM[1];
    for (scale, unit) in [(1e9, "metres"), (1e3, "micrometres"), (1e7, "centimetres"), (0.1, "ångström")] {
        if fits(scale) {
            return format!("it looks like {unit} (× {scale:e} gives {:.1}–{:.1} nm); the map must be in nm", lo * scale, hi * scale);
        }
    }
    "no unit makes it a plausible optical wavelength".into()
}

/// Checks a wavelength map: length, at least two values, finite,
/// strictly monotonic, and within [`PLAUSIBLE_WAVELENGTH_NM`].
pub fn check_wavelength_map(map: &[f64], pixels: usize, source: &str) -> Result<()> {
    if map.len() != pixels {
        bail!("wavelength map {source} has {} values but the fringes have {pixels} pixels", map.len());
    }
    if map.len() < 2 {
        bail!("wavelength map {source} has {} value(s); it needs one per pixel, at least 2", map.len());
    }
    if let Some(p) = map.iter().position(|v| !v.is_finite() || *v <= 0.0) {
        bail!("wavelength map {source} has a non-positive or non-finite value at pixel {p}");
    }
    let (lo, hi) = map.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let [min_nm, max_nm] = PLAUSIBLE_WAVELENGTH_NM;
    if lo < min_nm || hi > max_nm {
        bail!("wavelength map {source} spans {lo:.6e}–{hi:.6e}, outside {min_nm}–{max_nm} nm: {}", unit_hint(lo, hi));
    }
    let increasing = map[1] > map[0];
    if let Some(p) = map.windows(2).position(|w| if increasing { w[1] <= w[0] } else { w[1] >= w[0] }) {
        bail!("wavelength map {source} is not monotonic (at pixel {})", p + 1);
    }
    Ok(())
}

/// The fringe dataset's axis order: as `input.axes` names it, else
/// (frames, A-lines, pixels) for rank 3 and (A-lines, pixels) for rank 2.
fn fringe_axes(input: &CaptureLayout, shape: &[usize]) -> Result<Vec<AxisName>> {
    let axes = match &input.axes {
        Some(a) => a.clone(),
        None => match shape.len() {
            3 => vec![AxisName::Frame, AxisName::Aline, AxisName::Pixel],
            2 => vec![AxisName::Aline, AxisName::Pixel],
            r => bail!("dataset '{}' has rank {r}, expected 2 (alines, pixels) or 3 (frames, alines, pixels)", input.fringes),
        },
    };
    if axes.len() != shape.len() {
        bail!(
            "dataset '{}' has rank {} but the pipeline's input.axes names {} axes",
            input.fringes,
            shape.len(),
            axes.len()
        );
    }
    Ok(axes)
}

/// The wavelength map per pixel and where it came from (a calibration file,
/// the pipeline's polynomial, or the capture's dataset), checked against the
/// fringes; with the capture's own map when another one was used.
pub(crate) fn wavelength_map(file: Option<&hdf5::File>, input: &CaptureLayout, pixels: usize, shape: &[usize], axes: &[AxisName]) -> Result<(Vec<f64>, WavelengthSource, Option<Vec<f64>>)> {
    let (wavelength_nm, wavelength_source) = match &input.given_map {
        Some(GivenMap::Calibration { wavelength_nm, path: cal_path, file_hash }) => {
            if wavelength_nm.len() != pixels {
                bail!("calibration file {cal_path} has {} pixels but the fringes have {pixels} pixels", wavelength_nm.len());
            }
            (wavelength_nm.clone(), WavelengthSource::Calibration { path: cal_path.clone(), file_hash: file_hash.clone() })
        }
        Some(GivenMap::Polynomial(c)) => {
            let map = (0..pixels)
                .map(|p| c.iter().rev().fold(0.0, |acc, &ci| acc * p as f64 + ci))
                .collect::<Vec<_>>();
            (map, WavelengthSource::Polynomial { coefficients_nm: c.clone() })
        }
        Some(GivenMap::Inside { wavelength_nm, path }) => (wavelength_nm.iter().map(|v| v * input.wavelength_unit_nm).collect(), WavelengthSource::Dataset { path: path.clone() }),
        Some(GivenMap::File { path }) => {
            let (map, file_hash) = crate::map_file::read_map_file(Path::new(path), pixels)?;
            (map.iter().map(|v| v * input.wavelength_unit_nm).collect(), WavelengthSource::File { path: path.clone(), file_hash })
        }
        None if input.wavelength.contains('@') && file.is_some() => {
            let values = read_map_attribute(file.expect("checked"), &input.wavelength)?;
            (values.iter().map(|v| v * input.wavelength_unit_nm).collect(), WavelengthSource::Dataset { path: input.wavelength.clone() })
        }
        None => {
            let Some(file) = file else {
                bail!("the capture holds no wavelength map: give input.wavelength_file (a .npy or text file), input.wavelength_poly_nm or input.calibration");
            };
            let ds = open_dataset(file, &input.wavelength).ok_or_else(|| {
                anyhow!(
                    "dataset '{}' not found{}; give the map as input.wavelength (a dataset of the capture), input.wavelength_file (a .npy or text file), input.wavelength_poly_nm (a polynomial in the pixel index) or input.calibration (a file of `fringeflow calibrate wavelength`)",
                    input.wavelength,
                    map_candidates(file, pixels)
                )
            })?;
            let mut map = read_f64(&ds).with_context(|| format!("reading '{}'", input.wavelength))?;
            // A vector kept as a 1×N or N×1 matrix (as MATLAB stores one).
            if map.ndim() == 2 && map.shape().contains(&1) {
                let n = map.len();
                map = map.into_shape_with_order(ndarray::IxDyn(&[n]))?;
            }
            if map.ndim() != 1 {
                bail!("wavelength map '{}' has rank {}, expected 1", input.wavelength, map.ndim());
            }
            (map.iter().map(|v| v * input.wavelength_unit_nm).collect(), WavelengthSource::Dataset { path: input.wavelength.clone() })
        }
    };
    let source_name = match &wavelength_source {
        WavelengthSource::Dataset { path } => format!("'{path}'"),
        WavelengthSource::Polynomial { .. } => "input.wavelength_poly_nm".to_string(),
        WavelengthSource::Calibration { path, .. } => format!("from calibration {path}"),
        WavelengthSource::File { path, .. } => format!("from file {path}"),
    };
    let unit = if input.wavelength_unit_nm == 1.0 {
        String::new()
    } else if input.wavelength_unit_nm == 1e3 {
        " (declared in um)".into()
    } else {
        " (declared in m)".into()
    };
    let source_name = format!("{source_name}{unit}");
    if wavelength_nm.len() != pixels && shape.contains(&wavelength_nm.len()) {
        bail!(
            "wavelength map {source_name} has {} values but the fringes have {pixels} pixels{}",
            wavelength_nm.len(),
            transposed_hint(shape, axes, Some(wavelength_nm.len()), input.matlab_order)
        );
    }
    check_wavelength_map(&wavelength_nm, pixels, &source_name)?;
    let dataset_wavelength_nm = match wavelength_source {
        WavelengthSource::Dataset { .. } => None,
        _ => file.and_then(|f| open_dataset(f, &input.wavelength)).and_then(|ds| read_f64(&ds).ok()).filter(|m| m.ndim() == 1 && m.len() == pixels).map(|m| m.iter().copied().collect()),
    };

    Ok((wavelength_nm, wavelength_source, dataset_wavelength_nm))
}

/// The capture's background spectrum (the mean of the recorded ones, per
/// pixel), when it has a background dataset.
fn read_background(file: &hdf5::File, input: &CaptureLayout, pixels: usize) -> Result<Option<Vec<f64>>> {
    let name = &input.background;
    // A background kept as an attribute ("OBJECT@NAME"): named on purpose,
    // so it must be there.
    let b = if name.contains('@') {
        let (values, shape) = read_numeric_attribute(file, name, "input.background")?;
        let rank = shape.len().max(1);
        ndarray::ArrayD::from_shape_vec(if shape.is_empty() { vec![values.len()] } else { shape }, values)
            .map_err(|_| anyhow!("input.background = \"{name}\": attribute of rank {rank} could not be read as an array"))?
    } else {
        match open_dataset(file, name) {
            None => return Ok(None),
            Some(ds) => read_f64(&ds).with_context(|| format!("reading '{name}'"))?,
        }
    };
    // Spectra along either dimension of a matrix: a MATLAB file stores an
    // n×pixels matrix reversed, as (pixels, n), and a vector as 1×N or N×1.
    let rows: Array2<f64> = match b.ndim() {
        1 => b.into_dimensionality::<ndarray::Ix1>()?.insert_axis(Axis(0)),
        2 if b.shape()[1] != pixels && b.shape()[0] == pixels => b.into_dimensionality::<Ix2>()?.reversed_axes(),
        2 => b.into_dimensionality::<Ix2>()?,
        r => bail!("background '{name}' has rank {r}, expected 1 or 2"),
    };
    if rows.ncols() != pixels || rows.nrows() == 0 {
        bail!("background '{name}' has shape {:?}, expected ({pixels},) or (n, {pixels})", rows.shape());
    }
    if rows.iter().any(|v| !v.is_finite()) {
        bail!("background '{name}' contains NaN or infinite values");
    }
    // The mean over the recorded spectra, per pixel.
    Ok(rows.mean_axis(Axis(0)).map(|m| m.to_vec()))
}

/// The detector's full scale: the fringes' `full_scale` attribute, else the
/// integer sample type's largest value (none for floats).
fn full_scale(fringes: &hdf5::Dataset, input: &CaptureLayout, sample_type: SampleType) -> Result<Option<f64>> {
    let full_scale = match fringes.attr("full_scale") {
        Ok(a) => {
            let v = a.read_scalar::<f64>().context("reading attribute full_scale")?;
            if !(v.is_finite() && v > 0.0) {
                bail!("attribute full_scale of '{}' is {v}; a detector's full scale must be a positive number of counts", input.fringes);
            }
            Some(v)
        }
        Err(_) => sample_type.integer_max(),
    };

    Ok(full_scale)
}

/// The scan attributes stored on the fringe dataset (each must be positive).
fn scan_attributes(fringes: &hdf5::Dataset) -> Result<ScanAttributes> {
    Ok(ScanAttributes {
        aline_period_us: positive_attr(fringes, "aline_period_us")?,
        frame_period_us: positive_attr(fringes, "frame_period_us")?,
        aline_spacing_um: positive_attr(fringes, "aline_spacing_um")?,
        frame_spacing_um: positive_attr(fringes, "frame_spacing_um")?,
        repeats_per_position: positive_attr(fringes, "repeats_per_position")?,
    })
}

impl Capture {
    /// Opens and validates a capture laid out as `input` says.
    pub fn open(path: &Path, input: &CaptureLayout) -> Result<Self> {
        match input.format.map_or_else(|| detect_format(path, input), Ok)? {
            FileFormat::Hdf5 => Self::open_hdf5(path, input),
            FileFormat::Npy => crate::capture_array::open_npy(path, input),
            FileFormat::Raw => crate::capture_array::open_raw(path, input),
            FileFormat::Tiff => crate::capture_array::open_tiff(path, input),
            FileFormat::Npz => crate::capture_array::open_npz(path, input),
        }
    }

    /// An HDF5 capture.
    fn open_hdf5(path: &Path, input: &CaptureLayout) -> Result<Self> {
        // A MATLAB v7.3 file: `axes` is given in MATLAB's order (reversed).
        let matlab = is_matlab(path);
        let mut given = input.clone();
        if matlab {
            given.matlab_order = true;
            if let Some(a) = &mut given.axes {
                a.reverse();
            }
        }
        let input = &given;
        let file = open_hdf5(path)?;
        let fringes = match open_dataset(&file, &input.fringes) {
            Some(f) => f,
            // fringeflow's own output is not a capture.
            None if open_dataset(&file, "/volume_db").is_some() => {
                bail!("this is fringeflow's own output (the volume.h5 of a run), not a capture of raw spectra: give the capture it was made from (the log.json beside it names it under input.path)")
            }
            None => bail!("dataset '{}' not found; {}", input.fringes, dataset_hint(&file)),
        };
        let shape = fringes.shape();
        let axes = fringe_axes(input, &shape)?;
        let dim = |a: AxisName| axes.iter().position(|&x| x == a).map(|i| shape[i]);
        let frames = dim(AxisName::Frame).unwrap_or(1);
        let alines = dim(AxisName::Aline).unwrap_or(0);
        let pixels = dim(AxisName::Pixel).unwrap_or(0);
        if frames == 0 || alines == 0 {
            bail!("dataset '{}' is empty (shape {:?})", input.fringes, shape);
        }
        if pixels < 16 {
            bail!("dataset '{}' has {pixels} pixels per spectrum, expected at least 16{}", input.fringes, transposed_hint(&shape, &axes, None, input.matlab_order));
        }
        // One frame is read whole (as f64 on the reference path).
        super::memory::check_fits(&format!("one frame of dataset '{}' ({alines} A-lines × {pixels} pixels)", input.fringes), alines as u64 * pixels as u64, 8)?;
        // Captures stored in chunks of several frames: reopen with a chunk
        // cache that holds a frame's chunks.
        let (file, fringes) = match frame_chunk_cache(&fringes, &axes) {
            Some(cache) => {
                // Closed first: HDF5 would reuse the open file, with its cache.
                drop((fringes, file));
                let file = open_hdf5_with(path, Some(cache))?;
                let fringes = open_dataset(&file, &input.fringes).ok_or_else(|| anyhow!("dataset '{}' not found", input.fringes))?;
                (file, fringes)
            }
            None => (file, fringes),
        };
        let descriptor = fringes.dtype().and_then(|t| t.to_descriptor()).context("reading the fringe datatype")?;
        let sample_type = SampleType::from_descriptor(&descriptor).ok_or_else(|| {
            anyhow!(
                "dataset '{}' holds {}; supported sample types: u8, u16, i16, u32, f32, f64",
                input.fringes,
                super::h5::type_in_words(&descriptor)
            )
        })?;

        let (wavelength_nm, wavelength_source, dataset_wavelength_nm) = wavelength_map(Some(&file), input, pixels, &shape, &axes)?;

        let background = read_background(&file, input, pixels)?;
        let full_scale = full_scale(&fringes, input, sample_type)?;
        let scan = scan_attributes(&fringes)?;

        Ok(Capture {
            scan,
            path: path.to_path_buf(),
            source: Source::Hdf5 { file, fringes },
            format: FileFormat::Hdf5,
            format_detail: matlab.then(|| "MATLAB v7.3 MAT-file (HDF5 after a 512-byte user block)".to_string()),
            fringes_path: input.fringes.clone(),
            shape,
            axes,
            sample_type,
            frames,
            alines,
            pixels,
            wavelength_nm,
            wavelength_source,
            dataset_wavelength_nm,
            background,
            full_scale,
            given_by_pipeline: Vec::new(),
            background_file: None,
            sidecar: None,
        })
    }

    /// Reads frame `index` as (A-lines × pixels) in the stored sample type,
    /// with the number of saturated samples. Fails on NaN or infinite values.
    pub fn read_raw_frame(&self, index: usize) -> Result<(RawFrame, u64)> {
        let raw = match &self.source {
            Source::Hdf5 { fringes, .. } => self.read_hdf5_frame(fringes, index)?,
            Source::Array(a) => a.read_frame(index).with_context(|| format!("reading frame {index} of {}", self.path.display()))?,
            Source::Tiff(t) => t.read_frame(index).with_context(|| format!("reading frame {index} of {}", self.path.display()))?,
        };
        let saturated = self.check_frame(&raw, index)?;
        Ok((raw, saturated))
    }

    /// One frame of an HDF5 dataset as a hyperslab, A-lines first.
    fn read_hdf5_frame(&self, fringes: &Dataset, index: usize) -> Result<RawFrame> {
        let slab: Vec<SliceOrIndex> = self
            .axes
            .iter()
            .zip(self.shape.iter())
            .map(|(&a, &n)| match a {
                AxisName::Frame => SliceOrIndex::Index(index),
                _ => SliceOrIndex::SliceCount { start: 0, step: 1, count: n, block: 1 },
            })
            .collect();
        let aline_first = {
            let rest: Vec<AxisName> = self.axes.iter().copied().filter(|&a| a != AxisName::Frame).collect();
            rest[0] == AxisName::Aline
        };
        macro_rules! read_as {
            ($t:ty, $variant:ident) => {{
                let raw: Array2<$t> = fringes.read_slice(Hyperslab::from(slab)).with_context(|| format!("reading frame {index} of '{}'", self.fringes_path))?;
                RawFrame::$variant(if aline_first { raw } else { raw.reversed_axes().as_standard_layout().into_owned() })
            }};
        }
        Ok(match self.sample_type {
            SampleType::U8 => read_as!(u8, U8),
            SampleType::U16 => read_as!(u16, U16),
            SampleType::I16 => read_as!(i16, I16),
            SampleType::U32 => read_as!(u32, U32),
            SampleType::F32 => read_as!(f32, F32),
            SampleType::F64 => read_as!(f64, F64),
        })
    }

    /// Fails on a NaN or infinite sample; counts the samples at or above
    /// full scale.
    fn check_frame(&self, raw: &RawFrame, index: usize) -> Result<u64> {
        let fs = self.full_scale;
        macro_rules! check {
            ($a:expr, $t:ty, $kind:ident) => {{
                let v = $a.as_slice().expect("standard layout");
                check!(@finite $kind, $t, v);
                match fs {
                    Some(fs) => check!(@saturated $kind, $t, v, fs),
                    None => 0,
                }
            }};
            // Integers are always finite; floats are checked.
            (@finite int, $t:ty, $v:expr) => {};
            (@finite float, $t:ty, $v:expr) => {{
                #[allow(clippy::unnecessary_cast)]
                if let Some(pos) = $v.iter().position(|x| !(*x as f64).is_finite()) {
                    bail!(
                        "NaN or infinite value in '{}' frame {index} (A-line {}, pixel {})",
                        self.fringes_path,
                        pos / self.pixels,
                        pos % self.pixels
                    );
                }
            }};
            // x ≥ full scale, compared in the stored type for integers
            // (x ≥ fs ⇔ x ≥ ⌈fs⌉), which vectorises.
            (@saturated int, $t:ty, $v:expr, $fs:expr) => {{
                let t = $fs.ceil();
                if t > <$t>::MAX as f64 {
                    0
                } else {
                    let t = t.max(<$t>::MIN as f64) as $t;
                    // u32 counts per 64 Ki samples: the loop vectorises 4×
                    // wider than with u64.
                    $v.chunks(1 << 16).map(|c| c.iter().fold(0u32, |n, &x| n + (x >= t) as u32) as u64).sum::<u64>()
                }
            }};
            (@saturated float, $t:ty, $v:expr, $fs:expr) => {{
                #[allow(clippy::unnecessary_cast)]
                let n = $v.iter().filter(|&&x| x as f64 >= $fs).count() as u64;
                n
            }};
        }
        Ok(match raw {
            RawFrame::U8(a) => check!(a, u8, int),
            RawFrame::U16(a) => check!(a, u16, int),
            RawFrame::I16(a) => check!(a, i16, int),
            RawFrame::U32(a) => check!(a, u32, int),
            RawFrame::F32(a) => check!(a, f32, float),
            RawFrame::F64(a) => check!(a, f64, float),
        })
    }

    /// Reads frame `index` as (A-lines × pixels) f64 into `out`, returning the
    /// number of saturated samples. Fails on NaN or infinite values.
    pub fn read_frame(&self, index: usize, out: &mut Array2<f64>) -> Result<u64> {
        let (raw, saturated) = self.read_raw_frame(index)?;
        out.assign(&raw.to_f64());
        Ok(saturated)
    }

    /// Shape of one frame, (A-lines, pixels).
    pub fn frame_shape(&self) -> (usize, usize) {
        (self.alines, self.pixels)
    }

    /// The underlying HDF5 file (for inspection), when the capture is one.
    pub fn file(&self) -> Option<&hdf5::File> {
        match &self.source {
            Source::Hdf5 { file, .. } => Some(file),
            Source::Array(_) | Source::Tiff(_) => None,
        }
    }
}
