//! report.html: one self-contained page per output folder, built from what
//! io wrote there (log.json, volume.h5, the contrast PNGs), never from the
//! pipeline's internals. Everything is inline: the style, the script
//! (crates/report/src/report/page.js, ours), and the B-scans as 16-bit steps of 0.1 dB
//! (zlib, base64) that the page maps to grey or colour with a live
//! window/level. Opens from a file:// path or a mail attachment with no
//! network.

use anyhow::{Context, Result};
use base64::Engine;
use rayon::prelude::*;
use ndarray::Array2;
use serde_json::{json, Value};
use std::io::Write;
use std::path::Path;

use crate::io::staging::write_atomically;

pub mod compare;
pub mod index;
pub mod sweep;
pub use compare::write_comparison;
pub use index::write_index;

const PAGE: &str = include_str!("page.html");
const STYLE: &str = include_str!("page.css");
const SCRIPT: &str = include_str!("page.js");
/// viridis (matplotlib's, CC0), 32 stops as r,g,b bytes.
const VIRIDIS: &str = "68,1,84,71,13,96,72,24,106,72,35,116,71,46,124,69,56,130,66,65,134,62,74,137,58,84,140,54,93,141,50,101,142,46,109,142,43,117,142,40,125,142,37,132,142,34,140,141,31,148,140,30,156,137,32,163,134,37,171,130,46,179,124,58,186,118,72,193,110,88,199,101,108,205,90,127,211,78,147,215,65,168,219,52,192,223,37,213,226,26,234,229,26,253,231,37";

/// dB step of the embedded data (16-bit): rounding moves a value by at
/// most 0.05 dB, under one grey level for any window wider than 6.4 dB.
pub const STEP_DB: f64 = 0.1;
/// With `report_frame_step = 0` (auto), frames are embedded every k-th so
/// that at most this many pixels go into the page (about 1.6 bytes each
/// after compression and base64).
pub const AUTO_PIXEL_BUDGET: usize = 32 << 20;

/// What was written.
#[derive(Debug, Clone)]
pub struct ReportSummary {
    pub bytes: u64,
    pub frames_embedded: usize,
    pub frames_total: usize,
}

/// The embedded range starts this far below the first embedded frame's
/// logged noise floor (values below it show as it).
pub const BASE_BELOW_FLOOR_DB: f64 = 0.0;

/// Frames `frame_step` apart are embedded; 0 chooses the step from
/// [`AUTO_PIXEL_BUDGET`].
pub fn frame_step(frame_step: usize, frames: usize, depth: usize, alines: usize) -> usize {
    if frame_step > 0 {
        frame_step
    } else {
        (frames * depth * alines).div_ceil(AUTO_PIXEL_BUDGET).max(1)
    }
}

/// The lowest embedded dB: [`BASE_BELOW_FLOOR_DB`] under the first
/// embedded frame's logged noise floor, on the [`STEP_DB`] grid (the
/// image's lowest finite value when no floor is logged).
pub fn embed_base(first_floor_db: Option<f64>, first_image: &Array2<f32>) -> f64 {
    let floor = first_floor_db
        .filter(|f| f.is_finite())
        .unwrap_or_else(|| first_image.iter().filter(|d| d.is_finite()).fold(f64::INFINITY, |m, &d| m.min(d as f64)) + BASE_BELOW_FLOOR_DB);
    let floor = if floor.is_finite() { floor } else { 0.0 };
    // The logged floor has 6 decimals, so (floor − 10)/0.1 is a whole
    // number of 1e-5 steps: half a step keeps an ulp of JSON parsing from
    // moving the base to the next grid line.
    ((floor - BASE_BELOW_FLOOR_DB) / STEP_DB + 5e-6).floor() * STEP_DB
}

/// One B-scan as the page embeds it.
pub struct EmbeddedFrame {
    pub index: usize,
    /// zlib of the two byte planes, base64.
    pub data: String,
    /// Highest step in it.
    pub max_q: u16,
    /// Per depth row, the sum of its finite dB values (for the en face slab).
    pub row_sums: Vec<f64>,
}

