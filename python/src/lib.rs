//! The `fringeflow._native` Python extension: a thin binding (PyO3, numpy)
//! over the fringeflow library. No algorithm lives here: every function
//! converts arguments, releases the GIL, calls the library, and converts
//! the result (arrays as NumPy arrays, reports as JSON text that the
//! Python package turns into plain objects). Errors become the exception
//! classes of `fringeflow._errors`, with the CLI's one-line messages.

use numpy::ndarray::{Array2, Array3, ArrayView2, Axis};
use numpy::{IntoPyArray, PyArray1, PyArray2, PyArray3, PyReadonlyArray2, PyUntypedArrayMethods};
use pyo3::prelude::*;
use rustfft::num_complex::Complex32;
use std::path::{Path, PathBuf};

use fringeflow::contrast::doppler::DopplerScale;
use fringeflow::contrast::position::{PositionProcessor, RepeatFrame};
use fringeflow::io::capture::{Capture as CoreCapture, RawFrame};
use fringeflow::pipeline::config::PipelineConfig;
use fringeflow::open::samples;
use fringeflow::pipeline::fused::{Extra, FusedPlan, FusedTimer};
use fringeflow::pipeline::plan::{CaptureGeometry, Plan};

/// Raises `fringeflow._errors.<class>(message)`.
fn raise(py: Python<'_>, class: &str, message: String) -> PyErr {
    match py.import("fringeflow._errors").and_then(|m| m.getattr(class)).and_then(|c| c.call1((message.clone(),))) {
        Ok(e) => PyErr::from_value(e),
        Err(_) => pyo3::exceptions::PyRuntimeError::new_err(message),
    }
}

fn pipeline_error(py: Python<'_>, e: impl std::fmt::Display) -> PyErr {
    raise(py, "PipelineError", e.to_string())
}

/// A failure about a capture file: "<path>: <reason>", as the CLI prints it.
fn capture_error(py: Python<'_>, path: &Path, e: anyhow::Error) -> PyErr {
    raise(py, "CaptureError", format!("{}: {e:#}", path.display()))
}

fn array_error(py: Python<'_>, message: String) -> PyErr {
    raise(py, "ArrayError", message)
}

fn json_of<T: serde::Serialize>(v: &T) -> String {
    serde_json::to_string(v).expect("serialises")
}

/// A pipeline: every stage's settings.
#[pyclass(module = "fringeflow._native", name = "Pipeline", frozen)]
#[derive(Clone)]
struct Pipeline {
    config: PipelineConfig,
}

#[pymethods]
impl Pipeline {
    /// The built-in defaults (the same as pipelines/default.toml).
    #[new]
    fn new() -> Self {
        Pipeline { config: PipelineConfig::default() }
    }

    /// Reads a pipeline file (TOML).
    #[staticmethod]
    fn from_file(py: Python<'_>, path: PathBuf) -> PyResult<Self> {
        fringeflow::run::read_pipeline(&path, &[]).map(|config| Pipeline { config }).map_err(|e| pipeline_error(py, e))
    }

    /// Parses pipeline text (TOML); `name` appears in error messages.
    #[staticmethod]
    #[pyo3(signature = (text, name = "<string>"))]
    fn from_toml(py: Python<'_>, text: &str, name: &str) -> PyResult<Self> {
        PipelineConfig::from_str(name, text).map(|config| Pipeline { config }).map_err(|e| pipeline_error(py, e))
    }

    /// From JSON text of a dict of sections (what `to_json` gives); keys
    /// and values are checked as in a file.
    #[staticmethod]
    fn from_json(py: Python<'_>, text: &str) -> PyResult<Self> {
        let value: serde_json::Value = serde_json::from_str(text).map_err(|e| pipeline_error(py, format!("pipeline dict: {e}")))?;
        let toml_text = toml::to_string(&value).map_err(|e| pipeline_error(py, format!("pipeline dict: {e}")))?;
        PipelineConfig::from_str("pipeline dict", &toml_text)
            .map(|config| Pipeline { config })
            .map_err(|mut e| {
                // Lines of the generated text mean nothing to the caller.
                e.line = None;
                pipeline_error(py, e)
            })
    }

    /// Every setting, defaults filled in, as JSON text.
    fn to_json(&self) -> String {
        json_of(&self.config)
    }

