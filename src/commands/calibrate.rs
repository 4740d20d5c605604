//! `fringeflow calibrate wavelength`: a per-pixel wavelength map from mirror
//! captures, written as a calibration file (and optionally a plot).

use std::process::ExitCode;

use super::{fail, load_pipeline};
use crate::cli::CalibrateCommand;
use fringeflow::calibration::wavelength;
use fringeflow::io::staging::write_atomically;

pub fn command(command: CalibrateCommand) -> ExitCode {
    let CalibrateCommand::Wavelength { mirrors, out, centre_nm, span_nm, depths_um, decreasing, degree, pipeline, frame, plot, json } = command;
    let config = match load_pipeline(pipeline.as_deref(), &[]) {
        Ok(c) => c,
        Err(code) => return code,
    };
    let hints = wavelength::ScaleHints { centre_nm, span_nm, depths_um, decreasing };
    // Usage mistakes (which hints, how many depths, the degree) exit 2 before any file is read.
    if let Err(e) = wavelength::check_hints(mirrors.len(), &hints, degree) {
        return fail(2, format!("calibrate wavelength: {e:#}"));
    }
    if out.is_dir() {
        return fail(2, format!("--out {}: is a folder; give the calibration file to write, e.g. {}", out.display(), out.join("calibration.json").display()));
    }
    if let Some(p) = plot.as_ref().filter(|p| p.is_dir()) {
        return fail(2, format!("--plot {}: is a folder; give the PNG file to write, e.g. {}", p.display(), p.join("calibration.png").display()));
    }
    let cal = match wavelength::calibrate_files(&mirrors, &config, frame, &hints, degree) {
        Ok(c) => c,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    let written = write_atomically(&out, |tmp| {
        std::fs::write(tmp, fringeflow::json_doc::pretty(fringeflow::json_doc::CALIBRATION, &cal))?;
        Ok(())
    });
    if let Err(e) = written {
        return fail(1, format!("{}: {e:#}", out.display()));
    }
    if let Some(p) = &plot {
        let nominal = wavelength::nominal_map(&mirrors[0], &config);
        if let Err(e) = fringeflow::plot::wavelength_map(p, &cal, nominal.as_deref(), &config.sha256()) {
            return fail(1, format!("{}: {e:#}", p.display()));
        }
    }
    if json {
        outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::CALIBRATION, &cal));
        return ExitCode::SUCCESS;
    }
    let n = cal.pixels;
    outln!(
        "wavelength map: {:.3} nm (pixel 0) … {:.3} nm (pixel {}), centre {:.3} nm",
        cal.wavelength_nm[0],
        cal.wavelength_nm[n - 1],
        n - 1,
        cal.wavelength_nm[n / 2]
    );
    outln!(
        "degree-{} fit over pixels {}–{}: RMS residual {:.4} nm",
        cal.polynomial_nm.len() - 1,
        cal.fit_pixels[0],
        cal.fit_pixels[1],
        cal.fit_residual_rms_nm
    );
    for m in &cal.inputs {
        outln!("  {}: {:.1} fringe cycles, {:.1} dB", m.path.display(), m.fringe_cycles, m.fringe_peak_over_median_db);
    }
    match &cal.residual_dispersion {
        Some(d) => outln!(
            "residual dispersion: a2 {:.2} rad, a3 {:.2} rad = GDD {:.0} fs² ≈ {:.2} mm of fused silica",
            d.a2_rad, d.a3_rad, d.gdd_fs2, d.fused_silica_mm
        ),
        None => outln!("residual dispersion: needs two mirror depths (with one, it is folded into the map)"),
    }
    outln!("wrote {}", out.display());
    if let Some(p) = &plot {
        outln!("wrote {}", p.display());
    }
    ExitCode::SUCCESS
}
