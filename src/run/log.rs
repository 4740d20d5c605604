//! The contents of log.json: what was read, how it was processed, what was
//! written, and (in its own `timing` section) how long it took.

use serde::Serialize;

use crate::contrast::doppler::DopplerScale;
use crate::contrast::position::FrameShift;
use crate::io::capture::{SampleType, ScanAttributes, WavelengthSource};
use crate::io::capture::AxisName;
use crate::pipeline::config::{AngiographyMethod, DopplerPairs, PipelineConfig, Projection};
use crate::pipeline::plan::PlanSummary;

#[derive(Debug, Serialize)]
pub struct ToolInfo {
    pub name: &'static str,
    pub version: &'static str,
}

#[derive(Debug, Serialize)]
pub struct InputInfo {
    /// As given on the command line.
    pub path: String,
    /// The same made absolute (what `rerun` falls back to from elsewhere).
    pub absolute_path: String,
    pub fringes_dataset: String,
    pub shape: Vec<usize>,
    pub axes: Vec<AxisName>,
    pub dtype: SampleType,
    pub frames: usize,
    pub alines: usize,
    pub pixels: usize,
    pub full_scale: Option<f64>,
    pub wavelength_map: WavelengthSource,
    pub has_background: bool,
    /// For a capture that is not HDF5: its format, stored sample type and
    /// order (`dtype` is the type its frames are held in).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub format: Option<String>,
    /// The background file used instead of the capture's dataset.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub background_file: Option<FileRecord>,
    /// The sidecar beside the capture whose keys described it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sidecar: Option<FileRecord>,
    /// Scan facts and the full scale given by the pipeline's `[input]`
    /// over what the file records.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub given_by_pipeline: Vec<String>,
    /// Scan attributes of the fringes (A-line period, spacings), when recorded.
    #[serde(skip_serializing_if = "ScanAttributes::is_empty")]
    pub scan: ScanAttributes,
}

/// A file the run read besides the capture.
#[derive(Debug, Clone, Serialize)]
pub struct FileRecord {
    pub path: String,
    pub file_hash: String,
}

/// The version of log.json's layout (1: before it was recorded; 3: Doppler λ0
/// is the power-weighted centroid, registration names displacement and
/// correction; see docs/json-reference.md).
pub const LOG_FORMAT_VERSION: u32 = 3;

#[derive(Debug, Serialize)]
pub struct FrameRecord {
    /// Output frame (slow-axis position when averaging).
    pub index: usize,
    /// Input frames that made it.
    pub input_frames: [usize; 2],
    pub noise_floor_db: f64,
    pub peak_db: f64,
    pub saturated_samples: u64,
    /// dB shown black and white in its image.
    pub black_db: f64,
    pub white_db: f64,
}

/// Effect of averaging repeated B-scans, measured on the first position.
#[derive(Debug, Serialize)]
pub struct AveragingRecord {
    pub frames_per_position: usize,
    /// Median dB (noise floor) of one B-scan and of the average.
    pub noise_floor_single_db: f64,
    pub noise_floor_averaged_db: f64,
    /// Standard deviation of the noise (linear amplitude over the deepest
    /// tenth of the depth range), one B-scan and averaged, and the reduction
    /// 20·log10(single/averaged); independent noise gives about 10·log10(N) dB.
    pub noise_sd_single: f64,
    pub noise_sd_averaged: f64,
    pub noise_sd_reduction_db: f64,
}

/// How en-face.png was made from `/en_face_db`.
#[derive(Debug, Serialize)]
pub struct EnFaceRecord {
    /// Depth slab projected (first and last pixel centre, µm in air).
    pub depth_um: [f64; 2],
    pub projection: Projection,
    /// dB mapped to black and to white (the 1st and 99.5th percentiles).
    pub black_db: f64,
    pub white_db: f64,
}

/// What the contrast stages did (registration, Doppler, angiography,
/// complex output).
#[derive(Debug, Default, Serialize)]
pub struct ContrastRecord {
    #[serde(skip_serializing_if = "Option::is_none")]
    pub complex_output: Option<ComplexRecord>,
    /// Every B-scan's measured displacement, the correction applied and its
    /// registration peaks.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub registration: Vec<FrameShift>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub registration_convention: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub doppler: Option<DopplerRecord>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub angiography: Option<AngiographyRecord>,
}

#[derive(Debug, Serialize)]
pub struct ComplexRecord {
    pub dataset: &'static str,
    /// Centre of the uniform wavenumber grid, rad/µm: a reflector at
    /// optical depth z has phase 2·k_centre·z.
    pub k_centre_per_um: f64,
    pub phase_convention: &'static str,
}

#[derive(Debug, Serialize)]
pub struct DopplerRecord {
    pub between: DopplerPairs,
    pub scale: DopplerScale,
    /// Where the period T came from.
    pub period_source: String,
    /// The colour bar's range, ±mm/s.
    pub velocity_range_mm_s: f64,
    pub sign: &'static str,
    /// Per position: the mean bulk-motion phase removed per frame (A-line
    /// pairs) or per repeat pair, rad (the circular mean of the pairs').
    pub bulk_phase_rad: Vec<Vec<f64>>,
    /// How the bulk phase was voted, when bulk correction is on.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub bulk_vote: Option<BulkVoteRecord>,
    /// Which A-line (or pixel) a velocity belongs to.
    pub placement: &'static str,
}

#[derive(Debug, Serialize)]
pub struct BulkVoteRecord {
    pub method: &'static str,
    /// Pixels above the threshold over all pairs, and of those the ones
    /// marked as flow and left out of the vote.
    pub bright_pixels: usize,
    pub flow_pixels_left_out: usize,
}

