//! The dispersion sweep drawn and written: contact-sheet.png (one tile per
//! setting, same crop and grey scale, the best framed), sweep.csv and
//! sweep.json (the table), metric.png (entropy and FWHM against the swept
//! coefficient) and sweep.html (every setting on a comparison page: any
//! two side by side or blinking under one window/level, and their
//! difference). The numbers come from `calibration::sweep`.

use anyhow::{anyhow, Context, Result};
use image::{imageops, GrayImage};
use ndarray::Array2;
use plotters::prelude::*;
use std::io::Write;
use std::path::Path;

use crate::calibration::sweep::{Sweep, SweepReport, SweepRow, TileCrop, PAGE_PIXEL_BUDGET, THUMB_H, THUMB_W};
use crate::io::staging::write_atomically;
use crate::physics;
use crate::stages::log_compression::grey_levels;

const LABEL_H: u32 = 40;
const GAP: u32 = 8;
const COLUMNS: usize = 6;
/// Height of the sheet's header line (what the tiles show).
const HEADER_H: u32 = 26;

/// Writes `contact-sheet.png`, `sweep.csv`, `sweep.json`, `metric.png` and
/// `sweep.html` into `out`; returns the table as sweep.json holds it.
pub fn write(out: &Path, sweep: Sweep) -> Result<SweepReport> {
    let Sweep { mut report, tiles_db, page_db, page_part, page_first_depth_um, depth_spacing_um, aline_spacing_um, levels, floor_db, along_a2, per_rad } = sweep;
    let (black, white) = levels;
    let thumbs: Vec<GrayImage> = tiles_db.iter().map(|t| thumbnail(t, &report.tile_crop, black, white)).collect();
    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    let columns = report.rows.len().min(COLUMNS);
    for (i, row) in report.rows.iter_mut().enumerate() {
        let (c, r) = ((i % columns) as u32, (i / columns) as u32);
        let (w, h) = thumbs[i].dimensions();
        row.tile = [GAP + c * (THUMB_W + GAP), HEADER_H + GAP + r * (THUMB_H + LABEL_H + GAP) + LABEL_H, w, h];
    }
    contact_sheet(&out.join("contact-sheet.png"), &report.rows, &thumbs, columns, report.best, &report.tile_crop, levels, &report.pipeline_sha256)?;
    let best = report.best;
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
        std::fs::write(tmp, crate::io::json_doc::pretty(crate::io::json_doc::DISPERSION_SWEEP, &report))?;
        Ok(())
    })?;
    metric_plot(&out.join("metric.png"), &report, along_a2, per_rad)?;
    let page = sweep_page(&report, page_db, page_part, (page_first_depth_um, depth_spacing_um), aline_spacing_um, floor_db, levels);
    write_atomically(&out.join("sweep.html"), |tmp| {
        std::fs::write(tmp, page.as_bytes())?;
        Ok(())
    })?;
    Ok(report)
}

/// sweep.html: every setting as one side of a comparison page, the best
/// (lowest entropy) as A and the setting nearest no correction as B, with
/// the sweep's table (click a row to show it as B, shift-click as A).
fn sweep_page(report: &SweepReport, images: Vec<Array2<f32>>, part: Option<(usize, usize, usize, usize)>, (first_depth_um, depth_spacing_um): (f64, f64), aline_spacing_um: Option<f64>, floor_db: f64, (black, white): (f64, f64)) -> String {
    use super::{compare, escape};
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
    let shown = match part {
        None => "the whole frame".to_string(),
        Some((a0, na, d0, nd)) => format!("A-lines {a0}–{} and depth pixels {d0}–{} of each setting (the tiles' crop: all settings' whole frames would exceed {} M pixels)", a0 + na - 1, d0 + nd - 1, PAGE_PIXEL_BUDGET >> 20),
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
        first_depth_um,
        depth_spacing_um,
        aline_spacing_um,
        floor_db,
        black_db: black,
        white_db: white,
    })
}

/// B-scan tile: the crop of the frame, depth down, A-lines across, shared
/// grey scale, each pixel `zoom` × `zoom` screen pixels (no smoothing).
fn thumbnail(tile_db: &Array2<f32>, crop: &TileCrop, black: f64, white: f64) -> GrayImage {
    let db: Vec<f32> = tile_db.iter().copied().collect();
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
                root.draw(&Text::new(format!("{} µm", crate::plot::tick(&crop.scale_bar_um)), (bx + 5, by - bar_px), ("sans-serif", 13).into_font().color(&WHITE)))
                    .map_err(err)?;
            }
        }
        root.present().map_err(err)?;
    }
    let info = crate::plot::plot_info("dispersion sweep contact sheet: one tile per a2/a3 setting, same crop and grey scale".into(), pipeline_sha256)
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
    let info = crate::plot::plot_info(
        format!("dispersion sweep: entropy and FWHM against {}", if along_a2 { "a2" } else { "a3" }),
        &report.pipeline_sha256,
    );
    crate::plot::save_plot(path, 1000, 900, &info, |root| {
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
            .x_label_formatter(&crate::plot::tick)
            .y_label_formatter(&|v: &f64| format!("{v:.4}"))
            .x_desc(if along_a2 { "a2 (rad)" } else { "a3 (rad)" })
            .y_desc("entropy (nats, lower is sharper)")
            .draw()
            .map_err(err)?;
        if along_a2 {
            let mm_per_fs2 = per_rad.fused_silica_mm / per_rad.gdd_fs2;
            chart
                .configure_secondary_axes()
                .x_label_formatter(&|g: &f64| format!("{} fs² | {} mm", crate::plot::tick(&g.round()), crate::plot::tick(&(g * mm_per_fs2))))
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
        fwhm_panel(&lower, report, along_a2, (x0, x1), &groups, (wmin, wmax))
    })
}

/// The lower panel of the metric plot: FWHM of the brightest interface
/// against the swept coefficient, one line per value of the other, the best
/// setting circled.
fn fwhm_panel(lower: &DrawingArea<BitMapBackend<'_>, plotters::coord::Shift>, report: &SweepReport, along_a2: bool, (x0, x1): (f64, f64), groups: &[f64], (wmin, wmax): (f64, f64)) -> Result<()> {
    let key = |r: &SweepRow| if along_a2 { r.a2_rad } else { r.a3_rad };
    let other = |r: &SweepRow| if along_a2 { r.a3_rad } else { r.a2_rad };
    let colour_of = |gi: usize| crate::render::colour::OKABE_ITO[gi % crate::render::colour::OKABE_ITO.len()];
    let best = &report.rows[report.best];
    let wpad = ((wmax - wmin) * 0.08).max(0.05);
    let mut chart = ChartBuilder::on(lower)
        .caption("FWHM of the brightest interface (median over the bright A-lines)", ("sans-serif", 18))
        .margin(14)
        .x_label_area_size(40)
        .y_label_area_size(70)
        .build_cartesian_2d(x0..x1, (wmin - wpad)..(wmax + wpad))
        .map_err(err)?;
    chart
        .configure_mesh()
        .x_label_formatter(&crate::plot::tick)
        .y_label_formatter(&crate::plot::tick)
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
}

