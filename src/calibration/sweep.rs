//! Dispersion sweep: one frame reconstructed for every a2/a3 on a grid, with
//! a contact sheet of thumbnails, a table of metrics (CSV and JSON) and a
//! plot of the sharpness metric against the coefficient.
//!
//! The metric is the same entropy, on the same bright A-lines, that
//! `dispersion = "auto"` minimises, so the sweep's best row and the automatic
//! estimate can be compared directly. The FWHM and peak of the brightest
//! interface are measured on those A-lines with 8× zero padding.

use anyhow::{anyhow, bail, Context, Result};
use image::{imageops, GrayImage, RgbImage};
use ndarray::{Array2, Axis};
use plotters::prelude::*;
use rayon::prelude::*;
use serde::Serialize;
use std::io::Write;
use std::path::{Path, PathBuf};

use super::dispersion::{brightest_lines, entropy, FringeSet};
use crate::analysis;
use crate::io::capture::Capture;
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
    pub rows: Vec<SweepRow>,
}

/// Runs the sweep and writes `contact-sheet.png`, `sweep.csv`, `sweep.json`
/// and `metric.png` into `out`.
pub fn sweep(capture_path: &Path, config: &PipelineConfig, frame: usize, a2: &[f64], a3: &[f64], out: &Path) -> Result<SweepReport> {
    let settings: Vec<(f64, f64)> = a3.iter().flat_map(|&b| a2.iter().map(move |&a| (a, b))).collect();
    if settings.len() > MAX_SETTINGS {
        bail!("{} settings, more than {MAX_SETTINGS}", settings.len());
    }
    let capture = Capture::open(capture_path, &config.input)?;
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

    // Grey scale shared by all thumbnails, from the uncorrected frame.
    let lc = &config.log_compression;
    let (black, white) = match lc.mapping {
        GreyMapping::Fixed => (lc.black_db, lc.white_db),
        GreyMapping::Auto => {
            let amp = frame_set.amplitudes(0.0, 0.0);
            let db: Vec<f32> = amp.iter().map(|a| (20.0 * a.max(1e-12).log10()) as f32).collect();
            let floor = crate::stages::log_compression::noise_floor_db(&db);
            crate::stages::log_compression::auto_levels(&db, floor, lc.floor_offset_db, lc.dynamic_range_db, lc.white_percentile)
        }
    };

    let results: Vec<(SweepRow, GrayImage)> = settings
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
            (row, thumbnail(&amp, black, white))
        })
        .collect();
    let (mut rows, thumbs): (Vec<SweepRow>, Vec<GrayImage>) = results.into_iter().unzip();
    let best = rows.iter().enumerate().min_by(|a, b| a.1.entropy.total_cmp(&b.1.entropy)).map(|(i, _)| i).unwrap_or(0);

    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    let columns = settings.len().min(COLUMNS);
    for (i, row) in rows.iter_mut().enumerate() {
        let (c, r) = ((i % columns) as u32, (i / columns) as u32);
        row.tile = [GAP + c * (THUMB_W + GAP), GAP + r * (THUMB_H + LABEL_H + GAP) + LABEL_H, THUMB_W, THUMB_H];
    }
    contact_sheet(&out.join("contact-sheet.png"), &rows, &thumbs, columns, best)?;
    let report = SweepReport {
        capture: std::path::absolute(capture_path).unwrap_or_else(|_| capture_path.to_path_buf()),
        input_hash: hash::input_hash(capture_path)?,
        pipeline_sha256: config.sha256(),
        frame,
        metric: "entropy of normalised intensity (nats, lower is sharper)",
        alines_used: lines.len(),
        best,
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
        std::fs::write(tmp, serde_json::to_vec_pretty(&report)?)?;
        Ok(())
    })?;
    metric_plot(&out.join("metric.png"), &report, a2.len() > 1)?;
    Ok(report)
}

