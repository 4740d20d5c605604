//! Contrast workloads in memory: Doppler, angiography and registration on
//! the bench capture, against the intensity pipeline, same run.

use anyhow::Result;
use ndarray::Array2;
use rustfft::num_complex::Complex32;
use std::time::Instant;

use super::*;
use crate::open::samples;
use crate::io::capture::{Capture, RawFrame};
use crate::pipeline::config::PipelineConfig;
use crate::pipeline::fused::{Extra, FusedPlan};
use crate::pipeline::plan::Plan;

/// Contrast workloads in memory: each frame reconstructed with its complex
/// profile, every 4 frames one position through `contrast::position`, with
/// the buffers reused from position to position as `run` does.
pub(super) fn time_contrast(base: &PipelineConfig, capture: &Capture, plan: &Plan, frames: &[RawFrame], opts: &BenchOptions, pipe_rate: f64) -> Result<Vec<ContrastPoint>> {
    use crate::contrast::doppler::DopplerScale;
    use crate::contrast::position::{PositionProcessor, RepeatFrame};
    const N: usize = 4;
    let (alines, _) = capture.frame_shape();
    let depth = plan.summary.depth_pixels;
    let depth_um: Vec<f64> = (0..depth).map(|i| plan.depth_um(i)).collect();
    let fused = FusedPlan::new(plan);
    const LAYERS: &str = "[layers]\n[[layers.surface]]\nlabel = \"a\"\n[[layers.surface]]\nlabel = \"b\"\nmin_separation_um = 40\n[[layers.surface]]\nlabel = \"c\"\nmin_separation_um = 40\n[[layers.slab]]\nname = \"ab\"\ntop = \"a\"\nbottom = \"b\"\n[[layers.slab]]\nname = \"bc\"\ntop = \"b\"\nbottom = \"c\"\n";
    let with_flattening = format!("[angiography]\nmethods = [\"decorrelation\"]\n{}", LAYERS.replace("[layers]\n", "[layers]\nflatten = \"a\"\n"));
    let workloads: [(&str, &str); 8] = [
        ("complex depth profile only (no contrast stage)", "[output]\ncomplex = true\n"),
        ("Doppler between A-lines (Kasai 3 x 4)", "[doppler]\nenabled = true\n"),
        ("angiography N = 4, decorrelation", "[angiography]\nmethods = [\"decorrelation\"]\n"),
        ("angiography N = 4, decorrelation + registration", "[angiography]\nmethods = [\"decorrelation\"]\n[registration]\nrepeats = true\n"),
        ("angiography N = 4, split-spectrum (4 bands)", "[angiography]\nmethods = [\"split_spectrum\"]\n"),
        ("angiography N = 4, all four methods", "[angiography]\nmethods = [\"decorrelation\", \"split_spectrum\", \"speckle_variance\", \"complex_difference\"]\n"),
        ("layers: three surfaces and two slabs (N = 4 averaged)", LAYERS),
        ("layers: three surfaces, flattening, two slabs, decorrelation", &with_flattening),
    ];
    let positions = (opts.alines.div_ceil(alines).div_ceil(N)).clamp(2, 16);
    let mut out = Vec::new();
    for (name, extra) in workloads {
        let mut config: PipelineConfig = PipelineConfig::from_str("bench", &format!("{PIPELINE}\n[volume]\naverage = {N}\n{extra}")).map_err(|e| anyhow::anyhow!("{e}"))?;
        config.input = base.input.clone();
        let sub_bands: Vec<FusedPlan> = if config.angiography.methods.contains(&crate::pipeline::config::AngiographyMethod::SplitSpectrum) {
            let shaping = plan.shaping_gain();
            crate::contrast::angiography::sub_band_windows(plan.summary.k_samples, config.angiography.split_bands, config.angiography.split_band_fwhm)
                .into_iter()
                .map(|w| {
                    let gain: Vec<f64> = w.iter().zip(&shaping).map(|(a, b)| a * b).collect();
                    FusedPlan::with_spectral_gain(plan, &gain, 2.0 / w.iter().sum::<f64>())
                })
                .collect()
        } else {
            Vec::new()
        };
        let centre = plan.summary.band_centre_wavelength_nm;
        let scale = config.doppler.enabled.then(|| DopplerScale::new(centre, config.doppler.group_index, 20.0, centre, "band centre (bench)"));
        let timer = fused.new_timer();
        let mut runs = Vec::new();
        for _ in 0..opts.repeats.min(3) {
            let mut processor = PositionProcessor::new(&config, depth_um.clone(), alines, scale);
            let needs_complex = config.needs_complex();
            let mut repeats: Vec<RepeatFrame> = (0..N)
                .map(|_| RepeatFrame {
                    db: Array2::<f32>::zeros((depth, alines)),
                    complex: needs_complex.then(|| Array2::<Complex32>::zeros((depth, alines))),
                    sub_bands: sub_bands.iter().map(|_| Array2::<f32>::zeros((depth, alines))).collect(),
                    amplitude: if needs_complex { Array2::zeros((0, 0)) } else { Array2::zeros((depth, alines)) },
                    ..Default::default()
                })
                .collect();
            let mut scratch = Array2::<f32>::zeros((depth, alines));
            let start = Instant::now();
            for p in 0..positions {
                for (r, slot) in repeats.iter_mut().enumerate() {
                    let raw = &frames[(p * N + r) % frames.len()];
                    if slot.db.dim() != (depth, alines) {
                        slot.db = Array2::<f32>::zeros((depth, alines));
                    }
                    let extra = match slot.complex.as_mut() {
                        Some(c) => Extra { complex: Some(c), amplitude: None },
                        None => Extra { complex: None, amplitude: Some(&mut slot.amplitude) },
                    };
                    fused.process_raw_image_staged(samples(raw), &mut slot.db, extra, &timer);
                    for (sp, band) in sub_bands.iter().zip(slot.sub_bands.iter_mut()) {
                        sp.process_raw_image_with(samples(raw), &mut scratch, Extra { complex: None, amplitude: Some(band) }, &timer);
                    }
                    slot.index = p * N + r;
                }
                std::hint::black_box(processor.process(p, &mut repeats)?);
            }
            runs.push((positions * N * alines) as f64 / start.elapsed().as_secs_f64());
        }
        let rate = median(runs);
        out.push(ContrastPoint { workload: name.into(), alines_per_second: rate, over_pipeline: rate / pipe_rate });
    }
    Ok(out)
}
