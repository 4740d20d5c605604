//! Scanned scenes: the sample as a 3-D field of point scatterers seen
//! through a Gaussian beam, with vessels of flowing scatterers and motion of
//! the whole sample over time. Used when a scene has a `[scan]` section.
//!
//! Geometry: x along the fast axis (A-line a sits at x = a·aline_spacing),
//! y along the slow axis (position p at y = p·position_spacing), depth as
//! optical path in air (single pass), like everything else the simulator
//! writes. A scatterer at lateral distance r from the beam's axis adds its
//! fringe with the round-trip field weight exp(−2r²/w²) (w the 1/e²
//! intensity radius; a Gaussian beam coupled back into the same single-mode
//! fibre, common practice). Static scatterers fill each layer with a
//! density chosen so that an A-line collects the same mean power as the
//! per-A-line model (scatterers × mean reflectivity).
//!
//! Vessels are straight cylinders (round in geometric space, stretched by
//! the blood's group index in optical depth) whose scatterers move along
//! the axis with the Poiseuille profile v(r) = v_max·(1 − r²/R²), wrap
//! around at the ends of the simulated segment, and diffuse (Brownian
//! steps between B-scans). Time runs A-line by A-line:
//! t = frame·(alines·T + gap) + a·T.
//!
//! Not for: the per-A-line scatterer model and the detector (see `mod.rs`).

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Exp1, StandardNormal};
use serde::Serialize;

use super::scene::{aline_time_us, margin, CUTOFF_RADII, max_depth, scan_length, scan_width, vessel_frame, vessel_s_range, Scene, ScanSpec, VesselSpec};


/// mm/s in µm/µs.
const MM_PER_S_IN_UM_PER_US: f64 = 1e-3;

/// A static point scatterer: lateral position (µm), optical depth (µm) and
/// fringe amplitude 2·√R.
#[derive(Debug, Clone, Copy)]
struct Point {
    x: f64,
    y: f64,
    z: f64,
    amplitude: f64,
}

/// Static scatterers binned on a lateral grid of CUTOFF_RADII·w cells.
struct StaticField {
    origin: [f64; 2],
    cell: f64,
    nx: usize,
    ny: usize,
    cells: Vec<Vec<Point>>,
}

impl StaticField {
    fn near(&self, x: f64, y: f64, mut f: impl FnMut(&Point)) {
        let cx = ((x - self.origin[0]) / self.cell).floor() as i64;
        let cy = ((y - self.origin[1]) / self.cell).floor() as i64;
        for j in cy - 1..=cy + 1 {
            for i in cx - 1..=cx + 1 {
                if i >= 0 && j >= 0 && (i as usize) < self.nx && (j as usize) < self.ny {
                    self.cells[j as usize * self.nx + i as usize].iter().for_each(&mut f);
                }
            }
        }
    }
}

/// A vessel's frame and scatterers. Coordinates along the axis (s) and
/// across it (u, v) are geometric µm; the axis passes through
/// (lateral_um, middle slow-axis position, depth_um).
pub struct Vessel {
    spec: VesselSpec,
    centre: [f64; 3],
    axis: [f64; 3],
    across: [[f64; 3]; 2],
    s_range: [f64; 2],
    /// (s, u, v, amplitude) at the start of the current frame.
    scatterers: Vec<[f64; 4]>,
    /// The layer holding the axis at the scan's middle position.
    layer: Option<usize>,
}

impl Vessel {
    /// Speed along the axis at (u, v), µm/µs.
    fn speed(&self, u: f64, v: f64) -> f64 {
        let r2 = (u * u + v * v) / (self.spec.radius_um * self.spec.radius_um);
        self.spec.peak_velocity_mm_s * MM_PER_S_IN_UM_PER_US * (1.0 - r2).max(0.0)
    }

    /// Point of the vessel frame (s, u, v) in scene coordinates: x, y in µm
    /// and optical depth in µm.
    fn position(&self, s: f64, u: f64, v: f64) -> [f64; 3] {
        let g: [f64; 3] = std::array::from_fn(|i| s * self.axis[i] + u * self.across[0][i] + v * self.across[1][i]);
        [self.centre[0] + g[0], self.centre[1] + g[1], self.centre[2] + self.spec.group_index * g[2]]
    }

    fn wrap(&self, s: f64) -> f64 {
        let len = self.s_range[1] - self.s_range[0];
        self.s_range[0] + (s - self.s_range[0]).rem_euclid(len)
    }

