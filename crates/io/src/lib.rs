//! fringeflow-io: input and output at the edges, formats only — capture
//! reading (a plain [`capture::CaptureLayout`] in, raw frames out), TOML
//! and JSON documents, PNG, OME-TIFF, volume.h5, staging of outputs,
//! hashes. No processing: plain data in and out. Knows nothing of the core.

pub mod array_file;
pub mod capture;
pub mod capture_array;
pub mod capture_layout;
pub mod h5;
pub mod hash;
pub mod import;
pub mod json_doc;
pub mod map_file;
pub mod npz;
pub mod ome_tiff;
pub mod png;
pub mod staging;
pub mod tiff_pages;
pub mod toml_file;
pub mod volume;

use fringeflow_base::memory;
