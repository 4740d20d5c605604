//! What a capture will cost before it is reconstructed: the memory its
//! reconstruction holds at its peak, and the bytes its outputs take on disk
//! (checked against the output file system's free space).

use anyhow::Result;
use std::path::Path;

use super::open::Opened;
use super::plan::Planned;
use crate::io::capture::Capture;
use crate::pipeline::config::PipelineConfig;

/// Bytes one capture's reconstruction holds at its peak: the frames in
/// flight between reader, pipeline and writer, one position's repeats
/// with their complex profiles, amplitudes and sub-bands, the contrast
/// stages' working arrays, and the images waiting for the writer.
pub fn memory_estimate(capture: &Capture, config: &PipelineConfig, depth: usize) -> u64 {
    // In u128, so sizes a file declares cannot wrap.
    let px = capture.alines as u128 * depth as u128;
    let raw = capture.alines as u128 * capture.pixels as u128 * 8; // f64 at worst
    let bands = if config.angiography.methods.contains(&crate::pipeline::config::AngiographyMethod::SplitSpectrum) { config.angiography.split_bands as u128 } else { 0 };
    let per_repeat = px * (4 + if config.needs_complex() { 8 } else { 0 } + if config.has_contrast() { 4 } else { 0 } + 4 * bands);
    let n = config.volume.average as u128;
    let working = if config.has_contrast() { px * (16 + 4 * 8) } else { 0 };
    let outputs = px * (4 + 4 * (config.angiography.methods.len() as u128 + config.doppler.enabled as u128)) + if config.output.complex { px * 8 * n } else { 0 };
    u64::try_from(3 * raw + n * per_repeat + working + 3 * outputs + px * 8).unwrap_or(u64::MAX)
}
/// Bytes the outputs of one capture take, before anything is written:
/// volume.h5's datasets exactly (they are stored uncompressed), the
/// OME-TIFF, and the PNGs at a quarter of their raw pixels (compressed;
/// whole when `png_compression = "none"`). The report embeds a subset of
/// the B-scans and is left out.
pub fn output_bytes(config: &PipelineConfig, frames: usize, positions: usize, alines: usize, depth: usize) -> u64 {
    let px = alines as u128 * depth as u128;
    let (pos, frames) = (positions as u128, frames as u128);
    let out = &config.output;
    let contrast_maps = config.angiography.methods.len() as u128 + config.doppler.enabled as u128;
    let mut volume = 0u128;
    if out.volume {
        let sample = match out.volume_type {
            crate::pipeline::config::VolumeType::Float32 => 4,
            crate::pipeline::config::VolumeType::Uint16 => 2,
        };
        volume = pos * px * sample + pos * px * 4 * contrast_maps + pos * alines as u128 * 4 * (1 + config.angiography.methods.len() as u128);
        if out.complex {
            volume += frames * px * 8;
        }
    }
    let tiff = if out.ome_tiff { pos * px * 4 } else { 0 };
    let mut png_raw = 0u128;
    if out.png {
        png_raw = pos * px * (config.log_compression.bit_depth as u128 / 8 + 3 * config.doppler.enabled as u128 + config.angiography.methods.len() as u128);
    }
    if out.scaled_png {
        png_raw += pos * px * 3;
    }
    let png = if out.png_compression == crate::pipeline::config::PngCompression::None { png_raw } else { png_raw / 4 };
    u64::try_from(volume + tiff + png).unwrap_or(u64::MAX)
}

/// Refuses a capture whose outputs cannot fit in the free space of the
/// output file system, before anything is staged.
pub(super) fn check_output_space(opened: &Opened, planned: &Planned, config: &PipelineConfig, out_root: &Path) -> Result<()> {
    let (frames, alines) = (opened.capture.frames, opened.capture.alines);
    let bytes = output_bytes(config, frames, opened.positions, alines, planned.depth_um.len());
    crate::memory::check_space(&format!("the outputs of this capture ({} positions of {alines} A-lines × {} depth pixels)", opened.positions, planned.depth_um.len()), bytes, out_root)
}

