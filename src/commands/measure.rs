//! `fringeflow measure psf|rolloff`: characterise a system from mirror
//! captures.

use std::process::ExitCode;

use super::{fail, load_pipeline};
use crate::cli::MeasureCommand;

pub fn command(m: MeasureCommand) -> ExitCode {
    measure(m)
}

fn measure(command: MeasureCommand) -> ExitCode {
    use fringeflow::measure::{mirror, rolloff};
    use fringeflow::plot;
    match command {
        MeasureCommand::Psf { mirror: path, pipeline, overrides, frame, group_index, plot: plot_path, json } => {
            let config = match load_pipeline(pipeline.as_deref(), &overrides) {
                Ok(c) => c,
                Err(code) => return code,
            };
            let m = match mirror::measure(&path, &config, frame, group_index) {
                Ok(m) => m,
                Err(e) => return fail(1, format!("{}: {e:#}", path.display())),
            };
            if let Some(p) = &plot_path {
                if let Err(e) = plot::psf(p, &m, &config.sha256()) {
                    return fail(1, format!("{}: {e:#}", p.display()));
                }
            }
            for w in &m.warnings {
                errln!("fringeflow: warning: {w}");
            }
            if json {
                outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::PSF, &m));
            } else {
                outln!("mirror {} frame {}: peak at {:.2} µm, {:.1} dB", m.capture, m.frame, m.peak_depth_um, m.peak_db);
                outln!("source spectrum: centre {:.2} nm, FWHM {:.2} nm → limit l_c {:.3} µm", m.source.centre_nm, m.source.fwhm_nm, m.source.coherence_length_um);
                outln!("PSF FWHM {:.3} µm in air, {:.3} µm at group index {:.3}; measured/limit {:.3}", m.fwhm_um_air, m.fwhm_um_medium, m.group_index, m.fwhm_over_limit);
                match (m.side_lobe_db, m.side_lobe_above_noise) {
                    (Some(s), true) => outln!("highest side lobe {s:.1} dB"),
                    (Some(s), false) => outln!("no side lobe above the noise (highest local maximum {s:.1} dB is noise)"),
                    (None, _) => outln!("highest side lobe: none found"),
                }
                outln!("peak SNR {:.1} dB (noise floor {:.1} dB)", m.peak_over_noise_sd_db, m.noise_floor_db);
                if let Some(p) = &plot_path {
                    outln!("wrote {}", p.display());
                }
            }
            ExitCode::SUCCESS
        }
        MeasureCommand::Rolloff { mirrors, pipeline, overrides, attenuation_db, plot: plot_path, json } => {
            let config = match load_pipeline(pipeline.as_deref(), &overrides) {
                Ok(c) => c,
                Err(code) => return code,
            };
            if mirrors.len() < 3 {
                return fail(2, format!("roll-off needs mirror captures at three or more depths, got {}", mirrors.len()));
            }
            let (report, _) = match rolloff::measure_rolloff(&mirrors, &config, attenuation_db) {
                Ok(r) => r,
                Err(e) => return fail(1, format!("{e:#}")),
            };
            if let Some(p) = &plot_path {
                if let Err(e) = plot::rolloff(p, &report, &config.sha256()) {
                    return fail(1, format!("{}: {e:#}", p.display()));
                }
            }
            for w in &report.warnings {
                errln!("fringeflow: warning: {w}");
            }
            if json {
                outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::ROLLOFF, &report));
            } else {
                outln!("{:>12} {:>10} {:>10} {:>10}  capture", "depth µm", "peak dB", "SNR dB", "FWHM µm");
                for p in &report.points {
                    outln!("{:>12.1} {:>10.2} {:>10.2} {:>10.2}  {}", p.depth_um, p.peak_db, p.peak_over_noise_sd_db, p.fwhm_um, p.capture);
                }
                let f = &report.fit;
                outln!(
                    "fit: A0 {:.2} dB, spectral response FWHM {:.4} nm, pixel width {:.3e} rad/µm, RMS residual {:.2} dB",
                    f.a0_db, f.resolution_fwhm_nm, f.pixel_dk_per_um, f.rms_residual_db
                );
                outln!("-6 dB roll-off depth {:.0} µm (in air)", f.rolloff_6db_depth_um);
                if let Some(p) = &plot_path {
                    outln!("wrote {}", p.display());
                }
                if let (Some(s), Some(a)) = (report.sensitivity_db, attenuation_db) {
                    outln!("sensitivity {s:.1} dB = SNR {:.1} dB + round-trip attenuation 2 × {a:.1} dB", report.points[0].peak_over_noise_sd_db);
                }
            }
            ExitCode::SUCCESS
        }
    }
}
