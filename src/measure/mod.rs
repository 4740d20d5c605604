//! Characterising a system from its captures: the source spectrum, the axial
//! PSF of a mirror (FWHM against the coherence-length limit, side lobes,
//! SNR), and the roll-off of the signal with depth (and sensitivity).
//!
//! Not for images: these read mirror captures and report numbers and plots.

pub mod mirror;
pub mod plot;
pub mod rolloff;
pub mod spectrum;
