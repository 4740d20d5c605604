//! Dispersion sweep: one frame reconstructed for every a2/a3 on a grid, with
//! a contact sheet of thumbnails, a table of metrics (CSV and JSON) and a
//! plot of the sharpness metric against the coefficient, and sweep.html:
//! the frame at every setting on a comparison page (any two side by side or
//! blinking under one window/level, and their difference).
//!
//! The metric is the same entropy, on the same bright A-lines, that
//! `dispersion = "auto"` minimises, so the sweep's best row and the automatic
//! estimate can be compared directly. The FWHM and peak of the brightest
//! interface are measured on those A-lines with 8× zero padding.

use anyhow::{anyhow, bail, Context, Result};
use image::{imageops, GrayImage};
use ndarray::{Array2, Axis};
use plotters::prelude::*;
use rayon::prelude::*;
use serde::Serialize;
use std::io::Write;
use std::path::{Path, PathBuf};

use super::dispersion::{brightest_lines, entropy, FringeSet};
use crate::analysis;
use crate::io::hash;
use crate::io::staging::write_atomically;
use crate::physics;
use crate::pipeline::config::{DispersionMethod, PipelineConfig};
use crate::pipeline::plan::{CaptureGeometry, Plan};
use crate::stages::log_compression::{grey_levels, GreyMapping};

/// Most settings one sweep may have.
pub const MAX_SETTINGS: usize = 1024;
const THUMB_W: u32 = 240;
const THUMB_H: u32 = 180;
const LABEL_H: u32 = 40;
const GAP: u32 = 8;
const COLUMNS: usize = 6;
/// Height of the sheet's header line (what the tiles show).
const HEADER_H: u32 = 26;
/// Screen pixels per A-line and per depth pixel in a tile: the crop is
/// shown enlarged, never shrunk, so the PSF's sharpening stays visible.
const TILE_ZOOM: usize = 2;

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

/// Runs the sweep and writes `contact-sheet.png`, `sweep.csv`, `sweep.json`,
/// `metric.png` and `sweep.html` into `out`.
pub fn sweep(capture_path: &Path, config: &PipelineConfig, frame: usize, a2: &[f64], a3: &[f64], out: &Path) -> Result<SweepReport> {
    let settings: Vec<(f64, f64)> = a3.iter().flat_map(|&b| a2.iter().map(move |&a| (a, b))).collect();
    if settings.len() > MAX_SETTINGS {
        bail!("{} settings, more than {MAX_SETTINGS}", settings.len());
    }
    let capture = crate::run::open_capture(capture_path, &config.input)?;
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

    let results: Vec<(SweepRow, GrayImage, Array2<f32>)> = settings
        .par_iter()
        .map(|&(a2, a3)| {
            let amp = frame_set.amplitudes(a2, a3);
            let bright = amp.select(Axis(0), &lines);
            let fine = fine_set.amplitudes(a2, a3);
            let mut widths = Vec::new();
            let mut peaks = Vec::new();
            for row in fine.rows() {
                let profile = row.to_vec();
                let (i, v) = analysis::peak(&profile, 0, profile.len());
                peaks.push(20.0 * v.max(1e-12).log10());
                if let Some(w) = analysis::fwhm(&profile, i) {
                    widths.push(w * fine_spacing);
                }
            }
            let fwhm_um = (widths.len() * 2 > fine.nrows()).then(|| crate::stages::background::median_in_place(&mut widths));
            let peak_db = crate::stages::background::median_in_place(&mut peaks);
            let eq = physics::dispersion_equivalent(a2, k_min, k_max);
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
            let (a0, na, d0, nd) = page_part;
            let page_db = amp.slice(ndarray::s![a0..a0 + na, d0..d0 + nd]).t().mapv(|a| (20.0 * a.max(1e-12).log10()) as f32);
            (row, thumbnail(&amp, &crop, black, white), page_db)
        })
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

    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    let columns = settings.len().min(COLUMNS);
    for (i, row) in rows.iter_mut().enumerate() {
        let (c, r) = ((i % columns) as u32, (i / columns) as u32);
        let (w, h) = thumbs[i].dimensions();
        row.tile = [GAP + c * (THUMB_W + GAP), HEADER_H + GAP + r * (THUMB_H + LABEL_H + GAP) + LABEL_H, w, h];
    }
    let pipeline_sha256 = config.sha256();
    contact_sheet(&out.join("contact-sheet.png"), &rows, &thumbs, columns, best, &crop, (black, white), &pipeline_sha256)?;
    let report = SweepReport {
        capture: std::path::absolute(capture_path).unwrap_or_else(|_| capture_path.to_path_buf()),
        input_hash: hash::input_hash(capture_path)?,
        pipeline_sha256,
        frame,
        metric: "entropy of normalised intensity (nats, lower is sharper)",
        alines_used: lines.len(),
        best,
        tile_crop: crop,
        rows,
    };
    write_atomically(&out.join("sweep.csv"), |tmp| {
        let mut f = std::io::BufWriter::new(std::fs::File::create(tmp)?);
        writeln!(f, "a2_rad,a3_rad,entropy,fwhm_um,peak_db,gdd_fs2,fused_silica_mm,best")?;
        for (i, r) in report.rows.iter().enumerate() {
            let fwhm = r.fwhm_um.map(|v| format!("{v:.4}")).unwrap_or_default();
            writeln!(
                f,
                "{},{},{:.6},{},{:.3},{:.1},{:.4},{}",
                r.a2_rad,
                r.a3_rad,
                r.entropy,
                fwhm,
                r.peak_db,
                r.gdd_fs2,
                r.fused_silica_mm,
                i == best
            )?;
        }
        f.flush()?;
        Ok(())
    })?;
    write_atomically(&out.join("sweep.json"), |tmp| {
        std::fs::write(tmp, crate::json_doc::pretty(crate::json_doc::DISPERSION_SWEEP, &report))?;
        Ok(())
    })?;
    metric_plot(&out.join("metric.png"), &report, a2.len() > 1, physics::dispersion_equivalent(1.0, k_min, k_max))?;
    let page = sweep_page(&report, page_images, &plan, (!whole).then_some(page_part), config.input.aline_spacing_um.or(capture.scan.aline_spacing_um), floor_db, (black, white));
    write_atomically(&out.join("sweep.html"), |tmp| {
        std::fs::write(tmp, page.as_bytes())?;
        Ok(())
    })?;
    Ok(report)
}

