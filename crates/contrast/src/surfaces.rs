//! Layer surfaces of one B-scan: each surface is the minimum-cost path
//! across the A-lines through a graph weighted by the signed axial
//! intensity gradient (Chiu et al. 2010, Opt. Express 18:19413: edge weight
//! 2 − (g_a + g_b) + w_min with g the gradient normalised to [0, 1]; here
//! found by dynamic programming over the A-lines with a limit on the depth
//! change per A-line, which finds the same path as the shortest-path search
//! on that graph). Surfaces are found top first, each searched only in the
//! band its separation limits leave below the one above, so they stay in
//! order. Each A-line's position is then refined to sub-pixel: a thin
//! bright interface (the intensity rises and falls back within a few
//! pixels) sits at its peak, a step between layers at its steepest edge.
//! Where the edge is weaker than `min_edge_db`, or the surface is not that
//! far above the noise floor, the A-line has no surface there (NaN): a
//! path is never invented through shadow or noise.

use rayon::prelude::*;
use ndarray::ArrayView2;

use crate::pipeline::config::{LayersConfig, Polarity};

/// Pixels searched below (or above) the edge for a thin interface's peak,
/// and the drop (dB) that marks the peak as a line rather than a step.
const PEAK_REACH_PX: usize = 6;
const LINE_DROP_DB: f32 = 3.0;
/// Added to every node's cost (Chiu et al.'s w_min): keeps a path through
/// an edge-free stretch the shortest one.
const W_MIN: f32 = 1e-5;
/// Cost per unit of the strongest edge above a node in its band, and the
/// fewest A-lines averaged for the edges that count.
const ABOVE_PENALTY: f32 = 1.0;
const WIDE_ALINES: usize = 15;

/// The surfaces of one B-scan.
#[derive(Debug, Clone, PartialEq)]
pub struct BscanSurfaces {
    /// Depth in air (µm) of each surface at each A-line, [surface][A-line];
    /// NaN where the A-line has no surface.
    pub depth_um: Vec<Vec<f32>>,
    /// A-lines without each surface.
    pub missing: Vec<usize>,
}

/// Finds the configured surfaces in B-scans of one depth axis.
pub struct SurfaceFinder<'a> {
    config: &'a LayersConfig,
    depth_um: Vec<f64>,
    step_um: f64,
}

impl<'a> SurfaceFinder<'a> {
    /// `depth_um`: the depth (in air) of each image row, evenly spaced.
    pub fn new(config: &'a LayersConfig, depth_um: Vec<f64>) -> Self {
        let step_um = if depth_um.len() > 1 { depth_um[1] - depth_um[0] } else { 1.0 };
        SurfaceFinder { config, depth_um, step_um }
    }

    fn px(&self, um: f64) -> usize {
        (um / self.step_um).round().max(0.0) as usize
    }

    /// The surfaces of a dB image (depth × A-lines) whose noise floor is
    /// `floor_db`.
    pub fn find(&self, db: ArrayView2<'_, f32>, floor_db: f64) -> BscanSurfaces {
        self.find_near(db, floor_db, None)
    }

