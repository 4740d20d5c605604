//! The write phase of a capture, one position at a time: grey B-scan PNGs,
//! volume.h5 frames, the en face projection, and the contrast outputs
//! (complex depth profiles, Doppler velocity, angiography) as datasets and
//! images. Runs on the capture's writer thread; never uses the rayon pool
//! (the pool's workers may be blocked handing positions to this thread).

use anyhow::Result;
use hdf5::Dataset;
use ndarray::Array2;
use rustfft::num_complex::Complex32;

mod layers;

pub use layers::{describe_slab, SlabWritten};

use super::log::{AveragingRecord, FrameRecord};
use crate::contrast::position::{FrameShift, PositionOutput};
use crate::contrast::surfaces::BscanSurfaces;
use crate::io::png::{self, PngInfo};
use crate::io::staging::Staging;
use crate::io::volume::{write_stack_image, VolumeWriter};
use crate::pipeline::config::{AngiographyMethod, PipelineConfig, Projection};
use crate::stages::log_compression::{auto_levels, grey_levels, grey_levels_u8, noise_floor_db, peak_db, GreyMapping};

/// Digits of the image numbers of a capture with `count` images: 4, or
/// more when needed, so that names sort in frame order.
pub fn index_digits(count: usize) -> usize {
    count.saturating_sub(1).max(1).to_string().len().max(4)
}

/// Name of position `index`'s B-scan image among `count`.
pub fn bscan_png_name(index: usize, count: usize) -> String {
    format!("bscan-{index:0w$}.png", w = index_digits(count))
}

/// The contrast datasets of volume.h5.
pub struct ContrastDatasets {
    pub complex: Option<Dataset>,
    pub doppler: Option<Dataset>,
    pub angiography: Vec<(AngiographyMethod, Dataset)>,
    /// The attenuation coefficient, mm⁻¹ (layers).
    pub attenuation: Option<Dataset>,
}

/// Everything the writer collected, for the log.
pub struct Written {
    pub records: Vec<FrameRecord>,
    pub en_face: Vec<f32>,
    pub outputs: Vec<String>,
    pub warnings: Vec<String>,
    pub write_seconds: f64,
    pub averaging: Option<AveragingRecord>,
    pub shifts: Vec<FrameShift>,
    pub doppler_bulk: Vec<Vec<f64>>,
    pub doppler_vote: crate::contrast::phase::BulkVote,
    pub angiography_floor_db: Vec<f64>,
    pub angiography_white: Vec<(AngiographyMethod, Vec<f64>)>,
    /// Per method: en face rows of every position (positions × A-lines).
    pub angiography_en_face: Vec<(AngiographyMethod, Vec<f32>)>,
    pub volume: Option<VolumeWriter>,
    /// The report's embedded frames, made beside the writing.
    pub report: Option<crate::report::Embedder>,
    /// Layer surfaces: (position, surface, depth in µm per A-line).
    pub surfaces: Vec<(usize, usize, Vec<f32>)>,
    /// Per position: A-lines without each surface.
    pub surfaces_missing: Vec<Vec<usize>>,
    /// Per layer: the attenuation coefficients inside it, binned.
    pub attenuation: Vec<crate::contrast::attenuation::Histogram>,
    /// Flattening: per position, the shift of each A-line (pixels) and the
    /// A-lines where the surface was missing.
    pub flattening: Vec<Option<(Vec<f32>, usize, f64)>>,
    /// Each `[[layers.slab]]`'s en face rows.
    pub slabs: Vec<SlabWritten>,
}

pub struct Writer<'a> {
    pub config: &'a PipelineConfig,
    pub staging: &'a Staging,
    pub volume: Option<VolumeWriter>,
    pub datasets: ContrastDatasets,
    pub en_face_range: (usize, usize),
    pub alines: usize,
    pub average: usize,
    pub full_scale: Option<f64>,
    /// ± range of the Doppler colour bar, mm/s.
    pub velocity_range_mm_s: f64,
    /// Images (positions) the capture gives.
    pub positions: usize,
    /// What every image says about itself (tool, pipeline hash, spacings).
    pub png_base: PngInfo,
    /// Pixel size of a B-scan, (A-line step, depth step) in µm, when the
    /// lateral step is known.
    pub bscan_pixel_um: Option<(f64, f64)>,
    /// Slow-axis step between stored frames, µm, when known.
    pub position_step_um: Option<f64>,
    /// Embeds the frames for report.html as they are written.
    pub report: Option<crate::report::Embedder>,
    /// Depth of the first image row and the step between rows, µm.
    pub depth_um0: f64,
    pub depth_step_um: f64,
    written: Written,
    grey: Vec<u8>,
}

