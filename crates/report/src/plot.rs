//! Plots of measurements (plotters; PNG through the bitmap backend, SVG for
//! pages; system sans-serif font via fontconfig). Every plot is drawn into memory and written by
//! `io::png` with its provenance in tEXt chunks (tool version, what it
//! shows, the pipeline hash), atomically.

use anyhow::{anyhow, Result};
use plotters::coord::Shift;
use plotters::prelude::*;
use std::path::Path;

use crate::measure::mirror::MirrorMeasurement;
use crate::measure::rolloff::{model, RolloffReport};
use crate::io::png::PngInfo;
use crate::io::staging::write_atomically;
use crate::render::colour::OKABE_ITO;

/// A plot drawn the same way on any plotters backend: PNG for files and
/// SVG for pages.
pub trait Figure {
    /// Width and height in pixels (PNG) or user units (SVG).
    fn size(&self) -> (u32, u32);
    /// Provenance: the PNG's tEXt chunks, the SVG's metadata.
    fn info(&self) -> PngInfo;
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<()>;
}

/// Writes `figure` to `path` (temp file and rename): SVG when the name ends
/// in `.svg`, else an RGB PNG carrying the figure's provenance.
pub fn save_figure(path: &Path, figure: &impl Figure) -> Result<()> {
    if path.extension().is_some_and(|e| e.eq_ignore_ascii_case("svg")) {
        let svg = svg_string(figure)?;
        return write_atomically(path, |tmp| Ok(std::fs::write(tmp, svg.as_bytes())?));
    }
    let (width, height) = figure.size();
    save_plot(path, width, height, &figure.info(), |root| figure.draw(root))
}

/// Draws a `width` × `height` PNG with `draw` and writes it to `path`
/// (temp file and rename) carrying `info`.
pub fn save_plot<F>(path: &Path, width: u32, height: u32, info: &PngInfo, draw: F) -> Result<()>
where
    F: FnOnce(&DrawingArea<BitMapBackend<'_>, Shift>) -> Result<()>,
{
    let mut buf = vec![255u8; (width * height * 3) as usize];
    {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        draw(&root)?;
        root.present().map_err(err)?;
    }
    write_atomically(path, |tmp| crate::io::png::write_rgb8(tmp, width as usize, height as usize, &buf, info))
}

/// Marks an SVG as a fringeflow plot (report.html embeds the SVG files of
/// its folder that carry it).
pub const SVG_MARK: &str = "data-fringeflow-plot";

/// The figure as an SVG document, its provenance in `<title>` and
/// `<desc>` and the root element marked with [`SVG_MARK`].
pub fn svg_string(figure: &impl Figure) -> Result<String> {
    let (width, height) = figure.size();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        figure.draw(&root)?;
        root.present().map_err(err)?;
    }
    let info = figure.info();
    // Provenance as "keyword: text" lines in <desc> (elements such as
    // <meta> would break out of an SVG inlined in HTML).
    let lines: Vec<String> = info.text.iter().map(|(k, v)| format!("{k}: {v}")).collect();
    let head = format!(
        "<title>{}</title><desc>{}</desc>",
        crate::report::escape(info.get("Description").unwrap_or("fringeflow plot")),
        crate::report::escape(&lines.join("\n"))
    );
    let open = svg.find("<svg").ok_or_else(|| anyhow!("plotters wrote no <svg> element"))?;
    let close = open + svg[open..].find('>').ok_or_else(|| anyhow!("unterminated <svg> element"))?;
    svg.insert_str(close + 1, &head);
    svg.insert_str(close, &format!(" {SVG_MARK}=\"1\""));
    Ok(svg)
}

/// Provenance of a measurement plot.
pub fn plot_info(description: String, pipeline_sha256: &str) -> PngInfo {
    PngInfo::new(description).with("pipeline_sha256", pipeline_sha256)
}

pub const WIDTH: u32 = 1000;
pub const HEIGHT: u32 = 720;

/// A tick label without pointless decimals: 220 not 220.0, 0.5 not 0.50.
pub fn tick(v: &f64) -> String {
    let t = format!("{v:.3}");
    let t = t.trim_end_matches('0').trim_end_matches('.');
    if t == "-0" { "0".into() } else { t.to_string() }
}

