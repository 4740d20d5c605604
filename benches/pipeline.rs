//! Criterion benchmarks: each stage alone and the whole default pipeline on
//! 2048-pixel A-lines, reported as A-lines per second (criterion's element
//! throughput). Speed targets live here, never in timed unit tests.
//!
//! Groups: `stage` (the reference f64 stages, one A-line), `pipeline` (the
//! reference stage chain on a frame), `fused` (the f32 fast path on a u16
//! frame: the whole pipeline with median or fixed background, the median
//! background alone, and a bare batched f32 FFT of the same A-lines for
//! comparison). `fringeflow bench` prints the ratios in one run.

use criterion::{criterion_group, criterion_main, BatchSize, BenchmarkId, Criterion, Throughput};
use fringeflow::pipeline::config::PipelineConfig;
use fringeflow::pipeline::plan::{CaptureGeometry, Plan};
use fringeflow::stages::background::{Background, BackgroundSource};
use fringeflow::stages::dispersion::Dispersion;
use fringeflow::stages::fft::Fft;
use fringeflow::stages::k_linearization::{Interpolation, KLinearization};
use fringeflow::stages::log_compression::LogCompression;
use fringeflow::stages::window::{coefficients, Window, WindowKind};
use fringeflow::stages::{ALine, FrameContext, Stage};
use ndarray::Array2;

const PIXELS: usize = 2048;
const ALINES: usize = 1024;

fn wavelength_map() -> Vec<f64> {
    (0..PIXELS).map(|p| 790.0 + 100.0 * p as f64 / (PIXELS - 1) as f64 + 3e-7 * (p as f64).powi(2)).collect()
}

/// A frame of u16-like spectra: background plus two fringes plus a ripple.
fn frame() -> Array2<f64> {
    Array2::from_shape_fn((ALINES, PIXELS), |(a, p)| {
        let x = p as f64;
        (2000.0 + 40.0 * (0.3 * x + a as f64 * 0.01).cos() + 10.0 * (0.05 * x).sin() + (a * 7 + p * 13) as f64 % 5.0).round()
    })
}

fn bench_stages(c: &mut Criterion) {
    let map = wavelength_map();
    let input = frame();
    let mut group = c.benchmark_group("stage");
    group.throughput(Throughput::Elements(1));
    let stages: Vec<(&str, Box<dyn Stage>)> = vec![
        ("background", Box::new(Background { source: BackgroundSource::Fixed(vec![2000.0; PIXELS]) })),
        ("k_linearization_linear", Box::new(KLinearization::new(&map, PIXELS, Interpolation::Linear))),
        ("k_linearization_cubic", Box::new(KLinearization::new(&map, PIXELS, Interpolation::Cubic))),
        ("dispersion", Box::new(Dispersion::new(20.0, -5.0, PIXELS))),
        ("window", Box::new(Window { coefficients: coefficients(WindowKind::Hann, PIXELS, 0.5, 0.5) })),
        ("fft", Box::new(Fft::new(PIXELS, 0, PIXELS / 2, PIXELS as f64))),
        ("log_compression", Box::new(LogCompression)),
    ];
    let fft_scratch = rustfft::FftPlanner::<f64>::new().plan_fft_forward(PIXELS).get_inplace_scratch_len();
    for (name, stage) in &stages {
        let mut ctx = FrameContext::default();
        stage.begin_frame(input.view(), &mut ctx);
        let mut line = ALine::new(PIXELS, PIXELS, fft_scratch, PIXELS / 2);
        line.spectrum.copy_from_slice(input.row(0).as_slice().unwrap());
        for (i, v) in line.field.iter_mut().enumerate() {
            v.re = (i as f64 * 0.1).cos();
        }
        // Fresh buffers each iteration: repeated in-place stages would drive the
        // data into subnormal numbers and time those instead.
        group.bench_function(BenchmarkId::new("per_aline", name), |b| {
            b.iter_batched_ref(|| line.clone(), |l| stage.apply(&ctx, l), BatchSize::SmallInput);
        });
    }
    group.finish();
}

fn bench_pipeline(c: &mut Criterion) {
    let map = wavelength_map();
    let input = frame();
    let mut config = PipelineConfig::default();
    config.background.method = fringeflow::pipeline::config::BackgroundMethod::Median;
    config.dispersion.a2 = 20.0;
    config.dispersion.a3 = -5.0;
    let plan = Plan::new(&config, CaptureGeometry { wavelength_nm: &map, background: None, source_spectrum: None }).unwrap();
    let mut out = Array2::<f32>::zeros((ALINES, plan.summary.depth_pixels));
    let timer = plan.new_timer();
    let mut group = c.benchmark_group("pipeline");
    group.throughput(Throughput::Elements(ALINES as u64));
    group.sample_size(20);
    group.bench_function("default_frame_1024x2048", |b| {
        b.iter(|| plan.process_frame(input.view(), &mut out, &timer));
    });
    group.finish();
}

fn bench_fused(c: &mut Criterion) {
    use fringeflow::pipeline::fused::{FusedPlan, MedianKey, LANES};
    let map = wavelength_map();
    let input_u16: Array2<u16> = frame().mapv(|v| v as u16);
    let mut group = c.benchmark_group("fused");
    group.throughput(Throughput::Elements(ALINES as u64));
    group.sample_size(20);
    for (name, method) in [
        ("frame_u16_median_background", fringeflow::pipeline::config::BackgroundMethod::Median),
        ("frame_u16_fixed_background", fringeflow::pipeline::config::BackgroundMethod::Recorded),
    ] {
        let mut config = PipelineConfig::default();
        config.background.method = method;
        config.dispersion.a2 = 20.0;
        config.dispersion.a3 = -5.0;
        let background = vec![2000.0; PIXELS];
        let plan = Plan::new(&config, CaptureGeometry { wavelength_nm: &map, background: Some(&background), source_spectrum: None }).unwrap();
        let fused = FusedPlan::new(&plan);
        let mut image = Array2::<f32>::zeros((plan.summary.depth_pixels, ALINES));
        let timer = fused.new_timer();
        group.bench_function(name, |b| b.iter(|| fused.process_frame_image(input_u16.view(), &mut image, &timer)));
    }
    let mut hint = fringeflow::pipeline::fused::MedianHint::default();
    group.bench_function("median_background_u16", |b| b.iter(|| u16::median_columns(input_u16.view(), fringeflow::pipeline::kernel::best(), &mut hint)));
    let fft = rustfft::FftPlanner::<f32>::new().plan_fft_forward(PIXELS);
    let source = vec![rustfft::num_complex::Complex32::new(0.5, 0.1); LANES * PIXELS];
    let mut buf = source.clone();
    let mut scratch = vec![rustfft::num_complex::Complex32::new(0.0, 0.0); fft.get_inplace_scratch_len()];
    group.bench_function("bare_fft_f32_one_thread", |b| {
        b.iter(|| {
            for _ in 0..ALINES / LANES {
                buf.copy_from_slice(&source);
                fft.process_with_scratch(&mut buf, &mut scratch);
            }
        })
    });
    group.finish();
}

criterion_group!(benches, bench_stages, bench_pipeline, bench_fused);
criterion_main!(benches);
