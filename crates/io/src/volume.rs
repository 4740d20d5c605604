//! volume.h5: the dB volume of a reconstructed capture with its axes.
//!
//! Layout: `/volume_db` (frames, depth, A-lines), float32 (or uint16 packed
//! dB with CF `scale_factor`/`add_offset` attributes), one chunk per frame,
//! so `volume_db[f]` is frame f's B-scan as shown in its PNG; 1-D axis
//! datasets `/depth_um`, `/aline_index`, `/frame_index`; the depth pixel
//! spacing (µm, in air) and the axis order as attributes of `/volume_db`;
//! with averaging, each stored frame is one slow-axis position; optionally
//! `/en_face_db` (frames, A-lines), an en face projection in dB. The axis
//! datasets are HDF5 dimension scales attached to every image stack, each
//! with a `units` attribute; with a known lateral step, `/aline_um` (and
//! `/position_um` with a known slow-axis step) are attached too.

use anyhow::{Context, Result};
use hdf5::Dataset;
use ndarray::Array2;
use std::path::Path;

use super::h5::{attach_scales, concise, create_file, label_dimensions, make_scale, write_1d, write_attr, write_attr_str};
/// The stored type of volume.h5's dB values.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VolumeType {
    Float32,
    /// dB = stored · scale_factor + add_offset (CF packing attributes).
    Uint16,
}

/// uint16 volumes: dB = stored · PACKED_DB_STEP + PACKED_DB_OFFSET. The
/// offset is the dB of the amplitude floor (nothing is lower), the step
/// keeps the rounding error within ±0.005 dB.
pub const PACKED_DB_STEP: f64 = 0.01;
pub const PACKED_DB_OFFSET: f64 = -240.0;

pub struct VolumeWriter {
    file: hdf5::File,
    volume: Dataset,
    volume_type: VolumeType,
    frames: usize,
    axes: Axes,
}

/// An attribute's value: text, or a number (stored as a float64 scalar,
/// so readers get a number, not a string to parse).
#[derive(Debug, Clone)]
pub enum Attr {
    Text(String),
    Number(f64),
}

impl From<&str> for Attr {
    fn from(v: &str) -> Self {
        Attr::Text(v.to_string())
    }
}

impl From<String> for Attr {
    fn from(v: String) -> Self {
        Attr::Text(v)
    }
}

impl From<f64> for Attr {
    fn from(v: f64) -> Self {
        Attr::Number(v)
    }
}

fn write_attrs(ds: &Dataset, attrs: &[(&str, Attr)]) -> Result<()> {
    for (k, v) in attrs {
        match v {
            Attr::Text(t) => write_attr_str(ds, k, t)?,
            Attr::Number(x) => write_attr(ds, k, *x)?,
        }
    }
    Ok(())
}

/// The dimension labels an `axes` attribute names (comma-separated), or
/// `default` when there is none or it has another length.
fn axis_labels<'a, const N: usize>(attrs: &'a [(&str, Attr)], default: [&'a str; N]) -> [&'a str; N] {
    let Some((_, Attr::Text(axes))) = attrs.iter().find(|(k, _)| *k == "axes") else { return default };
    let names: Vec<&str> = axes.split(',').map(str::trim).collect();
    names.try_into().unwrap_or(default)
}

/// The dimension scales: depth, and per lateral and slow axis the index
/// and, when the step is known, the distance.
struct Axes {
    depth: Dataset,
    aline: Dataset,
    frame: Dataset,
    aline_um: Option<Dataset>,
    position_um: Option<Dataset>,
}

impl Axes {
    /// Attaches the scales of (frame, depth, A-line) to a stack of `frames`
    /// images (the frame axis only when the lengths agree), labelled
    /// `labels` (as its `axes` attribute names them).
    fn attach_stack(&self, ds: &Dataset, frames: usize, count: usize, labels: [&str; 3]) -> Result<()> {
        let same = count == frames;
        label_dimensions(ds, &labels)?;
        attach_scales(ds, &[same.then_some(&self.frame), Some(&self.depth), Some(&self.aline)])?;
        attach_scales(ds, &[same.then_some(self.position_um.as_ref()).flatten(), None, self.aline_um.as_ref()])
    }