fn err<E: std::fmt::Debug>(e: E) -> anyhow::Error {
    anyhow!("drawing plot: {e:?}")
}

/// Height of the PSF figure: spectrum, linear PSF and dB PSF panels.
pub const PSF_HEIGHT: u32 = 1020;

/// The source spectrum (baseline removed, normalised) with the Gaussian in
/// k of the measured centre and FWHM above; the PSF around its peak in
/// linear amplitude (normalised) with the FWHM marked; and in dB with the
/// noise floor and the highest side lobe.
pub fn psf(path: &Path, m: &MirrorMeasurement, pipeline_sha256: &str) -> Result<()> {
    save_figure(path, &PsfFigure { m, pipeline_sha256 })
}

/// The PSF figure of [`psf`], for any backend.
pub struct PsfFigure<'a> {
    pub m: &'a MirrorMeasurement,
    pub pipeline_sha256: &'a str,
}

impl Figure for PsfFigure<'_> {
    fn size(&self) -> (u32, u32) {
        (WIDTH, PSF_HEIGHT)
    }
    fn info(&self) -> PngInfo {
        let (m, pipeline_sha256) = (self.m, self.pipeline_sha256);

    plot_info(format!("axial PSF of {} frame {}: source spectrum, linear and dB profiles", m.capture, m.frame), pipeline_sha256)
        .with("fwhm_um_air", format!("{:.4}", m.fwhm_um_air))
        .with("depth_spacing_um", format!("{}", m.depth_spacing_um))
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<()> {
        let m = self.m;

        let (top, rest) = root.split_vertically(300);
        let (upper, lower) = rest.split_vertically((PSF_HEIGHT - 300) / 2);
        spectrum_panel(&top, m)?;
        let peak = m.profile.iter().copied().fold(f64::MIN, f64::max);
        let span = (12.0 * m.fwhm_um_air).max(20.0);
        let (z0, z1) = (m.peak_depth_um - span, m.peak_depth_um + span);
        let pts: Vec<(f64, f64)> = m
            .depth_um
            .iter()
            .zip(m.profile.iter())
            .filter(|(z, _)| **z >= z0 && **z <= z1)
            .map(|(z, a)| (*z, *a / peak))
            .collect();
        let half = (m.peak_depth_um - m.fwhm_um_air / 2.0, m.peak_depth_um + m.fwhm_um_air / 2.0);

        let mut chart = ChartBuilder::on(&upper)
            .caption(
                format!("Axial PSF: FWHM {:.2} µm in air (limit {:.2} µm, ratio {:.3})", m.fwhm_um_air, m.source.coherence_length_um, m.fwhm_over_limit),
                ("sans-serif", 20),
            )
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(z0..z1, 0.0..1.05)
            .map_err(err)?;
        chart.configure_mesh().x_label_formatter(&tick).y_label_formatter(&tick).x_desc("depth (µm, air)").y_desc("amplitude / peak").draw().map_err(err)?;
        chart.draw_series(LineSeries::new(pts.iter().copied(), &OKABE_ITO[0])).map_err(err)?;
        chart
            .draw_series(std::iter::once(PathElement::new(vec![(half.0, 0.5), (half.1, 0.5)], OKABE_ITO[1].stroke_width(2))))
            .map_err(err)?;
        chart
            .draw_series(std::iter::once(Text::new(
                format!("FWHM {:.2} µm", m.fwhm_um_air),
                (half.1 + 0.03 * (z1 - z0), 0.52),
                ("sans-serif", 14).into_font().color(&OKABE_ITO[1]),
            )))
            .map_err(err)?;

        let floor_db = (m.noise_floor_db - m.peak_db - 10.0).clamp(-100.0, -20.0);
        let mut chart = ChartBuilder::on(&lower)
            .caption(
                format!(
                    "dB: highest side lobe {}, SNR {:.1} dB",
                    match (m.side_lobe_db, m.side_lobe_above_noise) {
                        (Some(s), true) => format!("{s:.1} dB"),
                        _ => "below the noise".into(),
                    },
                    m.peak_over_noise_sd_db
                ),
                ("sans-serif", 20),
            )
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(z0..z1, floor_db..3.0)
            .map_err(err)?;
        chart.configure_mesh().x_label_formatter(&tick).y_label_formatter(&tick).x_desc("depth (µm, air)").y_desc("dB re peak").draw().map_err(err)?;
        chart
            .draw_series(LineSeries::new(pts.iter().map(|(z, a)| (*z, (20.0 * a.log10()).max(floor_db))), &OKABE_ITO[0]))
            .map_err(err)?;
        chart
            .draw_series(std::iter::once(PathElement::new(vec![(half.0, -6.02), (half.1, -6.02)], OKABE_ITO[1].stroke_width(2))))
            .map_err(err)?;
        // The mean noise floor (grey) and the highest side lobe's level
        // (green, when it stands above the noise), across the panel.
        let noise = m.noise_floor_db - m.peak_db;
        let mut level = |db: f64, colour: RGBColor, label: String| -> Result<()> {
            if db > floor_db {
                chart.draw_series(std::iter::once(PathElement::new(vec![(z0, db), (z1, db)], colour.stroke_width(1)))).map_err(err)?;
                chart.draw_series(std::iter::once(Text::new(label, (z0 + 0.02 * (z1 - z0), db - 0.8), ("sans-serif", 14).into_font().color(&colour)))).map_err(err)?;
            }
            Ok(())
        };
        level(noise, RGBColor(110, 110, 110), format!("noise floor {noise:.1} dB"))?;
        if let (Some(s), true) = (m.side_lobe_db, m.side_lobe_above_noise) {
            level(-s.abs(), OKABE_ITO[2], format!("highest side lobe {:.1} dB", -s.abs()))?;
        }
        Ok(())
    
    }
}

