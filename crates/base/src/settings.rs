//! TOML settings (pipelines, scenes) parsed from text, with errors that
//! name the file, the key and its line, on one line; `--set` overrides;
//! renamed keys. No file access: `io::toml_file` reads the files.
//!
//! Range checks run inside deserialisation (the `de_*` helpers), so the TOML
//! parser attaches the offending value's position to the message.

use serde::de::{DeserializeOwned, Deserializer, Error as _};
use serde::Deserialize;

/// A configuration problem: file, line (when known) and message.
#[derive(Debug, thiserror::Error)]
#[error("{file}{}: {message}", line.map(|l| format!(", line {l}")).unwrap_or_default())]
pub struct ConfigError {
    pub file: String,
    pub line: Option<usize>,
    pub message: String,
}

/// 1-based line of a byte offset in `text`.
pub fn line_of(text: &str, offset: usize) -> usize {
    text[..offset.min(text.len())].bytes().filter(|&b| b == b'\n').count() + 1
}

/// Line of `key = ...` inside `[section]` (or at top level when empty), for
/// checks that involve more than one key.
pub fn line_of_key(text: &str, section: &str, key: &str) -> Option<usize> {
    let mut current = String::new();
    for (i, raw) in text.lines().enumerate() {
        let line = raw.trim();
        if line.starts_with('[') {
            current = line.trim_matches(|c| c == '[' || c == ']').trim().to_string();
            continue;
        }
        if current == section {
            if let Some((k, _)) = line.split_once('=') {
                if k.trim() == key {
                    return Some(i + 1);
                }
            }
        }
    }
    None
}

/// The `section.key` written on 1-based `line` of `text` (the nearest
/// `[section]` above it), when the line holds a `key = value`.
pub fn key_at(text: &str, line: usize) -> Option<String> {
    let lines: Vec<&str> = text.lines().collect();
    let here = lines.get(line.checked_sub(1)?)?.trim();
    let (key, _) = here.split_once('=')?;
    let key = key.trim().trim_matches('"');
    if key.is_empty() || key.starts_with('[') || key.starts_with('#') {
        return None;
    }
    let section = lines[..line - 1]
        .iter()
        .rev()
        .map(|l| l.trim())
        .find(|l| l.starts_with('['))
        .map(|l| l.trim_matches(|c| c == '[' || c == ']').trim().to_string());
    Some(match section {
        Some(s) if !s.is_empty() => format!("{s}.{key}"),
        _ => key.to_string(),
    })
}

/// The deserialiser's wording in the trade's plain words: no Rust type
/// names, no "field" or "variant".
pub fn plain_words(message: &str) -> String {
    let mut m = message.trim().replace('\n', " ");
    for (from, to) in [
        ("expected i64", "expected a whole number"),
        ("expected u64", "expected a whole number"),
        ("expected usize", "expected a whole number"),
        ("expected f64", "expected a number"),
        ("expected f32", "expected a number"),
        ("expected a boolean", "expected true or false"),
        ("expected a string", "expected text in quotes"),
        ("invalid type: integer", "found the whole number"),
        ("invalid type: floating point", "found the number"),
        ("invalid type: string", "found the text"),
        ("invalid type: boolean", "found"),
        ("invalid type: sequence", "found a list"),
        ("invalid type: map", "found a table"),
        ("wanted string or table", "expected text in quotes"),
        ("unknown variant", "unknown value"),
        ("unknown field", "unknown key"),
        ("missing field", "missing key"),
        ("expected one of", "expected one of"),
        ("expected an array of length", "expected a list of"),
    ] {
        m = m.replace(from, to);
    }
    m.replace('`', "\"")
}

