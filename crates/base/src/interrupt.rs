//! The process-wide request to stop work in flight, set by a stopping
//! signal: the frame loops of both engines check it once per block of
//! A-lines, and the background medians once per column or counting pass,
//! so a signal is acted on within a fraction of a second however large the
//! frames (what was left unprocessed is never kept: the capture in flight
//! is discarded).

use std::sync::atomic::{AtomicBool, Ordering};

static REQUESTED: AtomicBool = AtomicBool::new(false);

/// Asks every frame loop of this process to stop.
pub fn request() {
    REQUESTED.store(true, Ordering::SeqCst);
}

/// Whether a stop was requested.
#[inline]
pub fn requested() -> bool {
    REQUESTED.load(Ordering::Relaxed)
}