/// The measured source spectrum against wavelength (baseline removed,
/// normalised to its peak) and the Gaussian in wavenumber with the
/// measured centre and FWHM — the spectrum the coherence-length limit
/// assumes.
fn spectrum_panel<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>, m: &MirrorMeasurement) -> Result<()> {
    let wl = &m.spectrum_wavelength_nm;
    let (lo, hi) = wl.iter().fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(v), b.max(v)));
    if wl.len() < 2 || hi.partial_cmp(&lo) != Some(std::cmp::Ordering::Greater) {
        return Ok(());
    }
    let peak = m.spectrum_counts.iter().copied().fold(f64::MIN, f64::max).max(f64::MIN_POSITIVE);
    let k0 = crate::physics::wavenumber_per_um(m.source.centre_nm);
    let dk = 2.0 * std::f64::consts::PI * (m.source.fwhm_nm * 1e-3) / (m.source.centre_nm * 1e-3).powi(2);
    let gauss = |l: f64| (-4.0 * std::f64::consts::LN_2 * ((crate::physics::wavenumber_per_um(l) - k0) / dk).powi(2)).exp();
    let ymin = m.spectrum_counts.iter().map(|c| c / peak).fold(0.0, f64::min).max(-0.2);
    let mut chart = ChartBuilder::on(area)
        .caption(
            format!(
                "Source spectrum: centre {:.1} nm, FWHM {:.1} nm (half-maximum crossings), Gaussian in k limit {:.2} µm",
                m.source.centre_nm, m.source.fwhm_nm, m.source.coherence_length_um
            ),
            ("sans-serif", 18),
        )
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(56)
        .build_cartesian_2d(lo..hi, ymin..1.12)
        .map_err(err)?;
    chart.configure_mesh().x_label_formatter(&tick).y_label_formatter(&tick).x_desc("wavelength (nm)").y_desc("counts / peak").draw().map_err(err)?;
    chart
        .draw_series(LineSeries::new(wl.iter().zip(m.spectrum_counts.iter()).map(|(&l, &c)| (l, c / peak)), &OKABE_ITO[0]))
        .map_err(err)?
        .label("measured, baseline removed")
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], OKABE_ITO[0]));
    let n = 400;
    chart
        .draw_series(LineSeries::new((0..=n).map(|i| lo + (hi - lo) * i as f64 / n as f64).map(|l| (l, gauss(l))), OKABE_ITO[4].stroke_width(2)))
        .map_err(err)?
        .label("Gaussian in k, same centre and FWHM")
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], OKABE_ITO[4].stroke_width(2)));
    // The legend goes in the upper corner farther from the spectrum's
    // centre, where the curves are low.
    let position = if m.source.centre_nm > 0.5 * (lo + hi) { SeriesLabelPosition::UpperLeft } else { SeriesLabelPosition::UpperRight };
    chart
        .configure_series_labels()
        .position(position)
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .label_font(("sans-serif", 14))
        .draw()
        .map_err(err)?;
    Ok(())
}