    /// SHA-256 of the pipeline's canonical form (as in log.json).
    #[getter]
    fn sha256(&self) -> String {
        self.config.sha256()
    }
}

/// The stored frame as a NumPy array of its own type.
fn raw_to_py<'py>(py: Python<'py>, raw: RawFrame) -> Bound<'py, PyAny> {
    match raw {
        RawFrame::U8(a) => a.into_pyarray(py).into_any(),
        RawFrame::U16(a) => a.into_pyarray(py).into_any(),
        RawFrame::I16(a) => a.into_pyarray(py).into_any(),
        RawFrame::U32(a) => a.into_pyarray(py).into_any(),
        RawFrame::F32(a) => a.into_pyarray(py).into_any(),
        RawFrame::F64(a) => a.into_pyarray(py).into_any(),
    }
}

/// An opened capture file: frames are read one at a time, on request.
#[pyclass(module = "fringeflow._native", name = "Capture")]
struct Capture {
    inner: CoreCapture,
}

#[pymethods]
impl Capture {
    #[new]
    #[pyo3(signature = (path, pipeline = None))]
    fn new(py: Python<'_>, path: PathBuf, pipeline: Option<&Pipeline>) -> PyResult<Self> {
        let input = pipeline.map(|p| p.config.input.clone()).unwrap_or_default();
        let opened = py.detach(|| fringeflow::run::open_capture(&path, &input));
        opened.map(|inner| Capture { inner }).map_err(|e| capture_error(py, &path, e))
    }

    #[getter]
    fn path(&self) -> PathBuf {
        self.inner.path.clone()
    }
    #[getter]
    fn frames(&self) -> usize {
        self.inner.frames
    }
    #[getter]
    fn alines(&self) -> usize {
        self.inner.alines
    }
    #[getter]
    fn pixels(&self) -> usize {
        self.inner.pixels
    }
    /// The stored sample type (u8, u16, i16, u32, f32, f64).
    #[getter]
    fn dtype(&self) -> String {
        json_of(&self.inner.sample_type).trim_matches('"').to_string()
    }
    /// Scan attributes (A-line period, spacings) as JSON text.
    fn scan_json(&self) -> String {
        json_of(&self.inner.scan)
    }
    /// Per-pixel wavelength, nm.
    #[getter]
    fn wavelength_nm<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        PyArray1::from_slice(py, &self.inner.wavelength_nm)
    }
    /// Mean of the blocked-sample-arm spectra, or None.
    #[getter]
    fn background<'py>(&self, py: Python<'py>) -> Option<Bound<'py, PyArray1<f64>>> {
        self.inner.background.as_ref().map(|b| PyArray1::from_slice(py, b))
    }
    /// Frame `index` (A-lines × pixels) in the stored type.
    fn frame<'py>(&self, py: Python<'py>, index: usize) -> PyResult<Bound<'py, PyAny>> {
        if index >= self.inner.frames {
            return Err(pyo3::exceptions::PyIndexError::new_err(format!("frame {index} does not exist (the capture has {} frames)", self.inner.frames)));
        }
        let read = py.detach(|| self.inner.read_raw_frame(index));
        read.map(|(raw, _)| raw_to_py(py, raw)).map_err(|e| capture_error(py, &self.inner.path, e))
    }
}