    /// Geometric distance of a scene point from the axis (depth converted
    /// with the blood's group index).
    fn distance_from_axis(&self, p: [f64; 3]) -> (f64, f64) {
        let g = [p[0] - self.centre[0], p[1] - self.centre[1], (p[2] - self.centre[2]) / self.spec.group_index];
        let s: f64 = (0..3).map(|i| g[i] * self.axis[i]).sum();
        let d2: f64 = (0..3).map(|i| (g[i] - s * self.axis[i]).powi(2)).sum();
        (d2.sqrt(), s)
    }

    /// Axial velocity (mm/s, positive away from the probe) of the flow at a
    /// scene point, None outside the vessel.
    pub fn axial_velocity_mm_s(&self, p: [f64; 3]) -> Option<f64> {
        let (r, _) = self.distance_from_axis(p);
        (r <= self.spec.radius_um).then(|| self.spec.peak_velocity_mm_s * (1.0 - (r / self.spec.radius_um).powi(2)) * self.axis[2])
    }

    /// Where the axis crosses the slow-axis coordinate y: (x µm, optical depth µm).
    pub fn crossing(&self, y: f64) -> Option<(f64, f64)> {
        (self.axis[1].abs() > 1e-9).then(|| {
            let s = (y - self.centre[1]) / self.axis[1];
            let p = self.position(s, 0.0, 0.0);
            (p[0], p[2])
        })
    }
}

/// Geometry shared by every A-line of a scanned scene.
pub struct ScannedSample {
    scan: ScanSpec,
    statics: StaticField,
    pub vessels: Vec<Vessel>,
    /// Per frame: (lateral, axial) displacement of the sample, µm.
    pub frame_shift_um: Vec<[f64; 2]>,
    positions: usize,
}


impl ScannedSample {
    /// Builds the static field, the vessels and the per-frame jitter.
    pub fn new(scene: &Scene, interfaces_at: &dyn Fn(f64, f64) -> Vec<f64>) -> ScannedSample {
        let scan = scene.scan.clone().expect("scanned scene");
        let positions = scene.frames / scene.repeats;
        let w = scan.beam_radius_um;
        let m = margin(scene, &scan);
        let (x0, x1) = (-m, scan_width(scene, &scan) + m);
        let (y0, y1) = (-m, scan_length(scene, &scan) + m);
        let max_depth_um = max_depth(scene);

        let mut vessels: Vec<Vessel> = scene
            .vessels
            .iter()
            .map(|v| {
                let centre = [v.lateral_um, 0.5 * scan_length(scene, &scan), v.depth_um];
                let (axis, across) = vessel_frame(v);
                let s_range = vessel_s_range(scene, v, centre, axis, max_depth_um);
                let layer = scene.sample.as_ref().and_then(|_| crate::scene::SampleSpec::layer_at(&interfaces_at(centre[0], centre[1]), centre[2]));
                Vessel { spec: v.clone(), centre, axis, across, s_range, scatterers: Vec::new(), layer }
            })
            .collect();

        // Static scatterers: density 4·n/(π·w²·thickness) per layer, so that
        // Σ R·weight² over the beam (∫ exp(−4r²/w²) dA = π·w²/4) equals the
        // per-A-line model's n·R.
        let mut rng = ChaCha8Rng::seed_from_u64(scene.seed);
        rng.set_stream(0x5ca7_0000_0000_0001);
        let cell = CUTOFF_RADII * w;
        let nx = ((x1 - x0) / cell).ceil().max(1.0) as usize;
        let ny = ((y1 - y0) / cell).ceil().max(1.0) as usize;
        let mut cells = vec![Vec::new(); nx * ny];
        if let Some(sample) = &scene.sample {
            for (i, layer) in sample.layers.iter().enumerate() {
                if layer.scatterers == 0 {
                    continue;
                }
                let thickness = layer.thickness_um * layer.group_index;
                let count = 4.0 * layer.scatterers as f64 / (std::f64::consts::PI * w * w) * (x1 - x0) * (y1 - y0);
                let count = count.round() as usize;
                for _ in 0..count {
                    let x = x0 + (x1 - x0) * rng.random::<f64>();
                    let y = y0 + (y1 - y0) * rng.random::<f64>();
                    let q = rng.random::<f64>();
                    let r = layer.scatterer_reflectivity * rng.sample::<f64, _>(Exp1);
                    let ifs = interfaces_at(x, y);
                    let z = ifs[i] + q * (ifs[i + 1] - ifs[i]);
                    let _ = thickness;
                    let weight = sample.field_weight(&ifs, z);
                    if vessels.iter().any(|v| v.distance_from_axis([x, y, z]).0 <= v.spec.radius_um) {
                        continue;
                    }
                    let ci = (((x - x0) / cell) as usize).min(nx - 1);
                    let cj = (((y - y0) / cell) as usize).min(ny - 1);
                    cells[cj * nx + ci].push(Point { x, y, z, amplitude: 2.0 * r.sqrt() * weight });
                }
            }
        }

        for (k, v) in vessels.iter_mut().enumerate() {
            let mut rng = ChaCha8Rng::seed_from_u64(scene.seed);
            rng.set_stream(0x7e55_0000_0000_0000 | k as u64);
            let [lo, hi] = v.s_range;
            let r = v.spec.radius_um;
            let count = (v.spec.scatterer_density_per_um3 * std::f64::consts::PI * r * r * (hi - lo)).round() as usize;
            // Weakened by the layers above the vessel's centre.
            let weight = scene.sample.as_ref().map_or(1.0, |sample| sample.field_weight(&interfaces_at(v.centre[0], v.centre[1]), v.centre[2]));
            v.scatterers = (0..count)
                .map(|_| {
                    let s = lo + (hi - lo) * rng.random::<f64>();
                    // Uniform over the disc.
                    let (rho, phi) = (r * rng.random::<f64>().sqrt(), 2.0 * std::f64::consts::PI * rng.random::<f64>());
                    let refl = v.spec.scatterer_reflectivity * rng.sample::<f64, _>(Exp1);
                    [s, rho * phi.cos(), rho * phi.sin(), 2.0 * refl.sqrt() * weight]
                })
                .collect();
        }

        let mut rng = ChaCha8Rng::seed_from_u64(scene.seed);
        rng.set_stream(0x1177_0000_0000_0000);
        let motion = scene.motion.clone().unwrap_or_default();
        let frame_shift_um = (0..scene.frames)
            .map(|f| {
                if f % scene.repeats == 0 {
                    return [0.0, 0.0];
                }
                let lateral = motion.repeat_lateral_jitter_um * (2.0 * rng.random::<f64>() - 1.0);
                let axial = motion.repeat_axial_jitter_um * (2.0 * rng.random::<f64>() - 1.0);
                [lateral, axial]
            })
            .collect();
        ScannedSample { scan, statics: StaticField { origin: [x0, y0], cell, nx, ny, cells }, vessels, frame_shift_um, positions }
    }