/// Peak dB relative to the fit's zero-delay value against depth, with the
/// fitted model, the −6 dB depth labelled, the sensitivity (when the
/// attenuation was given) and the maximum (Nyquist) imaging depth.
pub fn rolloff(path: &Path, r: &RolloffReport, pipeline_sha256: &str) -> Result<()> {
    save_figure(path, &RolloffFigure { r, pipeline_sha256 })
}

/// The roll-off figure of [`rolloff`], for any backend.
pub struct RolloffFigure<'a> {
    pub r: &'a RolloffReport,
    pub pipeline_sha256: &'a str,
}

impl Figure for RolloffFigure<'_> {
    fn size(&self) -> (u32, u32) {
        (WIDTH, HEIGHT)
    }
    fn info(&self) -> PngInfo {
        let r = self.r;
        plot_info(format!("roll-off: peak dB against depth of {} mirror captures", r.points.len()), self.pipeline_sha256)
            .with("rolloff_6db_depth_um", format!("{:.1}", r.fit.rolloff_6db_depth_um))
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<()> {
        let r = self.r;
        // Nyquist depth π/(2·δk) in air for a camera pixel δk wide in
        // wavenumber, the same as λ0²/(4·δλ) (common practice; physics::max_depth_um).
        let max_depth_um = std::f64::consts::PI / (2.0 * r.fit.pixel_dk_per_um);
        let a0 = r.fit.a0_db;

        let zmax = r.points.iter().map(|p| p.depth_um).fold(0.0, f64::max).max(r.fit.rolloff_6db_depth_um) * 1.15;
        let ymax = 3.0;
        let ymin = r.points.iter().map(|p| p.peak_db - a0).fold(f64::MAX, f64::min).min(-6.0) - 6.0;
        let sensitivity = r.sensitivity_db.map(|s| format!(", sensitivity {s:.1} dB")).unwrap_or_default();
        let mut chart = ChartBuilder::on(root)
            .caption(
                format!("Roll-off: −6 dB at {:.0} µm, maximum depth {:.0} µm{sensitivity} (fit RMS {:.2} dB)", r.fit.rolloff_6db_depth_um, max_depth_um, r.fit.rms_residual_db),
                ("sans-serif", 20),
            )
            .margin(14)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..zmax, ymin..ymax)
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc("mirror depth (µm, air)")
            .y_desc(format!("peak, dB re the zero-delay fit ({a0:.1} dB)"))
            .draw()
            .map_err(err)?;
        let curve = (0..=400).map(|i| {
            let z = zmax * i as f64 / 400.0;
            (z, 20.0 * model(z, r.fit.pixel_dk_per_um, r.fit.sigma_k_per_um).max(1e-9).log10())
        });
        chart.draw_series(LineSeries::new(curve, &OKABE_ITO[0])).map_err(err)?;
        chart
            .draw_series(r.points.iter().map(|p| Circle::new((p.depth_um, p.peak_db - a0), 5, OKABE_ITO[1].filled())))
            .map_err(err)?;
        let z6 = r.fit.rolloff_6db_depth_um;
        chart
            .draw_series(std::iter::once(PathElement::new(vec![(z6, ymin), (z6, ymax)], BLACK.stroke_width(1))))
            .map_err(err)?;
        chart
            .draw_series(std::iter::once(PathElement::new(vec![(0.0, -6.02), (zmax, -6.02)], BLACK.stroke_width(1))))
            .map_err(err)?;
        chart
            .draw_series(std::iter::once(Text::new(format!("−6 dB at {z6:.0} µm"), (z6 + 0.01 * zmax, ymin + 0.06 * (ymax - ymin)), ("sans-serif", 16).into_font())))
            .map_err(err)?;
        Ok(())
    
    }
}

