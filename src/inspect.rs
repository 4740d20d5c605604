//! `fringeflow inspect`: what a capture holds and what is wrong with it,
//! before anything is processed.
//!
//! Lists every dataset with its shape, type and value range (read in slices
//! along the first axis, never whole), then the problems found: NaN or
//! infinite samples, saturated fringes, a wavelength map that is not
//! monotonic or does not match the pixels, and anything else the capture
//! reader would refuse.

use anyhow::Result;
use hdf5::types::TypeDescriptor;
use std::fmt::Write as _;
use std::path::Path;

use crate::io::capture::{check_wavelength_map, open_hdf5};
use crate::pipeline::config::InputConfig;

/// Statistics of one dataset.
#[derive(Debug, Clone, serde::Serialize)]
pub struct DatasetStats {
    pub name: String,
    pub shape: Vec<usize>,
    pub dtype: String,
    pub min: f64,
    pub max: f64,
    pub non_finite: u64,
    /// (samples at or above full scale, the full scale) for integer fringes.
    #[serde(serialize_with = "full_scale_json")]
    pub at_full_scale: Option<(u64, f64)>,
    /// Values the statistics were taken from, when fewer than the dataset
    /// holds (evenly spaced blocks along its first axis; none read when
    /// one row alone is larger than the budget).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sampled_values: Option<u64>,
}

/// The most values `inspect` reads of one dataset for its statistics.
const SAMPLE_BUDGET: usize = 1 << 24;

/// The result of inspecting a capture.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Inspection {
    pub datasets: Vec<DatasetStats>,
    pub problems: Vec<String>,
    /// The capture as `run` would open it, when it opens.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub capture: Option<CaptureFacts>,
}

/// What `run` would read: format, size, the wavelength range (nm) and its
/// source, the scan facts with their units, the full scale.
#[derive(Debug, Clone, serde::Serialize)]
pub struct CaptureFacts {
    pub format: String,
    pub frames: usize,
    pub alines: usize,
    pub pixels: usize,
    pub wavelength_range_nm: [f64; 2],
    pub wavelength_source: serde_json::Value,
    pub scan: crate::io::capture::ScanAttributes,
    pub full_scale: Option<f64>,
}

fn facts(c: &crate::io::capture::Capture) -> CaptureFacts {
    let (lo, hi) = c.wavelength_nm.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    CaptureFacts {
        format: c.format_detail.clone().unwrap_or_else(|| format!("HDF5, {:?} samples", c.sample_type).to_lowercase()),
        frames: c.frames,
        alines: c.alines,
        pixels: c.pixels,
        wavelength_range_nm: [lo, hi],
        wavelength_source: serde_json::to_value(&c.wavelength_source).unwrap_or_default(),
        scan: c.scan.clone(),
        full_scale: c.full_scale,
    }
}

fn is_numeric_name(dtype: &str) -> bool {
    matches!(dtype.as_bytes().first(), Some(b'u' | b'i' | b'f')) && dtype.len() <= 3
}

fn is_numeric(d: &TypeDescriptor) -> bool {
    matches!(d, TypeDescriptor::Unsigned(_) | TypeDescriptor::Integer(_) | TypeDescriptor::Float(_))
}

fn full_scale_json<S: serde::Serializer>(v: &Option<(u64, f64)>, s: S) -> Result<S::Ok, S::Error> {
    use serde::Serialize;
    v.map(|(saturated, full_scale)| serde_json::json!({ "saturated": saturated, "full_scale": full_scale })).serialize(s)
}

fn first_line(s: &str) -> String {
    s.lines().next().unwrap_or(s).trim().to_string()
}

