//! Comparison pages: two outputs of the same capture (two dispersion
//! settings, linear against cubic resampling, …) from their log.json and
//! volume.h5 (`fringeflow compare`), and every setting of a dispersion
//! sweep (sweep.html). Any two sides are shown side by side or blinking on
//! the same frame under one window/level, with their difference in dB on a
//! diverging scale and each side's sharpness figures (entropy of the
//! normalised intensity and the median FWHM of the brightest interface).
//! Self-contained, like report.html.

use anyhow::{bail, Context, Result};
use ndarray::Array2;
use serde_json::{json, Value};
use std::path::Path;

use super::{embed_frames, escape, STEP_DB};
use crate::io::staging::write_atomically;

const STYLE: &str = include_str!("page.css");
const SCRIPT: &str = include_str!("compare.js");

/// Sharpness of one B-scan (depth × A-lines, dB): the entropy (nats) of
/// the intensity normalised to sum 1 (lower is sharper; the metric of
/// Wojtkowski et al. 2004 that `auto` dispersion minimises), and the median
/// over A-lines of the FWHM (µm) of each A-line's brightest peak, where it
/// falls to half on both sides.
pub fn sharpness(image: &ndarray::Array2<f32>, depth_spacing_um: f64) -> (f64, Option<f64>) {
    let intensity: Vec<f64> = image.iter().map(|&d| if d.is_finite() { 10f64.powf(d as f64 / 10.0) } else { 0.0 }).collect();
    let total: f64 = intensity.iter().sum();
    let entropy = if total > 0.0 { -intensity.iter().map(|&i| i / total).filter(|&p| p > 0.0).map(|p| p * p.ln()).sum::<f64>() } else { f64::NAN };
    let (depth, alines) = image.dim();
    let mut widths = Vec::new();
    for a in 0..alines {
        let profile: Vec<f64> = (0..depth).map(|z| crate::analysis::amplitude_from_db(image[[z, a]] as f64)).collect();
        let skip = 8.min(depth.saturating_sub(1));
        let (i, _) = crate::analysis::peak(&profile, skip, depth);
        if let Some(w) = crate::analysis::fwhm(&profile, i) {
            widths.push(w * depth_spacing_um);
        }
    }
    let fwhm = (widths.len() * 2 > alines).then(|| crate::stages::background::median_in_place(&mut widths));
    (entropy, fwhm)
}

/// Pipeline keys whose values differ between two logs, "section.key".
fn differences(a: &Value, b: &Value) -> Vec<(String, String, String)> {
    let mut out = Vec::new();
    let (Some(pa), Some(pb)) = (a["pipeline"].as_object(), b["pipeline"].as_object()) else { return out };
    let mut sections: Vec<&String> = pa.keys().chain(pb.keys()).collect();
    sections.sort();
    sections.dedup();
    for s in sections {
        let (sa, sb) = (&pa.get(s).cloned().unwrap_or(Value::Null), &pb.get(s).cloned().unwrap_or(Value::Null));
        let mut keys: Vec<String> = sa.as_object().map(|o| o.keys().cloned().collect()).unwrap_or_default();
        keys.extend(sb.as_object().map(|o| o.keys().cloned().collect::<Vec<_>>()).unwrap_or_default());
        keys.sort();
        keys.dedup();
        for k in keys {
            let (va, vb) = (&sa[&k], &sb[&k]);
            if va != vb {
                out.push((format!("{s}.{k}"), va.to_string(), vb.to_string()));
            }
        }
    }
    out
}

/// One side of a comparison: a name, its frames (depth × A-lines, dB) and
/// per frame its figures (`{"entropy": nats, "fwhm_um": µm or null}`).
pub struct Side {
    pub name: String,
    pub images: Vec<Array2<f32>>,
    pub figures: Vec<Value>,
}

/// What a comparison page shows besides the sides.
pub struct Comparison {
    pub title: String,
    /// One line under the title (HTML-escaped here).
    pub subtitle: String,
    /// Extra HTML before the viewer (a settings table), already escaped.
    pub intro_html: String,
    pub sides: Vec<Side>,
    /// The sides shown at first as A and B.
    pub pick: [usize; 2],
    pub first_depth_um: f64,
    pub depth_spacing_um: f64,
    pub aline_spacing_um: Option<f64>,
    /// Lowest dB worth embedding (the noise floor); the window's start.
    pub floor_db: f64,
    pub black_db: f64,
    pub white_db: f64,
}