/// A wavelength calibration: the calibrated map and the nominal one
/// against pixel (top), their difference (middle) and the residual of the
/// polynomial fit, measured minus fitted, over the fitted pixels (bottom).
pub fn wavelength_map(path: &Path, cal: &crate::calibration::wavelength::WavelengthCalibration, nominal: Option<&[f64]>, pipeline_sha256: &str) -> Result<()> {
    save_figure(path, &WavelengthMapFigure { cal, nominal, nominal_name: "the capture's map or the pipeline's", pipeline_sha256 })
}

/// The calibration figure of [`wavelength_map`], for any backend. Without
/// the per-pixel measurement (a calibration read back from its file) the
/// residual panel gives the RMS only.
pub struct WavelengthMapFigure<'a> {
    pub cal: &'a crate::calibration::wavelength::WavelengthCalibration,
    pub nominal: Option<&'a [f64]>,
    /// What the nominal map is, for the legend.
    pub nominal_name: &'a str,
    pub pipeline_sha256: &'a str,
}

impl Figure for WavelengthMapFigure<'_> {
    fn size(&self) -> (u32, u32) {
        // Without the per-pixel measurement the residual panel is left out.
        (WIDTH, if self.cal.measured_nm.is_empty() { 680 } else { 1020 })
    }
    fn info(&self) -> PngInfo {
        let cal = self.cal;
        plot_info(format!("wavelength calibration from {} mirror capture(s): map, change from nominal, fit residual", cal.inputs.len()), self.pipeline_sha256)
            .with("fit_residual_rms_nm", format!("{:.6}", cal.fit_residual_rms_nm))
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<()> {
        let cal = self.cal;
        let n = cal.pixels;
        let nominal = self.nominal.filter(|m| m.len() == n);
        let [p0, p1] = cal.fit_pixels;
        let residual: Vec<(f64, f64)> = (p0..=p1)
            .filter(|&p| cal.measured_nm.get(p).is_some_and(|v| v.is_finite()))
            .map(|p| (p as f64, cal.measured_nm[p] - cal.wavelength_nm[p]))
            .collect();

        let areas = root.split_evenly((if residual.is_empty() { 2 } else { 3 }, 1));
        let xmax = (n - 1) as f64;
        self.draw_map(&areas[0], nominal, residual.is_empty())?;
        self.draw_difference(&areas[1], nominal, xmax)?;
        if !residual.is_empty() {
            self.draw_residual(&areas[2], &residual, xmax)?;
        }
        Ok(())
    }
}

