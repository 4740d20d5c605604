//! The writer's layer outputs: /surfaces_um, /thickness_um and their
//! images with a colour bar, the flattening shifts, and each slab's en face
//! datasets and images (structure and every angiography method), written
//! after the last position from what each position handed over.

use anyhow::Result;

use super::{flow_grey, percentile_unmasked, Writer};
use crate::contrast::position::PositionOutput;
use crate::io::png;

/// One slab's en face rows, position after position (positions × A-lines).
#[derive(Default)]
pub struct SlabWritten {
    pub structure_db: Vec<f32>,
    /// Per angiography method, in the pipeline's order.
    pub angiography: Vec<Vec<f32>>,
    /// Per position: A-lines where the slab held no rows.
    pub empty_alines: Vec<usize>,
}

impl Writer<'_> {
    /// /surfaces_um (position, surface, A-line) and /thickness_um
    /// (position, layer, A-line) in volume.h5, after the last position.
    pub(super) fn write_layer_datasets(&mut self, positions: usize) -> Result<()> {
        let layers = &self.config.layers;
        let n = layers.surfaces.len();
        if n == 0 || self.written.surfaces.is_empty() {
            return Ok(());
        }
        let alines = self.alines;
        let mut surfaces = vec![f32::NAN; positions * n * alines];
        for (position, i, d) in &self.written.surfaces {
            let at = (position * n + i) * alines;
            surfaces[at..at + alines].copy_from_slice(d);
        }
        self.write_flattening(positions)?;
        self.write_slabs(positions)?;
        let labels = layers.labels().join(",");
        let polarities = layers.surfaces.iter().map(|s| s.polarity.name()).collect::<Vec<_>>().join(",");
        let attrs = [
            ("axes", "position,surface,aline".into()),
            ("units", "um".into()),
            ("description", "depth in air of each layer surface (top first) at each A-line, from zero delay; NaN where the A-line has no surface; thickness in tissue = difference / the layer's group index (see /thickness_um)".into()),
            ("surfaces", labels.clone().into()),
            ("polarity", polarities.into()),
        ];
        if let Some(v) = &self.volume {
            v.write_per_aline("surfaces_um", &surfaces, (positions, n, alines), "surface", &attrs)?;
        }
        if n > 1 {
            let mut thickness = vec![f32::NAN; positions * (n - 1) * alines];
            for p in 0..positions {
                let rows: Vec<Vec<f32>> = (0..n).map(|i| surfaces[(p * n + i) * alines..(p * n + i + 1) * alines].to_vec()).collect();
                for (j, t) in crate::contrast::surfaces::thickness_um(&rows, &layers.layer_group_indices()).into_iter().enumerate() {
                    let at = (p * (n - 1) + j) * alines;
                    thickness[at..at + alines].copy_from_slice(&t);
                }
            }
            let names: Vec<String> = layers.labels().windows(2).map(|w| format!("{}-{}", w[0], w[1])).collect();
            let attrs = [
                ("axes", "position,layer,aline".into()),
                ("units", "um".into()),
                ("description", "thickness in tissue of the layer between consecutive surfaces (depth difference in air / the layer's group index, listed in group_indices); NaN where a surface is missing".into()),
                ("layers", names.join(",").into()),
                ("group_indices", layers.layer_group_indices().iter().map(|n| n.to_string()).collect::<Vec<_>>().join(",").into()),
            ];
            if let Some(v) = &self.volume {
                v.write_per_aline("thickness_um", &thickness, (positions, n - 1, alines), "layer", &attrs)?;
            }
            if self.config.output.png {
                for (j, name) in names.iter().enumerate() {
                    let map: Vec<f32> = (0..positions).flat_map(|p| thickness[(p * (n - 1) + j) * alines..][..alines].iter().copied()).collect();
                    self.write_thickness_png(name, &map, positions)?;
                }
            }
        }
        Ok(())
    }

    /// `thickness-<layer>.png`: the layer's thickness map (A-lines across,
    /// positions down) in viridis between its 0.5th and 99.5th
    /// percentiles, with a colour bar in µm; each position's row repeated
    /// so a few positions still make a picture.
    fn write_thickness_png(&mut self, layer: &str, map: &[f32], positions: usize) -> Result<()> {
        let alines = self.alines;
        let lo = percentile_unmasked(map, 0.005);
        let hi = percentile_unmasked(map, 0.995).max(lo + 1.0);
        let repeat = 64usize.div_ceil(positions.max(1)).max(1);
        let view = ndarray::ArrayView2::from_shape((positions, alines), map)?;
        let rgb = crate::render::sequential_with_colour_bar(view, lo, hi, "µm", repeat)?;
        let name = format!("thickness-{layer}.png");
        let mut info = self
            .png_base
            .clone()
            .with("Description", format!("thickness in tissue of layer {layer} (µm): A-lines across, positions down (each position {repeat} rows), viridis from {lo:.2} µm (bottom of the colour bar) to {hi:.2} µm (top), black where a surface is missing"))
            .with("thickness_range_um", format!("{lo:.4},{hi:.4}"))
            .with("rows_per_position", format!("{repeat}"));
        info.pixel_um = self.en_face_pixel_um().map(|(a, p)| (a, p / repeat as f64));
        png::write_rgb8(&self.staging.path(&name), rgb.width, rgb.height, &rgb.bytes, &info)?;
        self.written.outputs.push(name);
        Ok(())
    }

    /// Keeps a position's flattening shifts and slab rows for the end.
    pub(super) fn keep_layers(&mut self, p: &mut PositionOutput) {
        if self.config.layers.flatten.is_some() {
            self.written.flattening.push(p.flattening.take());
        }
        for (w, s) in self.written.slabs.iter_mut().zip(std::mem::take(&mut p.slabs)) {
            w.structure_db.extend(s.structure_db);
            if w.angiography.len() < s.angiography.len() {
                w.angiography.resize(s.angiography.len(), Vec::new());
            }
            for (a, r) in w.angiography.iter_mut().zip(s.angiography) {
                a.extend(r);
            }
            w.empty_alines.push(s.empty_alines);
        }
    }

    /// /flattening_shift_px (position, A-line) and the volume's note that
    /// its images are flattened.
    fn write_flattening(&mut self, positions: usize) -> Result<()> {
        let Some(label) = self.config.layers.flatten.clone() else { return Ok(()) };
        let alines = self.alines;
        let mut shifts = vec![f32::NAN; positions * alines];
        let mut target = None;
        for (p, f) in self.written.flattening.iter().enumerate().take(positions) {
            if let Some((s, _, t)) = f {
                shifts[p * alines..(p + 1) * alines].copy_from_slice(s);
                target = target.or(Some(*t));
            }
        }
        if let Some(v) = &self.volume {
            let attrs = [
                ("axes", "position,aline".into()),
                ("units", "depth pixels".into()),
                ("description", format!("flattening: each A-line of every image in this file was shifted by this many depth pixels (positive: deeper; sub-pixel, on the complex profile) so that surface \"{label}\" lies at flattened_depth_um; NaN: the position was not flattened (surface missing)").into()),
                ("surface", label.clone().into()),
                ("flattened_depth_um", target.unwrap_or(f64::NAN).into()),
            ];
            v.write_2d("flattening_shift_px", &shifts, positions, alines, &attrs)?;
            v.write_root_text("flattened", &format!("every image is flattened to surface \"{label}\" at {:.3} um; /flattening_shift_px holds each A-line's shift", target.unwrap_or(f64::NAN)))?;
        }
        Ok(())
    }

    /// Each slab's en face datasets (`slab_<name>_structure_db`,
    /// `slab_<name>_angiography_<method>`) and images.
    fn write_slabs(&mut self, positions: usize) -> Result<()> {
        let alines = self.alines;
        let methods = self.config.angiography.methods.clone();
        let slabs = std::mem::take(&mut self.written.slabs);
        for (slab, w) in self.config.layers.slabs.iter().zip(&slabs) {
            if w.structure_db.len() != positions * alines {
                continue;
            }
            let edges = describe_slab(slab);
            if let Some(v) = &self.volume {
                let attrs = [
                    ("axes", "position,aline".into()),
                    ("units", "dB".into()),
                    ("description", format!("en face structure of slab \"{}\" ({edges}): {} of the linear intensity over the slab's rows, in dB; NaN where the slab is empty", slab.name, slab.projection.name()).into()),
                ];
                v.write_2d(&format!("slab_{}_structure_db", slab.name), &w.structure_db, positions, alines, &attrs)?;
                for (method, rows) in methods.iter().zip(&w.angiography) {
                    let attrs = [
                        ("axes", "position,aline".into()),
                        ("description", format!("en face {} angiography of slab \"{}\" ({edges}): {} of the unmasked values over the slab's rows; NaN where none", method.name(), slab.name, slab.projection.name()).into()),
                    ];
                    v.write_2d(&format!("slab_{}_angiography_{}", slab.name, method.name()), rows, positions, alines, &attrs)?;
                }
            }
            if self.config.output.png {
                let black = percentile_unmasked(&w.structure_db, 0.01);
                let white = percentile_unmasked(&w.structure_db, 0.995).max(black + 1.0);
                let grey: Vec<u8> = w.structure_db.iter().map(|&d| if d.is_nan() { 0 } else { ((d as f64 - black) / (white - black) * 255.0).round().clamp(0.0, 255.0) as u8 }).collect();
                let name = format!("slab-{}-structure.png", slab.name);
                let mut info = self.png_base.clone().with("Description", format!("en face structure of slab \"{}\" ({edges}), {}: A-lines across, positions down; grey linear in dB from black_db to white_db", slab.name, slab.projection.name())).with("black_db", format!("{black:.3}")).with("white_db", format!("{white:.3}"));
                info.pixel_um = self.en_face_pixel_um();
                png::write_grey8(&self.staging.path(&name), alines, positions, &grey, &info)?;
                self.written.outputs.push(name);
                for (method, rows) in methods.iter().zip(&w.angiography) {
                    let white = percentile_unmasked(rows, 0.995);
                    let name = format!("slab-{}-angiography-{}.png", slab.name, method.name());
                    let mut info = self.png_base.clone().with("Description", format!("en face {} angiography of slab \"{}\" ({edges}), {}: A-lines across, positions down; grey 0 at 0, 255 at white", method.name(), slab.name, slab.projection.name())).with("white", format!("{white:.6}"));
                    info.pixel_um = self.en_face_pixel_um();
                    png::write_grey8(&self.staging.path(&name), alines, positions, &flow_grey(rows, white), &info)?;
                    self.written.outputs.push(name);
                }
            }
        }
        self.written.slabs = slabs;
        Ok(())
    }
}

/// A slab's edges in words, e.g. `surface "upper" + 5 um to surface "lower" - 5 um`.
pub fn describe_slab(slab: &crate::pipeline::config::SlabConfig) -> String {
    let edge = |label: &Option<String>, depth: Option<f64>, offset: f64| match (label, depth) {
        (Some(l), _) => format!("surface \"{l}\" {} {} um", if offset < 0.0 { "-" } else { "+" }, offset.abs()),
        (None, Some(d)) => format!("{} um from zero delay", d + offset),
        _ => "?".to_string(),
    };
    format!("{} to {}", edge(&slab.top, slab.top_depth_um, slab.top_offset_um), edge(&slab.bottom, slab.bottom_depth_um, slab.bottom_offset_um))
}