/// Quantises and compresses frame `index` (depth × A-lines, dB) from `base` dB.
pub fn embed_frame(index: usize, image: &Array2<f32>, base: f64) -> EmbeddedFrame {
    let q = quantise(image, base);
    let max_q = q.iter().copied().max().unwrap_or(0);
    let row_sums = image.outer_iter().map(|row| row.iter().filter(|d| d.is_finite()).map(|&d| d as f64).sum::<f64>()).collect();
    EmbeddedFrame { index, data: compress_planes(&q), max_q, row_sums }
}

/// Embeds a run's frames while the run writes its other outputs, on
/// threads of its own (one per core; never the rayon pool, whose workers
/// may be waiting on the writer or, in a batch, on this): push every
/// stored frame in order, then [`Embedder::finish`].
pub struct Embedder {
    step: usize,
    /// uint16 volumes: frames are embedded as volume.h5 stores them.
    packed: bool,
    /// From the first frame pushed (frame 0).
    base: std::cell::Cell<Option<f64>>,
    tx: Option<std::sync::mpsc::Sender<(usize, Array2<f32>, f64)>>,
    workers: Vec<std::thread::JoinHandle<Vec<EmbeddedFrame>>>,
}

impl Embedder {
    pub fn new(step: usize, packed: bool) -> Embedder {
        let (tx, rx) = std::sync::mpsc::channel::<(usize, Array2<f32>, f64)>();
        let rx = std::sync::Arc::new(std::sync::Mutex::new(rx));
        let threads = std::thread::available_parallelism().map_or(1, |n| n.get()).min(8);
        let workers = (0..threads)
            .map(|_| {
                let rx = rx.clone();
                std::thread::spawn(move || {
                    let mut out = Vec::new();
                    loop {
                        // The lock is held only to take one frame.
                        let next = rx.lock().map(|r| r.recv());
                        match next {
                            Ok(Ok((index, image, base))) => out.push(embed_frame(index, &image, base)),
                            _ => return out,
                        }
                    }
                })
            })
            .collect();
        Embedder { step: step.max(1), packed, base: std::cell::Cell::new(None), tx: Some(tx), workers }
    }

    /// Stored frame `index` with its logged (rounded) noise floor.
    pub fn push(&self, index: usize, image: &Array2<f32>, noise_floor_db: f64) {
        if !index.is_multiple_of(self.step) {
            return;
        }
        let image = if self.packed {
            crate::io::volume::pack_db(image).mapv(|v| (v as f64 * crate::io::volume::PACKED_DB_STEP + crate::io::volume::PACKED_DB_OFFSET) as f32)
        } else {
            image.clone()
        };
        let base = match self.base.get() {
            Some(b) => b,
            None => {
                let b = embed_base(Some(noise_floor_db), &image);
                self.base.set(Some(b));
                b
            }
        };
        if let Some(tx) = &self.tx {
            // A closed channel means the workers are gone; finish() reports it.
            let _ = tx.send((index, image, base));
        }
    }

    /// The base and the embedded frames, in order.
    pub fn finish(mut self) -> Result<Embedded> {
        drop(self.tx.take());
        let mut frames = Vec::new();
        for w in self.workers.drain(..) {
            frames.extend(w.join().map_err(|_| anyhow::anyhow!("a report thread panicked"))?);
        }
        frames.sort_by_key(|f| f.index);
        Ok(Embedded { step: self.step, base_db: self.base.get().unwrap_or(0.0), frames })
    }
}

/// What [`Embedder`] made.
pub struct Embedded {
    pub step: usize,
    pub base_db: f64,
    pub frames: Vec<EmbeddedFrame>,
}

/// Writes `dir/report.html` for the output folder `dir` (log.json and
/// volume.h5 written there). `frame_step` 0 chooses the step from
/// [`AUTO_PIXEL_BUDGET`].
pub fn write_report(dir: &Path, out: &Path, frame_step: usize) -> Result<ReportSummary> {
    write_report_from(dir, out, frame_step, None)
}

/// [`write_report`] with the frames already embedded during the run (the
/// same bytes as embedding them from volume.h5; only the axes are read).
pub fn write_report_embedded(dir: &Path, out: &Path, embedded: Embedded) -> Result<ReportSummary> {
    write_report_from(dir, out, embedded.step, Some(embedded))
}

