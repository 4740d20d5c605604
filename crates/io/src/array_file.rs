//! Captures kept as a plain array in a file (NumPy `.npy`, headerless raw
//! binary): the sample type with its byte order, where each sample of the
//! logical (frame, A-line, pixel) grid sits in the file (a base offset and a
//! byte stride per axis, headers included), and frames read one at a time.
//!
//! Rows of pixels that lie contiguously are read with positioned reads
//! (`pread`), so memory does not grow with the file; other layouts (a
//! Fortran-order array whose frame axis is not the slowest) gather through a
//! read-only memory map. The file is never written.

use anyhow::{bail, Context, Result};
use ndarray::Array2;
use std::fs::File;
use std::os::unix::fs::FileExt;
use std::path::Path;

use crate::capture::RawFrame;

/// A sample type as a file stores it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StoredKind {
    Unsigned,
    Signed,
    Float,
}

/// Sample type and byte order of an array in a file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct StoredType {
    pub kind: StoredKind,
    /// Bytes per sample: 1, 2, 4 or 8.
    pub size: usize,
    pub big_endian: bool,
}

impl StoredType {
    /// From a short name: u8, i8, u16, i16, u32, i32, u64, i64, f32, f64.
    pub fn parse(name: &str, big_endian: bool) -> Option<Self> {
        let (kind, bits) = match name.as_bytes().first()? {
            b'u' => (StoredKind::Unsigned, &name[1..]),
            b'i' => (StoredKind::Signed, &name[1..]),
            b'f' => (StoredKind::Float, &name[1..]),
            _ => return None,
        };
        let size = match (kind, bits) {
            (StoredKind::Float, "32") => 4,
            (StoredKind::Float, "64") => 8,
            (StoredKind::Float, _) => return None,
            (_, "8") => 1,
            (_, "16") => 2,
            (_, "32") => 4,
            (_, "64") => 8,
            _ => return None,
        };
        Some(StoredType { kind, size, big_endian })
    }

    /// The short name (u16, f32, …).
    pub fn name(&self) -> String {
        let k = match self.kind {
            StoredKind::Unsigned => 'u',
            StoredKind::Signed => 'i',
            StoredKind::Float => 'f',
        };
        format!("{k}{}", self.size * 8)
    }

    /// Largest value of an integer type (its saturation level).
    pub fn integer_max(&self) -> Option<f64> {
        match (self.kind, self.size) {
            (StoredKind::Float, _) => None,
            (StoredKind::Unsigned, n) => Some(2f64.powi(8 * n as i32) - 1.0),
            (StoredKind::Signed, n) => Some(2f64.powi(8 * n as i32 - 1) - 1.0),
        }
    }
}

/// Where sample (f, a, p) sits: `base + f·frame + a·aline + p·pixel` bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ByteLayout {
    pub base: u64,
    pub frame: u64,
    pub aline: u64,
    pub pixel: u64,
}

/// An array of spectra in a file, read frame by frame.
pub struct ArrayFile {
    file: File,
    map: Option<memmap2::Mmap>,
    pub stored: StoredType,
    pub layout: ByteLayout,
    pub frames: usize,
    pub alines: usize,
    pub pixels: usize,
}

impl ArrayFile {
    /// Opens `path` read-only; checks that every sample lies inside it.
    pub fn open(path: &Path, stored: StoredType, layout: ByteLayout, (frames, alines, pixels): (usize, usize, usize)) -> Result<Self> {
        let file = File::open(path).context("cannot open")?;
        let len = file.metadata()?.len();
        let last = layout.base as u128
            + (frames.max(1) - 1) as u128 * layout.frame as u128
            + (alines.max(1) - 1) as u128 * layout.aline as u128
            + (pixels.max(1) - 1) as u128 * layout.pixel as u128
            + stored.size as u128;
        if last > len as u128 {
            bail!("the described array ends at byte {last} but the file has {len} bytes");
        }
        let contiguous_rows = layout.pixel == stored.size as u64;
        // Rows not contiguous: gather through a read-only map.
        let map = if contiguous_rows { None } else { Some(unsafe { memmap2::Mmap::map(&file) }.context("cannot map")?) };
        Ok(ArrayFile { file, map, stored, layout, frames, alines, pixels })
    }