    /// Moves the vessels' scatterers from the start of frame f − 1 to the
    /// start of frame f: flow along the axis plus one Brownian step of
    /// standard deviation √(2·D·Δt) per coordinate (reflected at the wall).
    pub fn advance_to_frame(&mut self, scene: &Scene, f: usize) {
        if f == 0 {
            return;
        }
        let dt = aline_time_us(scene, &self.scan, f, 0) - aline_time_us(scene, &self.scan, f - 1, 0);
        for (k, v) in self.vessels.iter_mut().enumerate() {
            let mut rng = ChaCha8Rng::seed_from_u64(scene.seed);
            rng.set_stream(0xb0b0_0000_0000_0000 | ((k as u64) << 40) | f as u64);
            let step = (2.0 * v.spec.diffusion_um2_per_s * dt * 1e-6).sqrt();
            let r = v.spec.radius_um;
            for i in 0..v.scatterers.len() {
                let [s, u, w, a] = v.scatterers[i];
                let mut s = s + v.speed(u, w) * dt;
                let (mut u, mut w) = (u, w);
                if step > 0.0 {
                    s += step * rng.sample::<f64, _>(StandardNormal);
                    u += step * rng.sample::<f64, _>(StandardNormal);
                    w += step * rng.sample::<f64, _>(StandardNormal);
                    let rho = (u * u + w * w).sqrt();
                    if rho > r {
                        let back = (2.0 * r - rho).max(0.0) / rho;
                        u *= back;
                        w *= back;
                    }
                }
                v.scatterers[i] = [v.wrap(s), u, w, a];
            }
        }
    }

    /// The sample's (lateral, axial) displacement at A-line a of frame f, µm:
    /// the frame's jitter plus the bulk axial drift.
    pub fn displacement(&self, scene: &Scene, f: usize, a: usize) -> [f64; 2] {
        let [dx, dz] = self.frame_shift_um[f];
        let drift = scene.motion.as_ref().map_or(0.0, |m| m.axial_velocity_mm_s * MM_PER_S_IN_UM_PER_US * aline_time_us(scene, &self.scan, f, a));
        [dx, dz + drift]
    }