/// Per embedded frame, the black and white levels its PNG used (from the
/// log's frame records; around `base` when a record is missing).
fn frame_levels(records: &[Value], indices: &[usize], base: f64) -> Vec<[f64; 2]> {
    indices
        .iter()
        .map(|&f| {
            let r = records.iter().find(|r| r["index"].as_u64() == Some(f as u64));
            match r {
                Some(r) => [r["black_db"].as_f64().unwrap_or(base), r["white_db"].as_f64().unwrap_or(base + 40.0)],
                None => [base + 3.0, base + 43.0],
            }
        })
        .collect()
}

/// The en face slab: the logged one, else 60 µm around the depth of the
/// brightest mean profile (skipping the 8 bins next to zero delay).
fn en_face_slab(log: &Value, embedded: &[EmbeddedFrame], depth_um: &[f64], depth: usize) -> [f64; 2] {
    match log["en_face"]["depth_um"].as_array() {
        Some(a) if a.len() == 2 => [a[0].as_f64().unwrap_or(depth_um[0]), a[1].as_f64().unwrap_or(depth_um[depth - 1])],
        _ => {
            let mut mean = vec![0.0f64; depth];
            for e in embedded {
                for (m, s) in mean.iter_mut().zip(&e.row_sums) {
                    *m += s;
                }
            }
            let skip = 8.min(depth - 1);
            let peak = (skip..depth).max_by(|&a, &b| mean[a].total_cmp(&mean[b])).unwrap_or(0);
            let z = depth_um[peak];
            [(z - 30.0).max(depth_um[0]), (z + 30.0).min(depth_um[depth - 1])]
        }
    }
}

fn write_report_from(dir: &Path, out: &Path, requested_step: usize, embedded: Option<Embedded>) -> Result<ReportSummary> {
    let log: Value = serde_json::from_slice(&std::fs::read(dir.join("log.json")).with_context(|| format!("reading {}", dir.join("log.json").display()))?)
        .with_context(|| format!("{}: not a fringeflow log", dir.join("log.json").display()))?;
    let volume_path = dir.join("volume.h5");
    if !volume_path.exists() {
        anyhow::bail!("{}: no volume.h5 (the report is drawn from it; turn [output] volume on)", dir.display());
    }
    let reader = crate::io::volume::DbReader::open(&volume_path)?;
    let [frames_total, depth, alines] = reader.shape;
    let step = frame_step(requested_step, frames_total, depth, alines);
    let axes = reader.axes()?;
    let records = log["frames"].as_array().cloned().unwrap_or_default();
    let logged_floor = |f: usize| records.iter().find(|r| r["index"].as_u64() == Some(f as u64)).and_then(|r| r["noise_floor_db"].as_f64());
    let Embedded { base_db: base, frames: embedded, .. } = match embedded {
        Some(e) => e,
        None => {
            let indices: Vec<usize> = (0..frames_total).step_by(step).collect();
            let images = indices.iter().map(|&f| reader.frame(f)).collect::<Result<Vec<_>>>()?;
            let base = embed_base(logged_floor(0), &images[0]);
            let frames = indices.par_iter().zip(images.par_iter()).map(|(&f, image)| embed_frame(f, image, base)).collect();
            Embedded { step, base_db: base, frames }
        }
    };
    let indices: Vec<usize> = embedded.iter().map(|e| e.index).collect();
    if indices != (0..frames_total).step_by(step).collect::<Vec<_>>() {
        anyhow::bail!("the embedded frames {indices:?} are not every {step}-th of {frames_total}");
    }
    let max_q = embedded.iter().map(|e| e.max_q).max().unwrap_or(0);
    let depth_um = &axes.depth_um;
    // Per embedded frame, the levels its PNG used.
    let levels = frame_levels(&records, &indices, base);
    let slab = en_face_slab(&log, &embedded, depth_um, depth);
    let frames_embedded = embedded.len();
    let data: Vec<String> = embedded.into_iter().map(|e| e.data).collect();
    let data_json = json!({
        "frames_total": frames_total,
        "frames_shown": indices,
        "frame_step": step,
        "depth": depth,
        "alines": alines,
        "first_depth_um": depth_um[0],
        "depth_spacing_um": axes.depth_spacing_um,
        "aline_spacing_um": axes.aline_spacing_um,
        "position_spacing_um": axes.position_spacing_um,
        "base_db": base,
        "step_db": STEP_DB,
        "max_q": max_q,
        "levels": levels,
        "slab_um": slab,
        "data": data,
    });

    // The output's name: the input's stem (the folder may still be a
    // staging folder when `run` writes the report).
    let name = log["input"]["path"]
        .as_str()
        .and_then(|p| Path::new(p).file_stem().map(|s| s.to_string_lossy().into_owned()))
        .or_else(|| dir.file_name().map(|n| n.to_string_lossy().into_owned()))
        .unwrap_or_else(|| "output".into());
    let title = format!("fringeflow report: {name}");
    let subtitle = format!(
        "{} · input {} · pipeline sha256:{} · {} {}",
        log["input"]["path"].as_str().unwrap_or("?"),
        log["input_hash"].as_str().unwrap_or("?"),
        log["pipeline_sha256"].as_str().unwrap_or("?"),
        log["tool"]["name"].as_str().unwrap_or("fringeflow"),
        log["tool"]["version"].as_str().unwrap_or("")
    );
    let page = PAGE
        .replace("{{STYLE}}", STYLE)
        .replace("{{SCRIPT}}", &SCRIPT.replace("{{VIRIDIS}}", VIRIDIS))
        .replace("{{GENERATOR}}", concat!("fringeflow ", env!("CARGO_PKG_VERSION")))
        .replace("{{TITLE}}", &escape(&title))
        .replace("{{SUBTITLE}}", &escape(&subtitle))
        .replace("{{WARNINGS}}", &warnings_html(&log))
        .replace("{{IMAGES}}", &(images_html(dir, &log)? + &plots_html(dir)?))
        .replace("{{LOG}}", &log_html(&log, &axes))
        // JSON inside <script>: "</" would end the element.
        .replace("{{DATA}}", &data_json.to_string().replace("</", "<\\/"));
    write_atomically(out, |tmp| {
        std::fs::write(tmp, page.as_bytes())?;
        Ok(())
    })?;
    Ok(ReportSummary { bytes: page.len() as u64, frames_embedded, frames_total })
}