    /// Attaches (frame, A-line) scales to an en face image.
    fn attach_en_face(&self, ds: &Dataset, frames: usize, rows: usize, labels: [&str; 2]) -> Result<()> {
        let same = rows == frames;
        label_dimensions(ds, &labels)?;
        attach_scales(ds, &[same.then_some(&self.frame), Some(&self.aline)])?;
        attach_scales(ds, &[same.then_some(self.position_um.as_ref()).flatten(), self.aline_um.as_ref()])
    }
}

/// Facts stored as attributes of the volume.
pub struct VolumeAttributes<'a> {
    pub depth_spacing_um: f64,
    pub first_depth_um: f64,
    pub pipeline_sha256: &'a str,
    /// Input frames averaged into each stored frame.
    pub frames_averaged: usize,
    pub volume_type: VolumeType,
    /// Lateral step between A-lines, µm, when known.
    pub aline_spacing_um: Option<f64>,
    /// Step between stored frames (slow-axis positions), µm, when known.
    pub position_spacing_um: Option<f64>,
}

impl VolumeWriter {
    pub fn create(path: &Path, frames: usize, depth_um: &[f64], alines: usize, attrs: &VolumeAttributes<'_>) -> Result<Self> {
        let file = create_file(path)?;
        let depth = depth_um.len();
        let builder = file.new_dataset_builder();
        let builder = match attrs.volume_type {
            VolumeType::Float32 => builder.empty::<f32>(),
            VolumeType::Uint16 => builder.empty::<u16>(),
        };
        let volume = builder
            .shape((frames, depth, alines))
            .chunk((1, depth, alines))
            .create("volume_db")
            .map_err(concise)
            .context("creating /volume_db")?;
        write_attr_str(&volume, "units", "dB (20 log10 of amplitude in detector counts)")?;
        if attrs.volume_type == VolumeType::Uint16 {
            // CF conventions' packed data: unpacked = packed·scale_factor + add_offset.
            write_attr(&volume, "scale_factor", PACKED_DB_STEP)?;
            write_attr(&volume, "add_offset", PACKED_DB_OFFSET)?;
        }
        write_attr_str(&volume, "axes", "frame,depth,aline")?;
        write_attr(&volume, "depth_spacing_um", attrs.depth_spacing_um)?;
        write_attr(&volume, "first_depth_um", attrs.first_depth_um)?;
        write_attr_str(&volume, "depth_medium", "air (divide by the group index for depth in a medium)")?;
        write_attr(&volume, "aline_spacing_index", 1u32)?;
        write_attr(&volume, "frame_spacing_index", 1u32)?;
        write_attr(&volume, "frames_averaged", attrs.frames_averaged as u32)?;
        write_attr_str(&file, "pipeline_sha256", attrs.pipeline_sha256)?;
        write_attr_str(&file, "producer", concat!("fringeflow ", env!("CARGO_PKG_VERSION")))?;
        let depth_axis = write_1d(&file, "depth_um", depth_um)?;
        make_scale(&depth_axis, "depth (optical path in air)", "um")?;
        let aline = write_1d(&file, "aline_index", &(0..alines as u32).collect::<Vec<_>>())?;
        make_scale(&aline, "A-line index", "1")?;
        let frame = write_1d(&file, "frame_index", &(0..frames as u32).collect::<Vec<_>>())?;
        make_scale(&frame, "frame index", "1")?;
        let distance = |name: &str, label: &str, step: Option<f64>, count: usize| -> Result<Option<Dataset>> {
            let Some(step) = step else { return Ok(None) };
            let ds = write_1d(&file, name, &(0..count).map(|i| i as f64 * step).collect::<Vec<_>>())?;
            make_scale(&ds, label, "um")?;
            Ok(Some(ds))
        };
        let aline_um = distance("aline_um", "lateral position", attrs.aline_spacing_um, alines)?;
        let position_um = distance("position_um", "slow-axis position", attrs.position_spacing_um, frames)?;
        let axes = Axes { depth: depth_axis, aline, frame, aline_um, position_um };
        axes.attach_stack(&volume, frames, frames, ["frame", "depth", "aline"])?;
        Ok(VolumeWriter { file, volume, volume_type: attrs.volume_type, frames, axes })
    }

