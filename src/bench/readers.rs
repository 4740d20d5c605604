//! Capture readers timed against HDF5: the bench capture written as NumPy
//! `.npy` (C and Fortran order), headerless raw binary and multi-page TIFF,
//! every frame read through `Capture::read_raw_frame` (what `run` does),
//! same run, median of the repeats, as MB/s and as a ratio to HDF5; and the
//! peak resident memory while a raw capture of about 2 GB is read frame by
//! frame (the peak is reset first through /proc/self/clear_refs).

use anyhow::{Context, Result};
use serde::Serialize;
use std::io::Write;
use std::path::Path;
use std::time::Instant;

use super::timing::median;
use crate::io::capture::{Capture, RawFrame};
use crate::pipeline::config::{AxisName, CaptureFormat, InputConfig, PipelineConfig};

/// One reader's rate.
#[derive(Debug, Clone, Serialize)]
pub struct ReaderPoint {
    pub format: String,
    pub megabytes_per_second: f64,
    pub over_hdf5: f64,
}

/// Readers against HDF5 and memory on a large raw capture.
#[derive(Debug, Clone, Serialize)]
pub struct ReadersReport {
    pub readers: Vec<ReaderPoint>,
    /// Size of the raw capture read for the memory figure, MB.
    pub large_raw_megabytes: f64,
    /// Resident set of the bench process before reading it, MB (the bench
    /// holds its capture's frames in memory).
    pub large_raw_resident_before_mb: Option<f64>,
    /// Peak resident set while reading it, MB (None where /proc has no
    /// clear_refs to reset the peak).
    pub large_raw_peak_resident_mb: Option<f64>,
    /// Peak minus before: what reading the file frame by frame added.
    pub large_raw_growth_mb: Option<f64>,
}

/// Current resident set of this process, MB.
fn resident_mb() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let kb: f64 = status.lines().find(|l| l.starts_with("VmRSS:"))?.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb / 1024.0)
}

fn u16_frames(capture: &Capture) -> Result<Vec<ndarray::Array2<u16>>> {
    (0..capture.frames)
        .map(|f| match capture.read_raw_frame(f)?.0 {
            RawFrame::U16(a) => Ok(a),
            _ => anyhow::bail!("the bench capture is not u16"),
        })
        .collect()
}

/// A (frames, A-lines, pixels) array: C order, or Fortran order (frames
/// fastest); `pixel_first` instead writes the same bytes as C order under a
/// Fortran-order (pixels, A-lines, frames) header, as MATLAB lays arrays out.
fn write_npy(path: &Path, frames: &[ndarray::Array2<u16>], fortran: bool, pixel_first: bool) -> Result<()> {
    let (a, p) = frames[0].dim();
    let n = frames.len();
    let dict = if pixel_first {
        format!("{{'descr': '<u2', 'fortran_order': True, 'shape': ({p}, {a}, {n}), }}")
    } else {
        format!("{{'descr': '<u2', 'fortran_order': {}, 'shape': ({n}, {a}, {p}), }}", if fortran { "True" } else { "False" })
    };
    let mut header = dict.into_bytes();
    while (10 + header.len() + 1) % 64 != 0 {
        header.push(b' ');
    }
    header.push(b'\n');
    let mut out = std::io::BufWriter::new(std::fs::File::create(path)?);
    out.write_all(b"\x93NUMPY\x01\x00")?;
    out.write_all(&(header.len() as u16).to_le_bytes())?;
    out.write_all(&header)?;
    if fortran {
        // Column-major: the frame index fastest.
        for pi in 0..p {
            for ai in 0..a {
                for f in frames {
                    out.write_all(&f[[ai, pi]].to_le_bytes())?;
                }
            }
        }
    } else {
        for f in frames {
            for v in f.iter() {
                out.write_all(&v.to_le_bytes())?;
            }
        }
    }
    out.flush()?;
    Ok(())
}

fn write_raw(path: &Path, frames: &[ndarray::Array2<u16>], copies: usize) -> Result<()> {
    let mut out = std::io::BufWriter::new(std::fs::File::create(path)?);
    for _ in 0..copies {
        for f in frames {
            let bytes: Vec<u8> = f.iter().flat_map(|v| v.to_le_bytes()).collect();
            out.write_all(&bytes)?;
        }
    }
    out.flush()?;
    Ok(())
}

/// Seconds to read every frame of the capture at `path` as `input` says.
fn read_all(path: &Path, input: &InputConfig) -> Result<f64> {
    let capture = crate::run::open_capture(path, input)?;
    let start = Instant::now();
    for f in 0..capture.frames {
        std::hint::black_box(capture.read_raw_frame(f)?);
    }
    Ok(start.elapsed().as_secs_f64())
}

fn peak_resident_reset() -> bool {
    std::fs::write("/proc/self/clear_refs", "5").is_ok()
}

