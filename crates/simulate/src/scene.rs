//! Scene files: what the simulator should image, read from TOML.
//!
//! A scene names the source spectrum, the spectrometer (its non-linear
//! wavelength map and spectral resolution), the detector (bit depth, full
//! scale, noise, fixed pattern), a dispersion mismatch in fused silica, and
//! what sits in the sample arm: flat mirrors and/or a layered sample with
//! gently curved interfaces and weak scatterers inside the layers; and,
//! with a `[scan]` section, the lateral geometry and timing of the scan,
//! bulk motion of the sample and vessels of flowing scatterers.

use serde::{Deserialize, Deserializer, Serialize};

use fringeflow_io::capture::SampleType;
use fringeflow_base::settings::{de_finite, de_non_negative, de_positive, de_usize_in, ConfigError};

fn de_count<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 1, 1 << 24)
}
fn de_count0<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 0, 1 << 24)
}
fn de_pixels<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 16, 1 << 16)
}
fn de_reflectivity<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
    use serde::de::Error;
    let v = f64::deserialize(d)?;
    if (0.0..=1.0).contains(&v) {
        Ok(v)
    } else {
        Err(D::Error::custom(format!("value {v} out of range: reflectivity must be in [0, 1]")))
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SpectrumShape {
    /// One Gaussian (in wavenumber) of given centre and FWHM.
    Gaussian,
    /// A weighted sum of Gaussians (non-Gaussian overall). Old name: `gaussians`.
    #[serde(rename = "gaussian_sum", alias = "gaussians")]
    GaussianSum,
    /// Flat across the spectrometer's band.
    Flat,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct GaussianComponent {
    #[serde(deserialize_with = "de_positive")]
    pub centre_nm: f64,
    #[serde(deserialize_with = "de_positive")]
    pub fwhm_nm: f64,
    #[serde(deserialize_with = "de_positive")]
    pub weight: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SourceSpec {
    pub shape: SpectrumShape,
    #[serde(deserialize_with = "de_positive")]
    pub centre_nm: f64,
    #[serde(deserialize_with = "de_positive")]
    pub fwhm_nm: f64,
    pub components: Vec<GaussianComponent>,
}

impl Default for SourceSpec {
    fn default() -> Self {
        SourceSpec { shape: SpectrumShape::Gaussian, centre_nm: 840.0, fwhm_nm: 50.0, components: Vec::new() }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SpectrometerSpec {
    #[serde(deserialize_with = "de_pixels")]
    pub pixels: usize,
    #[serde(deserialize_with = "de_positive")]
    pub start_nm: f64,
    #[serde(deserialize_with = "de_positive")]
    pub stop_nm: f64,
    /// Deviation from a linear-in-λ map: quadratic and cubic terms in nm,
    /// λ = λ_lin + n2·(t² − 1) + n3·(t³ − t), t = −1 … 1 across the pixels.
    pub nonlinearity_nm: [f64; 2],
    /// FWHM of each pixel's Gaussian spectral response, nm (0: ideal).
    #[serde(deserialize_with = "de_non_negative")]
    pub resolution_nm: f64,
    /// Integrate each pixel over its width (adds a sinc roll-off factor).
    pub pixel_integration: bool,
    /// What the capture records as its wavelength map: the true map
    /// (`exact`, default) or the nominal linear one from start_nm to stop_nm
    /// (`nominal`: a spectrometer that was never calibrated).
    #[serde(skip_serializing_if = "RecordedMap::is_exact")]
    pub recorded_map: RecordedMap,
}

#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RecordedMap {
    /// The spectrometer's true map. Old name: `true`.
    #[default]
    #[serde(alias = "true")]
    Exact,
    Nominal,
}

impl RecordedMap {
    fn is_exact(&self) -> bool {
        *self == RecordedMap::Exact
    }
}

impl Default for SpectrometerSpec {
    fn default() -> Self {
        SpectrometerSpec {
            pixels: 2048,
            start_nm: 765.0,
            stop_nm: 915.0,
            nonlinearity_nm: [0.0, 0.0],
            resolution_nm: 0.0,
            pixel_integration: false,
            recorded_map: RecordedMap::Exact,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct DetectorSpec {
    pub dtype: SampleType,
    /// Saturation level in counts; samples are clipped to [0, full_scale].
    #[serde(deserialize_with = "de_positive")]
    pub full_scale: f64,
    /// Peak of the reference-arm spectrum, counts.
    #[serde(deserialize_with = "de_non_negative")]
    pub reference_counts: f64,
    /// Detector gain for shot noise, electrons per count (0: no shot noise).
    #[serde(deserialize_with = "de_non_negative")]
    pub electrons_per_count: f64,
    #[serde(deserialize_with = "de_non_negative")]
    pub read_noise_counts: f64,
    /// Constant dark offset, counts.
    #[serde(deserialize_with = "de_non_negative")]
    pub dark_counts: f64,
    /// Standard deviation of the per-pixel fixed pattern, counts.
    #[serde(deserialize_with = "de_non_negative")]
    pub fixed_pattern_counts: f64,
}

impl Default for DetectorSpec {
    fn default() -> Self {
        DetectorSpec {
            dtype: SampleType::U16,
            full_scale: 4095.0,
            reference_counts: 2000.0,
            electrons_per_count: 4.0,
            read_noise_counts: 1.5,
            dark_counts: 100.0,
            fixed_pattern_counts: 10.0,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct DispersionSpec {
    /// Unmatched fused silica, mm, single pass: positive in the sample arm,
    /// negative in the reference arm.
    #[serde(deserialize_with = "de_finite")]
    pub fused_silica_mm: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Reflector {
    /// Optical path depth (single pass, in air) of the mirror.
    #[serde(deserialize_with = "de_non_negative")]
    pub depth_um: f64,
    /// Power reflectivity relative to the reference arm.
    #[serde(deserialize_with = "de_reflectivity")]
    pub reflectivity: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Layer {
    #[serde(deserialize_with = "de_positive")]
    pub thickness_um: f64,
    #[serde(deserialize_with = "de_positive")]
    pub group_index: f64,
    /// Reflectivity of the interface at the top of this layer.
    #[serde(deserialize_with = "de_reflectivity")]
    pub top_reflectivity: f64,
    /// Random point scatterers per A-line inside the layer.
    #[serde(default, deserialize_with = "de_count0")]
    pub scatterers: usize,
    /// Mean reflectivity of a scatterer.
    #[serde(default, deserialize_with = "de_reflectivity")]
    pub scatterer_reflectivity: f64,
    /// The interface at the top of this layer waves across the fast axis:
    /// amplitude in µm of optical depth, `wave_cycles` periods from the
    /// first to the last A-line, starting at phase `wave_phase_deg`.
    #[serde(default, deserialize_with = "de_non_negative", skip_serializing_if = "is_zero")]
    pub wave_um: f64,
    #[serde(default, deserialize_with = "de_non_negative", skip_serializing_if = "is_zero")]
    pub wave_cycles: f64,
    #[serde(default, deserialize_with = "de_finite", skip_serializing_if = "is_zero")]
    pub wave_phase_deg: f64,
    /// Depth change of this interface alone from the first to the last
    /// A-line, µm (over the whole sample's `tilt_um`).
    #[serde(default, deserialize_with = "de_finite", skip_serializing_if = "is_zero")]
    pub tilt_um: f64,
    /// Attenuation coefficient of the layer, mm⁻¹: light that goes down a
    /// geometric depth z in it and comes back is weakened by exp(−2·μ·z)
    /// in intensity (single scattering), and so is everything below.
    #[serde(default, deserialize_with = "de_non_negative", skip_serializing_if = "is_zero")]
    pub attenuation_per_mm: f64,
}

fn is_zero(v: &f64) -> bool {
    *v == 0.0
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SampleSpec {
    /// Optical depth of the top surface at the centre of the scan.
    #[serde(deserialize_with = "de_non_negative")]
    pub surface_um: f64,
    /// Curvature: extra depth at the scan's lateral edges (parabolic).
    #[serde(default, deserialize_with = "de_finite")]
    pub sag_um: f64,
    /// Depth change from the first to the last A-line.
    #[serde(default, deserialize_with = "de_finite")]
    pub tilt_um: f64,
    /// Depth change from the first to the last frame.
    #[serde(default, deserialize_with = "de_finite")]
    pub frame_tilt_um: f64,
    pub layers: Vec<Layer>,
    /// Reflectivity of the interface below the last layer.
    #[serde(default, deserialize_with = "de_reflectivity")]
    pub bottom_reflectivity: f64,
}

impl SampleSpec {
    /// The interfaces (top first) at fractions u of the fast-axis and v of
    /// the slow-axis extent of the scan: optical depth in µm (the sample's
    /// depth, sag and tilt, then each interface's own wave and tilt) and
    /// reflectivity. The last is the bottom of the last layer, which has
    /// no shape of its own.
    pub fn interfaces_at(&self, u: f64, v: f64) -> Vec<(f64, f64)> {
        let offset = self.sag_um * (2.0 * u - 1.0).powi(2) + self.tilt_um * (u - 0.5) + self.frame_tilt_um * (v - 0.5);
        let mut out = Vec::with_capacity(self.layers.len() + 1);
        // (Summed in this order so that a scene without waves gives the
        // same depths, to the bit, as before waves existed.)
        let mut z = self.surface_um;
        for layer in &self.layers {
            let own = layer.wave_um * (std::f64::consts::TAU * layer.wave_cycles * u + layer.wave_phase_deg.to_radians()).sin() + layer.tilt_um * (u - 0.5);
            out.push((z + offset + own, layer.top_reflectivity));
            z += layer.thickness_um * layer.group_index;
        }
        out.push((z + offset, self.bottom_reflectivity));
        out
    }

    /// The field (amplitude) weight of light reflected at optical depth z,
    /// given the interfaces' depths there: exp(−Σ μ_j·d_j), d_j the
    /// geometric path through layer j above z (optical / group index).
    pub fn field_weight(&self, depths: &[f64], z: f64) -> f64 {
        let mut exponent = 0.0;
        for (j, layer) in self.layers.iter().enumerate() {
            if layer.attenuation_per_mm == 0.0 {
                continue;
            }
            let (top, bottom) = (depths[j], depths[j + 1]);
            let inside = (z.min(bottom) - top).max(0.0);
            exponent += layer.attenuation_per_mm * 1e-3 * inside / layer.group_index;
        }
        (-exponent).exp()
    }

    /// The layer holding optical depth z (None above the first or below
    /// the last interface).
    pub fn layer_at(depths: &[f64], z: f64) -> Option<usize> {
        depths.windows(2).position(|w| z >= w[0] && z < w[1])
    }
}

/// Lateral scan geometry and timing. With it, the sample is a 3-D field of
/// scatterers seen through a Gaussian beam, so neighbouring A-lines and
/// repeated B-scans see correlated speckle (what Doppler and angiography
/// need); without it, each A-line draws its own scatterers.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct ScanSpec {
    /// Step between neighbouring A-lines (fast axis), µm.
    #[serde(deserialize_with = "de_positive")]
    pub aline_spacing_um: f64,
    /// Step between slow-axis positions, µm.
    #[serde(deserialize_with = "de_positive")]
    pub position_spacing_um: f64,
    /// Time from one A-line to the next, µs.
    #[serde(deserialize_with = "de_positive")]
    pub aline_period_us: f64,
    /// Dead time between B-scans (fly-back), µs.
    #[serde(deserialize_with = "de_non_negative")]
    pub frame_gap_us: f64,
    /// Beam radius at the sample where the intensity falls to 1/e², µm.
    /// The round-trip field weight of a scatterer at lateral distance r from
    /// the beam axis is exp(−2r²/w²).
    #[serde(deserialize_with = "de_positive")]
    pub beam_radius_um: f64,
}

impl Default for ScanSpec {
    fn default() -> Self {
        ScanSpec { aline_spacing_um: 2.0, position_spacing_um: 4.0, aline_period_us: 20.0, frame_gap_us: 0.0, beam_radius_um: 6.0 }
    }
}

/// Motion of the whole sample (needs `[scan]`).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct MotionSpec {
    /// Steady axial drift of the sample, mm/s; positive: away from the
    /// probe (towards larger depth).
    #[serde(deserialize_with = "de_finite")]
    pub axial_velocity_mm_s: f64,
    /// Each repeated B-scan after the first of a position is displaced by a
    /// random axial shift, uniform in ±this, µm (optical depth).
    #[serde(deserialize_with = "de_non_negative")]
    pub repeat_axial_jitter_um: f64,
    /// The same along the fast axis, µm.
    #[serde(deserialize_with = "de_non_negative")]
    pub repeat_lateral_jitter_um: f64,
}

/// A blood vessel: a straight cylinder of moving scatterers (needs `[scan]`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VesselSpec {
    /// Fast-axis position of the vessel's axis at the middle slow-axis
    /// position, µm from the first A-line.
    #[serde(deserialize_with = "de_finite")]
    pub lateral_um: f64,
    /// Optical depth (in air) of the axis there, µm.
    #[serde(deserialize_with = "de_non_negative")]
    pub depth_um: f64,
    #[serde(deserialize_with = "de_positive")]
    pub radius_um: f64,
    /// Speed on the axis (Poiseuille profile v = v_max·(1 − r²/R²)), mm/s;
    /// positive: along the axis direction below.
    #[serde(deserialize_with = "de_finite")]
    pub peak_velocity_mm_s: f64,
    /// Angle between the vessel's axis and the beam, degrees (90: across
    /// the beam, no axial velocity; below 90 the flow moves away from the probe).
    #[serde(deserialize_with = "de_finite")]
    pub angle_deg: f64,
    /// Direction of the axis en face, degrees from the slow axis towards
    /// the fast axis (0: the vessel runs along the slow axis).
    #[serde(default, deserialize_with = "de_finite")]
    pub azimuth_deg: f64,
    /// Scatterers per µm³ inside the vessel.
    #[serde(deserialize_with = "de_positive")]
    pub scatterer_density_per_um3: f64,
    /// Mean power reflectivity of a scatterer.
    #[serde(deserialize_with = "de_reflectivity")]
    pub scatterer_reflectivity: f64,
    /// Brownian diffusion coefficient of the scatterers, µm²/s.
    #[serde(default, deserialize_with = "de_non_negative")]
    pub diffusion_um2_per_s: f64,
    /// Group index of blood: optical depth = group index × geometric depth.
    #[serde(default = "default_blood_index", deserialize_with = "de_positive")]
    pub group_index: f64,
}

fn default_blood_index() -> f64 {
    1.38
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Scene {
    pub seed: u64,
    #[serde(deserialize_with = "de_count")]
    pub frames: usize,
    #[serde(deserialize_with = "de_count")]
    pub alines: usize,
    /// Spectra recorded with the sample arm blocked, stored as /background.
    #[serde(deserialize_with = "de_count0")]
    pub background_lines: usize,
    /// Repeated B-scans per slow-axis position: groups of this many
    /// consecutive frames image the same sample with independent noise.
    #[serde(deserialize_with = "de_count")]
    pub repeats: usize,
    pub source: SourceSpec,
    pub spectrometer: SpectrometerSpec,
    pub detector: DetectorSpec,
    pub dispersion: DispersionSpec,
    #[serde(rename = "reflector")]
    pub reflectors: Vec<Reflector>,
    pub sample: Option<SampleSpec>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub scan: Option<ScanSpec>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub motion: Option<MotionSpec>,
    #[serde(rename = "vessel", skip_serializing_if = "Vec::is_empty")]
    pub vessels: Vec<VesselSpec>,
}

impl Default for Scene {
    fn default() -> Self {
        Scene {
            seed: 1,
            frames: 1,
            alines: 64,
            background_lines: 16,
            repeats: 1,
            source: SourceSpec::default(),
            spectrometer: SpectrometerSpec::default(),
            detector: DetectorSpec::default(),
            dispersion: DispersionSpec::default(),
            reflectors: Vec::new(),
            sample: None,
            scan: None,
            motion: None,
            vessels: Vec::new(),
        }
    }
}

impl Scene {
    /// Parses a scene and checks what involves several keys.
    pub fn from_str(name: &str, text: &str) -> Result<Scene, ConfigError> {
        let scene: Scene = fringeflow_base::settings::parse(name, text)?;
        let fail = |section: &str, key: &str, message: String| ConfigError {
            file: name.to_string(),
            line: fringeflow_base::settings::line_of_key(text, section, key),
            message: format!("{}{key}: {message}", if section.is_empty() { String::new() } else { format!("{section}.") }),
        };
        if !scene.frames.is_multiple_of(scene.repeats) {
            return Err(fail("", "repeats", format!("frames ({}) must be a multiple of repeats ({})", scene.frames, scene.repeats)));
        }
        let s = &scene.spectrometer;
        if s.stop_nm <= s.start_nm {
            return Err(fail("spectrometer", "stop_nm", format!("must exceed start_nm ({} <= {})", s.stop_nm, s.start_nm)));
        }
        if !wavelength_map(s).windows(2).all(|w| w[1] > w[0]) {
            return Err(fail("spectrometer", "nonlinearity_nm", "makes the wavelength map non-monotonic".into()));
        }
        if let Some(sample) = &scene.sample {
            // Interfaces that cross would make a layer of negative thickness.
            for step in 0..=1000 {
                let u = step as f64 / 1000.0;
                for v in [0.0, 1.0] {
                    let ifs = sample.interfaces_at(u, v);
                    if let Some(i) = ifs.windows(2).position(|w| w[1].0 <= w[0].0) {
                        return Err(fail("sample", "layers", format!("interfaces {i} and {} (counted from the top, 0 first) cross at {:.0} % of the fast axis: reduce a wave or tilt, or thicken the layer between them", i + 1, u * 100.0)));
                    }
                }
            }
        }
        if scene.source.shape == SpectrumShape::GaussianSum && scene.source.components.is_empty() {
            return Err(fail("source", "components", "shape = \"gaussian_sum\" needs at least one component".into()));
        }
        if scene.scan.is_none() && (scene.motion.is_some() || !scene.vessels.is_empty()) {
            let key = if scene.motion.is_some() { "motion" } else { "vessel" };
            return Err(fail("", key, "needs a [scan] section (lateral spacing, A-line period, beam radius)".into()));
        }
        for v in &scene.vessels {
            let count = vessel_scatterer_estimate(&scene, v);
            if count > 5_000_000.0 {
                return Err(fail("vessel", "scatterer_density_per_um3", format!("gives about {count:.0} scatterers; keep it under 5 million")));
            }
        }
        if scene.detector.full_scale > scene.detector.dtype.integer_max().unwrap_or(f64::INFINITY) {
            return Err(fail("detector", "full_scale", format!("{} exceeds the {:?} range", scene.detector.full_scale, scene.detector.dtype)));
        }
        Ok(scene)
    }

    /// Old key and value names the text uses, as one-line notices.
    pub fn deprecations(name: &str, text: &str) -> Vec<String> {
        use fringeflow_base::settings::{deprecated_names, Rename};
        deprecated_names(name, text, &[Rename::Value("spectrometer", "recorded_map", "true", "exact"), Rename::Value("source", "shape", "gaussians", "gaussian_sum")])
    }

    pub fn from_file(path: &std::path::Path) -> Result<Scene, ConfigError> {
        use fringeflow_io::toml_file::{kind_hint, sniff, FileKind};
        let kind = sniff(path);
        if matches!(kind, FileKind::Hdf5 | FileKind::Pipeline | FileKind::Log) {
            let hint = kind_hint(kind).unwrap_or_default();
            return Err(ConfigError { file: path.display().to_string(), line: None, message: format!("not a scene file: {hint}") });
        }
        let (name, text) = fringeflow_io::toml_file::read_text(path)?;
        Scene::from_str(&name, &text)
    }
}

/// Beyond this many beam radii a scatterer's weight exp(−2r²/w²) is below
/// 1.6e-3 and it is left out.
pub(crate) const CUTOFF_RADII: f64 = 1.8;

/// The wavelength of every camera pixel, nm: linear from start to stop
/// plus the scene's quadratic and cubic non-linearity.
pub fn wavelength_map(s: &SpectrometerSpec) -> Vec<f64> {
    let n = s.pixels;
    (0..n)
        .map(|p| {
            let u = p as f64 / (n - 1) as f64;
            let t = 2.0 * u - 1.0;
            s.start_nm + (s.stop_nm - s.start_nm) * u
                + s.nonlinearity_nm[0] * (t * t - 1.0)
                + s.nonlinearity_nm[1] * (t * t * t - t)
        })
        .collect()
}

/// The fast-axis extent of the scan (first to last A-line), µm.
pub(crate) fn scan_width(scene: &Scene, scan: &ScanSpec) -> f64 {
    (scene.alines.max(2) - 1) as f64 * scan.aline_spacing_um
}

pub(crate) fn scan_length(scene: &Scene, scan: &ScanSpec) -> f64 {
    let positions = scene.frames / scene.repeats;
    (positions.max(2) - 1) as f64 * scan.position_spacing_um
}

/// Lateral margin around the scan that scatterers must fill: the beam's
/// reach plus the largest lateral jitter.
pub(crate) fn margin(scene: &Scene, scan: &ScanSpec) -> f64 {
    CUTOFF_RADII * scan.beam_radius_um + scene.motion.as_ref().map_or(0.0, |m| m.repeat_lateral_jitter_um) + 1.0
}

/// Unit vectors: the vessel's axis and two directions across it.
pub(crate) fn vessel_frame(v: &VesselSpec) -> ([f64; 3], [[f64; 3]; 2]) {
    let (t, a) = (v.angle_deg.to_radians(), v.azimuth_deg.to_radians());
    let axis = [t.sin() * a.sin(), t.sin() * a.cos(), t.cos()];
    // Any vector not parallel to the axis, made orthogonal.
    let helper = if axis[2].abs() < 0.9 { [0.0, 0.0, 1.0] } else { [1.0, 0.0, 0.0] };
    let dot: f64 = (0..3).map(|i| helper[i] * axis[i]).sum();
    let mut e1: [f64; 3] = std::array::from_fn(|i| helper[i] - dot * axis[i]);
    let n1 = e1.iter().map(|c| c * c).sum::<f64>().sqrt();
    e1.iter_mut().for_each(|c| *c /= n1);
    let e2 = [axis[1] * e1[2] - axis[2] * e1[1], axis[2] * e1[0] - axis[0] * e1[2], axis[0] * e1[1] - axis[1] * e1[0]];
    (axis, [e1, e2])
}

/// The range of s over which the vessel's cylinder can be seen by the scan
/// (the scanned box with its margin, every depth of the image).
pub(crate) fn vessel_s_range(scene: &Scene, v: &VesselSpec, centre: [f64; 3], axis: [f64; 3], max_depth_um: f64) -> [f64; 2] {
    let scan = scene.scan.as_ref().expect("scanned scene");
    let m = margin(scene, scan);
    let xs = [-m, scan_width(scene, scan) + m];
    let ys = [-m, scan_length(scene, scan) + m];
    let zs = [-v.depth_um / v.group_index, (max_depth_um - v.depth_um) / v.group_index];
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for x in xs {
        for y in ys {
            for z in zs {
                let g = [x - centre[0], y - centre[1], z];
                let s: f64 = (0..3).map(|i| g[i] * axis[i]).sum();
                lo = lo.min(s);
                hi = hi.max(s);
            }
        }
    }
    [lo - v.radius_um, hi + v.radius_um]
}

pub(crate) fn max_depth(scene: &Scene) -> f64 {
    let wl = wavelength_map(&scene.spectrometer);
    let n = wl.len();
    let centre = 0.5 * (wl[0] + wl[n - 1]);
    crate::optics::nyquist_depth_um(centre, (wl[n - 1] - wl[0]).abs() / (n - 1) as f64)
}

/// Expected scatterer count of a vessel (for the scene check).
pub fn vessel_scatterer_estimate(scene: &Scene, v: &VesselSpec) -> f64 {
    let Some(scan) = &scene.scan else { return 0.0 };
    let _ = scan;
    let centre = [v.lateral_um, 0.5 * scan_length(scene, scene.scan.as_ref().unwrap()), v.depth_um];
    let (axis, _) = vessel_frame(v);
    let [lo, hi] = vessel_s_range(scene, v, centre, axis, max_depth(scene));
    v.scatterer_density_per_um3 * std::f64::consts::PI * v.radius_um * v.radius_um * (hi - lo)
}

/// Seconds from the first A-line of the capture to A-line `a` of frame `f`, µs.
pub fn aline_time_us(scene: &Scene, scan: &ScanSpec, f: usize, a: usize) -> f64 {
    f as f64 * (scene.alines as f64 * scan.aline_period_us + scan.frame_gap_us) + a as f64 * scan.aline_period_us
}