    /// The same, each surface searched only within
    /// `max_step_between_positions_um` of where it was at the previous
    /// position (`previous`, same A-lines), where it was found there and
    /// the two bands meet (the 3-D constraint, in the spirit of Garvin et
    /// al. 2009, IEEE Trans. Med. Imaging 28:1436, applied position by
    /// position so memory stays flat).
    pub fn find_near(&self, db: ArrayView2<'_, f32>, floor_db: f64, previous: Option<&BscanSurfaces>) -> BscanSurfaces {
        let (depth, alines) = db.dim();
        let smooth = smoothed(db, self.config.lateral_smoothing_alines);
        let gradient = axial_gradient(&smooth, depth, alines);
        let wide_alines = (3 * self.config.lateral_smoothing_alines).max(WIDE_ALINES) | 1;
        let wide_gradient = axial_gradient(&smoothed(db, wide_alines), depth, alines);
        let max_step = self.px(self.config.max_step_um).max(1);
        let first = self.px(self.config.search_from_um).clamp(1, depth.saturating_sub(2).max(1));
        let mut out = BscanSurfaces { depth_um: Vec::new(), missing: Vec::new() };
        let mut above: Option<Vec<usize>> = None;
        let near = self.config.max_step_between_positions_um.map(|um| self.px(um).max(1));
        for (k, surface) in self.config.surfaces.iter().enumerate() {
            let prior = previous.zip(near).and_then(|(p, n)| p.depth_um.get(k).filter(|d| d.len() == alines).map(|d| (d, n)));
            let bounds: Vec<(usize, usize)> = (0..alines)
                .map(|a| {
                    let last = depth.saturating_sub(2).max(1);
                    match &above {
                        None => (first, last),
                        Some(path) => {
                            let lo = (path[a] + self.px(surface.min_separation_um).max(1)).min(last);
                            let hi = surface.max_separation_um.map_or(last, |m| (path[a] + self.px(m)).min(last));
                            (lo, hi.max(lo))
                        }
                    }
                })
                .enumerate()
                .map(|(a, (lo, hi))| match prior {
                    Some((d, n)) if d[a].is_finite() => {
                        let z = ((d[a] as f64 - self.depth_um[0]) / self.step_um).round().max(0.0) as usize;
                        let (l, h) = (lo.max(z.saturating_sub(n)), hi.min(z + n));
                        if l <= h { (l, h) } else { (lo, hi) }
                    }
                    _ => (lo, hi),
                })
                .collect();
            let sign = if surface.polarity == Polarity::DarkToBright { 1.0 } else { -1.0 };
            let narrow = strength(&gradient, sign, depth, &bounds);
            // Edges of the image averaged over many A-lines: they order
            // the path (the surface is the first strong edge of its band).
            let wide = strength(&wide_gradient, sign, depth, &bounds);
            let path = match &above {
                None => cheapest_path(&narrow, Some(&wide), depth, &bounds, max_step),
                Some(reference) => {
                    // Two candidates. Edges as they lie, ordered by the
                    // edges of the image averaged over many A-lines; and
                    // edges also taken along the surface above (the image
                    // flattened to it and averaged over many A-lines, where
                    // speckle averages out and an interface that runs
                    // beside it stays sharp), averaged with the first. The
                    // one whose edge stays sharp when averaged along its
                    // own course is the interface; speckle does not.
                    let (as_they_lie, parallel) = rayon::join(
                        || cheapest_path(&narrow, Some(&wide), depth, &bounds, max_step),
                        || {
                            let along = strength(&along_surface(&smooth, reference, depth, wide_alines), sign, depth, &bounds);
                            let both: Vec<f32> = narrow.iter().zip(&along).map(|(a, b)| 0.5 * (a + b)).collect();
                            cheapest_path(&both, Some(&along), depth, &bounds, max_step)
                        },
                    );
                    let coherence = |path: &[usize]| sign * edge_along(&smooth, path, depth, wide_alines);
                    if coherence(&parallel) >= coherence(&as_they_lie) {
                        parallel
                    } else {
                        as_they_lie
                    }
                }
            };
            let mut positions = Vec::with_capacity(alines);
            let mut missing = 0;
            for (a, &z) in path.iter().enumerate() {
                let s = &smooth[a * depth..(a + 1) * depth];
                let g = &gradient[a * depth..(a + 1) * depth];
                match refine(s, g, z, surface.polarity, floor_db as f32, self.config.min_edge_db as f32) {
                    Some(p) => positions.push((self.depth_um[0] + p * self.step_um) as f32),
                    None => {
                        positions.push(f32::NAN);
                        missing += 1;
                    }
                }
            }
            out.depth_um.push(positions);
            out.missing.push(missing);
            above = Some(path);
        }
        out
    }
}

/// The A-lines averaged for A-line `a`: `half` on each side, cut at the
/// edges of the B-scan (so within `half` of an edge a sloping interface is
/// pulled a little towards the inside: up to about half a pixel per pixel
/// of slope per A-line, measured in the tests).
fn clamped(a: usize, half: usize, alines: usize) -> (usize, usize) {
    (a.saturating_sub(half), (a + half).min(alines - 1))
}

/// Central difference down each A-line of a smoothed image (A-line by
/// A-line): dB per two pixels.
fn axial_gradient(smooth: &[f32], depth: usize, alines: usize) -> Vec<f32> {
    let mut gradient = vec![0f32; depth * alines];
    for a in 0..alines {
        let s = &smooth[a * depth..(a + 1) * depth];
        let g = &mut gradient[a * depth..(a + 1) * depth];
        for z in 1..depth.saturating_sub(1) {
            g[z] = s[z + 1] - s[z - 1];
        }
    }
    gradient
}

