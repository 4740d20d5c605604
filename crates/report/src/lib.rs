//! fringeflow-report: what people look at — colour maps, image geometry and
//! scale bars ([`render`]), figures drawn from the plain series the measure
//! crate hands up ([`plot`]), and the pages ([`report`]: one output's
//! report.html, the batch index, comparison and sweep pages) built from
//! what io wrote. Computes nothing it then shows; draws what it is given.

pub mod plot;
pub mod render;
pub mod report;

use fringeflow_core::{analysis, physics, stages};
use fringeflow_io as io;
use fringeflow_measure::{calibration, measure};