    /// Writes frame `index` from a (depth × A-lines) image in standard layout.
    pub fn write_frame(&self, index: usize, image: &Array2<f32>) -> Result<()> {
        let written = match self.volume_type {
            VolumeType::Float32 => self.volume.write_slice(image, ndarray::s![index, .., ..]),
            VolumeType::Uint16 => self.volume.write_slice(&pack_db(image), ndarray::s![index, .., ..]),
        };
        written.map_err(concise).with_context(|| format!("writing frame {index} to volume"))
    }

    /// Writes the en face projection (positions × A-lines, dB) and its depth range.
    pub fn write_en_face(&self, values: &[f32], positions: usize, alines: usize, depth_range_um: [f64; 2]) -> Result<()> {
        let image = ndarray::ArrayView2::from_shape((positions, alines), values)?;
        let ds = self.file.new_dataset_builder().with_data(&image).create("en_face_db").map_err(concise).context("writing /en_face_db")?;
        write_attr_str(&ds, "axes", "frame,aline")?;
        write_attr_str(&ds, "units", "dB")?;
        self.axes.attach_en_face(&ds, self.frames, positions, ["frame", "aline"])?;
        write_attr(&ds, "first_depth_um", depth_range_um[0])?;
        write_attr(&ds, "last_depth_um", depth_range_um[1])?;
        Ok(())
    }

    /// Creates a further stack `name` of `count` images of depth × A-lines
    /// (one chunk per image) with string attributes; write it with
    /// [`write_stack_image`].
    /// A stack of `count` images (depth × A-lines) with attributes; an
    /// `axes` attribute ("position,depth,aline") also labels the dimensions.
    pub fn add_stack<T: hdf5::H5Type>(&self, name: &str, count: usize, depth: usize, alines: usize, attrs: &[(&str, Attr)]) -> Result<Dataset> {
        let ds = self
            .file
            .new_dataset::<T>()
            .shape((count, depth, alines))
            .chunk((1, depth, alines))
            .create(name)
            .map_err(concise)
            .with_context(|| format!("creating /{name}"))?;
        write_attrs(&ds, attrs)?;
        let [a, b, c] = axis_labels(attrs, ["frame", "depth", "aline"]);
        self.axes.attach_stack(&ds, self.frames, count, [a, b, c])?;
        Ok(ds)
    }

    /// Writes a 2-D dataset (rows × columns) with attributes; an `axes`
    /// attribute also labels the dimensions.
    pub fn write_2d(&self, name: &str, values: &[f32], rows: usize, cols: usize, attrs: &[(&str, Attr)]) -> Result<()> {
        let image = ndarray::ArrayView2::from_shape((rows, cols), values)?;
        let ds = self.file.new_dataset_builder().with_data(&image).create(name).map_err(concise).with_context(|| format!("writing /{name}"))?;
        write_attrs(&ds, attrs)?;
        let [a, b] = axis_labels(attrs, ["frame", "aline"]);
        self.axes.attach_en_face(&ds, self.frames, rows, [a, b])?;
        Ok(())
    }

    /// A (position, item, A-line) array, e.g. surfaces or thicknesses per
    /// position: the position and A-line scales attached, the middle axis
    /// labelled `item` (its names in the attribute `names`).
    pub fn write_per_aline(&self, name: &str, values: &[f32], shape: (usize, usize, usize), item: &str, attrs: &[(&str, Attr)]) -> Result<()> {
        let array = ndarray::ArrayView3::from_shape(shape, values)?;
        let ds = self.file.new_dataset_builder().with_data(&array).create(name).map_err(concise).with_context(|| format!("writing /{name}"))?;
        write_attrs(&ds, attrs)?;
        let same = shape.0 == self.frames;
        label_dimensions(&ds, &["position", item, "aline"])?;
        attach_scales(&ds, &[same.then_some(&self.axes.frame), None, Some(&self.axes.aline)])?;
        attach_scales(&ds, &[same.then_some(self.axes.position_um.as_ref()).flatten(), None, self.axes.aline_um.as_ref()])
    }

