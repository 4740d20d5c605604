//! Reading TOML files (pipelines, scenes) with errors that name the file,
//! the key and its line, on one line.
//!
//! Range checks run inside deserialisation (the `de_*` helpers), so the TOML
//! parser attaches the offending value's position to the message.

use serde::de::{DeserializeOwned, Deserializer, Error as _};
use serde::Deserialize;
use std::path::Path;

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

/// Parses `text` (read from `file`) into `T`, turning TOML and range errors
/// into a one-line [`ConfigError`].
pub fn parse<T: DeserializeOwned>(file: &str, text: &str) -> Result<T, ConfigError> {
    toml::from_str(text).map_err(|e| ConfigError {
        file: file.to_string(),
        line: e.span().map(|s| line_of(text, s.start)),
        message: e.message().trim().replace('\n', " "),
    })
}

/// Reads a text file: (its name for messages, its text).
pub fn read_text(path: &Path) -> Result<(String, String), ConfigError> {
    let file = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|e| ConfigError { file: file.clone(), line: None, message: format!("cannot read: {e}") })?;
    Ok((file, text))
}

/// Reads and parses a TOML file.
pub fn read<T: DeserializeOwned>(path: &Path) -> Result<(T, String), ConfigError> {
    let (file, text) = read_text(path)?;
    Ok((parse(&file, &text)?, text))
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
