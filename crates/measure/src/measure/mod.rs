//! Characterising a system from its captures: the source spectrum, the axial
//! PSF of a mirror (FWHM against the coherence-length limit, side lobes,
//! SNR), and the roll-off of the signal with depth (and sensitivity).
//!
//! Not for images: these read mirror captures and report numbers; the
//! report crate draws them.

pub mod mirror;
pub mod rolloff;

pub use fringeflow_core::spectrum;