    /// A numeric attribute of the file's root.
    pub fn write_root_attr(&self, name: &str, value: f64) -> Result<()> {
        write_attr(&self.file, name, value)
    }

    /// A 1-D dataset along depth (one value per image row), with attributes.
    pub fn write_1d(&self, name: &str, values: &[f32], attrs: &[(&str, Attr)]) -> Result<()> {
        let ds = write_1d(&self.file, name, values)?;
        write_attrs(&ds, attrs)?;
        label_dimensions(&ds, &["depth"])?;
        attach_scales(&ds, &[Some(&self.axes.depth)])
    }

    /// A text attribute of the file's root.
    pub fn write_root_text(&self, name: &str, value: &str) -> Result<()> {
        write_attr_str(&self.file, name, value)
    }

    /// Records the input's SHA-256 and closes the file.
    pub fn finish(self, input_hash: &str) -> Result<()> {
        write_attr_str(&self.file, "input_hash", input_hash)?;
        self.file.flush().map_err(concise).context("writing volume.h5")?;
        self.file.close().map_err(concise).context("closing volume.h5")
    }
}

/// Writes image `index` of a stack made by [`VolumeWriter::add_stack`].
pub fn write_stack_image<T: hdf5::H5Type>(ds: &Dataset, index: usize, image: &Array2<T>) -> Result<()> {
    ds.write_slice(image, ndarray::s![index, .., ..]).map_err(concise).with_context(|| format!("writing image {index} of {}", ds.name()))
}

/// dB to uint16 in PACKED_DB_STEP steps from PACKED_DB_OFFSET, rounded to
/// nearest and clamped to the type's range.
pub fn pack_db(image: &Array2<f32>) -> Array2<u16> {
    let (inv_step, offset) = ((1.0 / PACKED_DB_STEP) as f32, PACKED_DB_OFFSET as f32);
    let pack = |d: f32| {
        // Compare-and-select (a NaN fails the first test and becomes 0), so
        // v is finite in [0, 65535]: the cast through i32 is exact, and the
        // loop vectorises (neither a saturating `as u16` nor f32::max does;
        // the old form was 7 % of a `run` profile).
        let v = (d - offset) * inv_step + 0.5;
        let v = if v > 0.0 { v } else { 0.0 };
        let v = if v < u16::MAX as f32 { v } else { u16::MAX as f32 };
        // SAFETY: v is finite and within i32's range.
        unsafe { v.to_int_unchecked::<i32>() as u16 }
    };
    match image.as_slice() {
        Some(values) => {
            let mut out = Array2::<u16>::zeros(image.raw_dim());
            for (o, &d) in out.as_slice_mut().expect("standard layout").iter_mut().zip(values) {
                *o = pack(d);
            }
            out
        }
        None => image.mapv(pack),
    }
}

/// What a page needs from a volume.h5: the dB B-scans of some frames and
/// the axes.
pub struct DbFrames {
    /// Stored frames in the file.
    pub frames: usize,
    /// The frames read, in order, and their (depth × A-lines) dB images.
    pub indices: Vec<usize>,
    pub images: Vec<Array2<f32>>,
    pub depth_um: Vec<f64>,
    pub depth_spacing_um: f64,
    /// Lateral and slow-axis steps when the file has `/aline_um` and `/position_um`.
    pub aline_spacing_um: Option<f64>,
    pub position_spacing_um: Option<f64>,
}

/// An open volume.h5 for reading `/volume_db` frame by frame in dB
/// (uint16 volumes unpacked with their CF `scale_factor`/`add_offset`).
pub struct DbReader {
    file: hdf5::File,
    ds: Dataset,
    /// (scale, offset) of a packed uint16 volume.
    packed: Option<(f64, f64)>,
    /// (frames, depth, A-lines).
    pub shape: [usize; 3],
}