/// The dB image averaged over `width` neighbouring A-lines (fewer at the
/// edges) and over [1, 2, 1]/4 in depth, stored A-line by A-line. Lateral
/// means from running sums along each image row, A-lines in parallel.
fn smoothed(db: ArrayView2<'_, f32>, width: usize) -> Vec<f32> {
    let (depth, alines) = db.dim();
    let half = width / 2;
    // Running sums along each row (f64: no drift across wide B-scans).
    let mut cum = vec![0f64; depth * (alines + 1)];
    cum.par_chunks_mut(alines + 1).zip(db.axis_iter(ndarray::Axis(0)).into_par_iter()).for_each(|(c, row)| {
        for (j, &v) in row.iter().enumerate() {
            c[j + 1] = c[j] + v as f64;
        }
    });
    let mut out = vec![0f32; depth * alines];
    out.par_chunks_mut(depth).enumerate().for_each(|(a, o)| {
        let (lo, hi) = clamped(a, half, alines);
        let n = (hi - lo + 1) as f64;
        let mut lateral = vec![0f32; depth];
        for (z, l) in lateral.iter_mut().enumerate() {
            let c = &cum[z * (alines + 1)..];
            *l = ((c[hi + 1] - c[lo]) / n) as f32;
        }
        o.copy_from_slice(&lateral);
        for z in 1..depth.saturating_sub(1) {
            o[z] = 0.25 * lateral[z - 1] + 0.5 * lateral[z] + 0.25 * lateral[z + 1];
        }
    });
    out
}

/// Edge strength for one surface: `sign`·gradient normalised by its
/// largest value inside each A-line's bounds, clipped to [0, 1] (0
/// outside the bounds).
fn strength(gradient: &[f32], sign: f32, depth: usize, bounds: &[(usize, usize)]) -> Vec<f32> {
    let top = bounds
        .par_iter()
        .enumerate()
        .map(|(a, &(lo, hi))| gradient[a * depth + lo..=a * depth + hi].iter().fold(0f32, |m, &g| m.max(sign * g)))
        .reduce(|| 0f32, f32::max);
    let scale = if top > 0.0 { 1.0 / top } else { 0.0 };
    let mut out = vec![0f32; gradient.len()];
    out.par_chunks_mut(depth).zip(bounds.par_iter()).enumerate().for_each(|(a, (o, &(lo, hi)))| {
        for z in lo..=hi {
            o[z] = (sign * gradient[a * depth + z] * scale).clamp(0.0, 1.0);
        }
    });
    out
}

/// The axial gradient of the smoothed image taken along the surface
/// `reference` (one depth pixel per A-line): the image flattened to it,
/// averaged over `width` A-lines in that frame, differentiated down, and
/// put back at each A-line's own depths.
fn along_surface(smooth: &[f32], reference: &[usize], depth: usize, width: usize) -> Vec<f32> {
    let alines = reference.len();
    let rows = depth;
    let half = width / 2;
    // The image flattened to the reference, then running sums across A-lines.
    let mut cum = vec![0f64; (alines + 1) * rows];
    for a in 0..alines {
        let (prev, next) = cum.split_at_mut((a + 1) * rows);
        let prev = &prev[a * rows..];
        let next = &mut next[..rows];
        let s = &smooth[a * depth..(a + 1) * depth];
        for r in 0..rows {
            next[r] = prev[r] + s[(reference[a] + r).min(depth - 1)] as f64;
        }
    }
    let mut out = vec![0f32; depth * alines];
    out.par_chunks_mut(depth).enumerate().for_each(|(a, o)| {
        let (lo, hi) = clamped(a, half, alines);
        let n = (hi - lo + 1) as f64;
        let flat = |r: usize| (cum[(hi + 1) * rows + r] - cum[lo * rows + r]) / n;
        for z in reference[a] + 1..depth.saturating_sub(1) {
            let r = z - reference[a];
            if r + 1 < rows {
                o[z] = (flat(r + 1) - flat(r - 1)) as f32;
            }
        }
    });
    out
}

/// Mean axial edge (dB per two pixels) at a path when the image is
/// flattened to the path and averaged over `width` A-lines along it.
fn edge_along(smooth: &[f32], path: &[usize], depth: usize, width: usize) -> f32 {
    let alines = path.len();
    let half = width / 2;
    let at = |a: usize, r: isize| smooth[a * depth + (path[a] as isize + r).clamp(0, depth as isize - 1) as usize];
    let mut sum = 0f32;
    for a in 0..alines {
        let (lo, hi) = clamped(a, half, alines);
        let n = (hi - lo + 1) as f32;
        let below: f32 = (lo..=hi).map(|j| at(j, 1)).sum::<f32>() / n;
        let above: f32 = (lo..=hi).map(|j| at(j, -1)).sum::<f32>() / n;
        sum += below - above;
    }
    sum / alines.max(1) as f32
}

