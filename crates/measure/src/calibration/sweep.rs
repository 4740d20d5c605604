//! Dispersion sweep: one frame reconstructed for every a2/a3 on a grid, and
//! for each setting the sharpness metric, the FWHM and peak of the
//! brightest interface, the image of a crop around it (the contact sheet's
//! tile) and the frame itself (what sweep.html shows). The report crate
//! draws and writes these (`report::sweep`); nothing is written here.
//!
//! The metric is the same entropy, on the same bright A-lines, that
//! `dispersion = "auto"` minimises, so the sweep's best row and the automatic
//! estimate can be compared directly. The FWHM and peak of the brightest
//! interface are measured on those A-lines with 8× zero padding.

use anyhow::{anyhow, bail, Result};
use ndarray::{Array2, Axis};
use rayon::prelude::*;
use serde::Serialize;
use std::path::{Path, PathBuf};

use super::dispersion::{brightest_lines, entropy, FringeSet};
use crate::analysis;
use crate::io::hash;
use crate::physics;
use crate::pipeline::config::{DispersionMethod, PipelineConfig};
use crate::pipeline::plan::{CaptureGeometry, Plan};
use crate::stages::log_compression::GreyMapping;

/// Most settings one sweep may have.
pub const MAX_SETTINGS: usize = 1024;
/// A contact-sheet tile's size in screen pixels: the crop fits it.
pub const THUMB_W: u32 = 240;
pub const THUMB_H: u32 = 180;
/// Screen pixels per A-line and per depth pixel in a tile: the crop is
/// shown enlarged, never shrunk, so the PSF's sharpening stays visible.
pub const TILE_ZOOM: usize = 2;

/// The part of the frame every tile shows: A-lines and depth pixels
/// around the brightest interface, at `zoom` screen pixels per pixel.
#[derive(Debug, Clone, Serialize)]
pub struct TileCrop {
    pub first_aline: usize,
    pub alines: usize,
    /// Index of the crop's first depth pixel in the reconstructed frame.
    pub first_depth_pixel: usize,
    /// Depth of the crop's first and last pixel, µm in air.
    pub first_depth_um: f64,
    pub last_depth_um: f64,
    pub depth_pixels: usize,
    pub depth_spacing_um: f64,
    pub zoom: usize,
    /// Depth of the brightest interface the crop is centred on, µm in air.
    pub interface_depth_um: f64,
    /// Length of the scale bar drawn in each tile, µm in air.
    pub scale_bar_um: f64,
}

/// Parses `START:STOP:STEP` into the values START, START+STEP, … ≤ STOP.
pub fn parse_range(text: &str, name: &str) -> Result<Vec<f64>> {
    let parts: Vec<&str> = text.split(':').collect();
    let nums: Vec<f64> = match parts.as_slice() {
        [single] => vec![single.trim().parse::<f64>().map_err(|_| anyhow!("--{name} '{text}': expected START:STOP:STEP or one number"))?],
        [a, b, c] => {
            let v: Result<Vec<f64>, _> = [a, b, c].iter().map(|s| s.trim().parse::<f64>()).collect();
            v.map_err(|_| anyhow!("--{name} '{text}': expected numbers START:STOP:STEP"))?
        }
        _ => bail!("--{name} '{text}': expected START:STOP:STEP"),
    };
    if nums.iter().any(|v| !v.is_finite()) {
        bail!("--{name} '{text}': values must be finite");
    }
    if nums.len() == 1 {
        return Ok(nums);
    }
    let (start, stop, step) = (nums[0], nums[1], nums[2]);
    if step <= 0.0 {
        bail!("--{name} '{text}': step must be > 0");
    }
    if stop < start {
        bail!("--{name} '{text}': stop {stop} is below start {start}");
    }
    let count = ((stop - start) / step + 1e-9).floor() as usize + 1;
    if count > MAX_SETTINGS {
        bail!("--{name} '{text}': {count} values, more than {MAX_SETTINGS}");
    }
    Ok((0..count).map(|i| start + step * i as f64).collect())
}

#[derive(Debug, Clone, Serialize)]
pub struct SweepRow {
    pub a2_rad: f64,
    pub a3_rad: f64,
    /// Entropy of the normalised intensity of the bright A-lines (nats; lower is sharper).
    pub entropy: f64,
    /// Median FWHM of the brightest interface over the bright A-lines, µm in air.
    pub fwhm_um: Option<f64>,
    /// Median peak of the brightest interface, dB.
    pub peak_db: f64,
    pub gdd_fs2: f64,
    pub fused_silica_mm: f64,
    /// Position of this setting's thumbnail in the contact sheet: x, y, width, height.
    pub tile: [u32; 4],
}

