//! fringeflow-core: the computation, from arrays and text only — physics
//! (wavenumber, coherence length, dispersion), analysis of depth profiles,
//! the stages one module each behind [`stages::Stage`] (the plain f64
//! reference), the source-spectrum estimate, and the pipeline: settings
//! parsed from text, the planner that builds tables once, and the fused f32
//! fast path laid out by kernel family. Knows nothing of files: io hands it
//! samples, the layers above join the two.

pub mod analysis;
pub mod physics;
pub mod pipeline;
pub mod spectrum;
pub mod stages;

use fringeflow_base::{interrupt, memory, settings};
