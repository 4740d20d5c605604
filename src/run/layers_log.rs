//! The `layers` section of log.json, from what the writer kept: surfaces,
//! thickness, attenuation, flattening and slabs.

use super::{log, writer};
use crate::pipeline::config::PipelineConfig;

/// The `layers` section of the log: per surface the A-lines without it per
/// frame and its mean depth, per layer its mean and median thickness.
pub(super) fn layers_record(config: &PipelineConfig, written: &writer::Written) -> Option<log::LayersRecord> {
    let layers = &config.layers;
    if !layers.enabled() {
        return None;
    }
    let labels = layers.labels();
    let n = labels.len();
    let finite_mean = |v: &[f64]| (!v.is_empty()).then(|| writer::round6(v.iter().sum::<f64>() / v.len() as f64));
    let mut per_surface: Vec<Vec<&Vec<f32>>> = vec![Vec::new(); n];
    let mut positions: Vec<usize> = written.surfaces.iter().map(|s| s.0).collect();
    positions.dedup();
    for (_, i, d) in &written.surfaces {
        per_surface[*i].push(d);
    }
    let surfaces = (0..n)
        .map(|i| {
            let values: Vec<f64> = per_surface[i].iter().flat_map(|d| d.iter()).filter(|v| v.is_finite()).map(|&v| v as f64).collect();
            log::SurfaceRecord {
                label: labels[i].clone(),
                polarity: layers.surfaces[i].polarity.name(),
                missing_alines_per_frame: written.surfaces_missing.iter().map(|m| m[i]).collect(),
                mean_depth_um: finite_mean(&values),
            }
        })
        .collect();
    let group_indices = layers.layer_group_indices();
    let thickness = (0..n.saturating_sub(1))
        .map(|i| {
            let mut values: Vec<f64> = per_surface[i]
                .iter()
                .zip(&per_surface[i + 1])
                .flat_map(|(a, b)| a.iter().zip(b.iter()).map(|(x, y)| (y - x) as f64 / group_indices[i]))
                .filter(|v| v.is_finite())
                .collect();
            values.sort_by(f64::total_cmp);
            let median = (!values.is_empty()).then(|| {
                let m = values.len() / 2;
                writer::round6(if values.len() % 2 == 1 { values[m] } else { 0.5 * (values[m - 1] + values[m]) })
            });
            let attenuation_median_per_mm = written.attenuation.get(i).and_then(|h| h.median()).map(|m| (m * 1e4).round() / 1e4);
            log::ThicknessRecord { layer: format!("{}-{}", labels[i], labels[i + 1]), group_index: group_indices[i], mean_um: finite_mean(&values), median_um: median, attenuation_median_per_mm }
        })
        .collect();
    let flattening = layers.flatten.as_ref().map(|label| {
        let shifts: Vec<f32> = written.flattening.iter().flatten().flat_map(|(s, _, _)| s.iter().copied()).collect();
        let (lo, hi) = shifts.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &v| (l.min(v as f64), h.max(v as f64)));
        log::FlatteningRecord {
            surface: label.clone(),
            depth_um: written.flattening.iter().flatten().map(|f| writer::round6(f.2)).next(),
            method: "each A-line shifted by a linear phase ramp on its complex profile's DFT, taken relative to the profile's carrier (band-limited, sub-pixel); every repeat alike; /flattening_shift_px",
            shift_px_range: (!shifts.is_empty()).then(|| [writer::round6(lo), writer::round6(hi)]),
            missing_alines_per_frame: written.flattening.iter().map(|f| f.as_ref().map(|f| f.1)).collect(),
        }
    });
    let slabs = layers
        .slabs
        .iter()
        .zip(&written.slabs)
        .map(|(slab, w)| log::SlabRecord {
            name: slab.name.clone(),
            edges: writer::describe_slab(slab),
            projection: slab.projection.name(),
            empty_alines_per_frame: w.empty_alines.clone(),
        })
        .collect();
    Some(log::LayersRecord {
        flattening,
        slabs,
        method: "minimum-cost path across the A-lines on the signed axial gradient (Chiu et al. 2010), dynamic programming, surfaces top first within their separation limits; sub-pixel at a thin interface's peak or a step's steepest edge",
        surfaces,
        thickness,
        attenuation: layers.attenuation.then(|| log::AttenuationRecord {
            method: "depth-resolved: mu[i] = I[i] / (2 * sum_{j>i} I[j] * dz_j) (Vermeer et al. 2014), I the linear intensity, dz_j the pixel size in the medium (depth step in air / the layer's group index)",
            corrections_applied: [
                Some("noise floor power subtracted".to_string()),
                Some(format!("intensity averaged over {} A-lines before the ratio (speckle)", layers.attenuation_alines)),
                layers.rolloff_6db_depth_um.map(|z| format!("roll-off divided out: Gaussian amplitude fall, one half at {z} um")),
                layers.attenuation_resampling_correction.then(|| format!(
                    "the k-resampling's interpolation loss divided out: its power transfer at each depth, computed from the plan's {} interpolation tables (/attenuation_depth_gain)",
                    serde_json::to_value(config.k_linearization.method).ok().and_then(|v| v.as_str().map(String::from)).unwrap_or_default()
                )),
            ]
            .into_iter()
            .flatten()
            .collect(),
            not_corrected: [
                layers.rolloff_6db_depth_um.is_none().then(|| "the spectrometer's roll-off (give layers.rolloff_6db_depth_um from measure rolloff)".to_string()),
                (!layers.attenuation_resampling_correction).then(|| "the k-resampling's interpolation loss (layers.attenuation_resampling_correction = false)".to_string()),
            ]
            .into_iter()
            .flatten()
            .collect(),
            medians_exclude: format!(
                "{} px next to each surface and the bottom {:.0} % of the depth range, where the sum below lacks the light beyond the range",
                crate::contrast::attenuation::EDGE_PX,
                crate::contrast::attenuation::BOTTOM_FRACTION * 100.0
            ),
        }),
    })
}