    /// Frame `index` as (A-lines × pixels) in a type that holds the stored
    /// values exactly: u8, u16, i16 (also for i8), u32, f32, or f64 (for
    /// i32, u64, i64 and f64).
    pub fn read_frame(&self, index: usize) -> Result<RawFrame> {
        let l = self.layout;
        let size = self.stored.size;
        let row = self.pixels * size;
        let whole = l.pixel == size as u64 && (self.alines == 1 || l.aline == row as u64);
        // A frame stored whole, in a type held as is: one positioned read
        // straight into the frame's samples.
        if whole && self.map.is_none() {
            let at = l.base + index as u64 * l.frame;
            if let Some(frame) = self.read_direct(at)? {
                return Ok(frame);
            }
        }
        let n = self.alines * self.pixels;
        let mut bytes = vec![0u8; n * size];
        for a in 0..self.alines {
            let at = l.base + index as u64 * l.frame + a as u64 * l.aline;
            let dst = &mut bytes[a * row..(a + 1) * row];
            match &self.map {
                None => self.file.read_exact_at(dst, at).with_context(|| format!("reading frame {index}, A-line {a}"))?,
                Some(map) => {
                    for (p, d) in dst.chunks_exact_mut(size).enumerate() {
                        let o = (at + p as u64 * l.pixel) as usize;
                        d.copy_from_slice(&map[o..o + size]);
                    }
                }
            }
        }
        Ok(decode(&bytes, self.stored, (self.alines, self.pixels)))
    }

    /// The frame at byte `at` read into typed samples without a copy, for
    /// the types held as stored (u8, u16, i16, u32, f32, f64; byte order
    /// swapped in place when it is not this machine's); None for the others.
    fn read_direct(&self, at: u64) -> Result<Option<RawFrame>> {
        let shape = (self.alines, self.pixels);
        let n = shape.0 * shape.1;
        let big = self.stored.big_endian;
        macro_rules! direct {
            ($t:ty, $variant:ident) => {{
                let mut v: Vec<$t> = vec![<$t>::default(); n];
                // SAFETY: a plain-number slice viewed as its bytes (no
                // padding, every bit pattern valid for these types).
                let bytes = unsafe { std::slice::from_raw_parts_mut(v.as_mut_ptr() as *mut u8, n * std::mem::size_of::<$t>()) };
                self.file.read_exact_at(bytes, at).context("reading a frame")?;
                if big != cfg!(target_endian = "big") {
                    for x in v.iter_mut() {
                        *x = <$t>::from_bits(x.to_bits().swap_bytes());
                    }
                }
                Some(RawFrame::$variant(Array2::from_shape_vec(shape, v).expect("frame shape")))
            }};
        }
        use StoredKind::*;
        Ok(match (self.stored.kind, self.stored.size) {
            (Unsigned, 1) => direct!(u8, U8),
            (Unsigned, 2) => direct!(u16, U16),
            (Signed, 2) => direct!(i16, I16),
            (Unsigned, 4) => direct!(u32, U32),
            (Float, 4) => direct!(f32, F32),
            (Float, 8) => direct!(f64, F64),
            _ => None,
        })
    }
}

/// Integers and floats as their bits, for swapping the byte order.
trait Bits: Copy {
    type B;
    fn to_bits(self) -> Self::B;
    fn from_bits(b: Self::B) -> Self;
}
macro_rules! bits_int {
    ($($t:ty),*) => {$(impl Bits for $t { type B = $t; fn to_bits(self) -> $t { self } fn from_bits(b: $t) -> $t { b } })*};
}
bits_int!(u8, u16, i16, u32);
impl Bits for f32 {
    type B = u32;
    fn to_bits(self) -> u32 {
        f32::to_bits(self)
    }
    fn from_bits(b: u32) -> f32 {
        f32::from_bits(b)
    }
}
impl Bits for f64 {
    type B = u64;
    fn to_bits(self) -> u64 {
        f64::to_bits(self)
    }
    fn from_bits(b: u64) -> f64 {
        f64::from_bits(b)
    }
}

