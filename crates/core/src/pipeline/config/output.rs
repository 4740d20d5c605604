//! The `[output]` and `[volume]` sections of the pipeline file: which
//! files a run writes and how (PNGs, volume.h5 and its stored type, the
//! complex profile, the report, OME-TIFF, the input digest), and the
//! averaging of repeats and the en face projection.

use serde::{Deserialize, Deserializer, Serialize};

use crate::settings::de_usize_in;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct OutputConfig {
    /// One PNG per frame.
    pub png: bool,
    /// volume.h5 with the dB volume.
    pub volume: bool,
    /// How volume.h5 stores dB: float32, or uint16 in 0.01 dB steps (half
    /// the bytes). Left out of the pipeline's serialised form (and so of its
    /// SHA-256) when it is the default.
    #[serde(skip_serializing_if = "VolumeType::is_float32")]
    pub volume_type: VolumeType,
    /// Also write the complex depth profile of every input frame (after
    /// dispersion, window and FFT, before log compression) into volume.h5
    /// as `/complex_depth_profile`, complex64. Left out of the serialised
    /// pipeline when off.
    #[serde(skip_serializing_if = "is_false")]
    pub complex: bool,
    /// report.html beside the outputs (needs the volume). Left out of the
    /// serialised pipeline when on (the default): it changes no number.
    #[serde(skip_serializing_if = "is_true")]
    pub report: bool,
    /// Frames embedded in report.html: every N-th; 0 (the default) chooses N
    /// so that the page holds at most about 32 M pixels. Left out of the
    /// serialised pipeline when 0.
    #[serde(skip_serializing_if = "is_zero")]
    pub report_frame_step: usize,
    /// Also write volume.ome.tif: the dB volume as OME-TIFF with its
    /// physical pixel sizes (needs the volume). Left out of the serialised
    /// pipeline when off.
    #[serde(skip_serializing_if = "is_false")]
    pub ome_tiff: bool,
    /// Also write bscan-NNNN-scaled.png: each B-scan resampled to its
    /// physical aspect with a scale bar and a dB colour bar (needs the
    /// lateral step). Left out of the serialised pipeline when off.
    #[serde(skip_serializing_if = "is_false")]
    pub scaled_png: bool,
    /// The digest of the input recorded in log.json: `blake3` (the default)
    /// or `sha256` for records that require it. Left out of the serialised
    /// pipeline when blake3.
    #[serde(skip_serializing_if = "InputHash::is_blake3")]
    pub input_hash: InputHash,
    /// Deflate effort of the PNGs: `none` (stored: the least CPU, a little
    /// bigger), `fast` (the default) or `small` (the smallest files,
    /// slowest). Left out of the serialised pipeline when
    /// fast. (`png = false` writes no B-scan PNGs at all.)
    #[serde(skip_serializing_if = "PngCompression::is_fast")]
    pub png_compression: PngCompression,
}

/// `[output] input_hash`.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum InputHash {
    #[default]
    Blake3,
    Sha256,
}

impl InputHash {
    fn is_blake3(&self) -> bool {
        *self == InputHash::Blake3
    }
}

/// `[output] png_compression`.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum PngCompression {
    None,
    #[default]
    Fast,
    Small,
}

impl PngCompression {
    fn is_fast(&self) -> bool {
        *self == PngCompression::Fast
    }
}

fn is_false(b: &bool) -> bool {
    !*b
}

fn is_true(b: &bool) -> bool {
    *b
}

fn is_zero(n: &usize) -> bool {
    *n == 0
}

impl Default for OutputConfig {
    fn default() -> Self {
        OutputConfig { png: true, volume: true, volume_type: VolumeType::Float32, complex: false, report: true, report_frame_step: 0, ome_tiff: false, scaled_png: false, input_hash: InputHash::Blake3, png_compression: PngCompression::Fast }
    }
}

/// The stored type of volume.h5's dB values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum VolumeType {
    #[default]
    Float32,
    /// dB = stored · scale_factor + add_offset (CF packing attributes):
    /// 0.01 dB steps from −240 dB (the amplitude floor) to +415 dB.
    Uint16,
}

impl VolumeType {
    pub fn is_float32(&self) -> bool {
        *self == VolumeType::Float32
    }
}

/// How an en face image projects the depth range.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Projection {
    Mean,
    Max,
}

fn de_average<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 1, 256)
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct VolumeConfig {
    /// Repeated B-scans per slow-axis position, averaged (linear amplitude)
    /// before log compression; frames must be a multiple of it.
    #[serde(deserialize_with = "de_average")]
    pub average: usize,
    /// Write an en face projection (en-face.png and /en_face_db).
    pub en_face: bool,
    /// Depth range of the projection, µm in air [start, end); none: all depths.
    pub en_face_depth_um: Option<[f64; 2]>,
    /// Mean or maximum of the dB values over the range.
    pub en_face_projection: Projection,
}

impl Default for VolumeConfig {
    fn default() -> Self {
        VolumeConfig { average: 1, en_face: false, en_face_depth_um: None, en_face_projection: Projection::Mean }
    }
}