impl<'a> Writer<'a> {
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        config: &'a PipelineConfig,
        staging: &'a Staging,
        volume: Option<VolumeWriter>,
        datasets: ContrastDatasets,
        en_face_range: (usize, usize),
        alines: usize,
        full_scale: Option<f64>,
        velocity_range_mm_s: f64,
    ) -> Self {
        let methods = config.angiography.methods.clone();
        Writer {
            config,
            staging,
            volume,
            datasets,
            en_face_range,
            alines,
            average: config.volume.average,
            full_scale,
            velocity_range_mm_s,
            positions: 0,
            png_base: PngInfo::default(),
            bscan_pixel_um: None,
            position_step_um: None,
            report: None,
            depth_um0: 0.0,
            depth_step_um: 1.0,
            written: Written {
                records: Vec::new(),
                en_face: Vec::new(),
                outputs: Vec::new(),
                warnings: Vec::new(),
                write_seconds: 0.0,
                averaging: None,
                shifts: Vec::new(),
                doppler_bulk: Vec::new(),
                doppler_vote: Default::default(),
                angiography_floor_db: Vec::new(),
                angiography_white: methods.iter().map(|&m| (m, Vec::new())).collect(),
                angiography_en_face: methods.iter().map(|&m| (m, Vec::new())).collect(),
                volume: None,
                report: None,
                surfaces: Vec::new(),
                surfaces_missing: Vec::new(),
                attenuation: Vec::new(),
                flattening: Vec::new(),
                slabs: config.layers.slabs.iter().map(|_| SlabWritten::default()).collect(),
            },
            grey: Vec::new(),
        }
    }

    /// Writes one position; returns its structure image for reuse.
    pub fn write(&mut self, mut p: PositionOutput) -> Result<Array2<f32>> {
        let t = std::time::Instant::now();
        let (floor, levels) = self.write_structure(&p)?;
        self.write_contrast(&mut p, floor)?;
        if let Some(surfaces) = p.surfaces.take() {
            self.write_surfaces(p.position, &p.structure_db, surfaces, levels)?;
        }
        self.keep_layers(&mut p);
        if let Some((mu, per_layer)) = p.attenuation.take() {
            if let Some(ds) = &self.datasets.attenuation {
                write_stack_image(ds, p.position, &mu)?;
            }
            self.written.attenuation.resize(per_layer.len(), Default::default());
            for (h, values) in self.written.attenuation.iter_mut().zip(&per_layer) {
                h.add(values);
            }
        }
        self.written.write_seconds += t.elapsed().as_secs_f64();
        Ok(p.structure_db)
    }

    /// The structure image of a position: its PNGs, its frame of the volume,
    /// its en face row, its record and warnings, the averaging record. Returns
    /// the image's noise floor in dB and its grey mapping (dB at grey 0 and
    /// at full grey).
    fn write_structure(&mut self, p: &PositionOutput) -> Result<(f64, (f64, f64))> {
        let cfg = self.config;
        let lc = &cfg.log_compression;
        let image = &p.structure_db;
        let values = image.as_slice().expect("standard layout");
        let floor = noise_floor_db(values);
        let peak = peak_db(values) as f64;
        let (black, white) = match lc.mapping {
            GreyMapping::Auto => auto_levels(values, floor, lc.floor_offset_db, lc.dynamic_range_db, lc.white_percentile),
            GreyMapping::Fixed => (lc.black_db, lc.white_db),
        };
        // Inverted grey (for print): the same mapping run from white to black.
        let (from, to) = if lc.invert { (white, black) } else { (black, white) };
        let position = p.position;
        self.write_bscan_pngs(position, image, (black, white), (from, to))?;
        if let Some(v) = &self.volume {
            v.write_frame(position, image)?;
        }
        if cfg.volume.en_face {
            self.written.en_face.extend(project(image, self.en_face_range, cfg.volume.en_face_projection));
        }
        if peak - floor < 1e-3 {
            self.written.warnings.push(format!(
                "frame {}: the B-scan is flat ({floor:.1} dB everywhere): the capture holds no fringes there (constant or all-zero samples: detector off or light blocked?)",
                p.input_frames[1]
            ));
        }
        if p.saturated > 0 {
            self.written.warnings.push(format!(
                "frame {}: {} samples at or above full scale ({}): fringes clipped",
                p.input_frames[1],
                p.saturated,
                self.full_scale.unwrap_or(f64::NAN)
            ));
        }
        if let Some(e) = &self.report {
            e.push(position, image, round6(floor));
        }
        self.written.records.push(FrameRecord {
            index: position,
            input_frames: p.input_frames,
            noise_floor_db: round6(floor),
            peak_db: round6(peak),
            saturated_samples: p.saturated,
            black_db: round6(black),
            white_db: round6(white),
        });
        if let (Some(single), None) = (&p.first_single_db, &self.written.averaging) {
            self.written.averaging = Some(measure_averaging(single, image, self.average));
        }
        Ok((floor, (from, to)))
    }

    /// A position's layer surfaces: kept for /surfaces_um and the log, and
    /// drawn over a copy of the B-scan (`surfaces-NNNN.png`; the plain
    /// B-scan is left as it is).
    fn write_surfaces(&mut self, position: usize, image: &Array2<f32>, surfaces: BscanSurfaces, (from, to): (f64, f64)) -> Result<()> {
        let (depth, alines) = image.dim();
        if self.config.output.png {
            let mut grey = vec![0u8; depth * alines];
            grey_levels_u8(image.as_slice().expect("standard layout"), from, to, &mut grey);
            let rgb = crate::render::surfaces_over(&grey, depth, alines, &surfaces.depth_um, self.depth_um0, self.depth_step_um);
            let name = format!("surfaces-{position:0w$}.png", w = index_digits(self.positions));
            let labels = self.config.layers.labels();
            let info = self.image_info(format!("B-scan {position} with its layer surfaces drawn over it, top first: {}", crate::render::surface_colour_names(&labels)));
            png::write_rgb8(&self.staging.path(&name), alines, depth, &rgb, &info)?;
            self.written.outputs.push(name);
        }
        for (i, d) in surfaces.depth_um.iter().enumerate() {
            debug_assert_eq!(d.len(), alines);
            self.written.surfaces.push((position, i, d.clone()));
        }
        self.written.surfaces_missing.push(surfaces.missing);
        Ok(())
    }

    /// The B-scan PNG (grey linear in dB, 8 or 16 bits) and the one at its
    /// physical aspect with scale and colour bars, as `[output]` asks.
    fn write_bscan_pngs(&mut self, position: usize, image: &Array2<f32>, (black, white): (f64, f64), (from, to): (f64, f64)) -> Result<()> {
        let cfg = self.config;
        let lc = &cfg.log_compression;
        let (depth, alines) = image.dim();
        let values = image.as_slice().expect("standard layout");
        if cfg.output.png {
            let name = bscan_png_name(position, self.positions);
            let path = self.staging.path(&name);
            let max_grey = if lc.bit_depth == 8 { 255 } else { 65535 };
            let info = self.image_info(format!("B-scan {position} (of {}, counted from 0): grey level linear in dB of the depth profile's magnitude", self.positions))
                .with("black_db", format!("{black:.3}"))
                .with("white_db", format!("{white:.3}"))
                .with("grey_levels", if lc.invert { format!("{max_grey} at black_db, 0 at white_db (inverted)") } else { format!("0 at black_db, {max_grey} at white_db") });
            if lc.bit_depth == 8 {
                self.grey.resize(values.len(), 0);
                grey_levels_u8(values, from, to, &mut self.grey);
                png::write_grey8(&path, alines, depth, &self.grey, &info)?;
            } else {
                png::write_grey(&path, alines, depth, &grey_levels(values, from, to, 65535.0), lc.bit_depth, &info)?;
            }
            self.written.outputs.push(name);
        }
        if cfg.output.scaled_png {
            let Some((across, down)) = self.bscan_pixel_um else {
                anyhow::bail!("[output] scaled_png needs the lateral step: set [input] aline_spacing_um, or record aline_spacing_um in the capture");
            };
            let mut grey = vec![0u8; values.len()];
            grey_levels_u8(values, from, to, &mut grey);
            let s = crate::render::geometry::physical_aspect(&grey, depth, alines, down, across, black, white)?;
            let name = bscan_png_name(position, self.positions).replace(".png", "-scaled.png");
            let mut info = self
                .png_base
                .clone()
                .with("Description", format!("B-scan {position} at its physical aspect ({:.4} µm per pixel across and down), scale bar and dB colour bar burnt in; for figures, not analysis", s.pixel_um))
                .with("black_db", format!("{black:.3}"))
                .with("white_db", format!("{white:.3}"))
                .with("depth_spacing_um", format!("{}", s.pixel_um))
                .with("aline_spacing_um", format!("{}", s.pixel_um))
                .with("scale_bar_um", format!("{}", s.scale_bar_um))
                .with("scale_bar_px", format!("{},{},{}", s.scale_bar_px[0], s.scale_bar_px[1], s.scale_bar_px[2]))
                .with("bscan_size_px", format!("{}x{}", s.bscan_width, s.bscan_height));
            info.pixel_um = Some((s.pixel_um, s.pixel_um));
            png::write_rgb8(&self.staging.path(&name), s.image.width, s.image.height, &s.image.bytes, &info)?;
            self.written.outputs.push(name);
        }
        Ok(())
    }

    /// A position's contrast outputs: complex profiles, registration shifts,
    /// Doppler (dataset, PNG, bulk phases) and each angiography method (map,
    /// PNG, en face row); `floor` is the structure image's noise floor.
    fn write_contrast(&mut self, p: &mut PositionOutput, floor: f64) -> Result<()> {
        let cfg = self.config;
        let position = p.position;
        let (depth, alines) = p.structure_db.dim();
        if let Some(ds) = &self.datasets.complex {
            for (index, c) in &p.complex {
                write_stack_image::<Complex32>(ds, *index, c)?;
            }
        }
        self.written.shifts.extend(std::mem::take(&mut p.shifts));
        self.written.warnings.extend(std::mem::take(&mut p.warnings));
        if let Some(v) = &p.doppler {
            if let Some(ds) = &self.datasets.doppler {
                write_stack_image(ds, position, v)?;
            }
            self.written.doppler_bulk.push(std::mem::take(&mut p.doppler_bulk_phase));
            self.written.doppler_vote.bright += p.doppler_vote.bright;
            self.written.doppler_vote.flow += p.doppler_vote.flow;
            if cfg.output.png {
                let name = format!("doppler-{position:0w$}.png", w = index_digits(self.positions));
                let rgb = crate::render::signed_with_colour_bar(v.view(), self.velocity_range_mm_s, "mm/s")?;
                let info = self
                    .image_info(format!("Doppler axial velocity, position {position}: cool-warm colour, positive away from the probe; colour bar at the right"))
                    .with("velocity_range_mm_s", format!("{:.4}", self.velocity_range_mm_s));
                png::write_rgb8(&self.staging.path(&name), rgb.width, rgb.height, &rgb.bytes, &info)?;
                self.written.outputs.push(name);
            }
        }
        if !p.angiography.is_empty() {
            self.written.angiography_floor_db.push(round6(floor));
        }
        for (k, (method, map, row)) in std::mem::take(&mut p.angiography).into_iter().enumerate() {
            if let Some((_, ds)) = self.datasets.angiography.iter().find(|(m, _)| *m == method) {
                write_stack_image(ds, position, &map)?;
            }
            let white = percentile_unmasked(map.as_slice().expect("standard layout"), 0.995);
            self.written.angiography_white[k].1.push(round6(white));
            self.written.angiography_en_face[k].1.extend(row);
            if cfg.output.png {
                let name = format!("angiography-{}-{position:0w$}.png", method.name(), w = index_digits(self.positions));
                let bytes = flow_grey(map.as_slice().expect("standard layout"), white);
                let info = self
                    .image_info(format!("{} angiography, position {position}: grey 0 at 0, 255 at white (masked pixels black)", method.name()))
                    .with("white", format!("{white:.6}"));
                png::write_grey8(&self.staging.path(&name), alines, depth, &bytes, &info)?;
                self.written.outputs.push(name);
            }
        }
        Ok(())
    }

    /// The base chunks with a description and the B-scan pixel size.
    fn image_info(&self, description: String) -> PngInfo {
        let mut info = self.png_base.clone().with("Description", description);
        info.pixel_um = self.bscan_pixel_um;
        info
    }

    /// Pixel size of an en face image, (A-line step, position step) in µm.
    pub fn en_face_pixel_um(&self) -> Option<(f64, f64)> {
        Some((self.bscan_pixel_um?.0, self.position_step_um?))
    }

    /// The angiography en face images and datasets, after the last position.
    pub fn finish(mut self, positions: usize) -> Result<Written> {
        let t = std::time::Instant::now();
        for (method, rows) in &self.written.angiography_en_face {
            let name = format!("angiography_{}_en_face", method.name());
            if let Some(v) = &self.volume {
                let attrs = [("axes", "position,aline".into()), ("description", format!("en face projection of /angiography_{} over the slab in log.json", method.name()).into())];
                v.write_2d(&name, rows, positions, self.alines, &attrs)?;
            }
            if self.config.output.png {
                let png_name = format!("angiography-{}-en-face.png", method.name());
                let white = percentile_unmasked(rows, 0.995);
                let mut info = self.png_base.clone().with("Description", format!("{} angiography en face: A-lines across, positions down; grey 0 at 0, 255 at white", method.name())).with("white", format!("{white:.6}"));
                info.pixel_um = self.en_face_pixel_um();
                png::write_grey8(&self.staging.path(&png_name), self.alines, positions, &flow_grey(rows, white), &info)?;
                self.written.outputs.push(png_name);
            }
        }
        self.write_layer_datasets(positions)?;
        self.written.write_seconds += t.elapsed().as_secs_f64();
        self.written.volume = self.volume.take();
        self.written.report = self.report.take();
        Ok(self.written)
    }
}