/// sweep.html: every setting as one side of a comparison page, the best
/// (lowest entropy) as A and the setting nearest no correction as B, with
/// the sweep's table (click a row to show it as B, shift-click as A).
fn sweep_page(report: &SweepReport, images: Vec<Array2<f32>>, plan: &Plan, part: Option<(usize, usize, usize, usize)>, aline_spacing_um: Option<f64>, floor_db: f64, (black, white): (f64, f64)) -> String {
    use crate::report::{compare, escape};
    let rows = &report.rows;
    let name = |r: &SweepRow| format!("a2 {} rad, a3 {} rad", r.a2_rad, r.a3_rad);
    let nearest_zero = (0..rows.len()).filter(|&i| i != report.best).min_by(|&a, &b| (rows[a].a2_rad.hypot(rows[a].a3_rad)).total_cmp(&rows[b].a2_rad.hypot(rows[b].a3_rad))).unwrap_or(report.best);
    let sides: Vec<compare::Side> = rows
        .iter()
        .zip(images)
        .map(|(r, image)| compare::Side { name: name(r), images: vec![image], figures: vec![serde_json::json!({ "entropy": r.entropy, "fwhm_um": r.fwhm_um })] })
        .collect();
    let table: String = rows
        .iter()
        .enumerate()
        .map(|(i, r)| {
            format!(
                "<tr data-side=\"{i}\"{}><td>{}</td><td>{}</td><td>{:.6}</td><td>{}</td><td>{:.2}</td><td>{:.0}</td><td>{:.3}</td></tr>",
                if i == report.best { " class=\"best\"" } else { "" },
                r.a2_rad,
                r.a3_rad,
                r.entropy,
                r.fwhm_um.map_or("—".into(), |w| format!("{w:.2}")),
                r.peak_db,
                r.gdd_fs2,
                r.fused_silica_mm
            )
        })
        .collect();
    let (shown, d0) = match part {
        None => ("the whole frame".to_string(), 0),
        Some((a0, na, d0, nd)) => (format!("A-lines {a0}–{} and depth pixels {d0}–{} of each setting (the tiles' crop: all settings' whole frames would exceed {} M pixels)", a0 + na - 1, d0 + nd - 1, PAGE_PIXEL_BUDGET >> 20), d0),
    };
    let intro = format!(
        "<p class=\"note\">Frame {} at {} settings; the page shows {}. Entropy and FWHM are the sweep's, on the {} brightest A-lines ({}); the best row (lowest entropy) is in bold. Click a row to show it as B, shift-click to show it as A.</p>\n<h2>Settings</h2>\n<table class=\"kv\"><tr><th>a2 (rad)</th><th>a3 (rad)</th><th>entropy (nats)</th><th>FWHM (µm)</th><th>peak (dB)</th><th>GDD (fs²)</th><th>fused silica (mm)</th></tr>{table}</table>",
        report.frame,
        rows.len(),
        escape(&shown),
        report.alines_used,
        escape(report.metric)
    );
    compare::comparison_html(&compare::Comparison {
        title: format!("fringeflow dispersion sweep: {}", report.capture.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default()),
        subtitle: format!("Capture {} (input {}), pipeline sha256:{}.", report.capture.display(), report.input_hash, report.pipeline_sha256),
        intro_html: intro,
        sides,
        pick: [report.best, nearest_zero],
        first_depth_um: plan.depth_um(d0),
        depth_spacing_um: plan.summary.depth_spacing_um,
        aline_spacing_um,
        floor_db,
        black_db: black,
        white_db: white,
    })
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

/// B-scan tile: the crop of the frame, depth down, A-lines across, shared
/// grey scale, each pixel `zoom` × `zoom` screen pixels (no smoothing).
fn thumbnail(amplitude: &Array2<f64>, crop: &TileCrop, black: f64, white: f64) -> GrayImage {
    let (a0, d0) = (crop.first_aline, crop.first_depth_pixel);
    let part = amplitude.slice(ndarray::s![a0..a0 + crop.alines, d0..d0 + crop.depth_pixels]);
    let db: Vec<f32> = part.t().iter().map(|a| (20.0 * a.max(1e-12).log10()) as f32).collect();
    let grey: Vec<u8> = grey_levels(&db, black, white, 255.0).into_iter().map(|g| g as u8).collect();
    let tile = GrayImage::from_raw(crop.alines as u32, crop.depth_pixels as u32, grey).expect("image size");
    let z = crop.zoom as u32;
    imageops::resize(&tile, tile.width() * z, tile.height() * z, imageops::FilterType::Nearest)
}

fn err<E: std::fmt::Debug>(e: E) -> anyhow::Error {
    anyhow!("drawing: {e:?}")
}

#[allow(clippy::too_many_arguments)]
fn contact_sheet(path: &Path, rows: &[SweepRow], thumbs: &[GrayImage], columns: usize, best: usize, crop: &TileCrop, levels: (f64, f64), pipeline_sha256: &str) -> Result<()> {
    let lines = rows.len().div_ceil(columns) as u32;
    let width = GAP + columns as u32 * (THUMB_W + GAP);
    let height = HEADER_H + GAP + lines * (THUMB_H + LABEL_H + GAP);
    let mut buf = vec![255u8; (width * height * 3) as usize];
    for (r, t) in rows.iter().zip(thumbs.iter()) {
        let [x, y, _, _] = r.tile;
        for (tx, ty, p) in t.enumerate_pixels() {
            let i = (((y + ty) * width + x + tx) * 3) as usize;
            buf[i..i + 3].fill(p.0[0]);
        }
    }
    {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        let header = format!(
            "Each tile: A-lines {}–{}, depth {:.0}–{:.0} µm in air around the brightest interface ({:.0} µm), {}× enlarged; grey {:.1} to {:.1} dB",
            crop.first_aline,
            crop.first_aline + crop.alines - 1,
            crop.first_depth_um,
            crop.last_depth_um,
            crop.interface_depth_um,
            crop.zoom,
            levels.0,
            levels.1
        );
        root.draw(&Text::new(header, (GAP as i32, 6), ("sans-serif", 15).into_font().color(&BLACK))).map_err(err)?;
        let bar_px = (crop.scale_bar_um / crop.depth_spacing_um * crop.zoom as f64).round() as i32;
        for (i, r) in rows.iter().enumerate() {
            let [x, y, w, h] = r.tile;
            let colour = if i == best { RED } else { BLACK };
            let style = ("sans-serif", 14).into_font().color(&colour);
            root.draw(&Text::new(format!("a2 {:.2}  a3 {:.2} rad", r.a2_rad, r.a3_rad), (x as i32, (y - LABEL_H + 2) as i32), style.clone()))
                .map_err(err)?;
            let fwhm = r.fwhm_um.map(|v| format!("{v:.2} µm")).unwrap_or_else(|| "—".into());
            root.draw(&Text::new(format!("entropy {:.3}  FWHM {fwhm}", r.entropy), (x as i32, (y - LABEL_H + 20) as i32), style))
                .map_err(err)?;
            if i == best {
                root.draw(&Rectangle::new([(x as i32 - 3, y as i32 - 3), ((x + w) as i32 + 2, (y + h) as i32 + 2)], RED.stroke_width(3)))
                    .map_err(err)?;
            }
            // Depth scale: a white bar in the tile's lower left corner.
            if bar_px >= 4 && bar_px + 12 < h as i32 {
                let (bx, by) = (x as i32 + 6, (y + h) as i32 - 6);
                root.draw(&PathElement::new(vec![(bx, by), (bx, by - bar_px)], WHITE.stroke_width(2))).map_err(err)?;
                root.draw(&Text::new(format!("{} µm", crate::measure::plot::tick(&crop.scale_bar_um)), (bx + 5, by - bar_px), ("sans-serif", 13).into_font().color(&WHITE)))
                    .map_err(err)?;
            }
        }
        root.present().map_err(err)?;
    }
    let info = crate::measure::plot::plot_info("dispersion sweep contact sheet: one tile per a2/a3 setting, same crop and grey scale".into(), pipeline_sha256)
        .with("black_db", format!("{}", levels.0))
        .with("white_db", format!("{}", levels.1))
        .with("depth_spacing_um", format!("{}", crop.depth_spacing_um / crop.zoom as f64))
        .with("tile_zoom", format!("{}", crop.zoom));
    write_atomically(path, |tmp| crate::io::png::write_rgb8(tmp, width as usize, height as usize, &buf, &info))
}

/// Metric against the swept coefficient (a2 when it varies, else a3), one
/// line per value of the other, the best setting circled; below it the
/// FWHM of the brightest interface. Along a2 a second axis on top gives the
/// same coefficient as group-delay dispersion (fs²) and as the thickness of
/// unmatched fused silica (mm), both linear in a2 (`per_rad`: their values
/// at a2 = 1 rad).
fn metric_plot(path: &Path, report: &SweepReport, along_a2: bool, per_rad: physics::DispersionEquivalent) -> Result<()> {
    let key = |r: &SweepRow| if along_a2 { r.a2_rad } else { r.a3_rad };
    let other = |r: &SweepRow| if along_a2 { r.a3_rad } else { r.a2_rad };
    let (xmin, xmax) = report.rows.iter().map(key).fold((f64::MAX, f64::MIN), |(a, b), v| (a.min(v), b.max(v)));
    let (ymin, ymax) = report.rows.iter().map(|r| r.entropy).fold((f64::MAX, f64::MIN), |(a, b), v| (a.min(v), b.max(v)));
    let pad_x = ((xmax - xmin) * 0.05).max(0.5);
    // Head room above the curves for the legend.
    let pad_y = ((ymax - ymin) * 0.08).max(1e-3);
    let (x0, x1) = (xmin - pad_x, xmax + pad_x);
    let mut groups: Vec<f64> = report.rows.iter().map(other).collect();
    groups.sort_by(f64::total_cmp);
    groups.dedup();
    let best = &report.rows[report.best];
    let widths: Vec<f64> = report.rows.iter().filter_map(|r| r.fwhm_um).collect();
    let (wmin, wmax) = widths.iter().fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(v), b.max(v)));
    let colour_of = |gi: usize| crate::render::colour::OKABE_ITO[gi % crate::render::colour::OKABE_ITO.len()];
    let info = crate::measure::plot::plot_info(
        format!("dispersion sweep: entropy and FWHM against {}", if along_a2 { "a2" } else { "a3" }),
        &report.pipeline_sha256,
    );
    crate::measure::plot::save_plot(path, 1000, 900, &info, |root| {
        let (upper, lower) = root.split_vertically(540);
        let fwhm_text = best.fwhm_um.map(|w| format!(", FWHM {w:.2} µm")).unwrap_or_default();
        let mut chart = ChartBuilder::on(&upper)
            .caption(
                format!("Dispersion sweep: best a2 {:.2} rad, a3 {:.2} rad (entropy {:.4}{fwhm_text})", best.a2_rad, best.a3_rad, best.entropy),
                ("sans-serif", 22),
            )
            .margin(14)
            .x_label_area_size(40)
            .top_x_label_area_size(if along_a2 { 40 } else { 0 })
            .y_label_area_size(70)
            .build_cartesian_2d(x0..x1, (ymin - pad_y)..(ymax + 4.0 * pad_y))
            .map_err(err)?
            .set_secondary_coord(x0 * per_rad.gdd_fs2..x1 * per_rad.gdd_fs2, 0.0..1.0);
        chart
            .configure_mesh()
            .x_label_formatter(&crate::measure::plot::tick)
            .y_label_formatter(&|v: &f64| format!("{v:.4}"))
            .x_desc(if along_a2 { "a2 (rad)" } else { "a3 (rad)" })
            .y_desc("entropy (nats, lower is sharper)")
            .draw()
            .map_err(err)?;
        if along_a2 {
            let mm_per_fs2 = per_rad.fused_silica_mm / per_rad.gdd_fs2;
            chart
                .configure_secondary_axes()
                .x_label_formatter(&|g: &f64| format!("{} fs² | {} mm", crate::measure::plot::tick(&g.round()), crate::measure::plot::tick(&(g * mm_per_fs2))))
                .x_desc("group-delay dispersion (fs²) | unmatched fused silica (mm)")
                .x_labels(6)
                .draw()
                .map_err(err)?;
        }
        for (gi, g) in groups.iter().enumerate() {
            let colour = colour_of(gi);
            let pts: Vec<(f64, f64)> = report.rows.iter().filter(|r| other(r) == *g).map(|r| (key(r), r.entropy)).collect();
            chart
                .draw_series(LineSeries::new(pts.iter().copied(), colour.stroke_width(2)))
                .map_err(err)?
                .label(format!("{} = {g:.2}", if along_a2 { "a3" } else { "a2" }))
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], colour));
            chart.draw_series(pts.iter().map(|&p| Circle::new(p, 3, colour.filled()))).map_err(err)?;
        }
        chart.draw_series(std::iter::once(Circle::new((key(best), best.entropy), 9, RED.stroke_width(3)))).map_err(err)?;
        if groups.len() > 1 {
            // In the head room kept above the curves.
            chart
                .configure_series_labels()
                .position(SeriesLabelPosition::UpperMiddle)
                .background_style(WHITE.mix(0.85))
                .border_style(BLACK)
                .draw()
                .map_err(err)?;
        }

        if widths.is_empty() {
            return Ok(());
        }
        let wpad = ((wmax - wmin) * 0.08).max(0.05);
        let mut chart = ChartBuilder::on(&lower)
            .caption("FWHM of the brightest interface (median over the bright A-lines)", ("sans-serif", 18))
            .margin(14)
            .x_label_area_size(40)
            .y_label_area_size(70)
            .build_cartesian_2d(x0..x1, (wmin - wpad)..(wmax + wpad))
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_label_formatter(&crate::measure::plot::tick)
            .y_label_formatter(&crate::measure::plot::tick)
            .x_desc(if along_a2 { "a2 (rad)" } else { "a3 (rad)" })
            .y_desc("FWHM (µm, air)")
            .draw()
            .map_err(err)?;
        for (gi, g) in groups.iter().enumerate() {
            let colour = colour_of(gi);
            let pts: Vec<(f64, f64)> = report.rows.iter().filter(|r| other(r) == *g).filter_map(|r| r.fwhm_um.map(|w| (key(r), w))).collect();
            chart.draw_series(LineSeries::new(pts.iter().copied(), colour.stroke_width(2))).map_err(err)?;
            chart.draw_series(pts.iter().map(|&p| Circle::new(p, 3, colour.filled()))).map_err(err)?;
        }
        if let Some(w) = best.fwhm_um {
            chart.draw_series(std::iter::once(Circle::new((key(best), w), 9, RED.stroke_width(3)))).map_err(err)?;
        }
        Ok(())
    })
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