/// The page of a [`Comparison`].
pub fn comparison_html(c: &Comparison) -> String {
    let base = (c.floor_db / STEP_DB).floor() * STEP_DB;
    let max = c.sides.iter().flat_map(|s| s.images.iter()).flat_map(|i| i.iter()).filter(|d| d.is_finite()).fold(f64::NEG_INFINITY, |m, &d| m.max(d as f64));
    let max_q = (((max - base) / STEP_DB).round().clamp(0.0, 65535.0)) as u16;
    let (depth, alines) = c.sides[0].images[0].dim();
    let sides: Vec<Value> = c.sides.iter().map(|s| json!({ "name": s.name, "frames": embed_frames(&s.images, base), "figures": s.figures })).collect();
    let data = json!({
        "depth": depth,
        "alines": alines,
        "frames": c.sides[0].images.len(),
        "first_depth_um": c.first_depth_um,
        "depth_spacing_um": c.depth_spacing_um,
        "aline_spacing_um": c.aline_spacing_um,
        "base_db": base,
        "step_db": STEP_DB,
        "max_q": max_q,
        "black": c.black_db,
        "range": c.white_db - c.black_db,
        "pick": c.pick,
        "sides": sides,
    });
    let pickers = if c.sides.len() > 2 {
        "<label for=\"pick-a\">A</label><select id=\"pick-a\"></select><span></span><label for=\"pick-b\">B</label><select id=\"pick-b\"></select><span></span>"
    } else {
        ""
    };
    format!(
        r##"<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><meta name="generator" content="fringeflow {version}">
<title>{title}</title>
<style>
{STYLE}
.pair {{ display: flex; gap: 16px; flex-wrap: wrap; align-items: flex-start; }}
.pair canvas {{ image-rendering: pixelated; display: block; border: 1px solid var(--line); }}
.side {{ max-width: 470px; }}
.side h3 {{ font-size: 14px; margin: 4px 0; word-break: break-all; }}
tr.best td {{ font-weight: 600; }}
tr.picked-a td:first-child::after {{ content: " (A)"; color: var(--accent); }}
tr.picked-b td:first-child::after {{ content: " (B)"; color: var(--accent); }}
[hidden] {{ display: none !important; }}
</style></head>
<body>
<h1>{title}</h1>
<p class="sub">{subtitle}</p>
{intro}
<h2>Frame</h2>
<div class="controls" style="max-width:720px">
  {pickers}
  <label for="frame">frame</label><input type="range" id="frame" min="0" value="0" step="1"><output id="frame-out"></output>
  <label for="black">black (dB)</label><input type="range" id="black" step="any"><output id="black-out"></output>
  <label for="range">range (dB)</label><input type="range" id="range" step="any"><output id="range-out"></output>
  <label for="diff-range">difference ± (dB)</label><input type="range" id="diff-range" min="1" max="40" step="any" value="20"><output id="diff-out"></output>
  <label>view</label><span><button id="mode-side">side by side</button> <button id="mode-blink">blink</button> <button id="toggle">show the other (b)</button></span><span></span>
  <p class="note full">Keys: ← → frames; b toggles A and B in the blink view.</p>
</div>
<div class="pair" id="side">
  <div class="side"><h3 id="name-a"></h3><canvas id="canvas-a"></canvas><p id="fig-a"></p></div>
  <div class="side"><h3 id="name-b"></h3><canvas id="canvas-b"></canvas><p id="fig-b"></p></div>
</div>
<div class="pair" id="blink" hidden>
  <div class="side"><h3 id="blink-name"></h3><canvas id="canvas-blink"></canvas><p id="blink-fig"></p></div>
</div>
<h2>Difference A − B (dB)</h2>
<p class="note">Red: A brighter; blue: B brighter; white: equal; full colour at ± the difference range.</p>
<canvas id="canvas-diff" style="image-rendering:pixelated;border:1px solid #ccc"></canvas>
<script type="application/json" id="ff-data">{data}</script>
<script>
{SCRIPT}
</script>
</body></html>
"##,
        version = env!("CARGO_PKG_VERSION"),
        title = escape(&c.title),
        subtitle = escape(&c.subtitle),
        intro = c.intro_html,
        // JSON inside <script>: "</" would end the element.
        data = data.to_string().replace("</", "<\\/"),
    )
}