/// A key or value renamed in this release.
pub enum Rename {
    /// (section, old key, new key)
    Key(&'static str, &'static str, &'static str),
    /// (section, key, old value, new value)
    Value(&'static str, &'static str, &'static str, &'static str),
}

/// One notice per old name the text uses (the parser accepts them through
/// serde aliases; this says so, with the line).
pub fn deprecated_names(file: &str, text: &str, renames: &[Rename]) -> Vec<String> {
    let mut notices = Vec::new();
    for r in renames {
        match *r {
            Rename::Key(section, old, new) => {
                if let Some(line) = line_of_key(text, section, old) {
                    notices.push(format!("{file}, line {line}: {section}.{old} is now called {section}.{new}; the old name is accepted until the next release"));
                }
            }
            Rename::Value(section, key, old, new) => {
                if let Some(line) = line_of_key(text, section, key) {
                    let value = text.lines().nth(line - 1).and_then(|l| l.split_once('=')).map(|(_, v)| v.split('#').next().unwrap_or("").trim().trim_matches('"').to_string());
                    if value.as_deref() == Some(old) {
                        notices.push(format!("{file}, line {line}: {section}.{key} = \"{old}\" is now called \"{new}\"; the old name is accepted until the next release"));
                    }
                }
            }
        }
    }
    notices
}

/// Parses `text` (read from `file`) into `T`, turning TOML and range errors
/// into a one-line [`ConfigError`] that names the key and its line.
pub fn parse<T: DeserializeOwned>(file: &str, text: &str) -> Result<T, ConfigError> {
    toml::from_str(text).map_err(|e| {
        let line = e.span().map(|s| line_of(text, s.start));
        let message = plain_words(e.message());
        let message = match line.and_then(|l| key_at(text, l)) {
            // Unknown-key messages already name the key.
            Some(key) if !message.starts_with("unknown key") => format!("{key}: {message}"),
            _ => message,
        };
        let message = match closest_suggestion(&message) {
            Some(best) => format!("{message}; did you mean \"{best}\"?"),
            None => message,
        };
        ConfigError { file: file.to_string(), line, message }
    })
}

/// For "unknown key "x", expected one of "a", "b" …" (and unknown values):
/// the expected name closest to the one given, when it is close enough to
/// be a typo (edit distance at most 2, or a third of the name).
pub fn closest_suggestion(message: &str) -> Option<String> {
    let rest = message.strip_prefix("unknown key ").or_else(|| message.split_once("unknown value ").map(|(_, r)| r))?;
    let quoted: Vec<&str> = rest.split('"').skip(1).step_by(2).collect();
    let (given, expected) = quoted.split_first()?;
    let limit = (given.chars().count() / 3).max(2);
    expected
        .iter()
        .map(|e| (edit_distance(&given.to_lowercase(), &e.to_lowercase()), *e))
        .filter(|(d, _)| *d <= limit)
        .min_by_key(|(d, _)| *d)
        .map(|(_, e)| e.to_string())
}

/// Levenshtein distance (insertions, deletions, substitutions).
pub fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut diagonal = row[0];
        row[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let next = (diagonal + usize::from(ca != *cb)).min(row[j] + 1).min(row[j + 1] + 1);
            diagonal = row[j + 1];
            row[j + 1] = next;
        }
    }
    row[b.len()]
}

/// Applies `section.key=value` overrides to TOML text. The value is read as
/// TOML (`2.5`, `true`, `[1, 2]`, `"hann"`), else taken as text, so
/// `window.kind=hann` works unquoted. Returns the text unchanged when there
/// are none.
pub fn apply_overrides(file: &str, text: &str, overrides: &[String]) -> Result<String, ConfigError> {
    if overrides.is_empty() {
        return Ok(text.to_string());
    }
    let err = |message: String| ConfigError { file: file.to_string(), line: None, message };
    let mut table: toml::Table = parse(file, text)?;
    for o in overrides {
        let Some((path, value)) = o.split_once('=') else {
            return Err(err(format!("--set {o}: expected SECTION.KEY=VALUE")));
        };
        let keys: Vec<&str> = path.trim().split('.').map(str::trim).collect();
        if keys.iter().any(|k| k.is_empty()) {
            return Err(err(format!("--set {o}: expected SECTION.KEY=VALUE")));
        }
        let value = value.trim();
        let value = match format!("v = {value}").parse::<toml::Table>() {
            Ok(mut t) => t.remove("v").unwrap_or_else(|| toml::Value::String(value.to_string())),
            Err(_) => toml::Value::String(value.to_string()),
        };
        let mut here = &mut table;
        for k in &keys[..keys.len() - 1] {
            let entry = here.entry(k.to_string()).or_insert_with(|| toml::Value::Table(toml::Table::new()));
            here = match entry {
                toml::Value::Table(t) => t,
                _ => return Err(err(format!("--set {o}: {k} is a value, not a section"))),
            };
        }
        here.insert(keys[keys.len() - 1].to_string(), value);
    }
    toml::to_string(&table).map_err(|e| err(format!("--set: {e}")))
}

macro_rules! bounded_f64 {
    ($name:ident, $ok:expr, $what:literal) => {
        pub fn $name<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
            let v = f64::deserialize(d)?;
            let ok: fn(f64) -> bool = $ok;
            if v.is_finite() && ok(v) {
                Ok(v)
            } else {
                Err(D::Error::custom(format!("value {v} out of range: {}", $what)))
            }
        }
    };
}

bounded_f64!(de_finite, |_| true, "must be a finite number");
bounded_f64!(de_positive, |v| v > 0.0, "must be > 0");
bounded_f64!(de_non_negative, |v| v >= 0.0, "must be >= 0");
bounded_f64!(de_unit_interval, |v| (0.0..=1.0).contains(&v), "must be in [0, 1]");

/// An integer in an inclusive range.
pub fn de_usize_in<'de, D: Deserializer<'de>>(d: D, lo: usize, hi: usize) -> Result<usize, D::Error> {
    let v = i64::deserialize(d)?;
    if v >= lo as i64 && v <= hi as i64 {
        Ok(v as usize)
    } else {
        Err(D::Error::custom(format!("value {v} out of range: must be an integer in [{lo}, {hi}]")))
    }
}