#[derive(Debug, Clone, Serialize)]
pub struct SweepReport {
    pub capture: PathBuf,
    pub input_hash: String,
    pub pipeline_sha256: String,
    pub frame: usize,
    pub metric: &'static str,
    pub alines_used: usize,
    pub best: usize,
    pub tile_crop: TileCrop,
    pub rows: Vec<SweepRow>,
}

/// Most pixels sweep.html embeds (all settings together); beyond it the
/// page holds the tiles' crop of each setting instead of the whole frame.
pub const PAGE_PIXEL_BUDGET: usize = 32 << 20;


/// A sweep's results: the table (as sweep.json records it) and the images
/// the report crate draws from them.
pub struct Sweep {
    pub report: SweepReport,
    /// Each setting's tile: the crop's dB image, depth × A-lines.
    pub tiles_db: Vec<Array2<f32>>,
    /// Each setting's image for sweep.html, dB, depth × A-lines.
    pub page_db: Vec<Array2<f32>>,
    /// The part of the frame `page_db` holds (first A-line, A-lines, first
    /// depth pixel, depth pixels) when it is the crop, not the whole frame.
    pub page_part: Option<(usize, usize, usize, usize)>,
    /// Depth of `page_db`'s first row, µm in air, and the depth step.
    pub page_first_depth_um: f64,
    pub depth_spacing_um: f64,
    pub aline_spacing_um: Option<f64>,
    /// The grey scale every image shares (black, white dB) and the noise floor.
    pub levels: (f64, f64),
    pub floor_db: f64,
    /// Whether a2 varies (the metric plot's axis), and the physical
    /// equivalents of a2 = 1 rad over this band.
    pub along_a2: bool,
    pub per_rad: physics::DispersionEquivalent,
}