/// The path (one depth pixel per A-line, inside each A-line's bounds,
/// changing by at most `max_step` between neighbours) that minimises the
/// summed node cost 1 − g + w_min, g the edge strength in [0, 1], plus
/// (with `order`, the strength of edges that run along the surface above)
/// `ABOVE_PENALTY` times the strongest such edge between the band's top and
/// three pixels above the node: the surface is the first strong edge of
/// its band, so of two parallel interfaces a few pixels apart the path
/// keeps to the upper one, while speckle above costs little.
fn cheapest_path(strength: &[f32], order: Option<&[f32]>, depth: usize, bounds: &[(usize, usize)], max_step: usize) -> Vec<usize> {
    let alines = bounds.len();
    let mut above = vec![0f32; depth * alines];
    if let Some(order) = order {
        for (a, &(lo, hi)) in bounds.iter().enumerate() {
            let mut strongest = 0f32;
            for z in lo..=hi {
                if z >= lo + 3 {
                    strongest = strongest.max(order[a * depth + z - 3]);
                }
                above[a * depth + z] = strongest;
            }
        }
    }
    let cost = |a: usize, z: usize| 1.0 - strength[a * depth + z] + W_MIN + ABOVE_PENALTY * above[a * depth + z];
    // Accumulated cost per depth, and where each node came from.
    let mut total = vec![f32::INFINITY; depth];
    let mut from = vec![0u32; depth * alines];
    let (lo, hi) = bounds[0];
    for z in lo..=hi {
        total[z] = cost(0, z);
    }
    let mut next = vec![f32::INFINITY; depth];
    let mut queue: Vec<usize> = Vec::with_capacity(depth);
    for a in 1..alines {
        let (lo, hi) = bounds[a];
        let (plo, phi) = bounds[a - 1];
        next.fill(f32::INFINITY);
        // The cheapest predecessor within the step: a sliding-window
        // minimum over the previous A-line's totals (a queue of indices
        // with rising totals, the lowest index first among equals), or the
        // nearest of the previous band when the bands do not overlap.
        queue.clear();
        let mut head = 0;
        let mut pushed = plo;
        for z in lo..=hi {
            let (wlo, whi) = (z.saturating_sub(max_step).max(plo), (z + max_step).min(phi));
            let arg = if wlo > whi {
                z.clamp(plo, phi)
            } else {
                pushed = pushed.max(wlo);
                while pushed <= whi {
                    while queue.len() > head && total[*queue.last().expect("non-empty")] > total[pushed] {
                        queue.pop();
                    }
                    queue.push(pushed);
                    pushed += 1;
                }
                while queue[head] < wlo {
                    head += 1;
                }
                queue[head]
            };
            next[z] = total[arg] + cost(a, z);
            from[a * depth + z] = arg as u32;
        }
        std::mem::swap(&mut total, &mut next);
    }
    let (lo, hi) = bounds[alines - 1];
    let mut z = (lo..=hi).min_by(|&x, &y| total[x].total_cmp(&total[y])).unwrap_or(lo);
    let mut path = vec![0usize; alines];
    for a in (0..alines).rev() {
        path[a] = z;
        if a > 0 {
            z = from[a * depth + z] as usize;
        }
    }
    path
}

