//! fringeflow-base: what both io and core need and neither owns — TOML
//! settings parsed with line numbers for their errors, the memory and free
//! space this process may use, and the process-wide stop flag that long
//! loops check. No OCT here; every other crate sits on this one.

pub mod interrupt;
pub mod memory;
pub mod settings;
