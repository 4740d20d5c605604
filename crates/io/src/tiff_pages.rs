//! Captures kept as multi-page TIFF, one frame of spectra per page (8-,
//! 16- or 32-bit integers, 32-bit floats; one sample per pixel): pages read
//! one at a time with the `tiff` crate, which also undoes the compression
//! TIFF allows. Rows are A-lines and columns pixels unless the axis order
//! says the pages are the other way round.

use anyhow::{anyhow, bail, Context, Result};
use ndarray::Array2;
use std::fs::File;
use std::io::BufReader;
use std::path::Path;
use std::sync::Mutex;
use tiff::decoder::{Decoder, DecodingResult};

use crate::capture::RawFrame;

/// A TIFF's pages as frames.
pub struct TiffPages {
    decoder: Mutex<Decoder<BufReader<File>>>,
    pub frames: usize,
    /// Page height and width.
    pub rows: usize,
    pub cols: usize,
    /// Pages hold pixels down and A-lines across.
    pub transposed: bool,
    /// The sample type of the first page, in words (u16, f32, …).
    pub sample: String,
}

/// The TIFF signatures (little- and big-endian, classic and BigTIFF).
pub fn is_tiff(head: &[u8]) -> bool {
    [b"II*\0", b"MM\0*", b"II+\0", b"MM\0+"].iter().any(|s| head.starts_with(*s))
}

impl TiffPages {
    /// Opens `path`, counts its pages and checks that they all have the
    /// first page's size.
    pub fn open(path: &Path, transposed: bool) -> Result<Self> {
        let file = File::open(path).context("cannot open")?;
        let mut dec = Decoder::new(BufReader::new(file)).map_err(|e| anyhow!("not a readable TIFF: {e}"))?;
        let (w, h) = dec.dimensions().map_err(|e| anyhow!("{e}"))?;
        let colour = dec.colortype().map_err(|e| anyhow!("{e}"))?;
        let sample = match colour {
            tiff::ColorType::Gray(bits) => format!("{bits}-bit grey"),
            other => bail!("pages of {other:?}; a spectrum page has one sample per pixel (grey)"),
        };
        let mut frames = 1;
        while dec.more_images() {
            dec.next_image().map_err(|e| anyhow!("page {frames}: {e}"))?;
            let d = dec.dimensions().map_err(|e| anyhow!("page {frames}: {e}"))?;
            if d != (w, h) {
                bail!("page {frames} is {}×{} but page 0 is {w}×{h}; every page must be one frame of the same size", d.0, d.1);
            }
            frames += 1;
        }
        Ok(TiffPages { decoder: Mutex::new(dec), frames, rows: h as usize, cols: w as usize, transposed, sample })
    }

    /// (A-lines, pixels) of a frame.
    pub fn frame_shape(&self) -> (usize, usize) {
        if self.transposed { (self.cols, self.rows) } else { (self.rows, self.cols) }
    }

    /// Page `index` as (A-lines × pixels).
    pub fn read_frame(&self, index: usize) -> Result<RawFrame> {
        let data = {
            let mut dec = self.decoder.lock().map_err(|_| anyhow!("TIFF reader poisoned"))?;
            dec.seek_to_image(index).map_err(|e| anyhow!("page {index}: {e}"))?;
            dec.read_image().map_err(|e| anyhow!("page {index}: {e}"))?
        };
        let shape = (self.rows, self.cols);
        fn arr<T: Clone>(shape: (usize, usize), v: Vec<T>, transposed: bool) -> Array2<T> {
            let a = Array2::from_shape_vec(shape, v).expect("page size");
            if transposed { a.reversed_axes().as_standard_layout().into_owned() } else { a }
        }
        let t = self.transposed;
        Ok(match data {
            DecodingResult::U8(v) => RawFrame::U8(arr(shape, v, t)),
            DecodingResult::U16(v) => RawFrame::U16(arr(shape, v, t)),
            DecodingResult::U32(v) => RawFrame::U32(arr(shape, v, t)),
            DecodingResult::I8(v) => RawFrame::I16(arr(shape, v.into_iter().map(i16::from).collect(), t)),
            DecodingResult::I16(v) => RawFrame::I16(arr(shape, v, t)),
            DecodingResult::I32(v) => RawFrame::F64(arr(shape, v.into_iter().map(f64::from).collect(), t)),
            DecodingResult::F32(v) => RawFrame::F32(arr(shape, v, t)),
            DecodingResult::F64(v) => RawFrame::F64(arr(shape, v, t)),
            _ => bail!("page {index}: sample type not supported (8/16/32-bit integers, 32- or 64-bit floats)"),
        })
    }
}

/// Writes u16 frames as an uncompressed multi-page TIFF, one frame per page
/// (rows are A-lines): what the bench reads back.
pub fn write_u16_pages(path: &Path, frames: &[Array2<u16>]) -> Result<()> {
    let file = std::io::BufWriter::new(File::create(path).with_context(|| format!("creating {}", path.display()))?);
    let mut enc = tiff::encoder::TiffEncoder::new(file).map_err(|e| anyhow!("{e}"))?;
    for f in frames {
        let (a, p) = f.dim();
        let data = f.as_standard_layout();
        enc.write_image::<tiff::encoder::colortype::Gray16>(p as u32, a as u32, data.as_slice().expect("standard layout")).map_err(|e| anyhow!("{e}"))?;
    }
    Ok(())
}
