//! The arrays of a NumPy `.npz` archive (a ZIP of `.npy` files, as
//! `numpy.savez` writes it): the central directory read, each member's name,
//! compression and where its bytes start, so that an uncompressed member is
//! read in place like a `.npy` file (ZIP file format after PKWARE's
//! APPNOTE.TXT, including the ZIP64 records NumPy writes for large arrays).

use anyhow::{bail, Context, Result};
use std::fs::File;
use std::os::unix::fs::FileExt;
use std::path::Path;

/// One member of the archive.
#[derive(Debug, Clone, PartialEq)]
pub struct Member {
    pub name: String,
    /// 0: stored; anything else is compressed.
    pub method: u16,
    /// Where the member's bytes start in the archive.
    pub data_offset: u64,
    pub size: u64,
}

/// The ZIP signature.
pub fn is_zip(head: &[u8]) -> bool {
    head.starts_with(b"PK\x03\x04")
}

fn u16_at(b: &[u8], o: usize) -> u16 {
    u16::from_le_bytes([b[o], b[o + 1]])
}
fn u32_at(b: &[u8], o: usize) -> u32 {
    u32::from_le_bytes(b[o..o + 4].try_into().expect("4 bytes"))
}
fn u64_at(b: &[u8], o: usize) -> u64 {
    u64::from_le_bytes(b[o..o + 8].try_into().expect("8 bytes"))
}

/// The members of the archive at `path`.
pub fn members(path: &Path) -> Result<Vec<Member>> {
    let file = File::open(path).context("cannot open")?;
    let len = file.metadata()?.len();
    // The end-of-central-directory record: within the last 64 KiB + 22 bytes.
    let tail_len = len.min(65_557);
    let mut tail = vec![0u8; tail_len as usize];
    file.read_exact_at(&mut tail, len - tail_len)?;
    let eocd = (0..tail.len().saturating_sub(21)).rev().find(|&i| u32_at(&tail, i) == 0x0605_4b50).context("not a ZIP archive (no end-of-central-directory record)")?;
    let mut entries = u16_at(&tail, eocd + 10) as u64;
    let mut dir_size = u32_at(&tail, eocd + 12) as u64;
    let mut dir_offset = u32_at(&tail, eocd + 16) as u64;
    if entries == 0xFFFF || dir_offset == 0xFFFF_FFFF {
        // ZIP64: the locator just before points at the ZIP64 record.
        let loc = eocd.checked_sub(20).filter(|&l| u32_at(&tail, l) == 0x0706_4b50).context("ZIP64 archive without its locator")?;
        let at = u64_at(&tail, loc + 8);
        let mut rec = [0u8; 56];
        file.read_exact_at(&mut rec, at)?;
        if u32_at(&rec, 0) != 0x0606_4b50 {
            bail!("damaged ZIP64 end-of-central-directory record");
        }
        entries = u64_at(&rec, 32);
        dir_size = u64_at(&rec, 40);
        dir_offset = u64_at(&rec, 48);
    }
    if dir_size > 64 << 20 || dir_offset + dir_size > len {
        bail!("implausible ZIP central directory ({dir_size} bytes at {dir_offset})");
    }
    let mut dir = vec![0u8; dir_size as usize];
    file.read_exact_at(&mut dir, dir_offset)?;
    let mut out = Vec::new();
    let mut o = 0usize;
    for _ in 0..entries {
        if o + 46 > dir.len() || u32_at(&dir, o) != 0x0201_4b50 {
            bail!("damaged ZIP central directory");
        }
        let method = u16_at(&dir, o + 10);
        let mut size = u32_at(&dir, o + 24) as u64;
        let mut compressed = u32_at(&dir, o + 20) as u64;
        let (name_len, extra_len, comment_len) = (u16_at(&dir, o + 28) as usize, u16_at(&dir, o + 30) as usize, u16_at(&dir, o + 32) as usize);
        let mut local = u32_at(&dir, o + 42) as u64;
        let name = String::from_utf8_lossy(dir.get(o + 46..o + 46 + name_len).context("damaged ZIP entry")?).into_owned();
        // ZIP64 extended information: the fields that were 0xFFFFFFFF, in order.
        let extra = dir.get(o + 46 + name_len..o + 46 + name_len + extra_len).context("damaged ZIP entry")?;
        let mut e = 0;
        while e + 4 <= extra.len() {
            let (id, n) = (u16_at(extra, e), u16_at(extra, e + 2) as usize);
            if id == 1 {
                let mut f = e + 4;
                for slot in [&mut size, &mut compressed, &mut local] {
                    if *slot == 0xFFFF_FFFF && f + 8 <= e + 4 + n {
                        *slot = u64_at(extra, f);
                        f += 8;
                    }
                }
            }
            e += 4 + n;
        }
        let mut lh = [0u8; 30];
        file.read_exact_at(&mut lh, local)?;
        if u32_at(&lh, 0) != 0x0403_4b50 {
            bail!("damaged ZIP local header of {name}");
        }
        let data_offset = local + 30 + u16_at(&lh, 26) as u64 + u16_at(&lh, 28) as u64;
        out.push(Member { name, method, data_offset, size: compressed });
        o += 46 + name_len + extra_len + comment_len;
    }
    Ok(out)
}

/// The member holding the array `name` ("fringes" or "/fringes" →
/// "fringes.npy"), or None.
pub fn find<'a>(members: &'a [Member], name: &str) -> Option<&'a Member> {
    let want = format!("{}.npy", name.trim_start_matches('/'));
    members.iter().find(|m| m.name == want)
}

/// The members' array names, for messages.
pub fn names(members: &[Member]) -> String {
    members.iter().map(|m| m.name.trim_end_matches(".npy")).collect::<Vec<_>>().join(", ")
}