/// A frame handed in from Python, borrowed without a copy.
enum Input<'py> {
    U8(PyReadonlyArray2<'py, u8>),
    U16(PyReadonlyArray2<'py, u16>),
    I16(PyReadonlyArray2<'py, i16>),
    U32(PyReadonlyArray2<'py, u32>),
    F32(PyReadonlyArray2<'py, f32>),
    F64(PyReadonlyArray2<'py, f64>),
}

impl<'py> Input<'py> {
    fn extract(py: Python<'py>, a: &Bound<'py, PyAny>) -> PyResult<Self> {
        macro_rules! try_as {
            ($($t:ty => $v:ident),*) => {$(
                if let Ok(x) = a.extract::<PyReadonlyArray2<'py, $t>>() {
                    return Ok(Input::$v(x));
                }
            )*};
        }
        try_as!(u16 => U16, u8 => U8, i16 => I16, u32 => U32, f32 => F32, f64 => F64);
        let what = a.getattr("dtype").map(|d| d.to_string()).unwrap_or_else(|_| a.get_type().to_string());
        let shape = a.getattr("shape").map(|s| s.to_string()).unwrap_or_default();
        Err(array_error(py, format!("a frame must be a 2-D array (A-lines × pixels) of uint8, uint16, int16, uint32, float32 or float64, in native byte order; got {what} {shape}")))
    }

    fn dims(&self) -> (usize, usize) {
        let s = match self {
            Input::U8(a) => a.shape().to_vec(),
            Input::U16(a) => a.shape().to_vec(),
            Input::I16(a) => a.shape().to_vec(),
            Input::U32(a) => a.shape().to_vec(),
            Input::F32(a) => a.shape().to_vec(),
            Input::F64(a) => a.shape().to_vec(),
        };
        (s[0], s[1])
    }

    /// Address of the data as the core sees it (for the zero-copy check).
    fn address(&self) -> usize {
        match self {
            Input::U8(a) => a.as_array().as_ptr() as usize,
            Input::U16(a) => a.as_array().as_ptr() as usize,
            Input::I16(a) => a.as_array().as_ptr() as usize,
            Input::U32(a) => a.as_array().as_ptr() as usize,
            Input::F32(a) => a.as_array().as_ptr() as usize,
            Input::F64(a) => a.as_array().as_ptr() as usize,
        }
    }

    /// Float input must be finite, as frames read from a capture must be.
    fn check_finite(&self) -> Result<(), String> {
        fn first_bad<T: Copy + Into<f64>>(a: ArrayView2<'_, T>) -> Option<(usize, usize)> {
            a.indexed_iter().find(|(_, &v)| !v.into().is_finite()).map(|(i, _)| i)
        }
        let bad = match self {
            Input::F32(a) => first_bad(a.as_array()),
            Input::F64(a) => first_bad(a.as_array()),
            _ => None,
        };
        match bad {
            Some((l, p)) => Err(format!("NaN or infinite value in the frame (A-line {l}, pixel {p})")),
            None => Ok(()),
        }
    }
}

/// Runs `f` on the input's view, with the GIL released.
macro_rules! with_view {
    ($py:expr, $input:expr, |$v:ident| $body:expr) => {
        match $input {
            Input::U8(a) => { let $v = a.as_array(); $py.detach(|| $body) }
            Input::U16(a) => { let $v = a.as_array(); $py.detach(|| $body) }
            Input::I16(a) => { let $v = a.as_array(); $py.detach(|| $body) }
            Input::U32(a) => { let $v = a.as_array(); $py.detach(|| $body) }
            Input::F32(a) => { let $v = a.as_array(); $py.detach(|| $body) }
            Input::F64(a) => { let $v = a.as_array(); $py.detach(|| $body) }
        }
    };
}

/// A pipeline planned for one spectrometer: the resampling tables,
/// dispersion phase and window built once, then applied to any number of
/// frames.
#[pyclass(module = "fringeflow._native", name = "Reconstructor")]
struct Reconstructor {
    config: PipelineConfig,
    plan: Plan,
    fused: FusedPlan,
    sub_bands: Vec<FusedPlan>,
    timer: FusedTimer,
    aline_period_us: Option<f64>,
    frame_period_us: Option<f64>,
    /// λ0 of the Doppler scale and what it came from (as `run` logs it).
    doppler_wavelength: (f64, &'static str),
    summary_json: String,
    estimate_json: Option<String>,
}

fn sub_band_plans(plan: &Plan, config: &PipelineConfig) -> Vec<FusedPlan> {
    if !config.angiography.methods.contains(&fringeflow::pipeline::config::AngiographyMethod::SplitSpectrum) {
        return Vec::new();
    }
    let shaping = plan.shaping_gain();
    fringeflow::contrast::angiography::sub_band_windows(plan.summary.k_samples, config.angiography.split_bands, config.angiography.split_band_fwhm)
        .into_iter()
        .map(|w| {
            let gain: Vec<f64> = w.iter().zip(&shaping).map(|(a, b)| a * b).collect();
            FusedPlan::with_spectral_gain(plan, &gain, 2.0 / w.iter().sum::<f64>())
        })
        .collect()
}

#[pymethods]
impl Reconstructor {
    /// Plans `pipeline` for a capture (its wavelength map, background,
    /// scan timing and, with `dispersion.method = "auto"`, its dispersion),
    /// or for a bare wavelength map (and optional background).
    #[new]
    #[pyo3(signature = (pipeline = None, capture = None, wavelength_nm = None, background = None))]
    fn new(py: Python<'_>, pipeline: Option<&Pipeline>, capture: Option<&Capture>, wavelength_nm: Option<Vec<f64>>, background: Option<Vec<f64>>) -> PyResult<Self> {
        let config = pipeline.map(|p| p.config.clone()).unwrap_or_default();
        let built = py.detach(|| -> anyhow::Result<_> {
            let (wl, bg, scan, resolved, estimate, source, from_background) = match (capture, wavelength_nm) {
                (Some(c), None) => {
                    let c = &c.inner;
                    let source = match (&c.background, config.shaping.enabled || config.doppler.enabled) {
                        (Some(b), _) => Some(b.clone()),
                        (None, true) => {
                            let mut first = Array2::<f64>::zeros(c.frame_shape());
                            c.read_frame(0, &mut first)?;
                            Some(fringeflow::stages::background::mean_spectrum(first.view()))
                        }
                        (None, false) => None,
                    };
                    let (resolved, estimate) = fringeflow::calibration::resolve_dispersion(c, &config, source.as_deref())?;
                    (c.wavelength_nm.clone(), c.background.clone(), c.scan.clone(), resolved, estimate, source, c.background.is_some())
                }
                (None, Some(wl)) => {
                    fringeflow::io::capture::check_wavelength_map(&wl, wl.len(), "wavelength_nm")?;
                    if config.dispersion.method == fringeflow::pipeline::config::DispersionMethod::Auto {
                        anyhow::bail!("dispersion.method = \"auto\" needs a capture to estimate from: give capture=");
                    }
                    let source = background.clone();
                    (wl, background, Default::default(), config.clone(), None, source, true)
                }
                (Some(_), Some(_)) => anyhow::bail!("give a capture or a wavelength map, not both"),
                (None, None) => anyhow::bail!("give a capture, or a wavelength map (nm per pixel)"),
            };
            if let Some(b) = &bg {
                anyhow::ensure!(b.len() == wl.len(), "the background has {} values for {} pixels", b.len(), wl.len());
            }
            let plan = Plan::new(&resolved, CaptureGeometry { wavelength_nm: &wl, background: bg.as_deref(), source_spectrum: source.as_deref() })?;
            let fused = FusedPlan::new(&plan);
            let sub_bands = sub_band_plans(&plan, &resolved);
            let doppler_wavelength = DopplerScale::wavelength_for(&plan, source.as_deref(), from_background);
            Ok((resolved, plan, fused, sub_bands, scan, estimate, doppler_wavelength))
        });
        let (config, plan, fused, sub_bands, scan, estimate, doppler_wavelength) = built.map_err(|e| pipeline_error(py, format!("{e:#}")))?;
        let summary_json = json_of(&plan.summary);
        Ok(Reconstructor {
            aline_period_us: config.doppler.aline_period_us.or(scan.aline_period_us),
            frame_period_us: config.doppler.frame_period_us.or(scan.frame_period_us),
            config,
            plan,
            fused,
            sub_bands,
            doppler_wavelength,
            timer: FusedTimer::default(),
            summary_json,
            estimate_json: estimate.map(|e| json_of(&e)),
        })
    }

    /// What the planner derived (k range, FFT length, depth spacing…) as JSON text.
    fn summary_json(&self) -> String {
        self.summary_json.clone()
    }

    /// The automatic dispersion estimate, as JSON text (None unless auto).
    fn dispersion_estimate_json(&self) -> Option<String> {
        self.estimate_json.clone()
    }

    /// The pipeline as planned (dispersion resolved), JSON text.
    fn pipeline_json(&self) -> String {
        json_of(&self.config)
    }

    /// Depth of each output pixel, µm in air.
    #[getter]
    fn depth_um<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        let d: Vec<f64> = (0..self.plan.summary.depth_pixels).map(|i| self.plan.depth_um(i)).collect();
        PyArray1::from_vec(py, d)
    }

    #[getter]
    fn pixels(&self) -> usize {
        self.plan.summary.pixels
    }

    /// One frame (A-lines × pixels, any supported dtype) to its dB image
    /// (depth × A-lines, float32): the bits `fringeflow run` writes.
    fn db<'py>(&self, py: Python<'py>, frame: &Bound<'py, PyAny>) -> PyResult<Bound<'py, PyArray2<f32>>> {
        let input = Input::extract(py, frame)?;
        let (alines, pixels) = self.check(py, &input)?;
        let depth = self.plan.summary.depth_pixels;
        let mut image = Array2::<f32>::zeros((depth, alines));
        let fused = &self.fused;
        let timer = &self.timer;
        let _ = pixels;
        with_view!(py, &input, |v| fused.process_frame_image(v, &mut image, timer));
        Ok(image.into_pyarray(py))
    }

    /// A stack of frames (frames × A-lines × pixels) to dB images
    /// (frames × depth × A-lines, float32).
    fn db_stack<'py>(&self, py: Python<'py>, frames: &Bound<'py, PyAny>) -> PyResult<Bound<'py, PyArray3<f32>>> {
        let list = self.frames_of(py, frames)?;
        let depth = self.plan.summary.depth_pixels;
        let alines = list.first().map(|f| f.dims().0).unwrap_or(0);
        let mut out = Array3::<f32>::zeros((list.len(), depth, alines));
        for (i, input) in list.iter().enumerate() {
            self.check(py, input)?;
            let mut image = Array2::<f32>::zeros((depth, alines));
            let (fused, timer) = (&self.fused, &self.timer);
            with_view!(py, input, |v| fused.process_frame_image(v, &mut image, timer));
            out.index_axis_mut(Axis(0), i).assign(&image);
        }
        Ok(out.into_pyarray(py))
    }

    /// One frame to its complex depth profile (depth × A-lines, complex64;
    /// phase referred to the band's centre wavenumber, growing with depth).
    fn complex<'py>(&self, py: Python<'py>, frame: &Bound<'py, PyAny>) -> PyResult<Bound<'py, PyArray2<Complex32>>> {
        let input = Input::extract(py, frame)?;
        let (alines, _) = self.check(py, &input)?;
        let depth = self.plan.summary.depth_pixels;
        let mut image = Array2::<f32>::zeros((depth, alines));
        let mut complex = Array2::<Complex32>::zeros((depth, alines));
        let (fused, timer) = (&self.fused, &self.timer);
        with_view!(py, &input, |v| fused.process_frame_image_complex(v, &mut image, &mut complex, timer));
        Ok(complex.into_pyarray(py))
    }

    /// The repeated B-scans of one position (repeats × A-lines × pixels)
    /// through registration, averaging, Doppler and angiography as the
    /// pipeline sets them. Returns (structure dB, Doppler velocity or None,
    /// {method: (image, en face row)}, shifts as JSON text, warnings).
    #[allow(clippy::type_complexity)]
    fn position<'py>(&self, py: Python<'py>, frames: &Bound<'py, PyAny>) -> PyResult<(Bound<'py, PyArray2<f32>>, Option<Bound<'py, PyArray2<f32>>>, Vec<(String, Bound<'py, PyArray2<f32>>, Bound<'py, PyArray1<f32>>)>, String, Vec<String>)> {
        let list = self.frames_of(py, frames)?;
        let n = list.len();
        if n != self.config.volume.average {
            return Err(array_error(py, format!("{n} B-scans given for a position; the pipeline's volume.average is {}", self.config.volume.average)));
        }
        let depth = self.plan.summary.depth_pixels;
        let cfg = &self.config;
        let scale = if cfg.doppler.enabled {
            let period = match cfg.doppler.between {
                fringeflow::pipeline::config::DopplerPairs::Alines => self.aline_period_us,
                fringeflow::pipeline::config::DopplerPairs::Repeats => self.frame_period_us,
            };
            let Some(t) = period else {
                return Err(pipeline_error(py, "Doppler needs the A-line period: set doppler.aline_period_us (µs) in the pipeline, or plan from a capture that records it"));
            };
            let (wavelength, source) = self.doppler_wavelength;
            Some(DopplerScale::new(wavelength, cfg.doppler.group_index, t, self.plan.summary.band_centre_wavelength_nm, source))
        } else {
            None
        };
        let mut repeats = Vec::with_capacity(n);
        for (i, input) in list.iter().enumerate() {
            let (alines, _) = self.check(py, input)?;
            let mut db = Array2::<f32>::zeros((depth, alines));
            let mut complex = cfg.needs_complex().then(|| Array2::<Complex32>::zeros((depth, alines)));
            let mut amplitude = Array2::<f32>::zeros((depth, alines));
            let (fused, timer) = (&self.fused, &self.timer);
            match complex.as_mut() {
                Some(c) => with_view!(py, input, |v| fused.process_frame_image_complex(v, &mut db, c, timer)),
                None => {
                    // The amplitude from the same pass (the raw-frame path takes it).
                    let raw = to_raw(input);
                    py.detach(|| fused.process_raw_image_with(samples(&raw), &mut db, Extra { complex: None, amplitude: Some(&mut amplitude) }, timer));
                }
            }
            let mut sub_bands = Vec::new();
            if !self.sub_bands.is_empty() {
                let raw = to_raw(input);
                for sp in &self.sub_bands {
                    let mut scratch = Array2::<f32>::zeros((depth, alines));
                    let mut band = Array2::<f32>::zeros((depth, alines));
                    py.detach(|| sp.process_raw_image_with(samples(&raw), &mut scratch, Extra { complex: None, amplitude: Some(&mut band) }, timer));
                    sub_bands.push(band);
                }
            }
            repeats.push(RepeatFrame { index: i, db, complex, sub_bands, saturated: 0, amplitude: if cfg.needs_complex() { Array2::zeros((0, 0)) } else { amplitude } });
        }
        let depth_um: Vec<f64> = (0..depth).map(|i| self.plan.depth_um(i)).collect();
        let alines = list[0].dims().0;
        let out = py.detach(|| {
            let mut processor = PositionProcessor::new(cfg, depth_um, alines, scale);
            processor.process(0, &mut repeats)
        });
        let out = out.map_err(|e| pipeline_error(py, format!("{e:#}")))?;
        let angio = out
            .angiography
            .into_iter()
            .map(|(m, map, row)| (m.name().to_string(), map.into_pyarray(py), PyArray1::from_vec(py, row)))
            .collect();
        Ok((out.structure_db.into_pyarray(py), out.doppler.map(|d| d.into_pyarray(py)), angio, json_of(&out.shifts), out.warnings))
    }

    /// Reconstructs `frames` (frames × A-lines × pixels) `repeats` times
    /// inside Rust, without Python between frames, and returns the rate in
    /// A-lines per second: the reference for the speed of `db`.
    fn time_in_memory(&self, py: Python<'_>, frames: &Bound<'_, PyAny>, repeats: usize) -> PyResult<f64> {
        let list = self.frames_of(py, frames)?;
        let raws: Vec<RawFrame> = list.iter().map(to_raw).collect();
        let depth = self.plan.summary.depth_pixels;
        let alines = list.first().map(|f| f.dims().0).unwrap_or(0);
        let (fused, timer) = (&self.fused, &self.timer);
        Ok(py.detach(|| {
            let mut image = Array2::<f32>::zeros((depth, alines));
            let t = std::time::Instant::now();
            for _ in 0..repeats {
                for r in &raws {
                    fused.process_raw_image(samples(r), &mut image, timer);
                }
            }
            (repeats * raws.len() * alines) as f64 / t.elapsed().as_secs_f64()
        }))
    }
}

/// A copy of the input as an owned raw frame (for the raw-frame paths).
fn to_raw(input: &Input<'_>) -> RawFrame {
    match input {
        Input::U8(a) => RawFrame::U8(a.as_array().to_owned()),
        Input::U16(a) => RawFrame::U16(a.as_array().to_owned()),
        Input::I16(a) => RawFrame::I16(a.as_array().to_owned()),
        Input::U32(a) => RawFrame::U32(a.as_array().to_owned()),
        Input::F32(a) => RawFrame::F32(a.as_array().to_owned()),
        Input::F64(a) => RawFrame::F64(a.as_array().to_owned()),
    }
}

impl Reconstructor {
    /// The frame's shape must fit the plan, float samples must be finite.
    fn check(&self, py: Python<'_>, input: &Input<'_>) -> PyResult<(usize, usize)> {
        let (alines, pixels) = input.dims();
        if pixels != self.plan.summary.pixels {
            return Err(array_error(py, format!("the frame has {pixels} pixels per spectrum, the plan {} (the last axis is the spectrum: A-lines × pixels)", self.plan.summary.pixels)));
        }
        if alines == 0 {
            return Err(array_error(py, "the frame has no A-lines".into()));
        }
        input.check_finite().map_err(|m| array_error(py, m))?;
        Ok((alines, pixels))
    }

    /// The 2-D frames of a 3-D array (or a list of 2-D arrays).
    fn frames_of<'py>(&self, py: Python<'py>, frames: &Bound<'py, PyAny>) -> PyResult<Vec<Input<'py>>> {
        let n: usize = frames.len()?;
        (0..n).map(|i| Input::extract(py, &frames.get_item(i)?)).collect()
    }
}

/// Address of a 2-D array's data as the core receives it (tests: no copy).
#[pyfunction]
fn _input_address(py: Python<'_>, frame: &Bound<'_, PyAny>) -> PyResult<usize> {
    Ok(Input::extract(py, frame)?.address())
}

/// `fringeflow run` on captures into `out`: the same outputs and logs.
/// Returns the batch summary as JSON text.
#[pyfunction]
#[pyo3(signature = (captures, out, pipeline = None, resume = false))]
fn run(py: Python<'_>, captures: Vec<PathBuf>, out: PathBuf, pipeline: Option<&Pipeline>, resume: bool) -> PyResult<String> {
    use fringeflow::batch::{self, inputs};
    let config = pipeline.map(|p| p.config.clone()).unwrap_or_default();
    let all = inputs::expand(&captures, None).map_err(|e| raise(py, "CaptureError", format!("{e:#}")))?;
    if all.is_empty() {
        return Err(raise(py, "CaptureError", "no captures given".into()));
    }
    let options = batch::BatchOptions { resume, quiet: true, terminal: false, shard: inputs::Shard::WHOLE, inputs_total: all.len(), reference_engine: false, verbose: false, json: false, progress_json: false };
    let stop = batch::StopSignals::default();
    let report = py.detach(|| batch::run_batch(&all, &config, &out, &options, &stop));
    report.map(|r| json_of(&r)).map_err(|e| raise(py, "CaptureError", format!("{e:#}")))
}

/// Simulates a scene (TOML text; `name` for messages) into `out`; the
/// truth as JSON text.
#[pyfunction]
#[pyo3(signature = (scene_text, out, name = "<scene>"))]
fn simulate(py: Python<'_>, scene_text: &str, out: PathBuf, name: &str) -> PyResult<String> {
    let scene = fringeflow::simulate::scene::Scene::from_str(name, scene_text).map_err(|e| raise(py, "SceneError", e.to_string()))?;
    let truth = py.detach(|| fringeflow::simulate::simulate(&scene, &out));
    truth.map(|t| json_of(&t)).map_err(|e| capture_error(py, &out, e))
}

/// `fringeflow measure psf`: JSON text.
#[pyfunction]
#[pyo3(signature = (path, pipeline = None, frame = 0, group_index = 1.38))]
fn measure_psf(py: Python<'_>, path: PathBuf, pipeline: Option<&Pipeline>, frame: usize, group_index: f64) -> PyResult<String> {
    let config = pipeline.map(|p| p.config.clone()).unwrap_or_default();
    let m = py.detach(|| fringeflow::measure::mirror::measure(&path, &config, frame, group_index));
    m.map(|m| fringeflow::json_doc::line(fringeflow::json_doc::PSF, &m)).map_err(|e| capture_error(py, &path, e))
}

/// `fringeflow measure rolloff`: JSON text.
#[pyfunction]
#[pyo3(signature = (paths, pipeline = None, attenuation_db = None))]
fn measure_rolloff(py: Python<'_>, paths: Vec<PathBuf>, pipeline: Option<&Pipeline>, attenuation_db: Option<f64>) -> PyResult<String> {
    if paths.len() < 3 {
        return Err(raise(py, "CaptureError", format!("roll-off needs mirror captures at three or more depths, got {}", paths.len())));
    }
    let config = pipeline.map(|p| p.config.clone()).unwrap_or_default();
    let r = py.detach(|| fringeflow::measure::rolloff::measure_rolloff(&paths, &config, attenuation_db));
    r.map(|(r, _)| fringeflow::json_doc::line(fringeflow::json_doc::ROLLOFF, &r)).map_err(|e| raise(py, "CaptureError", format!("{e:#}")))
}

/// `fringeflow design`: JSON text.
#[pyfunction]
#[pyo3(signature = (centre_nm, fwhm_nm, span_nm, pixels, group_index = 1.38, resolution_nm = None))]
fn design(py: Python<'_>, centre_nm: f64, fwhm_nm: f64, span_nm: f64, pixels: usize, group_index: f64, resolution_nm: Option<f64>) -> PyResult<String> {
    let values = [centre_nm, fwhm_nm, span_nm, group_index, resolution_nm.unwrap_or(1.0)];
    if values.iter().any(|v| !(v.is_finite() && *v > 0.0)) || pixels < 2 {
        return Err(raise(py, "ArrayError", "design: wavelengths, span, group index and resolution must be positive numbers, and pixels at least 2".into()));
    }
    Ok(fringeflow::json_doc::line(fringeflow::json_doc::DESIGN, &fringeflow::design::design(fringeflow::design::DesignInput {
        centre_nm,
        source_fwhm_nm: fwhm_nm,
        span_nm,
        pixels,
        group_index,
        resolution_nm: resolution_nm.unwrap_or(span_nm / pixels as f64),
    })))
}

/// `fringeflow calibrate wavelength` (without writing a file): JSON text.
#[pyfunction]
#[pyo3(signature = (paths, centre_nm = None, span_nm = None, depths_um = None, decreasing = false, degree = 3, pipeline = None, frame = 0))]
#[allow(clippy::too_many_arguments)]
fn calibrate_wavelength(py: Python<'_>, paths: Vec<PathBuf>, centre_nm: Option<f64>, span_nm: Option<f64>, depths_um: Option<Vec<f64>>, decreasing: bool, degree: usize, pipeline: Option<&Pipeline>, frame: usize) -> PyResult<String> {
    let config = pipeline.map(|p| p.config.clone()).unwrap_or_default();
    let hints = fringeflow::calibration::wavelength::ScaleHints { centre_nm, span_nm, depths_um, decreasing };
    let c = py.detach(|| fringeflow::calibration::wavelength::calibrate_files(&paths, &config, frame, &hints, degree));
    c.map(|c| fringeflow::json_doc::line(fringeflow::json_doc::CALIBRATION, &c)).map_err(|e| raise(py, "CaptureError", format!("{e:#}")))
}

/// `fringeflow dispersion estimate`: JSON text.
#[pyfunction]
#[pyo3(signature = (path, pipeline = None, frame = None))]
fn estimate_dispersion(py: Python<'_>, path: PathBuf, pipeline: Option<&Pipeline>, frame: Option<usize>) -> PyResult<String> {
    let config = pipeline.map(|p| p.config.clone()).unwrap_or_default();
    let e = py.detach(|| fringeflow::calibration::dispersion::estimate_file(&path, &config, frame));
    e.map(|e| fringeflow::json_doc::line(fringeflow::json_doc::DISPERSION_ESTIMATE, &e)).map_err(|e| capture_error(py, &path, e))
}

/// The library's version.
#[pyfunction]
fn version() -> &'static str {
    env!("CARGO_PKG_VERSION")
}

#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<Pipeline>()?;
    m.add_class::<Capture>()?;
    m.add_class::<Reconstructor>()?;
    m.add_function(wrap_pyfunction!(run, m)?)?;
    m.add_function(wrap_pyfunction!(simulate, m)?)?;
    m.add_function(wrap_pyfunction!(measure_psf, m)?)?;
    m.add_function(wrap_pyfunction!(measure_rolloff, m)?)?;
    m.add_function(wrap_pyfunction!(design, m)?)?;
    m.add_function(wrap_pyfunction!(calibrate_wavelength, m)?)?;
    m.add_function(wrap_pyfunction!(estimate_dispersion, m)?)?;
    m.add_function(wrap_pyfunction!(version, m)?)?;
    m.add_function(wrap_pyfunction!(_input_address, m)?)?;
    Ok(())
}
