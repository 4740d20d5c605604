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
use std::sync::mpsc::Receiver;
use std::time::Instant;

use super::writer::{Writer, Written};
use super::{transpose, Interrupted, Planned, RunContext};
use crate::open::samples;
use crate::contrast::position::{PositionOutput, PositionProcessor, RepeatFrame};
use crate::io::capture::{Capture, RawFrame};
use crate::pipeline::config::PipelineConfig;
use crate::pipeline::fused::{Extra, FusedPlan, FusedTimer};
use crate::pipeline::plan::StageTimer;

pub struct Computed {
    pub written: Written,
    pub read_seconds: f64,
    pub stage_seconds: serde_json::Map<String, serde_json::Value>,
    /// The fast path's variant and how it was chosen (None: reference engine).
    pub kernel: Option<(crate::pipeline::kernel::Variant, crate::pipeline::fused::tune::Choice)>,
}

/// The frame reconstruction of one capture: the plan (or the fused fast
/// path made from it), the timers and which extra images the contrast
/// stages need.
struct Reconstructor<'p> {
    planned: &'p Planned,
    fused: Option<FusedPlan>,
    timer: StageTimer,
    fused_timer: FusedTimer,
    depth: usize,
    alines: usize,
    needs_complex: bool,
    needs_amplitude: bool,
}

/// Buffers of one repeat slot, reused from position to position.
struct Buffers {
    db: Array2<f32>,
    complex: Option<Array2<Complex32>>,
    sub_bands: Vec<Array2<f32>>,
    amplitude: Array2<f32>,
}