/// Sub-pixel position (in pixels) of the surface whose path passes pixel
/// `z` of one smoothed A-line `s` (gradient `g`): the peak of a thin bright
/// interface next to the edge, else the steepest point of the edge. None
/// when the edge is weaker than `min_edge` dB or the surface is not that
/// far above the noise floor.
fn refine(s: &[f32], g: &[f32], z: usize, polarity: Polarity, floor: f32, min_edge: f32) -> Option<f64> {
    let n = s.len();
    if n < 5 || z == 0 || z + 1 >= n {
        return None;
    }
    let down = polarity == Polarity::DarkToBright;
    // Walk from the edge towards the bright side while the intensity grows.
    let mut top = z;
    for _ in 0..PEAK_REACH_PX {
        let next = if down { top + 1 } else { top.wrapping_sub(1) };
        if next >= n || s[next] <= s[top] {
            break;
        }
        top = next;
    }
    // The dark side: a few pixels beyond the edge.
    let dark = if down { s[z.saturating_sub(3)..z.saturating_sub(1).max(1)].iter().copied().fold(f32::INFINITY, f32::min) } else { s[(z + 2).min(n - 1)..(z + 4).min(n)].iter().copied().fold(f32::INFINITY, f32::min) };
    let bright = s[top];
    if !(bright - dark >= min_edge && bright - floor >= min_edge) {
        return None;
    }
    // Beyond the peak: does the intensity fall back (a line) or stay (a step)?
    let beyond: Vec<f32> = if down { s[(top + 1).min(n)..(top + 1 + PEAK_REACH_PX).min(n)].to_vec() } else { s[top.saturating_sub(PEAK_REACH_PX)..top].to_vec() };
    let fall = beyond.iter().copied().fold(f32::INFINITY, f32::min);
    let (centre, values) = if fall.is_finite() && bright - fall >= LINE_DROP_DB && top > 0 && top + 1 < n {
        (top, [s[top - 1], s[top], s[top + 1]])
    } else {
        let sign = if down { 1.0 } else { -1.0 };
        (z, [sign * g[z - 1], sign * g[z], sign * g[z + 1]])
    };
    Some(centre as f64 + parabola_offset(values))
}

/// Offset (−½ … ½) of the vertex of the parabola through three equally
/// spaced values, the middle one the largest.
fn parabola_offset([a, b, c]: [f32; 3]) -> f64 {
    let d = a - 2.0 * b + c;
    if d < 0.0 {
        (0.5 * (a - c) / d).clamp(-0.5, 0.5) as f64
    } else {
        0.0
    }
}

/// Thickness in tissue between consecutive surfaces, µm: the depth
/// difference in air over each layer's group index, [pair][A-line] (NaN
/// where either surface is missing).
pub fn thickness_um(surfaces: &[Vec<f32>], group_index: &[f64]) -> Vec<Vec<f32>> {
    surfaces.windows(2).zip(group_index).map(|(w, n)| w[0].iter().zip(&w[1]).map(|(a, b)| ((b - a) as f64 / n) as f32).collect()).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::pipeline::config::SurfaceConfig;
    use ndarray::Array2;

    /// A B-scan of two bright lines (a wavy one and a flat one) over a
    /// noise floor, in dB.
    fn image(depth: usize, alines: usize, first: impl Fn(usize) -> f64, second: f64) -> Array2<f32> {
        Array2::from_shape_fn((depth, alines), |(z, a)| {
            let line = |c: f64| 30.0 * (-((z as f64 - c).powi(2)) / 2.0).exp();
            (10.0 + line(first(a)) + line(second)) as f32
        })
    }

    #[test]
    fn two_lines_are_found_at_their_peaks_in_order() {
        let config = LayersConfig {
            surfaces: vec![SurfaceConfig::default(), SurfaceConfig { min_separation_um: 6.0, max_separation_um: Some(200.0), ..Default::default() }],
            search_from_um: 4.0,
            ..Default::default()
        };
        let depth_um: Vec<f64> = (0..200).map(|z| z as f64 * 2.0).collect();
        let wave = |a: usize| 60.0 + 5.0 * (a as f64 * 0.2).sin();
        let db = image(200, 64, wave, 120.0);
        let found = SurfaceFinder::new(&config, depth_um).find(db.view(), 10.0);
        for a in 0..64 {
            // Within half a pixel (1 µm) on a slope of up to one pixel per
            // A-line; at the first and last two A-lines, where the lateral
            // average is cut, within 1.25 pixels.
            let tolerance = if a < 2 || a > 61 { 2.5 } else { 1.0 };
            assert!((found.depth_um[0][a] as f64 - 2.0 * wave(a)).abs() < tolerance, "A-line {a}: {} vs {}", found.depth_um[0][a], 2.0 * wave(a));
            assert!((found.depth_um[1][a] as f64 - 240.0).abs() < 1.0, "A-line {a}: {}", found.depth_um[1][a]);
        }
        assert_eq!(found.missing, vec![0, 0]);
    }

    #[test]
    fn a_flat_image_has_no_surface() {
        let config = LayersConfig { surfaces: vec![SurfaceConfig::default()], ..Default::default() };
        let db = Array2::from_elem((100, 16), 10.0f32);
        let found = SurfaceFinder::new(&config, (0..100).map(|z| z as f64).collect()).find(db.view(), 10.0);
        assert!(found.depth_um[0].iter().all(|v| v.is_nan()));
        assert_eq!(found.missing, vec![16]);
    }
}