/// The frames as the page embeds them: 16-bit steps of [`STEP_DB`] from
/// `base` dB (lower and NaN values as 0), two byte planes (high bytes,
/// then low bytes: the high plane is nearly constant and compresses to
/// almost nothing), zlib, base64.
pub fn embed_frames(images: &[Array2<f32>], base: f64) -> Vec<String> {
    images
        .par_iter()
        .map(|image| compress_planes(&quantise(image, base)))
        .collect()
}

/// dB as steps of [`STEP_DB`] from `base` (lower and NaN values as 0).
fn quantise(image: &Array2<f32>, base: f64) -> Vec<u16> {
    image.iter().map(|&d| if d.is_finite() { ((d as f64 - base) / STEP_DB).round().clamp(0.0, 65535.0) as u16 } else { 0 }).collect()
}

/// The steps as two byte planes (high bytes, then low), zlib, base64.
fn compress_planes(q: &[u16]) -> String {
    let mut planes = Vec::with_capacity(2 * q.len());
    planes.extend(q.iter().map(|v| (v >> 8) as u8));
    planes.extend(q.iter().map(|v| (v & 0xff) as u8));
    // miniz at its fastest level: about 475 kB for the sample capture against
    // 463 kB at level 6, in a third of the time (fdeflate, quicker still,
    // made 570 kB).
    let mut z = flate2::write::ZlibEncoder::new(Vec::with_capacity(q.len()), flate2::Compression::fast());
    z.write_all(&planes).expect("in memory");
    base64::engine::general_purpose::STANDARD.encode(z.finish().expect("in memory"))
}

