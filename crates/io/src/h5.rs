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

// Dimension scales (HDF5 high-level library, H5DS): the axis datasets are
// attached to the dimensions of the data, so h5py's `dims`, netCDF-4 readers
// and HDF viewers show the axes with their units.
extern "C" {
    fn H5DSset_scale(dsid: hdf5_sys::h5i::hid_t, dimname: *const std::ffi::c_char) -> hdf5_sys::h5::herr_t;
    fn H5DSset_label(did: hdf5_sys::h5i::hid_t, idx: std::ffi::c_uint, label: *const std::ffi::c_char) -> hdf5_sys::h5::herr_t;
    fn H5DSattach_scale(did: hdf5_sys::h5i::hid_t, dsid: hdf5_sys::h5i::hid_t, idx: std::ffi::c_uint) -> hdf5_sys::h5::herr_t;
}

/// Makes `axis` a dimension scale named `name`, with a `units` attribute.
pub fn make_scale(axis: &hdf5::Dataset, name: &str, units: &str) -> Result<()> {
    write_attr_str(axis, "units", units)?;
    let c_name = std::ffi::CString::new(name).expect("scale names have no NUL");
    // SAFETY: both handles are open datasets; the library lock serialises
    // the call with the crate's own HDF5 calls.
    let status = hdf5::sync::sync(|| unsafe { H5DSset_scale(axis.id(), c_name.as_ptr()) });
    if status < 0 {
        anyhow::bail!("making {} a dimension scale failed", axis.name());
    }
    Ok(())
}

/// Attaches each scale to the dimension of `data` at its position (`None`
/// leaves a dimension without a scale).
pub fn attach_scales(data: &hdf5::Dataset, scales: &[Option<&hdf5::Dataset>]) -> Result<()> {
    for (dim, scale) in scales.iter().enumerate() {
        if let Some(s) = scale {
            // SAFETY: as in make_scale.
            let status = hdf5::sync::sync(|| unsafe { H5DSattach_scale(data.id(), s.id(), dim as std::ffi::c_uint) });
            if status < 0 {
                anyhow::bail!("attaching {} to dimension {dim} of {} failed", s.name(), data.name());
            }
        }
    }
    Ok(())
}

/// Names the dimensions of `data` (h5py's `dims[i].label`).
pub fn label_dimensions(data: &hdf5::Dataset, labels: &[&str]) -> Result<()> {
    for (dim, label) in labels.iter().enumerate() {
        let c = std::ffi::CString::new(*label).expect("labels have no NUL");
        // SAFETY: as in make_scale.
        let status = hdf5::sync::sync(|| unsafe { H5DSset_label(data.id(), dim as std::ffi::c_uint, c.as_ptr()) });
        if status < 0 {
            anyhow::bail!("labelling dimension {dim} of {} failed", data.name());
        }
    }
    Ok(())
}

/// Every dataset below `group`; members that cannot be opened become problems.
pub fn collect_datasets(group: &hdf5::Group, prefix: &str, out: &mut Vec<(String, hdf5::Dataset)>, problems: &mut Vec<String>) {
    let names = match group.member_names() {
        Ok(n) => n,
        Err(e) => {
            problems.push(format!("{}: its members cannot be listed ({})", if prefix.is_empty() { "/" } else { prefix }, e.to_string().lines().next().unwrap_or("").trim()));
            return;
        }
    };
    for name in names {
        let path = format!("{prefix}/{name}");
        if let Ok(ds) = group.dataset(&name) {
            out.push((path, ds));
        } else if let Ok(g) = group.group(&name) {
            collect_datasets(&g, &path, out, problems);
        } else {
            problems.push(format!("{path}: cannot be opened (damaged, or a link to something missing)"));
        }
    }
}

/// An HDF5 datatype in words: `u16`, `f32`, `complex`, `compound of 3
/// fields`, `text`… (for messages and `inspect`).
pub fn type_in_words(d: &hdf5::types::TypeDescriptor) -> String {
    use hdf5::types::TypeDescriptor;
    use hdf5::types::{FloatSize, IntSize};
    let size = |s: &IntSize| *s as usize * 8;
    match d {
        TypeDescriptor::Unsigned(s) => format!("u{}", size(s)),
        TypeDescriptor::Integer(s) => format!("i{}", size(s)),
        TypeDescriptor::Float(FloatSize::U4) => "f32".into(),
        TypeDescriptor::Float(FloatSize::U8) => "f64".into(),
        TypeDescriptor::Boolean => "boolean".into(),
        TypeDescriptor::Enum(_) => "enumeration".into(),
        TypeDescriptor::Compound(c) => {
            let names: Vec<&str> = c.fields.iter().map(|f| f.name.as_str()).collect();
            if names == ["r", "i"] {
                "complex".into()
            } else {
                format!("compound of {} fields", names.len())
            }
        }
        TypeDescriptor::FixedArray(_, n) => format!("array of {n}"),
        TypeDescriptor::FixedAscii(_) | TypeDescriptor::FixedUnicode(_) | TypeDescriptor::VarLenAscii | TypeDescriptor::VarLenUnicode => "text".into(),
        TypeDescriptor::VarLenArray(_) => "variable-length array".into(),
        TypeDescriptor::Reference(_) => "reference".into(),
    }
}