/// Writes the comparison page of output folders `a` and `b` to `out`.
pub fn write_comparison(a: &Path, b: &Path, out: &Path) -> Result<()> {
    let read_log = |d: &Path| -> Result<Value> {
        serde_json::from_slice(&std::fs::read(d.join("log.json")).with_context(|| format!("reading {}", d.join("log.json").display()))?).with_context(|| format!("{}: not a fringeflow log", d.join("log.json").display()))
    };
    let (la, lb) = (read_log(a)?, read_log(b)?);
    if la["input_hash"] != lb["input_hash"] {
        bail!("{} and {} come from different captures (input hashes differ): compare outputs of one capture", a.display(), b.display());
    }
    let va = crate::io::volume::DbReader::open(&a.join("volume.h5"))?.frames(1)?;
    let vb = crate::io::volume::DbReader::open(&b.join("volume.h5"))?.frames(1)?;
    let dims = |v: &crate::io::volume::DbFrames| (v.images.len(), v.images[0].nrows(), v.images[0].ncols());
    if dims(&va) != dims(&vb) || (va.depth_um[0] - vb.depth_um[0]).abs() > 1e-9 || (va.depth_spacing_um - vb.depth_spacing_um).abs() > 1e-12 * va.depth_spacing_um {
        bail!(
            "the two volumes differ in geometry ({:?} frames × depth × A-lines from {:.3} µm in {:.4} µm steps, against {:?} from {:.3} µm in {:.4} µm steps): compare outputs with the same zero padding and crop",
            dims(&va), va.depth_um[0], va.depth_spacing_um, dims(&vb), vb.depth_um[0], vb.depth_spacing_um
        );
    }
    let floor = |l: &Value| l["frames"].as_array().map(|f| f.iter().filter_map(|r| r["noise_floor_db"].as_f64()).fold(f64::INFINITY, f64::min)).unwrap_or(f64::NAN);
    let lowest = floor(&la).min(floor(&lb));
    let lowest = if lowest.is_finite() { lowest } else { -20.0 };
    let figures = |v: &crate::io::volume::DbFrames| -> Vec<Value> {
        v.images.iter().map(|i| sharpness(i, v.depth_spacing_um)).map(|(e, w)| json!({ "entropy": e, "fwhm_um": w })).collect()
    };
    let level = &la["frames"][0];
    let (black, white) = (level["black_db"].as_f64().unwrap_or(lowest + 3.0), level["white_db"].as_f64().unwrap_or(lowest + 40.0));
    let name = |d: &Path| d.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let diffs = differences(&la, &lb);
    let rows: String = if diffs.is_empty() {
        "<tr><td colspan=\"3\">none: the two pipelines are the same</td></tr>".into()
    } else {
        diffs.iter().map(|(k, x, y)| format!("<tr><th>{}</th><td>{}</td><td>{}</td></tr>", escape(k), escape(x), escape(y))).collect()
    };
    let (first_depth_um, depth_spacing_um, aline_spacing_um) = (va.depth_um[0], va.depth_spacing_um, va.aline_spacing_um);
    let page = comparison_html(&Comparison {
        title: format!("fringeflow comparison: {} vs {}", name(a), name(b)),
        subtitle: format!("Two outputs of the capture {} (input {}).", la["input"]["path"].as_str().unwrap_or("?"), la["input_hash"].as_str().unwrap_or("?")),
        intro_html: format!("<h2>Settings that differ</h2>\n<table class=\"kv\"><tr><th>key</th><th>A</th><th>B</th></tr>{rows}</table>"),
        sides: vec![
            Side { name: a.display().to_string(), figures: figures(&va), images: va.images },
            Side { name: b.display().to_string(), figures: figures(&vb), images: vb.images },
        ],
        pick: [0, 1],
        first_depth_um,
        depth_spacing_um,
        aline_spacing_um,
        floor_db: lowest,
        black_db: black,
        white_db: white,
    });
    write_atomically(out, |tmp| {
        std::fs::write(tmp, page.as_bytes())?;
        Ok(())
    })
}
