//! fringeflow: spectral-domain OCT reconstruction on the CPU.
//!
//! Raw spectra (one per A-line) read from HDF5 go through staged processors
//! (background subtraction, k-linearization, numerical dispersion
//! compensation, windowing, FFT, log compression) into B-scan images, a
//! float32 dB volume and a JSON processing log that is enough to reproduce
//! them. A simulator writes captures of invented scenes with their ground
//! truth. Research tool, not a diagnostic device.
//!
//! Layout: `stages/` one module per stage behind [`stages::Stage`];
//! `pipeline/` the settings file and the planner; `io/` everything that
//! touches files; `simulate/` the simulator; `run` one capture end to end.

pub mod analysis;
pub mod batch;
pub mod calibration;
pub mod design;
pub mod inspect;
pub mod io;
pub mod measure;
pub mod physics;
pub mod pipeline;
pub mod run;
pub mod simulate;
pub mod stages;
pub mod throughput;
