//! The compute phase of a capture: frames read on one thread, reconstructed
//! (dB image, and the complex depth profile when a contrast stage needs it)
//! on the caller's thread with the rayon pool, grouped by position and put
//! through `contrast::position`, then handed to the writer thread. The
//! reader fetches frame f+1 while frame f is reconstructed and the writer
//! stores position p−1; reader and writer never use the rayon pool (this
//! loop may run on a pool worker and block on their channels).

use anyhow::Result;
use ndarray::Array2;
use rustfft::num_complex::Complex32;
use std::sync::atomic::Ordering;
use std::time::Instant;

use super::writer::{Writer, Written};
use super::{transpose, Interrupted, Planned, RunContext};
use crate::open::samples;
use crate::contrast::position::{PositionOutput, PositionProcessor, RepeatFrame};
use crate::io::capture::{Capture, RawFrame};
use crate::pipeline::config::PipelineConfig;
use crate::pipeline::fused::{Extra, FusedPlan, FusedTimer};

pub struct Computed {
    pub written: Written,
    pub read_seconds: f64,
    pub stage_seconds: serde_json::Map<String, serde_json::Value>,
    /// The fast path's variant and how it was chosen (None: reference engine).
    pub kernel: Option<(crate::pipeline::kernel::Variant, crate::pipeline::fused::tune::Choice)>,
}