#[derive(Debug, Serialize)]
pub struct AngiographyRecord {
    pub methods: Vec<AngiographyMethod>,
    pub repeats_per_position: usize,
    /// Pixels below the structure's noise floor + this are masked (NaN).
    pub noise_bias_threshold_db: f64,
    pub noise_bias_note: &'static str,
    /// Per position: the structure image's noise floor, dB.
    pub noise_floor_db: Vec<f64>,
    /// Per method and position: the value shown white in its PNG (the
    /// 99.5th percentile of the unmasked values; black is 0).
    pub white: Vec<(AngiographyMethod, Vec<f64>)>,
    /// How speckle variance is normalised, when it ran.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub speckle_variance_normalisation: Option<&'static str>,
    pub en_face_depth_um: Option<[f64; 2]>,
    pub en_face_from_surface: bool,
    pub en_face_projection: Projection,
}

#[derive(Debug, Serialize)]
pub struct Timing {
    pub note: &'static str,
    pub read_seconds: f64,
    /// Seconds per stage, summed over worker threads.
    pub stage_thread_seconds: serde_json::Map<String, serde_json::Value>,
    pub write_seconds: f64,
    pub total_seconds: f64,
    pub alines_per_second: f64,
    pub threads: usize,
    /// Peak resident memory of the process so far (VmHWM), MB.
    pub peak_resident_mb: Option<f64>,
    /// How the fast path's kernel variant was chosen (forced, measured on
    /// this plan's shape, or cached from an earlier measurement), with the
    /// measured rates; absent for the reference engine.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub kernel_choice: Option<crate::pipeline::fused::tune::Choice>,
}

/// Contents of log.json.
#[derive(Debug, Serialize)]
pub struct ProcessingLog {
    pub format_version: u32,
    pub tool: ToolInfo,
    pub input: InputInfo,
    /// `blake3:<hex>` (or `sha256:<hex>`, as `[output] input_hash` asks) of the input file.
    pub input_hash: String,
    pub pipeline: PipelineConfig,
    pub pipeline_sha256: String,
    /// `fused` (f32 fast path) or `reference` (f64 stage chain).
    pub engine: &'static str,
    /// The fast path's kernel variant that ran (`avx512`, `avx2`, `scalar`):
    /// the fastest on this plan by measurement, or forced with
    /// `FRINGEFLOW_KERNEL`; absent for the reference engine.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub kernel: Option<&'static str>,
    pub derived: PlanSummary,
    /// The automatic dispersion estimate, when `dispersion.method = "auto"`.
    pub dispersion_estimate: Option<crate::calibration::dispersion::DispersionEstimate>,
    pub frames: Vec<FrameRecord>,
    pub averaging: Option<AveragingRecord>,
    /// The en face projection's grey mapping, when one was written.
    pub en_face: Option<EnFaceRecord>,
    /// Registration, Doppler and angiography, when any ran.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub contrast: Option<ContrastRecord>,
    /// Layer surfaces and thickness, when `[layers]` asked for them.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub layers: Option<LayersRecord>,
    pub outputs: Vec<String>,
    pub warnings: Vec<String>,
    pub timing: Timing,
}

/// What layer segmentation found (`layers` in log.json).
#[derive(Debug, Clone, Serialize)]
pub struct LayersRecord {
    /// How the surfaces were found, in words.
    pub method: &'static str,
    pub surfaces: Vec<SurfaceRecord>,
    /// Between consecutive surfaces, top first.
    pub thickness: Vec<ThicknessRecord>,
    /// How the attenuation coefficients were estimated, when asked.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub attenuation: Option<AttenuationRecord>,
    /// The flattening, when `[layers] flatten` asked.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub flattening: Option<FlatteningRecord>,
    /// The en face slabs (`[[layers.slab]]`).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub slabs: Vec<SlabRecord>,
}

#[derive(Debug, Clone, Serialize)]
pub struct FlatteningRecord {
    /// The surface made straight.
    pub surface: String,
    /// The depth it was moved to, µm in air.
    pub depth_um: Option<f64>,
    pub method: &'static str,
    /// Smallest and largest shift applied, depth pixels (positive: deeper).
    pub shift_px_range: Option<[f64; 2]>,
    /// Per position: A-lines whose shift was interpolated (surface
    /// missing there); null: the position was not flattened.
    pub missing_alines_per_frame: Vec<Option<usize>>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SlabRecord {
    pub name: String,
    /// Top and bottom in words (surfaces or depths, with offsets).
    pub edges: String,
    pub projection: &'static str,
    /// Per position: A-lines where the slab held no rows.
    pub empty_alines_per_frame: Vec<usize>,
}

#[derive(Debug, Clone, Serialize)]
pub struct AttenuationRecord {
    pub method: &'static str,
    pub corrections_applied: Vec<String>,
    pub not_corrected: Vec<String>,
    /// What the per-layer medians leave out.
    pub medians_exclude: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct SurfaceRecord {
    pub label: String,
    pub polarity: &'static str,
    /// Per stored frame (position): A-lines where this surface was not
    /// found (NaN in /surfaces_um).
    pub missing_alines_per_frame: Vec<usize>,
    /// Mean depth in air over the A-lines where it was found, µm.
    pub mean_depth_um: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ThicknessRecord {
    /// "upper-lower" by the surfaces' labels.
    pub layer: String,
    /// Depth difference in air ÷ this = thickness in tissue.
    pub group_index: f64,
    /// Over every A-line of every position where both surfaces were found, µm in tissue.
    pub mean_um: Option<f64>,
    pub median_um: Option<f64>,
    /// Median attenuation coefficient inside the layer, mm⁻¹ (with
    /// `[layers] attenuation`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub attenuation_median_per_mm: Option<f64>,
}