/// Runs the sweep: every setting's row and images; writes nothing.
pub fn sweep(capture_path: &Path, config: &PipelineConfig, frame: usize, a2: &[f64], a3: &[f64]) -> Result<Sweep> {
    let settings: Vec<(f64, f64)> = a3.iter().flat_map(|&b| a2.iter().map(move |&a| (a, b))).collect();
    if settings.len() > MAX_SETTINGS {
        bail!("{} settings, more than {MAX_SETTINGS}", settings.len());
    }
    let capture = crate::open::open_capture(capture_path, &config.input)?;
    if frame >= capture.frames {
        bail!("frame {frame} does not exist (the capture has {} frames)", capture.frames);
    }
    let mut spectra = Array2::<f64>::zeros(capture.frame_shape());
    capture.read_frame(frame, &mut spectra)?;
    let source = capture.background.clone().unwrap_or_else(|| crate::stages::background::mean_spectrum(spectra.view()));
    let geometry = CaptureGeometry { wavelength_nm: &capture.wavelength_nm, background: capture.background.as_deref(), source_spectrum: Some(&source) };
    let mut cfg = config.clone();
    cfg.dispersion.method = DispersionMethod::Fixed;
    cfg.dispersion.a2 = 0.0;
    cfg.dispersion.a3 = 0.0;
    let plan = Plan::new(&cfg, geometry)?;
    let mut fine_cfg = cfg.clone();
    fine_cfg.fft.zero_padding = fine_cfg.fft.zero_padding.max(8);
    fine_cfg.fft.crop_um = None;
    fine_cfg.fft.crop_px = None;
    let fine_plan = Plan::new(&fine_cfg, geometry)?;

    let all: Vec<usize> = (0..capture.alines).collect();
    let lines = brightest_lines(&plan, spectra.view(), config.dispersion.search_alines);
    let frame_set = FringeSet::new(&plan, spectra.view(), &all);
    let fine_set = FringeSet::new(&fine_plan, spectra.view(), &lines);
    let (k_min, k_max) = (plan.summary.k_min_per_um, plan.summary.k_max_per_um);
    let fine_spacing = fine_plan.summary.depth_spacing_um;

    // Grey scale shared by all thumbnails, and the crop, from the
    // uncorrected frame.
    let uncorrected = frame_set.amplitudes(0.0, 0.0);
    let crop = tile_crop(&uncorrected, &lines, &plan);
    let lc = &config.log_compression;
    let uncorrected_db: Vec<f32> = uncorrected.iter().map(|a| (20.0 * a.max(1e-12).log10()) as f32).collect();
    let floor_db = crate::stages::log_compression::noise_floor_db(&uncorrected_db);
    let (black, white) = match lc.mapping {
        GreyMapping::Fixed => (lc.black_db, lc.white_db),
        GreyMapping::Auto => crate::stages::log_compression::auto_levels(&uncorrected_db, floor_db, lc.floor_offset_db, lc.dynamic_range_db, lc.white_percentile),
    };
    // What sweep.html embeds of each setting: the whole frame, or the
    // tiles' crop when all frames together would exceed the budget.
    let (alines_n, depth_n) = uncorrected.dim();
    let whole = settings.len() * alines_n * depth_n <= PAGE_PIXEL_BUDGET;
    let page_part = if whole { (0, alines_n, 0, depth_n) } else { (crop.first_aline, crop.alines, crop.first_depth_pixel, crop.depth_pixels) };

    let sets = Sets { frame: &frame_set, fine: &fine_set, lines: &lines, crop: &crop, page_part, fine_spacing, k_band: (k_min, k_max) };
    let results: Vec<(SweepRow, Array2<f32>, Array2<f32>)> = settings
        .par_iter()
        .map(|&(a2, a3)| one_setting(&sets, a2, a3))
        .collect();
    let mut rows = Vec::with_capacity(results.len());
    let mut thumbs = Vec::with_capacity(results.len());
    let mut page_images = Vec::with_capacity(results.len());
    for (r, t, p) in results {
        rows.push(r);
        thumbs.push(t);
        page_images.push(p);
    }
    let best = rows.iter().enumerate().min_by(|a, b| a.1.entropy.total_cmp(&b.1.entropy)).map(|(i, _)| i).unwrap_or(0);

    let report = SweepReport {
        capture: std::path::absolute(capture_path).unwrap_or_else(|_| capture_path.to_path_buf()),
        input_hash: hash::input_hash(capture_path)?,
        pipeline_sha256: config.sha256(),
        frame,
        metric: "entropy of normalised intensity (nats, lower is sharper)",
        alines_used: lines.len(),
        best,
        tile_crop: crop,
        rows,
    };
    Ok(Sweep {
        page_first_depth_um: plan.depth_um(page_part.2),
        page_part: (!whole).then_some(page_part),
        report,
        tiles_db: thumbs,
        page_db: page_images,
        depth_spacing_um: plan.summary.depth_spacing_um,
        aline_spacing_um: config.input.aline_spacing_um.or(capture.scan.aline_spacing_um),
        levels: (black, white),
        floor_db,
        along_a2: a2.len() > 1,
        per_rad: physics::dispersion_equivalent(1.0, k_min, k_max),
    })
}

/// What every setting of a sweep is measured on: the whole frame's and the
/// finely sampled bright lines' fringes, the bright lines, the tiles' crop,
/// the part of the frame the page shows, the fine depth step and the band.
struct Sets<'a> {
    frame: &'a FringeSet,
    fine: &'a FringeSet,
    lines: &'a [usize],
    crop: &'a TileCrop,
    page_part: (usize, usize, usize, usize),
    fine_spacing: f64,
    k_band: (f64, f64),
}

/// One setting (a2, a3): its row (entropy of the bright lines, median FWHM
/// and peak of the finely sampled ones, the equivalent GDD), its tile and
/// its page image in dB.
fn one_setting(sets: &Sets<'_>, a2: f64, a3: f64) -> (SweepRow, Array2<f32>, Array2<f32>) {
    let amp = sets.frame.amplitudes(a2, a3);
    let bright = amp.select(Axis(0), sets.lines);
    let fine = sets.fine.amplitudes(a2, a3);
    let mut widths = Vec::new();
    let mut peaks = Vec::new();
    for row in fine.rows() {
        let profile = row.to_vec();
        let (i, v) = analysis::peak(&profile, 0, profile.len());
        peaks.push(20.0 * v.max(1e-12).log10());
        if let Some(w) = analysis::fwhm(&profile, i) {
            widths.push(w * sets.fine_spacing);
        }
    }
    let fwhm_um = (widths.len() * 2 > fine.nrows()).then(|| crate::stages::background::median_in_place(&mut widths));
    let peak_db = crate::stages::background::median_in_place(&mut peaks);
    let eq = physics::dispersion_equivalent(a2, sets.k_band.0, sets.k_band.1);
    let row = SweepRow {
        a2_rad: a2,
        a3_rad: a3,
        entropy: entropy(&bright),
        fwhm_um,
        peak_db,
        gdd_fs2: eq.gdd_fs2,
        fused_silica_mm: eq.fused_silica_mm,
        tile: [0; 4],
    };
    let (a0, na, d0, nd) = sets.page_part;
    let page_db = amp.slice(ndarray::s![a0..a0 + na, d0..d0 + nd]).t().mapv(|a| (20.0 * a.max(1e-12).log10()) as f32);
    (row, tile_db(&amp, sets.crop), page_db)
}

