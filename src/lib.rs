//! fringeflow: spectral-domain OCT reconstruction on the CPU.
//!
//! Raw spectra (one per A-line) read from HDF5 go through staged processors
//! (background subtraction, k-linearization, numerical dispersion
//! compensation, windowing, FFT, log compression) into B-scan images, a
//! float32 dB volume and a JSON processing log that is enough to reproduce
//! them. A simulator writes captures of invented scenes with their ground
//! truth. Research tool, not a diagnostic device.
//!
//! Layout: `stages/` one module per stage behind [`stages::Stage`] (the
//! plain f64 reference implementation); `pipeline/` the settings file, the
//! planner and the fused f32 fast path built from a plan (`pipeline::fused`);
//! `io/` everything that touches files; `simulate/` the simulator; `run` one
//! capture end to end; `calibration/` wavelength map and dispersion from the
//! data; `measure/` system characterisation; `throughput` the bench report.

pub mod analysis;
pub mod batch;
pub mod calibration;
pub mod contrast;
pub mod design;
pub mod errors;
pub mod inspect;
pub mod interrupt;
pub mod io;
pub mod json_doc;
pub mod measure;
pub mod output;
pub mod physics;
pub mod pipeline;
pub mod render;
pub mod report;
pub mod run;
pub mod settings;
pub mod simulate;
pub mod stages;
pub mod throughput;