/// HTML text escaping.
pub fn escape(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

fn warnings_html(log: &Value) -> String {
    let warnings: Vec<&str> = log["warnings"].as_array().map(|a| a.iter().filter_map(|w| w.as_str()).collect()).unwrap_or_default();
    if warnings.is_empty() {
        return "<p class=\"ok\" id=\"warnings\">No warnings.</p>".into();
    }
    let items: String = warnings.iter().map(|w| format!("<li>{}</li>", escape(w))).collect();
    format!("<div class=\"warnings\" id=\"warnings\"><strong>{} warning{}</strong><ul>{items}</ul></div>", warnings.len(), if warnings.len() == 1 { "" } else { "s" })
}

/// The contrast images of the folder (Doppler and angiography), inline.
fn images_html(dir: &Path, log: &Value) -> Result<String> {
    let outputs: Vec<&str> = log["outputs"].as_array().map(|a| a.iter().filter_map(|o| o.as_str()).collect()).unwrap_or_default();
    let picked: Vec<&str> = outputs.iter().copied().filter(|o| o.ends_with(".png") && (o.contains("en-face") || o.starts_with("doppler-") && o.ends_with("-0000.png") || o.starts_with("angiography-") && o.ends_with("-0000.png"))).collect();
    if picked.is_empty() {
        return Ok(String::new());
    }
    let mut s = String::from("<h2>Flow, angiography and en face images</h2><p class=\"note\">As written beside this report (the first position of each stack; the rest are in the folder and in volume.h5).</p>");
    for name in picked {
        let bytes = std::fs::read(dir.join(name)).with_context(|| format!("reading {}", dir.join(name).display()))?;
        s += &format!(
            "<figure><img alt=\"{0}\" src=\"data:image/png;base64,{1}\"><figcaption>{0}</figcaption></figure>",
            escape(name),
            base64::engine::general_purpose::STANDARD.encode(bytes)
        );
    }
    Ok(s)
}

/// The measurement and calibration plots of the folder: every SVG file in
/// it that fringeflow drew (marked with [`crate::plot::SVG_MARK`]),
/// inline, by name (HTML needs no SVG namespace: it is dropped, so the page
/// names no URL).
fn plots_html(dir: &Path) -> Result<String> {
    let mut names: Vec<std::path::PathBuf> = std::fs::read_dir(dir)
        .with_context(|| format!("listing {}", dir.display()))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "svg") && p.is_file())
        .collect();
    names.sort();
    let mut s = String::new();
    for p in names {
        let text = std::fs::read_to_string(&p).with_context(|| format!("reading {}", p.display()))?;
        let Some(start) = text.find("<svg") else { continue };
        if !text[start..text[start..].find('>').map_or(start, |e| start + e)].contains(crate::plot::SVG_MARK) {
            continue;
        }
        let name = p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        s += &format!("<figure class=\"plot\" data-file=\"{}\">{}<figcaption>{}</figcaption></figure>", escape(&name), text[start..].replacen(" xmlns=\"http://www.w3.org/2000/svg\"", "", 1), escape(&name));
    }
    if s.is_empty() {
        return Ok(s);
    }
    Ok(format!("<h2>Measurement and calibration plots</h2><p class=\"note\">Drawn by fringeflow (SVG files in this folder).</p>{s}"))
}

fn value_text(v: &Value) -> String {
    match v {
        Value::Null => "—".into(),
        Value::String(s) => s.clone(),
        Value::Array(a) if a.iter().all(|x| !x.is_object()) => a.iter().map(value_text).collect::<Vec<_>>().join(", "),
        Value::Object(o) => o.iter().map(|(k, v)| format!("{k} {}", value_text(v))).collect::<Vec<_>>().join(", "),
        other => other.to_string(),
    }
}

fn table(rows: &[(String, String)]) -> String {
    let body: String = rows.iter().map(|(k, v)| format!("<tr><th>{}</th><td>{}</td></tr>", escape(k), escape(v))).collect();
    format!("<table class=\"kv\">{body}</table>")
}