/// Mean or maximum over rows [lo, hi) of each column of a depth × A-lines image.
fn project(image: &Array2<f32>, (lo, hi): (usize, usize), projection: Projection) -> Vec<f32> {
    let rows = image.slice(ndarray::s![lo..hi, ..]);
    let n = rows.nrows() as f64;
    let mut acc = vec![
        match projection {
            Projection::Mean => 0.0f64,
            Projection::Max => f64::NEG_INFINITY,
        };
        image.ncols()
    ];
    for row in rows.outer_iter() {
        for (a, &v) in acc.iter_mut().zip(row.iter()) {
            match projection {
                Projection::Mean => *a += v as f64,
                Projection::Max => *a = a.max(v as f64),
            }
        }
    }
    acc.iter()
        .map(|&a| match projection {
            Projection::Mean => (a / n) as f32,
            Projection::Max => a as f32,
        })
        .collect()
}

/// The q-quantile of the values that are not NaN (0 when none).
pub fn percentile_unmasked(values: &[f32], q: f64) -> f64 {
    let mut v: Vec<f32> = values.iter().copied().filter(|x| !x.is_nan()).collect();
    if v.is_empty() {
        return 0.0;
    }
    let i = ((v.len() - 1) as f64 * q).round() as usize;
    let (_, x, _) = v.select_nth_unstable_by(i, f32::total_cmp);
    *x as f64
}

