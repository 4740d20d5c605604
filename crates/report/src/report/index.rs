//! index.html: one self-contained page per batch folder: a row per
//! capture (status, frames, A-lines, time, warnings, a thumbnail of its
//! first B-scan, a link to its report.html), sortable and filterable in the
//! page, failed captures with their one-line reason, the batch's figures at
//! the top. Built from batch.json (or summary.json) and each output's
//! log.json and first PNG, as io wrote them.

use anyhow::Result;
use base64::Engine;
use serde_json::Value;
use std::path::Path;

use super::escape;
use crate::io::staging::write_atomically;

const STYLE: &str = include_str!("page.css");
const THUMB_W: u32 = 160;
const THUMB_H: u32 = 120;

/// Writes `dir/index.html` from `summary` (the batch report as JSON).
pub fn write_index(dir: &Path, summary: &Value) -> Result<()> {
    let captures = summary["captures"].as_array().cloned().unwrap_or_default();
    let total_s: f64 = captures.iter().filter_map(|c| c["seconds"].as_f64()).sum();
    let mut rows = String::new();
    for c in &captures {
        rows += &capture_row(dir, c);
    }
    let figures = figures(summary, total_s);
    let name = dir.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "batch".into());
    let page = format!(
        r##"<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><meta name="generator" content="fringeflow {version}">
<title>fringeflow batch: {title}</title>
<style>
{STYLE}
table.batch {{ border-collapse: collapse; }}
table.batch th, table.batch td {{ border: 1px solid var(--line); padding: 4px 8px; text-align: left; vertical-align: middle; }}
table.batch th {{ background: #f3f5f7; cursor: pointer; user-select: none; }}
tr.status-failed td {{ background: #fdecea; }}
tr.status-failed td.reason {{ color: #8a1c12; font-weight: 600; }}
img.thumb {{ width: {THUMB_W}px; height: {THUMB_H}px; image-rendering: auto; display: block; }}
</style></head>
<body>
<h1>fringeflow batch: {title}</h1>
<p class="sub" id="figures">{figures}</p>
<p><label>filter <input id="filter" placeholder="text in any column"></label>
<label>status <select id="status"><option value="">all</option><option value="done">done</option><option value="skipped">skipped</option><option value="failed">failed</option><option value="not_run">not run</option><option value="held">held</option></select></label>
<span class="note" id="shown"></span></p>
<table class="batch" id="captures"><thead><tr><th data-k="text">status</th><th data-k="text">input</th><th data-k="num">frames</th><th data-k="num">A-lines</th><th data-k="num">seconds</th><th data-k="num">warnings</th><th>first B-scan</th><th data-k="text">report</th><th data-k="text">reason</th></tr></thead>
<tbody>
{rows}</tbody></table>
<p class="note">Click a column heading to sort; click again to reverse.</p>
<script>
"use strict";
(function () {{
  const body = document.querySelector("#captures tbody"), rows = Array.from(body.rows);
  const filter = document.getElementById("filter"), status = document.getElementById("status");
  function apply() {{
    const t = filter.value.toLowerCase(), s = status.value;
    let n = 0;
    for (const r of rows) {{ const ok = (!s || r.dataset.status === s) && (!t || r.textContent.toLowerCase().includes(t)); r.hidden = !ok; if (ok) n++; }}
    document.getElementById("shown").textContent = `${{n}} of ${{rows.length}} shown`;
  }}
  filter.addEventListener("input", apply); status.addEventListener("change", apply);
  document.querySelectorAll("#captures th[data-k]").forEach((th, i) => {{
    let dir = 1;
    th.addEventListener("click", () => {{
      const idx = th.cellIndex, num = th.dataset.k === "num";
      const key = (r) => {{ const c = r.cells[idx]; return num ? parseFloat(c.dataset.v || "NaN") : c.textContent.toLowerCase(); }};
      rows.sort((a, b) => {{ const x = key(a), y = key(b); if (num) {{ const ax = isNaN(x) ? -Infinity : x, by = isNaN(y) ? -Infinity : y; return (ax - by) * dir; }} return x < y ? -dir : x > y ? dir : 0; }});
      dir = -dir;
      for (const r of rows) body.appendChild(r);
    }});
  }});
  apply();
  document.body.dataset.ready = "1";
}})();
</script>
</body></html>
"##,
        version = env!("CARGO_PKG_VERSION"),
        title = escape(&name),
        figures = escape(&figures),
    );
    write_atomically(&dir.join("index.html"), |tmp| {
        std::fs::write(tmp, page.as_bytes())?;
        Ok(())
    })
}

/// The output's first B-scan PNG, shrunk to a thumbnail, as base64 PNG.
fn thumbnail(folder: &Path, log: Option<&Value>) -> Option<String> {
    let outputs = log?["outputs"].as_array()?;
    let first = outputs.iter().filter_map(|o| o.as_str()).find(|o| o.starts_with("bscan-") && o.ends_with(".png"))?;
    let image = image::open(folder.join(first)).ok()?.to_luma8();
    let small = image::imageops::resize(&image, THUMB_W, THUMB_H, image::imageops::FilterType::Triangle);
    let mut bytes = Vec::new();
    small.write_to(&mut std::io::Cursor::new(&mut bytes), image::ImageFormat::Png).ok()?;
    Some(base64::engine::general_purpose::STANDARD.encode(bytes))
}

/// One capture's table row: status, input, size, seconds, warnings, the
/// first B-scan's thumbnail, the link to its report, the reason it failed.
fn capture_row(dir: &Path, c: &Value) -> String {
    let status = c["status"].as_str().unwrap_or("?");
    let input = c["input"].as_str().unwrap_or("?");
    // The output folder, relative to the batch folder.
    let folder = c["output"].as_str().and_then(|o| Path::new(o).file_name()).map(|n| n.to_string_lossy().into_owned());
    let log: Option<Value> = folder.as_ref().and_then(|f| std::fs::read(dir.join(f).join("log.json")).ok()).and_then(|b| serde_json::from_slice(&b).ok());
    let (frames, alines) = log.as_ref().map_or((String::new(), String::new()), |l| (l["input"]["frames"].to_string(), l["input"]["alines"].to_string()));
    let thumb = folder.as_ref().and_then(|f| thumbnail(&dir.join(f), log.as_ref())).map(|b64| format!("<img class=\"thumb\" alt=\"first B-scan\" src=\"data:image/png;base64,{b64}\">")).unwrap_or_default();
    let link = match &folder {
        Some(f) if dir.join(f).join("report.html").exists() => format!("<a href=\"{0}/report.html\">{0}</a>", escape(f)),
        Some(f) => escape(f),
        None => String::new(),
    };
    let reason = match (c["reason"].as_str(), c["error_kind"].as_str()) {
        (Some(r), Some(k)) => format!("{} <span class=\"note\">({})</span>", escape(r), escape(k)),
        (Some(r), None) => escape(r),
        _ => String::new(),
    };
    let seconds = c["seconds"].as_f64().unwrap_or(0.0);
    let warnings = c["warnings"].as_u64().unwrap_or(0);
    format!(
        "<tr class=\"status-{s}\" data-status=\"{s}\"><td>{s}</td><td>{}</td><td data-v=\"{frames}\">{frames}</td><td data-v=\"{alines}\">{alines}</td><td data-v=\"{seconds}\">{seconds:.2}</td><td data-v=\"{warnings}\">{warnings}</td><td>{thumb}</td><td>{link}</td><td class=\"reason\">{reason}</td></tr>\n",
        escape(input),
        s = escape(status),
    )
}

/// The batch in one sentence: counts, warnings, processing time, pipeline.
fn figures(summary: &Value, total_s: f64) -> String {
    format!(
        "{} captures in the input list{}; done {}, skipped {}, failed {}, not run {}, held by another run {}; {} warnings; {:.1} s of processing; pipeline sha256:{}{}",
        summary["inputs_total"],
        match (summary["shard"]["index"].as_u64(), summary["shard"]["count"].as_u64()) {
            (Some(i), Some(n)) if n > 1 => format!(" (shard {i} of {n})"),
            _ => String::new(),
        },
        summary["counts"]["done"],
        summary["counts"]["skipped"],
        summary["counts"]["failed"],
        summary["counts"]["not_run"],
        summary["counts"]["held"],
        summary["counts"]["warnings"],
        total_s,
        summary["pipeline_sha256"].as_str().unwrap_or("?"),
        summary["interrupted"].as_str().map(|s| format!("; stopped by {s}")).unwrap_or_default()
    ) + &summary["folder_note"].as_str().map(|n| format!(". {n}")).unwrap_or_default()
}