/// Times every reader on the bench capture at `hdf5_path` (same run,
/// median of `repeats`, alternating formats) and reads a raw copy of about
/// 2 GB for the memory figure; the files live in `work` and are removed.
pub fn time_readers(hdf5_path: &Path, config: &PipelineConfig, work: &Path, repeats: usize) -> Result<ReadersReport> {
    let capture = crate::run::open_capture(hdf5_path, &config.input)?;
    let frames = u16_frames(&capture)?;
    let dir = work.join("readers");
    std::fs::create_dir_all(&dir).with_context(|| format!("creating {}", dir.display()))?;
    let map = dir.join("wavelength.npy");
    write_npy_vector(&map, &capture.wavelength_nm)?;
    let (a, p) = frames[0].dim();
    let described = |format: Option<CaptureFormat>| {
        let mut i = config.input.clone();
        if format.is_some() {
            i.wavelength_file = Some(map.display().to_string());
        }
        i.format = format;
        i
    };
    let mut raw_input = described(Some(CaptureFormat::Raw));
    raw_input.sample_type = Some("u16".into());
    raw_input.pixels = Some(p);
    raw_input.alines_per_frame = Some(a);
    write_npy(&dir.join("c.npy"), &frames, false, false)?;
    write_npy(&dir.join("fortran.npy"), &frames, true, false)?;
    write_npy(&dir.join("pixel-first.npy"), &frames, false, true)?;
    let mut pixel_first = described(Some(CaptureFormat::Npy));
    pixel_first.axes = Some(vec![AxisName::Pixel, AxisName::Aline, AxisName::Frame]);
    write_raw(&dir.join("capture.bin"), &frames, 1)?;
    crate::io::tiff_pages::write_u16_pages(&dir.join("capture.tif"), &frames)?;
    let cases: Vec<(&str, std::path::PathBuf, InputConfig)> = vec![
        ("HDF5", hdf5_path.to_path_buf(), config.input.clone()),
        ("NumPy .npy, C order", dir.join("c.npy"), described(Some(CaptureFormat::Npy))),
        ("NumPy .npy, Fortran (pixels, A-lines, frames)", dir.join("pixel-first.npy"), pixel_first),
        ("NumPy .npy, Fortran (frames, ...): frames fastest", dir.join("fortran.npy"), described(Some(CaptureFormat::Npy))),
        ("raw binary", dir.join("capture.bin"), raw_input.clone()),
        ("multi-page TIFF", dir.join("capture.tif"), described(Some(CaptureFormat::Tiff))),
    ];
    let mut runs: Vec<Vec<f64>> = vec![Vec::new(); cases.len()];
    for _ in 0..repeats.max(1) + 1 {
        for (k, (_, path, input)) in cases.iter().enumerate() {
            runs[k].push(read_all(path, input)?);
        }
    }
    // The first round warms the page cache: left out.
    let mb = (frames.len() * a * p * 2) as f64 / 1e6;
    let seconds: Vec<f64> = runs.into_iter().map(|r| median(r[1..].to_vec())).collect();
    let readers = cases.iter().zip(&seconds).map(|((name, _, _), &s)| ReaderPoint { format: name.to_string(), megabytes_per_second: mb / s, over_hdf5: seconds[0] / s }).collect();
    // About 2 GB of raw frames, read frame by frame.
    let frame_bytes = a * p * 2 * frames.len();
    let copies = (2_000_000_000usize).div_ceil(frame_bytes);
    let large = dir.join("large.bin");
    write_raw(&large, &frames, copies)?;
    drop(frames);
    let before = resident_mb();
    let peak = if peak_resident_reset() {
        read_all(&large, &raw_input)?;
        crate::run::peak_resident_mb()
    } else {
        None
    };
    let large_mb = std::fs::metadata(&large).map(|m| m.len() as f64 / 1e6).unwrap_or(0.0);
    std::fs::remove_dir_all(&dir).ok();
    let growth = before.zip(peak).map(|(b, p)| p - b);
    Ok(ReadersReport { readers, large_raw_megabytes: large_mb, large_raw_resident_before_mb: before, large_raw_peak_resident_mb: peak, large_raw_growth_mb: growth })
}

fn write_npy_vector(path: &Path, v: &[f64]) -> Result<()> {
    let dict = format!("{{'descr': '<f8', 'fortran_order': False, 'shape': ({},), }}", v.len());
    let mut header = dict.into_bytes();
    while (10 + header.len() + 1) % 64 != 0 {
        header.push(b' ');
    }
    header.push(b'\n');
    let mut out = Vec::new();
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header.len() as u16).to_le_bytes());
    out.extend_from_slice(&header);
    for x in v {
        out.extend_from_slice(&x.to_le_bytes());
    }
    std::fs::write(path, out)?;
    Ok(())
}