pub fn run(capture: &Capture, config: &PipelineConfig, planned: &Planned, writer: Writer<'_>, ctx: &RunContext<'_>) -> Result<Computed> {
    let (frames, alines) = (capture.frames, capture.alines);
    let plan = &planned.plan;
    let average = config.volume.average;
    let positions = frames / average;
    let needs_complex = config.needs_complex();
    let rec = Reconstructor {
        planned,
        fused: (!ctx.reference_engine).then(|| FusedPlan::new(plan)),
        timer: plan.new_timer(),
        fused_timer: FusedTimer::default(),
        depth: plan.summary.depth_pixels,
        alines,
        needs_complex,
        needs_amplitude: config.needs_amplitude() && !needs_complex,
    };
    let mut processor = PositionProcessor::new(config, planned.depth_um.clone(), alines, planned.doppler.as_ref().map(|(s, _)| *s));
    if config.layers.enabled() && config.layers.attenuation && config.layers.attenuation_resampling_correction {
        processor.set_resampling_power(plan.resampling_power_transfer(&planned.depth_um));
    }

    let (written, read_s) = std::thread::scope(|scope| -> Result<_> {
        let cancel = ctx.cancel;
        let raw_rx = spawn_reader(scope, capture, cancel);
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
            if stopped() {
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
            let spare = spares.get_mut(repeats.len()).map(std::mem::take);
            let buffers = rec.buffers(spare, || free_rx.try_recv().ok());
            let Buffers { db, complex, sub_bands, amplitude } = rec.reconstruct(&raw, buffers, &mut sub_band_db);
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

    Ok(Computed { written, read_seconds: read_s, stage_seconds: rec.stage_seconds(), kernel: rec.fused.as_ref().map(|f| (f.variant, f.choice.clone())) })
}

/// The reader thread: frames in order into a channel of two, stopping at a
/// cancel, at the first read error (sent on) or when the receiver is gone.
fn spawn_reader<'scope>(scope: &'scope std::thread::Scope<'scope, '_>, capture: &'scope Capture, cancel: Option<&'scope std::sync::atomic::AtomicBool>) -> Receiver<Result<(RawFrame, u64, f64)>> {
    let (raw_tx, raw_rx) = std::sync::mpsc::sync_channel::<Result<(RawFrame, u64, f64)>>(2);
    scope.spawn(move || {
        for f in 0..capture.frames {
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
    raw_rx
}

impl Reconstructor<'_> {
    /// A repeat slot's buffers: its own from the position before (the dB
    /// image replaced by one the writer returned, or a new one, when its
    /// size is wrong), else new ones.
    fn buffers(&self, spare: Option<RepeatFrame>, mut returned: impl FnMut() -> Option<Array2<f32>>) -> Buffers {
        let (depth, alines) = (self.depth, self.alines);
        let mut fresh_db = || returned().unwrap_or_else(|| Array2::<f32>::zeros((depth, alines)));
        let mut b = match spare {
            Some(RepeatFrame { db, complex, sub_bands, amplitude, .. }) => {
                let db = if db.dim() == (depth, alines) { db } else { fresh_db() };
                Buffers { db, complex, sub_bands, amplitude }
            }
            None => Buffers { db: fresh_db(), complex: self.needs_complex.then(|| Array2::<Complex32>::zeros((depth, alines))), sub_bands: Vec::new(), amplitude: Array2::zeros((0, 0)) },
        };
        if self.needs_amplitude && b.amplitude.dim() != (depth, alines) {
            b.amplitude = Array2::zeros((depth, alines));
        }
        b
    }

    /// One raw frame into the dB image (and the complex profile or the
    /// amplitude when contrast needs them), then each split-spectrum
    /// sub-band's amplitude from the same raw frame.
    fn reconstruct(&self, raw: &RawFrame, b: Buffers, sub_band_db: &mut Array2<f32>) -> Buffers {
        let Buffers { mut db, mut complex, mut sub_bands, mut amplitude } = b;
        let (depth, alines) = (self.depth, self.alines);
        let plan = &self.planned.plan;
        let (timer, fused_timer) = (&self.timer, &self.fused_timer);
        let needs_amplitude = self.needs_amplitude;
        match (&self.fused, complex.as_mut()) {
            (Some(fp), Some(c)) => fp.process_raw_image_staged(samples(raw), &mut db, Extra { complex: Some(c), amplitude: None }, fused_timer),
            (Some(fp), None) if needs_amplitude => fp.process_raw_image_staged(samples(raw), &mut db, Extra { complex: None, amplitude: Some(&mut amplitude) }, fused_timer),
            (Some(fp), None) => fp.process_raw_image(samples(raw), &mut db, fused_timer),
            (None, c) => {
                let mut rows = Array2::<f32>::zeros((alines, depth));
                match c {
                    Some(c) => {
                        let mut crows = Array2::<Complex32>::zeros((alines, depth));
                        plan.process_frame_complex(raw.to_f64().view(), &mut rows, &mut crows, timer);
                        *c = transpose(&crows);
                    }
                    None => plan.process_frame(raw.to_f64().view(), &mut rows, timer),
                }
                db = transpose(&rows);
                if needs_amplitude {
                    amplitude = db.mapv(|d| 10f32.powf(d / 20.0));
                }
            }
        }
        // Split-spectrum: each sub-band's amplitude from the same raw frame.
        let planned_bands = &self.planned.sub_bands;
        sub_bands.resize_with(planned_bands.len(), || Array2::<f32>::zeros((depth, alines)));
        if !planned_bands.is_empty() && sub_band_db.dim() != (depth, alines) {
            *sub_band_db = Array2::zeros((depth, alines));
        }
        for (sp, band) in planned_bands.iter().zip(sub_bands.iter_mut()) {
            sp.process_raw_image_with(samples(raw), sub_band_db, Extra { complex: None, amplitude: Some(band) }, fused_timer);
        }
        Buffers { db, complex, sub_bands, amplitude }
    }

    /// Seconds per fused part, or per reference stage, for the log.
    fn stage_seconds(&self) -> serde_json::Map<String, serde_json::Value> {
        let mut stage_seconds = serde_json::Map::new();
        if self.fused.is_some() {
            for (part, s) in FusedTimer::PARTS.iter().zip(self.fused_timer.seconds()) {
                stage_seconds.insert(format!("fused:{part}"), serde_json::json!(s));
            }
        } else {
            let plan = &self.planned.plan;
            for (stage, s) in plan.stage_names().iter().zip(self.timer.seconds()) {
                stage_seconds.insert(stage.to_string(), serde_json::json!(s));
            }
        }
        stage_seconds
    }
}
