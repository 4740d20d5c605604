//! fringeflow-measure: numbers about the system, from its captures — the
//! spectrometer's wavelength map and the dispersion from the data
//! ([`calibration`]), the axial PSF, roll-off and sensitivity, and the
//! design figures of a planned system ([`measure`], [`design`]). The first
//! crate that knows both io and core: [`open`] turns a pipeline's `[input]`
//! settings into io's plain capture layout and opens the capture, for the
//! measurements here and for the layers above. Hands plain series and
//! documents up; drawing them is the report crate's.

pub mod calibration;
pub mod design;
pub mod measure;
pub mod open;

use fringeflow_core::{analysis, physics, pipeline, stages};
use fringeflow_io as io;
