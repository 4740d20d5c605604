//! PNG plots of measurements (plotters, bitmap backend, system sans-serif
//! font via fontconfig).

use anyhow::{anyhow, Result};
use plotters::prelude::*;
use std::path::Path;

use super::mirror::MirrorMeasurement;
use super::rolloff::{model, RolloffReport};
use crate::io::staging::write_atomically;
use crate::render::colour::OKABE_ITO;

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

/// PSF around its peak: linear amplitude (normalised) above, dB below, with
/// the FWHM marked.
pub fn psf(path: &Path, m: &MirrorMeasurement) -> Result<()> {
    write_atomically(path, |tmp| {
        let root = BitMapBackend::new(tmp, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let (upper, lower) = root.split_vertically(HEIGHT / 2);
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
        root.present().map_err(err)?;
        Ok(())
    })
}

/// Peak dB relative to the fit's zero-delay value against depth, with the
/// fitted model, the −6 dB depth labelled, the sensitivity (when the
/// attenuation was given) and the maximum (Nyquist) imaging depth.
pub fn rolloff(path: &Path, r: &RolloffReport) -> Result<()> {
    // Nyquist depth π/(2·δk) in air for a camera pixel δk wide in
    // wavenumber, the same as λ0²/(4·δλ) (common practice; physics::max_depth_um).
    let max_depth_um = std::f64::consts::PI / (2.0 * r.fit.pixel_dk_per_um);
    let a0 = r.fit.a0_db;
    write_atomically(path, |tmp| {
        let root = BitMapBackend::new(tmp, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        let zmax = r.points.iter().map(|p| p.depth_um).fold(0.0, f64::max).max(r.fit.rolloff_6db_depth_um) * 1.15;
        let ymax = 3.0;
        let ymin = r.points.iter().map(|p| p.peak_db - a0).fold(f64::MAX, f64::min).min(-6.0) - 6.0;
        let sensitivity = r.sensitivity_db.map(|s| format!(", sensitivity {s:.1} dB")).unwrap_or_default();
        let mut chart = ChartBuilder::on(&root)
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
        root.present().map_err(err)?;
        Ok(())
    })
}

#[cfg(test)]
mod tests {
    #[test]
    fn tick_labels_drop_trailing_zeros() {
        let t = |v: f64| super::tick(&v);
        assert_eq!((t(220.0), t(0.5), t(-6.25), t(-0.0), t(1e-4)), ("220".into(), "0.5".into(), "-6.25".into(), "0".into(), "0".into()));
    }
}
