//! The bench report: what was measured (machine, rates, ratios, parts) as
//! JSON fields, and its text rendering.

use serde::Serialize;
use std::path::PathBuf;

#[derive(Debug, Clone, Serialize)]
pub struct Machine {
    pub cpu: String,
    pub logical_cpus: usize,
    pub threads: usize,
    pub avx2_fma: bool,
}

/// The fused pipeline with one kernel variant forced (same run).
#[derive(Debug, Clone, Serialize)]
pub struct VariantPoint {
    pub variant: &'static str,
    pub alines_per_second: f64,
    pub over_fft: f64,
}

/// One camera size: the bare FFT of its length, the fused pipeline with the
/// measured choice and with each variant forced, same run.
#[derive(Debug, Clone, Serialize)]
pub struct SizePoint {
    pub pixels: usize,
    pub fft_length: usize,
    pub bare_fft_alines_per_second: f64,
    /// The variant the plan chose by measurement, and its rate.
    pub chosen: &'static str,
    pub alines_per_second: f64,
    pub over_fft: f64,
    pub variants: Vec<VariantPoint>,
    /// Where the chosen variant's time goes (thread-seconds per part).
    pub parts_seconds: serde_json::Map<String, serde_json::Value>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ScalingPoint {
    pub alines: usize,
    pub alines_per_second: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct BenchReport {
    pub machine: Machine,
    pub capture: PathBuf,
    pub pixels: usize,
    pub alines_per_run: usize,
    pub repeats: usize,
    pub pipeline: String,
    /// Medians, A-lines per second.
    pub bare_fft_alines_per_second: f64,
    pub pipeline_alines_per_second: f64,
    pub pipeline_over_fft: f64,
    /// The variant the figures above ran: the plan's measured choice,
    /// unless forced by `FRINGEFLOW_KERNEL` or `--kernel`.
    pub kernel: &'static str,
    /// How it was chosen, with the plan-time measurement's rates.
    pub kernel_choice: crate::pipeline::fused::tune::Choice,
    /// Every variant this CPU has, forced in turn, same run.
    pub variants: Vec<VariantPoint>,
    /// Each camera size of [`SIZES`] on synthetic frames, every variant.
    pub sizes: Vec<SizePoint>,
    /// The same with the capture's recorded background instead of the
    /// per-frame median (what the default pipeline does when a capture has one).
    pub capture_background_alines_per_second: f64,
    pub capture_background_over_fft: f64,
    /// Where the fused pipeline's time goes (thread-seconds per part, one run).
    pub pipeline_parts_seconds: serde_json::Map<String, serde_json::Value>,
    /// The fused path's FFT: "lane" (AVX-512, 16 A-lines per vector; the
    /// interpolation × factor then runs inside the FFT's first level and its
    /// time counts under "fft") or "rustfft" (one call per A-line).
    pub fused_fft: String,
    pub reference_alines_per_second: f64,
    pub scaling: Vec<ScalingPoint>,
    pub end_to_end_alines_per_second: Option<f64>,
    pub end_to_end_over_pipeline: Option<f64>,
    /// The same with `[output] volume_type = "uint16"` (half the volume bytes).
    pub end_to_end_uint16_alines_per_second: Option<f64>,
    pub end_to_end_uint16_over_pipeline: Option<f64>,
    /// The same with no PNGs and no report (`png = false`, `report =
    /// false`: a volume-only batch).
    pub end_to_end_volume_only_alines_per_second: Option<f64>,
    pub end_to_end_volume_only_over_pipeline: Option<f64>,
    /// The default outputs with the input hashed by SHA-256 instead of BLAKE3.
    pub end_to_end_sha256_alines_per_second: Option<f64>,
    pub end_to_end_sha256_over_pipeline: Option<f64>,
    /// Contrast beyond intensity, in memory on the same frames taken 4 at
    /// a time as repeats of a position (same run as the pipeline figures).
    pub contrast: Vec<ContrastPoint>,
    /// The simulator on the sample scene (sample-data/layered-phantom.toml):
    /// seconds with the vectorised kernels and with the standard library's
    /// cos/sin/exp (the plain formulas), and their ratio; and the plain
    /// formulas on one thread (the serial scalar simulator), the baseline
    /// for parallel + vectorised together.
    pub simulator: Option<SimulatorPoint>,
    /// Capture readers against HDF5, and memory on a 2 GB raw capture.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub readers: Option<super::ReadersReport>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ContrastPoint {
    pub workload: String,
    pub alines_per_second: f64,
    /// Against the intensity pipeline of this run.
    pub over_pipeline: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct SimulatorPoint {
    pub scene: String,
    pub alines: usize,
    pub vectorised_seconds: f64,
    pub standard_library_seconds: f64,
    /// Vectorised against the standard library, both on every thread.
    pub speed_up: f64,
    /// Threads of the parallel runs.
    pub threads: usize,
    /// The standard library's functions on one thread: the serial scalar simulator.
    pub serial_scalar_seconds: f64,
    /// serial_scalar_seconds / vectorised_seconds: parallel and vectorised together.
    pub speed_up_over_serial_scalar: f64,
}

impl BenchReport {
    pub fn render(&self) -> String {
        let m = &self.machine;
        let mut s = format!(
            "machine: {} ({} logical CPUs, {} threads, AVX2+FMA {})\ncapture: {} ({} pixels), {} A-lines per run, median of {}\npipeline: {}\n\n",
            m.cpu,
            m.logical_cpus,
            m.threads,
            if m.avx2_fma { "yes" } else { "no" },
            self.capture.display(),
            self.pixels,
            self.alines_per_run,
            self.repeats,
            self.pipeline
        );
        s += &format!("{:<44} {:>14}\n", "", "A-lines/s");
        s += &format!("{:<44} {:>14.0}\n", "bare rustfft forward FFT (f32)", self.bare_fft_alines_per_second);
        s += &format!("{:<44} {:>14.0}\n", format!("full pipeline (fused f32 path, {})", self.kernel), self.pipeline_alines_per_second);
        s += &format!("{:<44} {:>14.3}\n", "ratio pipeline / bare FFT", self.pipeline_over_fft);
        for v in &self.variants {
            s += &format!("{:<44} {:>14.0}   ratio {:.3}\n", format!("  forced kernel variant {}", v.variant), v.alines_per_second, v.over_fft);
        }
        s += &format!("  kernel variant chosen at plan time: {} ({})\n", self.kernel, self.kernel_choice.source);
        s += &format!("{:<44} {:>14.0}\n", "same, capture background instead of median", self.capture_background_alines_per_second);
        s += &format!("{:<44} {:>14.3}\n", "ratio (capture background) / bare FFT", self.capture_background_over_fft);
        s += &format!("{:<44} {:>14.0}\n", "plain f64 stage chain (reference)", self.reference_alines_per_second);
        for p in &self.scaling {
            s += &format!("{:<44} {:>14.0}\n", format!("pipeline over {} A-lines", p.alines), p.alines_per_second);
        }
        if let (Some(e), Some(r)) = (self.end_to_end_alines_per_second, self.end_to_end_over_pipeline) {
            s += &format!("{:<44} {:>14.0}\n", "`run` end to end (default outputs, BLAKE3)", e);
            s += &format!("{:<44} {:>14.3}\n", "ratio end to end / in-memory pipeline", r);
        }
        if let (Some(e), Some(r)) = (self.end_to_end_uint16_alines_per_second, self.end_to_end_uint16_over_pipeline) {
            s += &format!("{:<44} {:>14.0}\n", "same, uint16 volume (half the bytes)", e);
            s += &format!("{:<44} {:>14.3}\n", "ratio (uint16 volume) / in-memory pipeline", r);
        }
        if let (Some(e), Some(r)) = (self.end_to_end_volume_only_alines_per_second, self.end_to_end_volume_only_over_pipeline) {
            s += &format!("{:<44} {:>14.0}\n", "same, volume only (no PNGs, no report)", e);
            s += &format!("{:<44} {:>14.3}\n", "ratio (volume only) / in-memory pipeline", r);
        }
        if let (Some(e), Some(r)) = (self.end_to_end_sha256_alines_per_second, self.end_to_end_sha256_over_pipeline) {
            s += &format!("{:<44} {:>14.0}\n", "default outputs, input hashed by SHA-256", e);
            s += &format!("{:<44} {:>14.3}\n", "ratio (SHA-256) / in-memory pipeline", r);
        }
        if !self.sizes.is_empty() {
            s += "\ncamera sizes (synthetic u16 frames of 1000 A-lines, same pipeline), ratio to the bare FFT of each length:\n";
            s += &format!("  {:<8} {:<6} {:>12} {:>14}", "pixels", "FFT", "bare FFT/s", "chosen");
            for v in &self.sizes[0].variants {
                s += &format!(" {:>8}", v.variant);
            }
            s += "   thread-s: background / resample / fft / log\n";
            for p in &self.sizes {
                s += &format!("  {:<8} {:<6} {:>12.0} {:>7} {:>6.3}", p.pixels, p.fft_length, p.bare_fft_alines_per_second, p.chosen, p.over_fft);
                for v in &p.variants {
                    s += &format!(" {:>8.3}", v.over_fft);
                }
                let part = |k: &str| p.parts_seconds.get(k).and_then(|v| v.as_f64()).unwrap_or(0.0);
                s += &format!("   {:.3} / {:.3} / {:.3} / {:.3}\n", part("background"), part("resample_disperse_window"), part("fft"), part("magnitude_log"));
            }
            s += "\n";
        }
        for c in &self.contrast {
            s += &format!("{:<44} {:>14.0}\n", c.workload, c.alines_per_second);
            s += &format!("{:<44} {:>14.3}\n", "  ratio to the intensity pipeline", c.over_pipeline);
        }
        if let Some(r) = &self.readers {
            s += "\ncapture readers, every frame through read_raw_frame (same run, median):\n";
            for p in &r.readers {
                s += &format!("  {:<52} {:>8.0} MB/s  {:.2} of HDF5\n", p.format, p.megabytes_per_second, p.over_hdf5);
            }
            if let (Some(b), Some(pk), Some(g)) = (r.large_raw_resident_before_mb, r.large_raw_peak_resident_mb, r.large_raw_growth_mb) {
                s += &format!("  raw capture of {:.0} MB read frame by frame: resident {b:.0} MB before, {pk:.0} MB at peak (+{g:.1} MB)\n", r.large_raw_megabytes);
            }
        }
        if let Some(sim) = &self.simulator {
            s += &format!(
                "simulator, {} ({} A-lines): {:.2} s vectorised, {:.2} s with the standard library's cos/sin/exp: {:.1}x\n",
                sim.scene, sim.alines, sim.vectorised_seconds, sim.standard_library_seconds, sim.speed_up
            );
            s += &format!(
                "  against the serial scalar simulator (standard library, 1 thread: {:.2} s): {:.1}x with {} threads\n",
                sim.serial_scalar_seconds, sim.speed_up_over_serial_scalar, sim.threads
            );
        }
        s += &format!("\nfused pipeline, thread-seconds per part (first run; FFT: {}):\n", self.fused_fft);
        if self.fused_fft == "lane" {
            s += "  (lane FFT: the interpolation x factor runs inside the FFT's first level, so its time is under fft)\n";
        }
        for (k, v) in &self.pipeline_parts_seconds {
            s += &format!("  {k:<28} {:.3} s\n", v.as_f64().unwrap_or(0.0));
        }
        s
    }
}
