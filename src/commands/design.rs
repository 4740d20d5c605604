//! `fringeflow design`: resolution, depth range and roll-off from the source
//! and spectrometer figures.

use std::process::ExitCode;

use super::fail;
use crate::cli::DesignArgs;

pub fn command(a: DesignArgs) -> ExitCode {
    let DesignArgs { centre_nm, fwhm_nm, span_nm, pixel_width_nm, pixels, group_index, resolution_nm, json } = a;
    let span = match (span_nm, pixel_width_nm) {
        (Some(s), None) => s,
        (None, Some(w)) => w * pixels as f64,
        _ => return fail(2, "design: give one of --span-nm, --pixel-width-nm"),
    };
    let values = [centre_nm, fwhm_nm, span, group_index, resolution_nm.unwrap_or(1.0)];
    if values.iter().any(|v| !(v.is_finite() && *v > 0.0)) || pixels < 2 {
        return fail(2, "design: wavelengths, span, group index and resolution must be positive numbers, and pixels at least 2");
    }
    let report = fringeflow::design::design(fringeflow::design::DesignInput {
        centre_nm,
        source_fwhm_nm: fwhm_nm,
        span_nm: span,
        pixels,
        group_index,
        resolution_nm: resolution_nm.unwrap_or(span / pixels as f64),
    });
    if json {
        outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::DESIGN, &report));
    } else {
        out!("{}", report.render());
    }
    ExitCode::SUCCESS
}
