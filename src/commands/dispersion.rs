//! `fringeflow dispersion estimate|sweep`: dispersion coefficients from the
//! image entropy, or a grid of a2/a3 reconstructed and tabled.

use std::process::ExitCode;

use super::{check_out_dir, fail, load_pipeline};
use crate::cli::DispersionCommand;
use fringeflow::calibration::{dispersion, sweep};

pub fn command(command: DispersionCommand) -> ExitCode {
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