/// Flow values to 8-bit grey: 0 black, `white` white, NaN black.
pub fn flow_grey(values: &[f32], white: f64) -> Vec<u8> {
    let scale = if white > 0.0 { 255.0 / white } else { 0.0 };
    values.iter().map(|&v| if v.is_nan() { 0 } else { (v as f64 * scale).round().clamp(0.0, 255.0) as u8 }).collect()
}

pub(crate) fn round6(v: f64) -> f64 {
    (v * 1e6).round() / 1e6
}

/// Noise statistics of one B-scan against the average of its position, on
/// the deepest tenth of the depth range (chosen by position, not by value,
/// so the selection does not bias either side).
fn measure_averaging(single: &Array2<f32>, averaged: &Array2<f32>, n: usize) -> AveragingRecord {
    // Images are depth × A-lines: the deepest tenth of the rows.
    let depth = single.nrows();
    let region = (depth - depth / 10).min(depth - 1)..depth;
    let values = |a: &Array2<f32>| -> Vec<f64> {
        a.slice(ndarray::s![region.clone(), ..]).iter().map(|&d| crate::analysis::amplitude_from_db(d as f64)).collect()
    };
    let sd = |v: &[f64]| {
        let mean = v.iter().sum::<f64>() / v.len() as f64;
        (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
    };
    let (sd_one, sd_avg) = (sd(&values(single)), sd(&values(averaged)));
    AveragingRecord {
        frames_per_position: n,
        noise_floor_single_db: round6(noise_floor_db(single.as_slice().unwrap())),
        noise_floor_averaged_db: round6(noise_floor_db(averaged.as_slice().unwrap())),
        noise_sd_single: round6(sd_one),
        noise_sd_averaged: round6(sd_avg),
        noise_sd_reduction_db: round6(20.0 * (sd_one / sd_avg).log10()),
    }
}