fn stats(name: &str, ds: &hdf5::Dataset) -> Result<DatasetStats> {
    let shape = ds.shape();
    let descriptor = match ds.dtype().and_then(|t| t.to_descriptor()) {
        Ok(d) => d,
        Err(_) => {
            return Ok(DatasetStats { name: name.to_string(), shape, dtype: "a type fringeflow cannot describe".into(), min: f64::INFINITY, max: f64::NEG_INFINITY, non_finite: 0, at_full_scale: None, sampled_values: None })
        }
    };
    let mut st = DatasetStats {
        name: name.to_string(),
        shape: shape.clone(),
        dtype: crate::io::h5::type_in_words(&descriptor),
        min: f64::INFINITY,
        max: f64::NEG_INFINITY,
        non_finite: 0,
        at_full_scale: None,
        sampled_values: None,
    };
    if !is_numeric(&descriptor) {
        return Ok(st);
    }
    let full_scale = ds.attr("full_scale").ok().and_then(|a| a.read_scalar::<f64>().ok());
    let mut saturated = 0u64;
    let mut visit = |v: f64| {
        if v.is_finite() {
            st.min = st.min.min(v);
            st.max = st.max.max(v);
        } else {
            st.non_finite += 1;
        }
        if full_scale.is_some_and(|fs| v >= fs) {
            saturated += 1;
        }
    };
    if shape.is_empty() {
        visit(ds.read_scalar::<f64>()?);
    } else {
        let row: usize = shape[1..].iter().product::<usize>().max(1);
        let step = ((1usize << 21) / row).max(1);
        // Blocks of `step` rows; beyond the budget, evenly spaced ones.
        let blocks = shape[0].div_ceil(step);
        let budget = if row > SAMPLE_BUDGET { 0 } else { (SAMPLE_BUDGET / (step * row)).max(1) };
        let chosen: Vec<usize> = if blocks <= budget { (0..blocks).collect() } else { (0..budget).map(|i| i * blocks / budget).collect() };
        if chosen.len() < blocks {
            st.sampled_values = Some(chosen.iter().map(|&b| ((b * step + step).min(shape[0]) - b * step) * row).sum::<usize>() as u64);
        }
        for start in chosen.into_iter().map(|b| b * step) {
            let end = (start + step).min(shape[0]);
            let part = ds.read_slice::<f64, _, ndarray::IxDyn>(hdf5::Hyperslab::from(
                std::iter::once(hdf5::SliceOrIndex::SliceCount { start, step: 1, count: end - start, block: 1 })
                    .chain(shape[1..].iter().map(|&n| hdf5::SliceOrIndex::SliceCount { start: 0, step: 1, count: n, block: 1 }))
                    .collect::<Vec<_>>(),
            ))?;
            part.iter().for_each(|&v| visit(v));
        }
    }
    st.at_full_scale = full_scale.map(|fs| (saturated, fs));
    Ok(st)
}

/// Inspects a capture; dataset paths (or a raw layout) come from `input`.
pub fn inspect(path: &Path, input: &InputConfig) -> Result<Inspection> {
    let layout = crate::open::capture_layout(input)?;
    let format = match layout.format {
        Some(f) => f,
        None => crate::io::capture_array::detect_format(path, &layout)?,
    };
    if format != crate::io::capture::FileFormat::Hdf5 {
        return inspect_frames(path, input);
    }
    let file = open_hdf5(path)?;
    let mut sets = Vec::new();
    let mut problems = Vec::new();
    crate::io::h5::collect_datasets(&file, "", &mut sets, &mut problems);
    let mut datasets = Vec::new();
    for (name, ds) in &sets {
        let st = match stats(name, ds) {
            Ok(st) => st,
            Err(e) => {
                problems.push(format!("{name}: cannot be read ({})", first_line(&e.to_string())));
                continue;
            }
        };
        if !is_numeric_name(&st.dtype) && (name == &input.fringes || name == &input.wavelength || name == &input.background) {
            problems.push(format!("{name}: holds {}, not numbers", st.dtype));
        }
        if st.non_finite > 0 {
            problems.push(format!("{name}: {} NaN or infinite values", st.non_finite));
        }
        if name == &input.fringes && is_numeric_name(&st.dtype) && st.min == st.max {
            let which = if st.sampled_values.is_some() { "every sampled value" } else { "every sample" };
            problems.push(format!("{name}: {which} is {}: no fringes (an empty capture, or the camera recorded nothing)", st.min));
        }
        if let Some((n, fs)) = st.at_full_scale {
            if n > 0 {
                problems.push(format!("{name}: {n} samples at or above full scale {fs} (saturated)"));
            }
        }
        if name == &input.wavelength && st.shape.len() == 1 && is_numeric_name(&st.dtype) {
            match crate::memory::check_fits(&format!("dataset '{name}'"), ds.size() as u64, 8).and_then(|()| Ok(ds.read_raw::<f64>()?)) {
                Ok(map) => {
                    if let Err(e) = check_wavelength_map(&map, map.len(), &format!("'{name}'")) {
                        problems.push(e.to_string());
                    }
                }
                Err(e) => problems.push(format!("{name}: cannot be read ({})", first_line(&e.to_string()))),
            }
        }
        datasets.push(st);
    }
    let capture = match crate::run::open_capture(path, input) {
        Ok(c) => Some(facts(&c)),
        Err(e) => {
            let msg = format!("{e:#}");
            if !problems.iter().any(|p| p == &msg) {
                problems.push(msg);
            }
            None
        }
    };
    Ok(Inspection { datasets, problems, capture })
}

