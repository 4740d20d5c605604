//! The binary's `calibrate` and `dispersion` commands: argument checks,
//! calls into `fringeflow::calibration`, and what they print.

use std::process::ExitCode;

use crate::cli::{CalibrateCommand, DispersionCommand};
use crate::{check_out_dir, fail, load_pipeline};
use fringeflow::calibration::{dispersion, sweep, wavelength};
use fringeflow::io::staging::write_atomically;

pub fn calibrate(command: CalibrateCommand) -> ExitCode {
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

pub fn dispersion(command: DispersionCommand) -> ExitCode {
    match command {
        DispersionCommand::Estimate { capture: path, pipeline, overrides, frame, json } => {
            let config = match load_pipeline(pipeline.as_deref(), &overrides) {
                Ok(c) => c,
                Err(code) => return code,
            };
            let result = dispersion::estimate_file(&path, &config, frame);
            let e = match result {
                Ok(e) => e,
                Err(e) => return fail(1, format!("{}: {e:#}", path.display())),
            };
            if json {
                outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::DISPERSION_ESTIMATE, &e));
            } else {
                outln!("a2 {:.3} rad, a3 {:.3} rad (frame {}, {} A-lines, {} evaluations, {:.2} s)", e.a2_rad, e.a3_rad, e.frame, e.alines_used, e.evaluations, e.seconds);
                outln!("entropy {:.4} (uncorrected {:.4}); peak {:.1} dB over the noise floor", e.entropy, e.entropy_uncorrected, e.peak_over_floor_db);
                outln!("equivalent: GDD mismatch {:.0} fs², {:.2} mm of fused silica (positive: in the sample arm)", e.equivalent.gdd_fs2, e.equivalent.fused_silica_mm);
                if e.at_range_limit {
                    errln!("fringeflow: warning: the estimate is on the edge of the search range; widen dispersion.a2_range / a3_range");
                }
            }
            ExitCode::SUCCESS
        }
        DispersionCommand::Sweep { capture, a2, a3, frame, pipeline, overrides, out, json } => {
            let config = match load_pipeline(pipeline.as_deref(), &overrides) {
                Ok(c) => c,
                Err(code) => return code,
            };
            if let Err(code) = check_out_dir(&out) {
                return code;
            }
            let (a2, a3) = match (sweep::parse_range(&a2, "a2"), sweep::parse_range(&a3, "a3")) {
                (Ok(a), Ok(b)) => (a, b),
                (Err(e), _) | (_, Err(e)) => return fail(2, e),
            };
            let report = match sweep::sweep(&capture, &config, frame, &a2, &a3).and_then(|s| fringeflow::report::sweep::write(&out, s)) {
                Ok(r) => r,
                Err(e) => return fail(1, format!("{}: {e:#}", capture.display())),
            };
            if json {
                outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::DISPERSION_SWEEP, &report));
                return ExitCode::SUCCESS;
            }
            outln!("{:>10} {:>10} {:>10} {:>9} {:>9}", "a2 rad", "a3 rad", "entropy", "FWHM µm", "peak dB");
            for (i, r) in report.rows.iter().enumerate() {
                let fwhm = r.fwhm_um.map(|v| format!("{v:.2}")).unwrap_or_else(|| "-".into());
                outln!("{:>10.2} {:>10.2} {:>10.4} {:>9} {:>9.1}{}", r.a2_rad, r.a3_rad, r.entropy, fwhm, r.peak_db, if i == report.best { "  ← best" } else { "" });
            }
            outln!("wrote contact-sheet.png, sweep.csv, sweep.json, metric.png, sweep.html in {}", out.display());
            ExitCode::SUCCESS
        }
    }
}
