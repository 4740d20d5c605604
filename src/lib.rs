//! fringeflow: spectral-domain OCT reconstruction on the CPU — the top of
//! the workspace. Research tool, not a diagnostic device.
//!
//! Raw spectra (one per A-line) go through staged processors (background
//! subtraction, k-linearization, numerical dispersion compensation,
//! windowing, FFT, log compression) into B-scan images, a float32 dB
//! volume and a JSON processing log that is enough to reproduce them.
//!
//! This crate holds what joins the layers for a user: [`run`] (one capture
//! in phases: open → plan → compute → write → log), [`batch`] (many
//! captures: shards, locks, resume, signals), [`inspect`], [`bench`], and
//! the binary's commands. The layers below are crates of their own, a
//! dependency only pointing down, and are re-exported here under their
//! module names for the tests, the benches and the Python binding:
//!
//! | crate | re-exported as |
//! |---|---|
//! | fringeflow-base | [`settings`], [`interrupt`], [`memory`] |
//! | fringeflow-io | [`io`], [`json_doc`] |
//! | fringeflow-core | [`physics`], [`analysis`], [`stages`], [`pipeline`] |
//! | fringeflow-contrast | [`contrast`] |
//! | fringeflow-simulate | [`simulate`] |
//! | fringeflow-measure | [`calibration`], [`measure`], [`design`], [`open`] |
//! | fringeflow-report | [`render`], [`report`], [`plot`] |

pub mod batch;
pub mod bench;
pub mod errors;
pub mod inspect;
pub mod output;
pub mod run;

pub use fringeflow_base::{interrupt, memory, settings};
pub use fringeflow_contrast as contrast;
pub use fringeflow_core::{analysis, physics, pipeline, stages};
pub use fringeflow_io as io;
pub use fringeflow_io::json_doc;
pub use fringeflow_measure::{calibration, design, measure, open};
pub use fringeflow_report::{plot, render, report};
pub use fringeflow_simulate as simulate;
