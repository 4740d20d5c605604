//! fringeflow-contrast: contrast beyond intensity, computed on the complex depth profiles the
//! pipeline hands over: registration of repeated B-scans, phase-resolved
//! Doppler flow and angiography (motion contrast). Works per slow-axis
//! position on its repeats only, so memory stays flat.
//!
//! Layout: [`registration`] (upsampled phase correlation), [`doppler`]
//! (Kasai estimator), [`angiography`] (decorrelation, split-spectrum,
//! speckle variance, complex difference), [`phase`] (bulk-motion phase),
//! [`box_sum`] (neighbourhood sums), [`surfaces`] (layer
//! segmentation of the structure image), [`fft2`] (2-D FFTs), [`position`] (one position's repeats through all
//! of them, as `run` uses it).

pub mod angiography;
pub mod attenuation;
pub mod box_sum;
pub mod doppler;
pub mod fft2;
pub mod flatten;
pub mod phase;
pub mod position;
pub mod registration;
pub mod slab;
pub mod surfaces;

use fringeflow_core::{analysis, physics, pipeline, stages};