impl DbReader {
    pub fn open(path: &Path) -> Result<DbReader> {
        let file = hdf5::File::open(path).map_err(concise).with_context(|| format!("opening {}", path.display()))?;
        let ds = file.dataset("volume_db").map_err(concise).with_context(|| format!("{}: /volume_db", path.display()))?;
        let shape = match ds.shape().as_slice() {
            &[f, d, a] => [f, d, a],
            other => anyhow::bail!("{}: /volume_db has {} dimensions, expected 3 (frame, depth, A-line)", path.display(), other.len()),
        };
        let packed = ds.dtype().map_err(concise)?.is::<u16>().then(|| {
            (ds.attr("scale_factor").and_then(|a| a.read_scalar::<f64>()).unwrap_or(PACKED_DB_STEP), ds.attr("add_offset").and_then(|a| a.read_scalar::<f64>()).unwrap_or(PACKED_DB_OFFSET))
        });
        Ok(DbReader { file, ds, packed, shape })
    }

    /// Frame `index` in dB.
    pub fn frame(&self, index: usize) -> Result<Array2<f32>> {
        Ok(match self.packed {
            Some((scale, offset)) => {
                let raw: Array2<u16> = self.ds.read_slice(ndarray::s![index, .., ..]).map_err(concise)?;
                raw.mapv(|v| (v as f64 * scale + offset) as f32)
            }
            None => self.ds.read_slice(ndarray::s![index, .., ..]).map_err(concise)?,
        })
    }

    /// The frames `every`-th apart (0, every, 2·every, …) with the axes.
    pub fn frames(&self, every: usize) -> Result<DbFrames> {
        let indices: Vec<usize> = (0..self.shape[0]).step_by(every.max(1)).collect();
        let images = indices.iter().map(|&f| self.frame(f)).collect::<Result<Vec<_>>>()?;
        let VolumeAxes { depth_um, depth_spacing_um, aline_spacing_um, position_spacing_um } = self.axes()?;
        Ok(DbFrames { frames: self.shape[0], indices, images, depth_um, depth_spacing_um, aline_spacing_um, position_spacing_um })
    }

    /// Depth axis (µm), depth spacing, and the lateral and slow-axis steps when known.
    pub fn axes(&self) -> Result<VolumeAxes> {
        let depth_um: Vec<f64> = self.file.dataset("depth_um").and_then(|d| d.read_raw::<f64>()).map_err(concise).context("/depth_um")?;
        let spacing = self.ds.attr("depth_spacing_um").and_then(|a| a.read_scalar::<f64>()).map_err(concise).context("depth_spacing_um")?;
        let step = |name: &str| -> Option<f64> {
            let v = self.file.dataset(name).ok()?.read_raw::<f64>().ok()?;
            (v.len() >= 2).then(|| v[1] - v[0])
        };
        Ok(VolumeAxes { depth_um, depth_spacing_um: spacing, aline_spacing_um: step("aline_um"), position_spacing_um: step("position_um") })
    }
}

/// The axes of a volume.h5.
pub struct VolumeAxes {
    pub depth_um: Vec<f64>,
    pub depth_spacing_um: f64,
    pub aline_spacing_um: Option<f64>,
    pub position_spacing_um: Option<f64>,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn packing_rounds_clamps_and_zeroes_nan() {
        // CF conventions 1.11, §8.1 (packed data): unpacked = packed ·
        // scale_factor + add_offset, so packed = (d − (−240 dB)) / 0.01 dB,
        // rounded to nearest; outside the uint16
        // range clamped; NaN (never produced, but not undefined) to 0.
        let d = ndarray::arr2(&[[-300.0f32, -240.0, 0.0, 12.344], [415.35, 500.0, f32::NAN, -239.996]]);
        let p = pack_db(&d);
        assert_eq!(p, ndarray::arr2(&[[0u16, 0, 24000, 25234], [65535, 65535, 0, 0]]));
        // A transposed (not standard layout) image packs the same values.
        assert_eq!(pack_db(&d.t().to_owned()), pack_db(&d).t());
    }
}
