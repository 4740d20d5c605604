//! The JSON documents fringeflow writes and prints (`--json` outputs,
//! calibration files, summaries): each carries a `format_version`, and a
//! key renamed in a later version keeps its previous name beside the new
//! one for one version, with the same value. docs/json-reference.md lists
//! every document's fields; tests/json_reference.rs holds real output
//! against that page.

use serde::Serialize;
use serde_json::{Map, Value};

/// One kind of document: its name, its format version and the keys it
/// still writes under their previous names.
#[derive(Debug, Clone, Copy)]
pub struct Doc {
    pub name: &'static str,
    pub version: u32,
    /// (where, previous name, current name): `where` is "" for the top
    /// level, or a key whose value is an array of objects (each gets it).
    pub previous_names: &'static [(&'static str, &'static str, &'static str)],
}

pub const DESIGN: Doc = Doc { name: "design", version: 2, previous_names: &[("", "axial_resolution_air_um", "axial_resolution_um_air")] };
pub const ROLLOFF: Doc = Doc { name: "measure rolloff", version: 2, previous_names: &[("points", "snr_db", "peak_over_noise_sd_db")] };
pub const PSF: Doc = Doc { name: "measure psf", version: 1, previous_names: &[] };
pub const INSPECT: Doc = Doc { name: "inspect", version: 1, previous_names: &[] };
pub const SIMULATE: Doc = Doc { name: "simulate", version: 1, previous_names: &[] };
pub const RERUN: Doc = Doc { name: "rerun", version: 1, previous_names: &[] };
pub const SUMMARY: Doc = Doc { name: "summarize", version: 1, previous_names: &[] };
pub const REPORT: Doc = Doc { name: "report", version: 1, previous_names: &[] };
pub const BENCH: Doc = Doc { name: "bench", version: 1, previous_names: &[] };
pub const PIPELINE: Doc = Doc { name: "pipeline show", version: 1, previous_names: &[] };
pub const DISPERSION_ESTIMATE: Doc = Doc { name: "dispersion estimate", version: 1, previous_names: &[] };
pub const DISPERSION_SWEEP: Doc = Doc { name: "dispersion sweep", version: 1, previous_names: &[] };
/// The calibration file and `calibrate wavelength --json` (2: the mirrors'
/// `sha256` became `input_hash`, a BLAKE3 or SHA-256 digest named by its
/// prefix; files of version 1 still load).
pub const CALIBRATION: Doc = Doc { name: "calibration", version: 2, previous_names: &[] };
/// `run --json`'s lines (one per capture, dry-run lines).
pub const RUN_LINE: Doc = Doc { name: "run line", version: 1, previous_names: &[] };

/// `value` as the document: `format_version` first, then its own keys,
/// with the previous names of renamed keys added.
pub fn versioned(doc: Doc, value: &impl Serialize) -> Value {
    let value = serde_json::to_value(value).expect("documents serialise");
    let Value::Object(fields) = value else { return value };
    let mut out = Map::new();
    out.insert("format_version".into(), Value::from(doc.version));
    for (k, v) in fields {
        if k != "format_version" {
            out.insert(k, v);
        }
    }
    for &(at, previous, current) in doc.previous_names {
        if at.is_empty() {
            if let Some(v) = out.get(current).cloned() {
                out.insert(previous.into(), v);
            }
        } else if let Some(Value::Array(items)) = out.get_mut(at) {
            for item in items.iter_mut() {
                if let Value::Object(o) = item {
                    if let Some(v) = o.get(current).cloned() {
                        o.insert(previous.into(), v);
                    }
                }
            }
        }
    }
    Value::Object(out)
}

/// The document pretty-printed.
pub fn pretty(doc: Doc, value: &impl Serialize) -> String {
    serde_json::to_string_pretty(&versioned(doc, value)).expect("documents serialise")
}

/// The document on one line.
pub fn line(doc: Doc, value: &impl Serialize) -> String {
    versioned(doc, value).to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn versions_first_and_previous_names_kept() {
        let v = versioned(DESIGN, &serde_json::json!({ "axial_resolution_um_air": 6.23, "x": 1 }));
        let keys: Vec<&String> = v.as_object().unwrap().keys().collect();
        assert_eq!(keys[0], "format_version");
        assert_eq!(v["format_version"], 2);
        assert_eq!(v["axial_resolution_air_um"], 6.23);
        let r = versioned(ROLLOFF, &serde_json::json!({ "points": [{ "peak_over_noise_sd_db": 40.0 }, { "peak_over_noise_sd_db": 35.5 }] }));
        assert_eq!(r["points"][1]["snr_db"], 35.5);
    }
}