impl WavelengthMapFigure<'_> {
    /// The calibrated map over the nominal one, with a legend.
    fn draw_map<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>, nominal: Option<&[f64]>, show_rms: bool) -> Result<()> {
        let cal = self.cal;
        let n = cal.pixels;
        let xmax = (n - 1) as f64;
        let (lo, hi) = cal.wavelength_nm.iter().chain(nominal.unwrap_or(&[]).iter()).fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(v), b.max(v)));
        let pad = ((hi - lo) * 0.04).max(0.1);
        let mut chart = ChartBuilder::on(area)
            .caption(
                format!(
                    "Wavelength map: {:.2}–{:.2} nm over {n} pixels (degree {}){}",
                    cal.wavelength_nm[0],
                    cal.wavelength_nm[n - 1],
                    cal.polynomial_nm.len() - 1,
                    if show_rms { format!(", fit RMS {:.4} nm", cal.fit_residual_rms_nm) } else { String::new() }
                ),
                ("sans-serif", 20),
            )
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..xmax, (lo - pad)..(hi + pad))
            .map_err(err)?;
        chart.configure_mesh().x_label_formatter(&tick).y_label_formatter(&tick).x_desc("camera pixel").y_desc("wavelength (nm)").draw().map_err(err)?;
        if let Some(nom) = nominal {
            chart
                .draw_series(LineSeries::new(nom.iter().enumerate().map(|(p, &l)| (p as f64, l)), OKABE_ITO[1].stroke_width(3)))
                .map_err(err)?
                .label(format!("nominal ({})", self.nominal_name))
                .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], OKABE_ITO[1].stroke_width(3)));
        }
        chart
            .draw_series(LineSeries::new(cal.wavelength_nm.iter().enumerate().map(|(p, &l)| (p as f64, l)), OKABE_ITO[0].stroke_width(1)))
            .map_err(err)?
            .label("calibrated (fit)")
            .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], OKABE_ITO[0]));
        // The map runs corner to corner; the legend sits in the empty corner.
        let rising = cal.wavelength_nm[n - 1] > cal.wavelength_nm[0];
        chart
            .configure_series_labels()
            .position(if rising { SeriesLabelPosition::UpperLeft } else { SeriesLabelPosition::LowerLeft })
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .label_font(("sans-serif", 14))
            .draw()
            .map_err(err)?;

        Ok(())
    }

    /// Calibrated minus nominal map, or a note that there is no nominal one.
    fn draw_difference<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>, nominal: Option<&[f64]>, xmax: f64) -> Result<()> {
        let cal = self.cal;
        match nominal {
            Some(nom) => {
                let diff: Vec<(f64, f64)> = cal.wavelength_nm.iter().zip(nom.iter()).enumerate().map(|(p, (c, m))| (p as f64, c - m)).collect();
                let (dlo, dhi) = diff.iter().fold((f64::MAX, f64::MIN), |(a, b), &(_, v)| (a.min(v), b.max(v)));
                let dpad = ((dhi - dlo) * 0.08).max(1e-3);
                let worst = diff.iter().fold(0.0f64, |m, &(_, v)| m.max(v.abs()));
                let mut chart = ChartBuilder::on(area)
                    .caption(format!("Calibrated minus nominal: up to {worst:.3} nm"), ("sans-serif", 20))
                    .margin(12)
                    .x_label_area_size(36)
                    .y_label_area_size(60)
                    .build_cartesian_2d(0.0..xmax, (dlo - dpad)..(dhi + dpad))
                    .map_err(err)?;
                chart.configure_mesh().x_label_formatter(&tick).y_label_formatter(&tick).x_desc("camera pixel").y_desc("difference (nm)").draw().map_err(err)?;
                chart.draw_series(LineSeries::new(diff.iter().copied(), OKABE_ITO[0].stroke_width(2))).map_err(err)?;
                chart.draw_series(std::iter::once(PathElement::new(vec![(0.0, 0.0), (xmax, 0.0)], BLACK.stroke_width(1)))).map_err(err)?;
            }
            None => {
                area
                    .draw(&Text::new("no nominal map: the capture has no wavelength dataset and the pipeline gives none", (60, 150), ("sans-serif", 18).into_font()))
                    .map_err(err)?;
            }
        }

        Ok(())
    }

    /// Measured minus fitted wavelength over the fitted pixels.
    fn draw_residual<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>, residual: &[(f64, f64)], xmax: f64) -> Result<()> {
        let cal = self.cal;
        let [p0, p1] = cal.fit_pixels;
        let (rlo, rhi) = residual.iter().fold((f64::MAX, f64::MIN), |(a, b), &(_, v)| (a.min(v), b.max(v)));
        let rpad = ((rhi - rlo) * 0.08).max(1e-6);
        let (rlo, rhi) = if residual.is_empty() { (-1e-3, 1e-3) } else { (rlo - rpad, rhi + rpad) };
        let mut chart = ChartBuilder::on(area)
            .caption(
                format!(
                    "Fit residual, measured minus fitted, pixels {p0}–{p1}: RMS {:.4} nm",
                    cal.fit_residual_rms_nm
                ),
                ("sans-serif", 20),
            )
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..xmax, rlo..rhi)
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&|v: &f64| format!("{v:.4}").trim_end_matches('0').trim_end_matches('.').to_string())
            .x_desc("camera pixel")
            .y_desc("residual (nm)")
            .draw()
            .map_err(err)?;
        chart.draw_series(residual.iter().map(|&p| Circle::new(p, 1, OKABE_ITO[0].filled()))).map_err(err)?;
        chart.draw_series(std::iter::once(PathElement::new(vec![(0.0, 0.0), (xmax, 0.0)], BLACK.stroke_width(1)))).map_err(err)?;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn tick_labels_drop_trailing_zeros() {
        let t = |v: f64| super::tick(&v);
        assert_eq!((t(220.0), t(0.5), t(-6.25), t(-0.0), t(1e-4)), ("220".into(), "0.5".into(), "-6.25".into(), "0".into(), "0".into()));
    }
}