pub fn run(capture: &Capture, config: &PipelineConfig, planned: &Planned, writer: Writer<'_>, ctx: &RunContext<'_>) -> Result<Computed> {
    let (frames, alines) = (capture.frames, capture.alines);
    let plan = &planned.plan;
    let depth = plan.summary.depth_pixels;
    let average = config.volume.average;
    let positions = frames / average;
    let needs_complex = config.needs_complex();
    let needs_amplitude = config.needs_amplitude() && !needs_complex;
    let fused = (!ctx.reference_engine).then(|| FusedPlan::new(plan));
    let timer = plan.new_timer();
    let fused_timer = FusedTimer::default();
    let mut processor = PositionProcessor::new(config, planned.depth_um.clone(), alines, planned.doppler.as_ref().map(|(s, _)| *s));

    let (written, read_s) = std::thread::scope(|scope| -> Result<_> {
        let (raw_tx, raw_rx) = std::sync::mpsc::sync_channel::<Result<(RawFrame, u64, f64)>>(2);
        let cancel = ctx.cancel;
        scope.spawn(move || {
            for f in 0..frames {
                if cancel.is_some_and(|c| c.load(Ordering::Relaxed)) {
                    break;
                }
                let t = Instant::now();
                let r = capture.read_raw_frame(f).map(|(raw, sat)| (raw, sat, t.elapsed().as_secs_f64()));
                let failed = r.is_err();
                if raw_tx.send(r).is_err() || failed {
                    break;
                }
            }
        });
        let (out_tx, out_rx) = std::sync::mpsc::sync_channel::<PositionOutput>(2);
        let (free_tx, free_rx) = std::sync::mpsc::channel::<Array2<f32>>();
        let stopped = move || cancel.is_some_and(|c| c.load(Ordering::Relaxed));
        let writer_thread = scope.spawn(move || -> Result<Written> {
            let mut writer = writer;
            // On a stop, what is queued is dropped unwritten.
            for p in out_rx {
                if stopped() {
                    return Err(Interrupted.into());
                }
                let image = writer.write(p)?;
                let _ = free_tx.send(image);
            }
            if stopped() {
                return Err(Interrupted.into());
            }
            writer.finish(positions)
        });

        let mut read_s = 0.0;
        let mut repeats: Vec<RepeatFrame> = Vec::with_capacity(average);
        let mut spares: Vec<RepeatFrame> = Vec::new();
        let mut sub_band_db = Array2::<f32>::zeros((0, 0));
        let mut result: Result<()> = Ok(());
        for f in 0..frames {
            if ctx.cancel.is_some_and(|c| c.load(Ordering::Relaxed)) {
                result = Err(Interrupted.into());
                break;
            }
            let (raw, saturated, secs) = match raw_rx.recv() {
                Ok(Ok(r)) => r,
                Ok(Err(e)) => {
                    result = Err(e);
                    break;
                }
                Err(_) => {
                    result = Err(Interrupted.into());
                    break;
                }
            };
            read_s += secs;
            // Buffers come back from the position before (a repeat slot's
            // own), or from the writer (structure images), else are new.
            let slot = repeats.len();
            let spare = spares.get_mut(slot).map(std::mem::take);
            let (mut db, mut complex, mut sub_band_buffers, mut amplitude) = match spare {
                Some(RepeatFrame { db, complex, sub_bands, amplitude, .. }) => {
                    let db = if db.dim() == (depth, alines) { db } else { free_rx.try_recv().unwrap_or_else(|_| Array2::<f32>::zeros((depth, alines))) };
                    (db, complex, sub_bands, amplitude)
                }
                None => (
                    free_rx.try_recv().unwrap_or_else(|_| Array2::<f32>::zeros((depth, alines))),
                    needs_complex.then(|| Array2::<Complex32>::zeros((depth, alines))),
                    Vec::new(),
                    Array2::zeros((0, 0)),
                ),
            };
            if needs_amplitude && amplitude.dim() != (depth, alines) {
                amplitude = Array2::zeros((depth, alines));
            }
            match (&fused, complex.as_mut()) {
                (Some(fp), Some(c)) => fp.process_raw_image_staged(samples(&raw), &mut db, Extra { complex: Some(c), amplitude: None }, &fused_timer),
                (Some(fp), None) if needs_amplitude => fp.process_raw_image_staged(samples(&raw), &mut db, Extra { complex: None, amplitude: Some(&mut amplitude) }, &fused_timer),
                (Some(fp), None) => fp.process_raw_image(samples(&raw), &mut db, &fused_timer),
                (None, c) => {
                    let mut rows = Array2::<f32>::zeros((alines, depth));
                    match c {
                        Some(c) => {
                            let mut crows = Array2::<Complex32>::zeros((alines, depth));
                            plan.process_frame_complex(raw.to_f64().view(), &mut rows, &mut crows, &timer);
                            *c = transpose(&crows);
                        }
                        None => plan.process_frame(raw.to_f64().view(), &mut rows, &timer),
                    }
                    db = transpose(&rows);
                    if needs_amplitude {
                        amplitude = db.mapv(|d| 10f32.powf(d / 20.0));
                    }
                }
            }
            // Split-spectrum: each sub-band's amplitude from the same raw frame.
            sub_band_buffers.resize_with(planned.sub_bands.len(), || Array2::<f32>::zeros((depth, alines)));
            if !planned.sub_bands.is_empty() && sub_band_db.dim() != (depth, alines) {
                sub_band_db = Array2::zeros((depth, alines));
            }
            for (sp, band) in planned.sub_bands.iter().zip(sub_band_buffers.iter_mut()) {
                sp.process_raw_image_with(samples(&raw), &mut sub_band_db, Extra { complex: None, amplitude: Some(band) }, &fused_timer);
            }
            let sub_bands = sub_band_buffers;
            drop(raw);
            // A frame cut short by a stop is never passed on.
            if stopped() {
                result = Err(Interrupted.into());
                break;
            }
            for p in [ctx.progress, ctx.capture_progress].into_iter().flatten() {
                p.inc(1);
            }
            if let Some(tell) = ctx.on_frame {
                tell(f + 1, capture.frames);
            }
            repeats.push(RepeatFrame { index: f, db, complex, sub_bands, saturated, amplitude });
            if repeats.len() < average {
                continue;
            }
            let output = match processor.process(f / average, &mut repeats) {
                Ok(o) => o,
                Err(e) => {
                    result = Err(e);
                    break;
                }
            };
            spares = std::mem::replace(&mut repeats, Vec::with_capacity(average));
            if out_tx.send(output).is_err() {
                break; // the writer failed; its error is returned below
            }
        }
        drop(out_tx);
        drop(raw_rx);
        let written = writer_thread.join().map_err(|_| anyhow::anyhow!("the writer thread panicked"))?;
        result?;
        Ok((written?, read_s))
    })?;

    let mut stage_seconds = serde_json::Map::new();
    if fused.is_some() {
        for (part, s) in FusedTimer::PARTS.iter().zip(fused_timer.seconds()) {
            stage_seconds.insert(format!("fused:{part}"), serde_json::json!(s));
        }
    } else {
        for (stage, s) in plan.stage_names().iter().zip(timer.seconds()) {
            stage_seconds.insert(stage.to_string(), serde_json::json!(s));
        }
    }
    let kernel = fused.as_ref().map(|f| (f.variant, f.choice.clone()));
    Ok(Computed { written, read_seconds: read_s, stage_seconds, kernel })
}
