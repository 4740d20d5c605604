//! SHA-256 of files and byte strings, for the processing log.

use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::Path;

/// The input hash as every file fringeflow writes names it (`input_hash`):
/// the algorithm, a colon, the hex digest.
pub fn input_hash(path: &Path) -> std::io::Result<String> {
    sha256_file(path).map(|h| format!("sha256:{h}"))
}

/// Whether `recorded` (an `input_hash`, or the bare hex SHA-256 of logs
/// before it) names the digest `hash` (an `input_hash`).
pub fn same_input(recorded: &str, hash: &str) -> bool {
    recorded == hash || hash.strip_prefix("sha256:") == Some(recorded)
}

pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// SHA-256 of a file. The file is memory-mapped a window at a time, so its
/// pages go from the page cache to the hash without a copy (a quarter of the
/// input-side kernel time of `run`), and resident memory grows by one window
/// only; files that cannot be mapped are streamed.
pub fn sha256_file(path: &Path) -> std::io::Result<String> {
    /// 16 MiB: a multiple of any page size.
    const WINDOW: u64 = 1 << 24;
    let file = std::fs::File::open(path)?;
    let len = file.metadata()?.len();
    let mut hasher = Sha256::new();
    let mut offset = 0u64;
    while offset < len {
        let n = (len - offset).min(WINDOW) as usize;
        // SAFETY: the map is read only and dropped before the next window.
        // Inputs are never written by fringeflow; a file changed by another
        // program while it is hashed gives a wrong digest, as a read would.
        let map = match unsafe { memmap2::MmapOptions::new().offset(offset).len(n).map(&file) } {
            Ok(m) => m,
            Err(_) if offset == 0 => return sha256_stream(file),
            Err(e) => return Err(e),
        };
        let _ = map.advise(memmap2::Advice::Sequential);
        // In 1 MiB pieces, so that each is hashed while it is in cache.
        for piece in map.chunks(1 << 20) {
            hasher.update(piece);
        }
        offset += n as u64;
    }
    if len == 0 {
        return sha256_stream(file);
    }
    Ok(hex(&hasher.finalize()))
}

/// Streams a file through SHA-256 without loading it whole.
fn sha256_stream(mut file: std::fs::File) -> std::io::Result<String> {
    let mut hasher = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let n = file.read(&mut buf)?;
        if n == 0 {
            break;
        }
        hasher.update(&buf[..n]);
    }
    Ok(hex(&hasher.finalize()))
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
    fn known_digest() {
        // FIPS 180-2 example: SHA-256("abc").
        assert_eq!(
            super::sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