/// The log in words: the capture, the stages with every parameter, the
/// derived numbers, the frames, the checks, the timing.
fn log_html(log: &Value, v: &crate::io::volume::VolumeAxes) -> String {
    let input = &log["input"];
    let mut s = String::new();
    s += &format!(
        "<p>Capture <code>{}</code>: {} frames × {} A-lines × {} pixels of {} samples; fringes from <code>{}</code>; wavelength map from {}; {}.</p>",
        escape(input["path"].as_str().unwrap_or("?")),
        input["frames"],
        input["alines"],
        input["pixels"],
        escape(&value_text(&input["dtype"])),
        escape(input["fringes_dataset"].as_str().unwrap_or("?")),
        escape(&value_text(&input["wavelength_map"])),
        if input["has_background"].as_bool() == Some(true) { "recorded background spectra present" } else { "no recorded background" }
    );
    let derived = &log["derived"];
    let stages: Vec<String> = derived["stages"].as_array().map(|a| a.iter().map(value_text).collect()).unwrap_or_default();
    s += &format!(
        "<p>Engine <code>{}</code>; stages in order: {}. Background method used: {}. Depth: {} pixels of {:.4} µm (in air) from {:.2} µm.</p>",
        escape(log["engine"].as_str().unwrap_or("?")),
        escape(&stages.join(" → ")),
        escape(&value_text(&derived["background_method"])),
        v.depth_um.len(),
        v.depth_spacing_um,
        v.depth_um[0]
    );
    s += "<h3>Pipeline (every stage and parameter)</h3>";
    if let Some(p) = log["pipeline"].as_object() {
        for (section, keys) in p {
            let rows: Vec<(String, String)> = match keys.as_object() {
                Some(o) => o.iter().map(|(k, v)| (k.clone(), value_text(v))).collect(),
                None => vec![(section.clone(), value_text(keys))],
            };
            s += &format!("<p><strong>[{}]</strong></p>{}", escape(section), table(&rows));
        }
    }
    s += "<h3>Derived</h3>";
    if let Some(o) = derived.as_object() {
        s += &table(&o.iter().map(|(k, v)| (k.clone(), value_text(v))).collect::<Vec<_>>());
    }
    s += "<h3>Frames</h3><table class=\"kv\"><tr><th>frame</th><th>noise floor (dB)</th><th>peak (dB)</th><th>black / white (dB)</th><th>saturated samples</th></tr>";
    let records = log["frames"].as_array().cloned().unwrap_or_default();
    for r in &records {
        s += &format!(
            "<tr><td>{}</td><td>{:.2}</td><td>{:.2}</td><td>{:.2} / {:.2}</td><td>{}</td></tr>",
            r["index"],
            r["noise_floor_db"].as_f64().unwrap_or(f64::NAN),
            r["peak_db"].as_f64().unwrap_or(f64::NAN),
            r["black_db"].as_f64().unwrap_or(f64::NAN),
            r["white_db"].as_f64().unwrap_or(f64::NAN),
            r["saturated_samples"]
        );
    }
    s += "</table>";
    let saturated: u64 = records.iter().filter_map(|r| r["saturated_samples"].as_u64()).sum();
    let warnings = log["warnings"].as_array().map_or(0, |a| a.len());
    s += "<h3>Checks</h3><ul>";
    s += &format!("<li>{}</li>", if saturated == 0 { "No sample at or above full scale in any frame.".to_string() } else { format!("{saturated} samples at or above full scale: those fringes are clipped.") });
    s += &format!("<li>Input hash recorded ({}); <code>fringeflow rerun</code> checks it before reproducing this output.</li>", escape(log["input_hash"].as_str().unwrap_or("?")));
    s += &format!("<li>{}</li>", if warnings == 0 { "No warnings.".to_string() } else { format!("{warnings} warning(s), listed at the top.") });
    if log["dispersion_estimate"].is_object() {
        let e = &log["dispersion_estimate"];
        s += &format!("<li>Dispersion estimated: a2 {:.2} rad, a3 {:.2} rad{}.</li>", e["a2_rad"].as_f64().unwrap_or(f64::NAN), e["a3_rad"].as_f64().unwrap_or(f64::NAN), if e["at_range_limit"].as_bool() == Some(true) { " — at the edge of the search range" } else { "" });
    }
    s += "</ul>";
    let t = &log["timing"];
    s += &format!(
        "<h3>Timing</h3><p id=\"timing\">{:.3} s in all ({:.0} A-lines/s on {} threads); reading {:.3} s, writing {:.3} s; peak memory {} MB. (The only part of this page that differs between identical runs.)</p>",
        t["total_seconds"].as_f64().unwrap_or(f64::NAN),
        t["alines_per_second"].as_f64().unwrap_or(f64::NAN),
        t["threads"],
        t["read_seconds"].as_f64().unwrap_or(f64::NAN),
        t["write_seconds"].as_f64().unwrap_or(f64::NAN),
        t["peak_resident_mb"].as_f64().map_or("—".into(), |m| format!("{m:.0}"))
    );
    s
}
