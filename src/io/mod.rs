//! Input and output at the edges: capture reading, TOML files, images,
//! volumes, staging of outputs, hashes, the memory a read may take.

pub mod capture;
pub mod capture_layout;
pub mod h5;
pub mod memory;
pub mod hash;
pub mod ome_tiff;
pub mod png;
pub mod staging;
pub mod toml_file;
pub mod volume;