/// B-scan thumbnail: depth down, A-lines across, shared grey scale.
fn thumbnail(amplitude: &Array2<f64>, black: f64, white: f64) -> GrayImage {
    let (alines, depth) = amplitude.dim();
    let db: Vec<f32> = amplitude.t().iter().map(|a| (20.0 * a.max(1e-12).log10()) as f32).collect();
    let grey: Vec<u8> = grey_levels(&db, black, white, 255.0).into_iter().map(|g| g as u8).collect();
    let full = GrayImage::from_raw(alines as u32, depth as u32, grey).expect("image size");
    imageops::resize(&full, THUMB_W, THUMB_H, imageops::FilterType::Triangle)
}

fn err<E: std::fmt::Debug>(e: E) -> anyhow::Error {
    anyhow!("drawing: {e:?}")
}

fn contact_sheet(path: &Path, rows: &[SweepRow], thumbs: &[GrayImage], columns: usize, best: usize) -> Result<()> {
    let lines = rows.len().div_ceil(columns) as u32;
    let width = GAP + columns as u32 * (THUMB_W + GAP);
    let height = GAP + lines * (THUMB_H + LABEL_H + GAP);
    let mut buf = vec![255u8; (width * height * 3) as usize];
    {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
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
        }
        root.present().map_err(err)?;
    }
    let mut sheet = RgbImage::from_raw(width, height, buf).expect("sheet size");
    for (r, t) in rows.iter().zip(thumbs.iter()) {
        let [x, y, _, _] = r.tile;
        for (tx, ty, p) in t.enumerate_pixels() {
            sheet.put_pixel(x + tx, y + ty, image::Rgb([p.0[0]; 3]));
        }
    }
    write_atomically(path, |tmp| {
        sheet.save_with_format(tmp, image::ImageFormat::Png).map_err(|e| anyhow!("writing {}: {e}", path.display()))
    })
}

/// Metric against the swept coefficient (a2 when it varies, else a3), one
/// line per value of the other, the best setting circled.
fn metric_plot(path: &Path, report: &SweepReport, along_a2: bool) -> Result<()> {
    let key = |r: &SweepRow| if along_a2 { r.a2_rad } else { r.a3_rad };
    let other = |r: &SweepRow| if along_a2 { r.a3_rad } else { r.a2_rad };
    let (xmin, xmax) = report.rows.iter().map(key).fold((f64::MAX, f64::MIN), |(a, b), v| (a.min(v), b.max(v)));
    let (ymin, ymax) = report.rows.iter().map(|r| r.entropy).fold((f64::MAX, f64::MIN), |(a, b), v| (a.min(v), b.max(v)));
    let pad_x = ((xmax - xmin) * 0.05).max(0.5);
    let pad_y = ((ymax - ymin) * 0.08).max(1e-3);
    let mut groups: Vec<f64> = report.rows.iter().map(other).collect();
    groups.sort_by(f64::total_cmp);
    groups.dedup();
    let best = &report.rows[report.best];
    write_atomically(path, |tmp| {
        let root = BitMapBackend::new(tmp, (1000, 720)).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(
                format!("Dispersion sweep: best a2 {:.2} rad, a3 {:.2} rad (entropy {:.4})", best.a2_rad, best.a3_rad, best.entropy),
                ("sans-serif", 22),
            )
            .margin(14)
            .x_label_area_size(40)
            .y_label_area_size(70)
            .build_cartesian_2d((xmin - pad_x)..(xmax + pad_x), (ymin - pad_y)..(ymax + pad_y))
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_label_formatter(&crate::measure::plot::tick)
            .y_label_formatter(&|v: &f64| format!("{v:.4}"))
            .x_desc(if along_a2 { "a2 (rad)" } else { "a3 (rad)" })
            .y_desc("entropy (nats, lower is sharper)")
            .draw()
            .map_err(err)?;
        for (gi, g) in groups.iter().enumerate() {
            let colour = crate::render::colour::OKABE_ITO[gi % crate::render::colour::OKABE_ITO.len()].to_rgba();
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
            chart.configure_series_labels().background_style(WHITE.mix(0.8)).border_style(BLACK).draw().map_err(err)?;
        }
        root.present().map_err(err)?;
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