/// The crop every tile shows: centred on the brightest interface of the
/// bright A-lines (the median of their peaks, skipping the 8 bins next to
/// zero delay) and on the median bright A-line, as large as a tile holds
/// at [`TILE_ZOOM`].
fn tile_crop(uncorrected: &Array2<f64>, lines: &[usize], plan: &Plan) -> TileCrop {
    let (alines, depth) = uncorrected.dim();
    let skip = 8usize.saturating_sub(plan.summary.first_depth_bin).min(depth.saturating_sub(1));
    let mut peaks: Vec<f64> = lines
        .iter()
        .map(|&l| {
            let row = uncorrected.row(l);
            (skip..depth).max_by(|&a, &b| row[a].total_cmp(&row[b])).unwrap_or(0) as f64
        })
        .collect();
    let centre_px = if peaks.is_empty() { depth as f64 / 2.0 } else { crate::stages::background::median_in_place(&mut peaks) };
    let mut across: Vec<f64> = lines.iter().map(|&l| l as f64).collect();
    let centre_a = if across.is_empty() { alines as f64 / 2.0 } else { crate::stages::background::median_in_place(&mut across) };
    let cw = alines.min(THUMB_W as usize / TILE_ZOOM).max(1);
    let ch = depth.min(THUMB_H as usize / TILE_ZOOM).max(1);
    let start = |centre: f64, len: usize, total: usize| ((centre - len as f64 / 2.0).round().max(0.0) as usize).min(total - len);
    let (a0, d0) = (start(centre_a, cw, alines), start(centre_px, ch, depth));
    let spacing = plan.summary.depth_spacing_um;
    // A round scale bar about a third of the crop's depth.
    let span = ch as f64 * spacing;
    let target = span / 3.0;
    let magnitude = 10f64.powf(target.log10().floor());
    let scale_bar_um = [5.0, 2.0, 1.0].iter().map(|m| m * magnitude).find(|&v| v <= target).unwrap_or(magnitude);
    TileCrop {
        first_aline: a0,
        alines: cw,
        first_depth_pixel: d0,
        first_depth_um: plan.depth_um(d0),
        last_depth_um: plan.depth_um(d0 + ch - 1),
        depth_pixels: ch,
        depth_spacing_um: spacing,
        zoom: TILE_ZOOM,
        interface_depth_um: plan.depth_um(centre_px.round() as usize),
        scale_bar_um,
    }
}

/// A tile's image: the crop of the frame in dB, depth down, A-lines across.
fn tile_db(amplitude: &Array2<f64>, crop: &TileCrop) -> Array2<f32> {
    let (a0, d0) = (crop.first_aline, crop.first_depth_pixel);
    let part = amplitude.slice(ndarray::s![a0..a0 + crop.alines, d0..d0 + crop.depth_pixels]);
    part.t().mapv(|a| (20.0 * a.max(1e-12).log10()) as f32)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ranges_parse_and_reject() {
        assert_eq!(parse_range("0:40:10", "a2").unwrap(), vec![0.0, 10.0, 20.0, 30.0, 40.0]);
        assert_eq!(parse_range("-5:5:5", "a2").unwrap(), vec![-5.0, 0.0, 5.0]);
        assert_eq!(parse_range("7", "a3").unwrap(), vec![7.0]);
        assert!(parse_range("0:40:0", "a2").unwrap_err().to_string().contains("step must be > 0"));
        assert!(parse_range("40:0:5", "a2").unwrap_err().to_string().contains("below start"));
        assert!(parse_range("a:b", "a2").is_err());
    }
}
