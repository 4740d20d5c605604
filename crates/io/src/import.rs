//! Writing any readable capture as a fringeflow HDF5 capture (`fringeflow
//! import`): `/fringes` (frames, A-lines, pixels) in the type the frames are
//! held in, chunked one frame per chunk and optionally deflate-compressed
//! (lossless, with the byte shuffle), `/wavelength_nm` in nm, `/background`
//! when the capture has one (its mean spectrum), the scan facts and full
//! scale as attributes of `/fringes`, and on the root the source file, its
//! digest, its format and the import settings. Frames are copied one at a
//! time; the file appears only when complete.

use anyhow::{Context, Result};
use hdf5::H5Type;
use ndarray::Array2;
use std::path::Path;

use crate::capture::{Capture, RawFrame};
use crate::h5::{concise, create_file, write_1d, write_attr, write_attr_str};
use crate::staging::write_atomically;

/// How the copy is stored.
#[derive(Debug, Clone, Copy, Default)]
pub struct ImportOptions {
    /// Deflate level 1–9; None: uncompressed.
    pub deflate: Option<u8>,
}

/// What was written.
#[derive(Debug, Clone, serde::Serialize)]
pub struct ImportSummary {
    pub frames: usize,
    pub alines: usize,
    pub pixels: usize,
    pub bytes: u64,
}

fn frame_dataset<T: H5Type>(file: &hdf5::File, shape: [usize; 3], options: ImportOptions) -> Result<hdf5::Dataset> {
    let mut b = file.new_dataset::<T>().shape(shape).chunk([1, shape[1], shape[2]]);
    if let Some(level) = options.deflate {
        b = b.shuffle().deflate(level);
    }
    b.create("fringes").map_err(concise).context("creating /fringes")
}

fn write_frame<T: H5Type>(ds: &hdf5::Dataset, index: usize, frame: &Array2<T>) -> Result<()> {
    ds.write_slice(frame, (index, .., ..)).map_err(concise).with_context(|| format!("writing frame {index}"))
}

/// Copies `capture` into a new HDF5 capture at `out`; `provenance` are
/// (name, value) string attributes for the root (source, digest, settings).
pub fn import(capture: &Capture, out: &Path, options: ImportOptions, provenance: &[(&str, String)]) -> Result<ImportSummary> {
    let shape = [capture.frames, capture.alines, capture.pixels];
    write_atomically(out, |tmp| {
        let file = create_file(tmp)?;
        let first = capture.read_raw_frame(0)?.0;
        let ds = match &first {
            RawFrame::U8(_) => frame_dataset::<u8>(&file, shape, options)?,
            RawFrame::U16(_) => frame_dataset::<u16>(&file, shape, options)?,
            RawFrame::I16(_) => frame_dataset::<i16>(&file, shape, options)?,
            RawFrame::U32(_) => frame_dataset::<u32>(&file, shape, options)?,
            RawFrame::F32(_) => frame_dataset::<f32>(&file, shape, options)?,
            RawFrame::F64(_) => frame_dataset::<f64>(&file, shape, options)?,
        };
        for f in 0..capture.frames {
            if fringeflow_base::interrupt::requested() {
                anyhow::bail!("stopped");
            }
            let raw = if f == 0 { first.clone() } else { capture.read_raw_frame(f)?.0 };
            match &raw {
                RawFrame::U8(a) => write_frame(&ds, f, a)?,
                RawFrame::U16(a) => write_frame(&ds, f, a)?,
                RawFrame::I16(a) => write_frame(&ds, f, a)?,
                RawFrame::U32(a) => write_frame(&ds, f, a)?,
                RawFrame::F32(a) => write_frame(&ds, f, a)?,
                RawFrame::F64(a) => write_frame(&ds, f, a)?,
            }
        }
        write_attr_str(&ds, "axes", "frame,aline,pixel")?;
        write_attr_str(&ds, "units", "detector counts")?;
        if let Some(fs) = capture.full_scale {
            write_attr(&ds, "full_scale", fs)?;
        }
        let s = &capture.scan;
        for (name, v) in [
            ("aline_period_us", s.aline_period_us),
            ("frame_period_us", s.frame_period_us),
            ("aline_spacing_um", s.aline_spacing_um),
            ("frame_spacing_um", s.frame_spacing_um),
            ("repeats_per_position", s.repeats_per_position),
        ] {
            if let Some(v) = v {
                write_attr(&ds, name, v)?;
            }
        }
        write_1d(&file, "wavelength_nm", &capture.wavelength_nm)?;
        if let Some(b) = &capture.background {
            write_1d(&file, "background", b)?;
        }
        for (name, value) in provenance {
            write_attr_str(&file, name, value)?;
        }
        file.close().map_err(concise)?;
        Ok(())
    })?;
    let bytes = std::fs::metadata(out).map(|m| m.len()).unwrap_or(0);
    Ok(ImportSummary { frames: capture.frames, alines: capture.alines, pixels: capture.pixels, bytes })
}