/// Typed samples from stored bytes.
fn decode(bytes: &[u8], t: StoredType, shape: (usize, usize)) -> RawFrame {
    macro_rules! take {
        ($ty:ty, $n:expr) => {
            bytes.chunks_exact($n).map(|c| {
                let a: [u8; $n] = c.try_into().expect("sample size");
                if t.big_endian { <$ty>::from_be_bytes(a) } else { <$ty>::from_le_bytes(a) }
            })
        };
    }
    fn arr<T>(shape: (usize, usize), v: Vec<T>) -> Array2<T> {
        Array2::from_shape_vec(shape, v).expect("frame shape")
    }
    use StoredKind::*;
    match (t.kind, t.size) {
        (Unsigned, 1) => RawFrame::U8(arr(shape, bytes.to_vec())),
        (Signed, 1) => RawFrame::I16(arr(shape, bytes.iter().map(|&b| b as i8 as i16).collect())),
        (Unsigned, 2) => RawFrame::U16(arr(shape, take!(u16, 2).collect())),
        (Signed, 2) => RawFrame::I16(arr(shape, take!(i16, 2).collect())),
        (Unsigned, 4) => RawFrame::U32(arr(shape, take!(u32, 4).collect())),
        (Signed, 4) => RawFrame::F64(arr(shape, take!(i32, 4).map(|v| v as f64).collect())),
        (Float, 4) => RawFrame::F32(arr(shape, take!(f32, 4).collect())),
        (Unsigned, 8) => RawFrame::F64(arr(shape, take!(u64, 8).map(|v| v as f64).collect())),
        (Signed, 8) => RawFrame::F64(arr(shape, take!(i64, 8).map(|v| v as f64).collect())),
        _ => RawFrame::F64(arr(shape, take!(f64, 8).collect())),
    }
}

/// A NumPy `.npy` header: sample type, order, shape and where the data begin
/// (format versions 1.0, 2.0 and 3.0; NumPy's own description of the format,
/// `numpy.lib.format`).
#[derive(Debug, Clone, PartialEq)]
pub struct NpyHeader {
    pub stored: StoredType,
    pub fortran_order: bool,
    pub shape: Vec<usize>,
    pub data_offset: u64,
}

/// The `.npy` signature.
pub const NPY_MAGIC: &[u8] = b"\x93NUMPY";

/// Reads and checks the header of a `.npy` file.
pub fn read_npy_header(path: &Path) -> Result<NpyHeader> {
    read_npy_header_at(path, 0)
}

/// The same for a `.npy` that starts `at` bytes into the file (an array of
/// an uncompressed `.npz`).
pub fn read_npy_header_at(path: &Path, at: u64) -> Result<NpyHeader> {
    let file = File::open(path).context("cannot open")?;
    let mut head = [0u8; 12];
    file.read_exact_at(&mut head[..10], at).context("too short for a .npy array")?;
    if &head[..6] != NPY_MAGIC {
        bail!("not a NumPy .npy file (no \\x93NUMPY signature)");
    }
    let (len, start) = match head[6] {
        1 => (u16::from_le_bytes([head[8], head[9]]) as usize, 10usize),
        2 | 3 => {
            file.read_exact_at(&mut head[10..12], at + 10)?;
            (u32::from_le_bytes([head[8], head[9], head[10], head[11]]) as usize, 12usize)
        }
        v => bail!(".npy format version {v} is not one fringeflow reads (1, 2 or 3)"),
    };
    if len > 1 << 20 {
        bail!(".npy header of {len} bytes is implausible");
    }
    let mut text = vec![0u8; len];
    file.read_exact_at(&mut text, at + start as u64).context("the .npy header is cut short")?;
    let text = String::from_utf8_lossy(&text).into_owned();
    parse_npy_dict(&text, at + (start + len) as u64).with_context(|| format!(".npy header {}", text.trim()))
}