/// A capture that is not HDF5: opened as `run` opens it, the statistics of
/// its frames (evenly spaced ones beyond the budget) and of its wavelength
/// map.
fn inspect_frames(path: &Path, input: &InputConfig) -> Result<Inspection> {
    let mut problems = Vec::new();
    let capture = match crate::run::open_capture(path, input) {
        Ok(c) => c,
        Err(e) => {
            problems.push(format!("{e:#}"));
            return Ok(Inspection { datasets: Vec::new(), problems, capture: None });
        }
    };
    let per_frame = capture.alines * capture.pixels;
    let budget = (SAMPLE_BUDGET / per_frame.max(1)).max(1);
    let chosen: Vec<usize> = if capture.frames <= budget { (0..capture.frames).collect() } else { (0..budget).map(|i| i * capture.frames / budget).collect() };
    let name = capture.format_detail.clone().unwrap_or_else(|| "fringes".into());
    let mut st = DatasetStats {
        name,
        shape: capture.shape.clone(),
        dtype: format!("{:?}", capture.sample_type).to_lowercase(),
        min: f64::INFINITY,
        max: f64::NEG_INFINITY,
        non_finite: 0,
        at_full_scale: None,
        sampled_values: (chosen.len() < capture.frames).then_some((chosen.len() * per_frame) as u64),
    };
    let mut saturated = 0;
    for &f in &chosen {
        match capture.read_raw_frame(f) {
            Ok((raw, sat)) => {
                saturated += sat;
                for v in raw.to_f64().iter() {
                    st.min = st.min.min(*v);
                    st.max = st.max.max(*v);
                }
            }
            Err(e) => {
                problems.push(format!("frame {f}: {}", first_line(&format!("{e:#}"))));
                break;
            }
        }
    }
    st.at_full_scale = capture.full_scale.map(|fs| (saturated, fs));
    if saturated > 0 {
        problems.push(format!("{saturated} samples at or above full scale {} (saturated)", capture.full_scale.unwrap_or(f64::NAN)));
    }
    if st.min == st.max {
        problems.push(format!("every sample read is {}: no fringes (an empty capture, or the camera recorded nothing)", st.min));
    }
    let map = &capture.wavelength_nm;
    let (lo, hi) = map.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let source = serde_json::to_value(&capture.wavelength_source).ok().and_then(|v| v["path"].as_str().map(String::from)).unwrap_or_else(|| "given map".into());
    let wl = DatasetStats { name: format!("wavelength map (nm) from {source}"), shape: vec![map.len()], dtype: "f64".into(), min: lo, max: hi, non_finite: 0, at_full_scale: None, sampled_values: None };
    Ok(Inspection { datasets: vec![st, wl], problems, capture: Some(facts(&capture)) })
}

impl Inspection {
    pub fn render(&self, path: &Path) -> String {
        let mut s = String::new();
        let _ = writeln!(s, "capture {}", path.display());
        let width = self.datasets.iter().map(|d| d.name.len()).max().unwrap_or(4);
        for d in &self.datasets {
            let shape = format!("{:?}", d.shape);
            let _ = write!(s, "  {:<width$}  {:<4} {:<18}", d.name, d.dtype, shape);
            if d.min <= d.max {
                let _ = write!(s, " min {:<12} max {:<12}", fmt_num(d.min), fmt_num(d.max));
            }
            if let Some((n, fs)) = d.at_full_scale {
                let _ = write!(s, " full scale {} ({} saturated)", fmt_num(fs), n);
            }
            if let Some(n) = d.sampled_values {
                let _ = write!(s, " (statistics of {n} sampled values)");
            }
            let _ = writeln!(s);
        }
        if let Some(c) = &self.capture {
            let _ = writeln!(s, "as run reads it: {}; {} frames × {} A-lines × {} pixels", c.format, c.frames, c.alines, c.pixels);
            let source = c.wavelength_source["path"].as_str().map_or_else(|| c.wavelength_source["kind"].as_str().unwrap_or("?").to_string(), |p| p.to_string());
            let _ = writeln!(s, "  wavelength {:.3}–{:.3} nm (from {source})", c.wavelength_range_nm[0], c.wavelength_range_nm[1]);
            let sc = &c.scan;
            let units = [
                ("A-line period", sc.aline_period_us, "µs"),
                ("frame period", sc.frame_period_us, "µs"),
                ("A-line spacing", sc.aline_spacing_um, "µm"),
                ("frame spacing", sc.frame_spacing_um, "µm"),
                ("repeats per position", sc.repeats_per_position, ""),
            ];
            let given: Vec<String> = units.iter().filter_map(|(n, v, u)| v.map(|v| format!("{n} {} {u}", fmt_num(v)).trim_end().to_string())).collect();
            if !given.is_empty() {
                let _ = writeln!(s, "  scan: {}", given.join(", "));
            }
            if let Some(fs) = c.full_scale {
                let _ = writeln!(s, "  full scale {} counts", fmt_num(fs));
            }
        }
        if self.problems.is_empty() {
            let _ = writeln!(s, "problems: none");
        } else {
            let _ = writeln!(s, "problems:");
            for p in &self.problems {
                let _ = writeln!(s, "  - {p}");
            }
        }
        s
    }
}

fn fmt_num(v: f64) -> String {
    if v.fract() == 0.0 && v.abs() < 1e12 {
        format!("{v:.0}")
    } else if v.abs() < 1e-3 || v.abs() >= 1e9 {
        format!("{v:.4e}")
    } else {
        format!("{v:.4}")
    }
}
