//! Small helpers for writing HDF5 files reproducibly: no object timestamps,
//! scalar and string attributes. Shared by the volume writer and the
//! simulator's capture writer.

use anyhow::{Context, Result};
use hdf5::types::VarLenUnicode;
use hdf5::{H5Type, Location};
use std::path::Path;

/// Shortens an HDF5 error to its cause: the operating system's message when
/// HDF5 reports one (e.g. "No space left on device"), else its first line.
pub fn concise(e: hdf5::Error) -> anyhow::Error {
    let text = e.to_string();
    if let Some(start) = text.find("error message = '") {
        let rest = &text[start + 17..];
        if let Some(end) = rest.find('\'') {
            return anyhow::anyhow!("{}", &rest[..end]);
        }
    }
    anyhow::anyhow!("{}", text.lines().next().unwrap_or("HDF5 error"))
}

/// Creates (truncating) an HDF5 file that records no modification times, so
/// the same content gives the same bytes.
pub fn create_file(path: &Path) -> Result<hdf5::File> {
    hdf5::File::with_options()
        .with_fcpl(|p| p.obj_track_times(false))
        .create(path)
        .map_err(concise)
        .with_context(|| format!("creating HDF5 file {}", path.display()))
}

pub fn write_attr<T: H5Type>(loc: &Location, name: &str, value: T) -> Result<()> {
    loc.new_attr::<T>()
        .create(name)
        .and_then(|a| a.write_scalar(&value))
        .map_err(concise)
        .with_context(|| format!("writing attribute {name}"))
}

pub fn write_attr_str(loc: &Location, name: &str, value: &str) -> Result<()> {
    let v: VarLenUnicode = value.parse().map_err(|e| anyhow::anyhow!("attribute {name}: {e:?}"))?;
    write_attr(loc, name, v)
}

/// Writes a 1-D dataset.
pub fn write_1d<T: H5Type>(file: &hdf5::Group, name: &str, data: &[T]) -> Result<hdf5::Dataset> {
    file.new_dataset_builder()
        .with_data(data)
        .create(name)
        .map_err(concise)
        .with_context(|| format!("writing dataset {name}"))
}
