//! The commented default pipeline (`fringeflow pipeline defaults`) and the
//! resolved form of a pipeline (`fringeflow pipeline show`).
//!
//! The comments come from the key tables of docs/pipeline-reference.md,
//! compiled in, so the printed defaults and the reference cannot disagree:
//! a test checks that every key the pipeline serialises has a row there.

use super::config::PipelineConfig;

/// The reference, compiled in.
const REFERENCE: &str = include_str!("../../../../docs/pipeline-reference.md");

/// The sections in stage order, as the reference lists them.
pub const SECTIONS: &[&str] = &[
    "input",
    "background",
    "k_linearization",
    "dispersion",
    "shaping",
    "window",
    "fft",
    "log_compression",
    "volume",
    "registration",
    "doppler",
    "angiography",
    "output",
];

/// One row of a key table: key, default as written, meaning.
#[derive(Debug, Clone)]
pub struct KeyDoc {
    pub key: String,
    pub default: String,
    pub meaning: String,
}

fn plain(cell: &str) -> String {
    cell.replace('`', "").replace("\\|", "|").trim().to_string()
}

/// The key tables of the reference, per section.
pub fn key_docs(section: &str) -> Vec<KeyDoc> {
    let heading = format!("## `[{section}]`");
    let mut rows = Vec::new();
    let mut inside = false;
    for line in REFERENCE.lines() {
        if line.starts_with("## ") {
            inside = line.trim() == heading;
            continue;
        }
        if !inside || !line.starts_with("| `") {
            continue;
        }
        // Split on unescaped pipes.
        let mut cells = Vec::new();
        let mut cell = String::new();
        let mut prev = ' ';
        for ch in line.trim().trim_matches('|').chars() {
            if ch == '|' && prev != '\\' {
                cells.push(std::mem::take(&mut cell));
            } else {
                cell.push(ch);
            }
            prev = ch;
        }
        cells.push(cell);
        if cells.len() < 3 {
            continue;
        }
        let keys: Vec<String> = cells[0].split(',').map(plain).collect();
        let defaults: Vec<String> = cells[1].split(", ").map(plain).collect();
        for (i, key) in keys.iter().enumerate() {
            let default = if defaults.len() == keys.len() { defaults[i].clone() } else { plain(&cells[1]) };
            rows.push(KeyDoc { key: key.clone(), default, meaning: plain(&cells[2..].join("|")) });
        }
    }
    rows
}

/// Each section of a pipeline as a TOML table (every section, even those
/// left out of the serialised form at their defaults).
fn sections(config: &PipelineConfig) -> Vec<(&'static str, toml::Table)> {
    fn table<T: serde::Serialize>(v: &T) -> toml::Table {
        toml::Table::try_from(v).expect("a pipeline section serialises to TOML")
    }
    vec![
        ("input", table(&config.input)),
        ("background", table(&config.background)),
        ("k_linearization", table(&config.k_linearization)),
        ("dispersion", table(&config.dispersion)),
        ("shaping", table(&config.shaping)),
        ("window", table(&config.window)),
        ("fft", table(&config.fft)),
        ("log_compression", table(&config.log_compression)),
        ("volume", table(&config.volume)),
        ("registration", table(&config.registration)),
        ("doppler", table(&config.doppler)),
        ("angiography", table(&config.angiography)),
        ("output", table(&config.output)),
    ]
}

fn wrap(text: &str, width: usize, prefix: &str) -> String {
    let mut out = String::new();
    let mut line = String::new();
    for word in text.split_whitespace() {
        if !line.is_empty() && line.chars().count() + 1 + word.chars().count() > width {
            out += &format!("{prefix}{line}\n");
            line.clear();
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line += word;
    }
    if !line.is_empty() {
        out += &format!("{prefix}{line}\n");
    }
    out
}

fn value_text(v: &toml::Value) -> String {
    let mut t = toml::Table::new();
    t.insert("v".into(), v.clone());
    toml::to_string(&t).unwrap_or_default().trim_start_matches("v = ").trim().to_string()
}

/// A pipeline as TOML, every key of every section in stage order with
/// its meaning from the reference as a comment above it; keys with no
/// value (optional, unset) are shown commented out with their default.
pub fn commented(config: &PipelineConfig, title: &str) -> String {
    let mut s = String::new();
    s += &wrap(title, 76, "# ");
    s += "# Every key is optional: a file needs only the keys it changes.\n";
    s += "# Reference: docs/pipeline-reference.md\n";
    for (name, table) in sections(config) {
        s += &format!("\n[{name}]\n");
        let docs = key_docs(name);
        let mut shown = std::collections::BTreeSet::new();
        for doc in &docs {
            if !shown.insert(doc.key.clone()) {
                continue;
            }
            s += &wrap(&doc.meaning, 74, "# ");
            match table.get(&doc.key) {
                Some(v) => s += &format!("{} = {}\n", doc.key, value_text(v)),
                None => s += &format!("# {} = …  (default: {})\n", doc.key, doc.default),
            }
        }
        for (key, v) in &table {
            if !shown.contains(key) {
                s += &format!("{key} = {}\n", value_text(v));
            }
        }
    }
    s
}

/// The default pipeline, commented.
pub fn defaults_text() -> String {
    commented(&PipelineConfig::default(), "fringeflow default pipeline: every key with its default value.")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_key_is_documented_in_the_reference() {
        for (name, table) in sections(&PipelineConfig::default()) {
            let docs = key_docs(name);
            assert!(!docs.is_empty(), "docs/pipeline-reference.md has no key table for [{name}]");
            for key in table.keys() {
                assert!(docs.iter().any(|d| &d.key == key), "[{name}] {key} has no row in docs/pipeline-reference.md");
            }
        }
    }

    #[test]
    fn every_documented_key_exists() {
        // A key the reference lists must be accepted by the parser.
        for name in SECTIONS {
            for doc in key_docs(name) {
                let e = PipelineConfig::from_str("p.toml", &format!("[{name}]\n{} = \"?\"\n", doc.key));
                if let Err(e) = e {
                    assert!(!e.to_string().contains("unknown key"), "[{name}] {}: {e}", doc.key);
                }
            }
        }
    }

    #[test]
    fn defaults_text_parses_back_to_the_defaults() {
        let text = defaults_text();
        let parsed = PipelineConfig::from_str("defaults.toml", &text).unwrap();
        assert_eq!(parsed, PipelineConfig::default());
        assert!(text.contains("[angiography]") && text.contains("# "), "{text}");
    }
}