    /// Beam position in the sample's own frame for A-line a of frame f.
    pub fn beam_in_sample(&self, scene: &Scene, f: usize, a: usize) -> [f64; 2] {
        let [dx, _] = self.displacement(scene, f, a);
        [a as f64 * self.scan.aline_spacing_um - dx, (f / scene.repeats) as f64 * self.scan.position_spacing_um]
    }

    /// Scatterers seen by A-line a of frame f, as (optical depth, fringe
    /// amplitude 2·√R·weight), depths already displaced by the motion.
    pub fn scatterers_seen(&self, scene: &Scene, f: usize, a: usize, out: &mut Vec<(f64, f64)>) {
        let [bx, by] = self.beam_in_sample(scene, f, a);
        let [_, dz] = self.displacement(scene, f, a);
        let w = self.scan.beam_radius_um;
        let reach2 = (CUTOFF_RADII * w).powi(2);
        let inv_w2 = 2.0 / (w * w);
        self.statics.near(bx, by, |p| {
            let r2 = (p.x - bx).powi(2) + (p.y - by).powi(2);
            if r2 < reach2 {
                out.push((p.z + dz, p.amplitude * (-inv_w2 * r2).exp()));
            }
        });
        let t = aline_time_us(scene, &self.scan, f, a) - aline_time_us(scene, &self.scan, f, 0);
        for v in &self.vessels {
            for &[s, u, vv, amp] in &v.scatterers {
                let p = v.position(v.wrap(s + v.speed(u, vv) * t), u, vv);
                let r2 = (p[0] - bx).powi(2) + (p[1] - by).powi(2);
                if r2 < reach2 {
                    out.push((p[2] + dz, amp * (-inv_w2 * r2).exp()));
                }
            }
        }
    }

    /// Number of slow-axis positions.
    pub fn positions(&self) -> usize {
        self.positions
    }
}

/// Ground truth of a vessel at each slow-axis position.
#[derive(Debug, Clone, Serialize)]
pub struct VesselTruth {
    /// Axial component of the centre-line velocity, mm/s (positive: away
    /// from the probe): v_max·cos(angle).
    pub peak_axial_velocity_mm_s: f64,
    /// Where the axis crosses each position: fast-axis µm and A-line index
    /// (fractional), optical depth µm. Empty when the vessel runs along the
    /// fast axis (it then lies in every B-scan).
    pub centre_per_position: Vec<VesselCrossing>,
    pub scatterers: usize,
    /// The layer (0 = the top one) holding the vessel's axis at the middle
    /// slow-axis position; None outside the layered sample.
    pub layer: Option<usize>,
}

#[derive(Debug, Clone, Serialize)]
pub struct VesselCrossing {
    pub position: usize,
    pub lateral_um: f64,
    pub aline: f64,
    pub depth_um: f64,
}

impl ScannedSample {
    pub fn vessel_truth(&self) -> Vec<VesselTruth> {
        self.vessels
            .iter()
            .map(|v| VesselTruth {
                peak_axial_velocity_mm_s: v.spec.peak_velocity_mm_s * v.axis[2],
                centre_per_position: (0..self.positions)
                    .filter_map(|p| {
                        let y = p as f64 * self.scan.position_spacing_um;
                        v.crossing(y).map(|(x, z)| VesselCrossing { position: p, lateral_um: x, aline: x / self.scan.aline_spacing_um, depth_um: z })
                    })
                    .collect(),
                scatterers: v.scatterers.len(),
                layer: v.layer,
            })
            .collect()
    }

    /// Axial flow velocity (mm/s) on the beam's axis at each depth of
    /// `depth_um` for every A-line of every position (no motion): NaN
    /// outside vessels. (positions × depths × A-lines, row-major.)
    pub fn velocity_field(&self, scene: &Scene, depth_um: &[f64]) -> Vec<f32> {
        let mut out = vec![f32::NAN; self.positions * depth_um.len() * scene.alines];
        for p in 0..self.positions {
            let y = p as f64 * self.scan.position_spacing_um;
            for (d, &z) in depth_um.iter().enumerate() {
                for a in 0..scene.alines {
                    let x = a as f64 * self.scan.aline_spacing_um;
                    if let Some(v) = self.vessels.iter().find_map(|v| v.axial_velocity_mm_s([x, y, z])) {
                        out[(p * depth_um.len() + d) * scene.alines + a] = v as f32;
                    }
                }
            }
        }
        out
    }
}