/// The header dictionary: {'descr': '<u2', 'fortran_order': False, 'shape': (4, 64, 1024), }
fn parse_npy_dict(text: &str, data_offset: u64) -> Result<NpyHeader> {
    let value_of = |key: &str| -> Result<&str> {
        let k = format!("'{key}'");
        let at = text.find(&k).with_context(|| format!("has no {k}"))?;
        let rest = text[at + k.len()..].trim_start();
        let rest = rest.strip_prefix(':').with_context(|| format!("{k} has no value"))?;
        Ok(rest.trim_start())
    };
    let descr = value_of("descr")?;
    let quote = descr.chars().next().filter(|c| *c == '\'' || *c == '"').context("'descr' is not a simple type string (structured arrays are not spectra)")?;
    let descr = &descr[1..descr[1..].find(quote).context("unterminated 'descr'")? + 1];
    let (order, code) = descr.split_at(1);
    let big_endian = match order {
        "<" | "|" | "=" => false,
        ">" => true,
        _ => bail!("'descr' {descr}: unknown byte order"),
    };
    let (kind, size) = (code.as_bytes().first().copied().unwrap_or(b'?'), code[1..].parse::<usize>().unwrap_or(0));
    let name = match kind {
        b'u' => format!("u{}", size * 8),
        b'i' => format!("i{}", size * 8),
        b'f' => format!("f{}", size * 8),
        b'b' if size == 1 => "u8".into(),
        _ => bail!("'descr' {descr}: sample type not supported (unsigned or signed integers of 1–8 bytes, 4- or 8-byte floats)"),
    };
    let stored = StoredType::parse(&name, big_endian).with_context(|| format!("'descr' {descr}: sample type not supported (unsigned or signed integers of 1–8 bytes, 4- or 8-byte floats)"))?;
    let fortran = value_of("fortran_order")?;
    let fortran_order = if fortran.starts_with("True") {
        true
    } else if fortran.starts_with("False") {
        false
    } else {
        bail!("'fortran_order' is neither True nor False")
    };
    let shape_text = value_of("shape")?;
    let inner = shape_text.strip_prefix('(').and_then(|s| s.split(')').next()).context("'shape' is not a tuple")?;
    let shape = inner.split(',').map(str::trim).filter(|s| !s.is_empty()).map(|s| s.trim_end_matches('L').parse::<usize>()).collect::<Result<Vec<_>, _>>().context("'shape' holds a non-integer")?;
    Ok(NpyHeader { stored, fortran_order, shape, data_offset })
}

/// Byte strides of each stored dimension of an array in C or Fortran order.
pub fn dimension_strides(shape: &[usize], size: usize, fortran_order: bool) -> Vec<u64> {
    let mut strides = vec![0u64; shape.len()];
    let mut s = size as u64;
    let order: Vec<usize> = if fortran_order { (0..shape.len()).collect() } else { (0..shape.len()).rev().collect() };
    for d in order {
        strides[d] = s;
        s *= shape[d] as u64;
    }
    strides
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn npy_dictionary_as_numpy_writes_it() {
        // Header text as numpy.save writes it (NumPy's format description).
        let h = parse_npy_dict("{'descr': '>u2', 'fortran_order': True, 'shape': (3, 64, 1024), }   \n", 128).unwrap();
        assert_eq!(h.stored, StoredType { kind: StoredKind::Unsigned, size: 2, big_endian: true });
        assert!(h.fortran_order);
        assert_eq!(h.shape, vec![3, 64, 1024]);
        let h = parse_npy_dict("{'descr': '<f8', 'fortran_order': False, 'shape': (1024,), }", 128).unwrap();
        assert_eq!((h.stored.kind, h.stored.size, h.shape.clone()), (StoredKind::Float, 8, vec![1024]));
        assert!(parse_npy_dict("{'descr': [('a', '<u2')], 'fortran_order': False, 'shape': (3,), }", 128).is_err());
        assert!(parse_npy_dict("{'descr': '<c8', 'fortran_order': False, 'shape': (3,), }", 128).is_err());
    }

    #[test]
    fn strides_of_c_and_fortran_order() {
        assert_eq!(dimension_strides(&[2, 3, 4], 2, false), vec![24, 8, 2]);
        assert_eq!(dimension_strides(&[2, 3, 4], 2, true), vec![2, 4, 12]);
    }

    #[test]
    fn stored_type_names_and_saturation() {
        for n in ["u8", "i8", "u16", "i16", "u32", "i32", "u64", "i64", "f32", "f64"] {
            assert_eq!(StoredType::parse(n, false).unwrap().name(), n);
        }
        assert!(StoredType::parse("f16", false).is_none());
        assert_eq!(StoredType::parse("u16", false).unwrap().integer_max(), Some(65535.0));
        assert_eq!(StoredType::parse("i8", false).unwrap().integer_max(), Some(127.0));
    }
}
