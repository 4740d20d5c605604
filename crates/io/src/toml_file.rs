//! Reading TOML files (pipelines, scenes) and telling what kind of file a
//! path holds; the text is parsed by [`fringeflow_base::settings`].

use serde::de::DeserializeOwned;
use std::path::Path;

use fringeflow_base::settings::{parse, ConfigError};

/// What a file given on the command line looks like, for errors that say
/// which command takes it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FileKind {
    Hdf5,
    /// A TOML file with the simulator's scene keys.
    Scene,
    /// A TOML file with pipeline sections.
    Pipeline,
    /// A processing log (JSON).
    Log,
    Other,
}

/// The most `sniff` reads: pipelines, scenes and logs are far smaller, so
/// a larger file (or a device that never ends) is only looked at for its
/// signature.
const SNIFF_LIMIT: u64 = 16 << 20;

/// Looks at the first bytes (and for text up to [`SNIFF_LIMIT`], the
/// top-level keys); memory stays bounded whatever the file.
pub fn sniff(path: &Path) -> FileKind {
    use std::io::Read;
    let Ok(file) = std::fs::File::open(path) else { return FileKind::Other };
    let mut bytes = Vec::new();
    if file.take(SNIFF_LIMIT + 1).read_to_end(&mut bytes).is_err() {
        return FileKind::Other;
    }
    if bytes.starts_with(b"\x89HDF\r\n\x1a\n") {
        return FileKind::Hdf5;
    }
    if bytes.len() as u64 > SNIFF_LIMIT {
        return FileKind::Other;
    }
    let Ok(text) = std::str::from_utf8(&bytes) else { return FileKind::Other };
    if text.trim_start().starts_with('{') {
        return match serde_json::from_str::<serde_json::Value>(text) {
            Ok(v) if v.get("pipeline").is_some() && v.get("input").is_some() => FileKind::Log,
            _ => FileKind::Other,
        };
    }
    let Ok(table) = text.parse::<toml::Table>() else { return FileKind::Other };
    const SCENE: [&str; 7] = ["alines", "frames", "background_lines", "source", "spectrometer", "detector", "reflector"];
    const PIPELINE: [&str; 12] = ["input", "background", "k_linearization", "window", "fft", "log_compression", "output", "volume", "shaping", "registration", "doppler", "angiography"];
    if table.keys().any(|k| SCENE.contains(&k.as_str())) {
        FileKind::Scene
    } else if table.keys().any(|k| PIPELINE.contains(&k.as_str())) {
        FileKind::Pipeline
    } else {
        FileKind::Other
    }
}

/// Which command takes a file of this kind (for "wrong file" errors).
pub fn kind_hint(kind: FileKind) -> Option<&'static str> {
    match kind {
        FileKind::Hdf5 => Some("it is an HDF5 capture: give it to `fringeflow run`, `inspect` or `measure` as a capture argument"),
        FileKind::Scene => Some("it is a scene file for the simulator: make a capture from it with `fringeflow simulate SCENE --out capture.h5`"),
        FileKind::Pipeline => Some("it is a pipeline file: give it with --pipeline (-p)"),
        FileKind::Log => Some("it is a processing log: reproduce its output with `fringeflow rerun LOG --out DIR`"),
        FileKind::Other => None,
    }
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

