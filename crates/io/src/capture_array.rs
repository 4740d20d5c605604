//! Opening captures kept as plain arrays: NumPy `.npy` files and headerless
//! raw binary described by `[input]` keys. Both become a [`Capture`] whose
//! frames an [`ArrayFile`] reads; the wavelength map comes from outside the
//! file (a map file, the polynomial, or a calibration), there is no
//! recorded background, and the full scale is the stored integer type's.

use anyhow::{bail, Context, Result};
use std::path::Path;

use crate::array_file::{dimension_strides, read_npy_header, ArrayFile, ByteLayout, StoredKind, StoredType, NPY_MAGIC};
use crate::capture::{wavelength_map, AxisName, Capture, CaptureLayout, FileFormat, SampleType, ScanAttributes, Source};

/// The format a file's first bytes announce: HDF5 (also after a user block
/// of 512, 1024 or 2048 bytes, as MATLAB v7.3 files have), NumPy `.npy`, or
/// raw when `[input]` describes a raw layout; otherwise HDF5, whose opening
/// then says what the file is not.
pub fn detect_format(path: &Path, input: &CaptureLayout) -> Result<FileFormat> {
    use std::io::Read;
    let mut head = Vec::new();
    if let Ok(f) = std::fs::File::open(path) {
        f.take(2056).read_to_end(&mut head).ok();
    }
    const HDF5: &[u8] = b"\x89HDF\r\n\x1a\n";
    if [0usize, 512, 1024, 2048].iter().any(|&o| head.get(o..o + 8) == Some(HDF5)) {
        return Ok(FileFormat::Hdf5);
    }
    if head.starts_with(NPY_MAGIC) {
        return Ok(FileFormat::Npy);
    }
    if crate::tiff_pages::is_tiff(&head) {
        return Ok(FileFormat::Tiff);
    }
    if crate::npz::is_zip(&head) {
        return Ok(FileFormat::Npz);
    }
    if input.raw.sample_type.is_some() {
        return Ok(FileFormat::Raw);
    }
    Ok(FileFormat::Hdf5)
}

/// The type a frame is held in for a stored type (exact for every value).
fn held_type(t: StoredType) -> SampleType {
    match (t.kind, t.size) {
        (StoredKind::Unsigned, 1) => SampleType::U8,
        (StoredKind::Signed, 1) | (StoredKind::Signed, 2) => SampleType::I16,
        (StoredKind::Unsigned, 2) => SampleType::U16,
        (StoredKind::Unsigned, 4) => SampleType::U32,
        (StoredKind::Float, 4) => SampleType::F32,
        _ => SampleType::F64,
    }
}

/// Frames, A-lines and pixels of a stored shape in the named axis order.
fn logical_dims(shape: &[usize], axes: &[AxisName], what: &str) -> Result<(usize, usize, usize)> {
    let dim = |a: AxisName| axes.iter().position(|&x| x == a).map(|i| shape[i]);
    let (frames, alines, pixels) = (dim(AxisName::Frame).unwrap_or(1), dim(AxisName::Aline).unwrap_or(0), dim(AxisName::Pixel).unwrap_or(0));
    if frames == 0 || alines == 0 {
        bail!("{what} is empty (shape {shape:?})");
    }
    if pixels < 16 {
        bail!("{what} has {pixels} pixels per spectrum, expected at least 16 (shape {shape:?}, axes {axes:?}: set input.axes to the order the array is stored in)");
    }
    Ok((frames, alines, pixels))
}

/// The byte stride of each logical axis, from the strides of the stored
/// dimensions (0 for a frame axis the array does not have).
fn axis_strides(strides: &[u64], axes: &[AxisName]) -> (u64, u64, u64) {
    let s = |a: AxisName| axes.iter().position(|&x| x == a).map_or(0, |i| strides[i]);
    (s(AxisName::Frame), s(AxisName::Aline), s(AxisName::Pixel))
}

/// The axis order given, else (frame, A-line, pixel) or (A-line, pixel) by
/// rank.
fn axes_for(input: &CaptureLayout, rank: usize, what: &str) -> Result<Vec<AxisName>> {
    let axes = match (&input.axes, rank) {
        (Some(a), _) => a.clone(),
        (None, 3) => vec![AxisName::Frame, AxisName::Aline, AxisName::Pixel],
        (None, 2) => vec![AxisName::Aline, AxisName::Pixel],
        (None, r) => bail!("{what} has rank {r}, expected 2 (alines, pixels) or 3 (frames, alines, pixels)"),
    };
    if axes.len() != rank {
        bail!("{what} has rank {rank} but input.axes names {} axes", axes.len());
    }
    Ok(axes)
}

/// Everything but the frames' source, shared by both formats.
#[allow(clippy::too_many_arguments)]
fn finish(path: &Path, input: &CaptureLayout, file: ArrayFile, format: FileFormat, detail: String, shape: Vec<usize>, axes: Vec<AxisName>) -> Result<Capture> {
    let (frames, alines, pixels) = (file.frames, file.alines, file.pixels);
    let stored = file.stored;
    finish_with(path, input, Source::Array(file), (held_type(stored), stored.integer_max()), (format, detail), (frames, alines, pixels), shape, axes)
}

/// A capture from a frame source, its held sample type and full scale.
#[allow(clippy::too_many_arguments)]
fn finish_with(path: &Path, input: &CaptureLayout, source: Source, (sample_type, full_scale): (SampleType, Option<f64>), (format, detail): (FileFormat, String), (frames, alines, pixels): (usize, usize, usize), shape: Vec<usize>, axes: Vec<AxisName>) -> Result<Capture> {
    crate::memory::check_fits(&format!("one frame ({alines} A-lines × {pixels} pixels)"), alines as u64 * pixels as u64, 8)?;
    let (wavelength_nm, wavelength_source, dataset_wavelength_nm) = wavelength_map(None, input, pixels, &shape, &axes)?;
    Ok(Capture {
        path: path.to_path_buf(),
        source,
        format,
        format_detail: Some(detail),
        fringes_path: path.file_name().map_or_else(String::new, |n| n.to_string_lossy().into_owned()),
        shape,
        axes,
        sample_type,
        frames,
        alines,
        pixels,
        wavelength_nm,
        wavelength_source,
        dataset_wavelength_nm,
        background: None,
        full_scale,
        scan: ScanAttributes::default(),
        given_by_pipeline: Vec::new(),
        background_file: None,
        sidecar: None,
    })
}

/// A NumPy `.npy` capture: any integer or float sample type, either byte
/// order, C or Fortran order; `input.axes` names the dimensions in the
/// order NumPy shows the shape.
pub fn open_npy(path: &Path, input: &CaptureLayout) -> Result<Capture> {
    let h = read_npy_header(path)?;
    open_npy_array(path, input, h, "NumPy .npy".into())
}

/// A `.npy` array whose header is `h` (a file, or a member of an archive).
fn open_npy_array(path: &Path, input: &CaptureLayout, h: crate::array_file::NpyHeader, what_file: String) -> Result<Capture> {
    let what = format!("the NumPy array of shape {:?}", h.shape);
    let axes = axes_for(input, h.shape.len(), &what)?;
    let dims = logical_dims(&h.shape, &axes, &what)?;
    let strides = dimension_strides(&h.shape, h.stored.size, h.fortran_order);
    let (frame, aline, pixel) = axis_strides(&strides, &axes);
    let file = ArrayFile::open(path, h.stored, ByteLayout { base: h.data_offset, frame, aline, pixel }, dims)?;
    let detail = format!(
        "{what_file}, {} {}-endian, {} order, shape {:?}",
        h.stored.name(),
        if h.stored.big_endian { "big" } else { "little" },
        if h.fortran_order { "Fortran" } else { "C" },
        h.shape
    );
    let format = if what_file.starts_with("NumPy .npz") { FileFormat::Npz } else { FileFormat::Npy };
    finish(path, input, file, format, detail, h.shape, axes)
}

/// An array of an uncompressed NumPy `.npz` archive (`numpy.savez`), read in
/// place: `input.fringes` names the array ("/fringes" → `fringes.npy`); the
/// wavelength map and the background are taken from the arrays named by
/// `input.wavelength` and `input.background` when the archive has them.
pub fn open_npz(path: &Path, input: &CaptureLayout) -> Result<Capture> {
    let members = crate::npz::members(path)?;
    let name = input.fringes.trim_start_matches('/');
    let m = crate::npz::find(&members, name).with_context(|| format!("no array '{name}' in the archive (it holds: {}); name it with input.fringes", crate::npz::names(&members)))?;
    let stored_only = |m: &crate::npz::Member, what: &str| -> Result<()> {
        if m.method != 0 {
            bail!("array '{what}' is compressed (numpy.savez_compressed): fringeflow reads the arrays of an uncompressed .npz (numpy.savez) in place; save with numpy.savez, or the array alone with numpy.save");
        }
        Ok(())
    };
    stored_only(m, name)?;
    let h = crate::array_file::read_npy_header_at(path, m.data_offset).with_context(|| format!("array '{name}'"))?;
    let mut given = input.clone();
    if given.given_map.is_none() {
        if let Some(w) = crate::npz::find(&members, &input.wavelength) {
            let wname = input.wavelength.trim_start_matches('/');
            stored_only(w, wname)?;
            let (rows, cols, values) = crate::map_file::npy_values_at(path, w.data_offset).with_context(|| format!("array '{wname}'"))?;
            if rows > 1 && cols > 1 {
                bail!("array '{wname}' is a {rows} × {cols} matrix, not a wavelength vector");
            }
            given.given_map = Some(crate::capture_layout::GivenMap::Inside { wavelength_nm: values, path: format!("{wname} (in the archive)") });
        }
    }
    let mut capture = open_npy_array(path, &given, h, format!("NumPy .npz array '{name}'"))?;
    if let Some(b) = crate::npz::find(&members, &input.background) {
        let bname = input.background.trim_start_matches('/');
        stored_only(b, bname)?;
        let (rows, cols, values) = crate::map_file::npy_values_at(path, b.data_offset).with_context(|| format!("array '{bname}'"))?;
        if cols != capture.pixels || rows == 0 {
            bail!("array '{bname}' has shape ({rows}, {cols}), expected ({},) or (n, {})", capture.pixels, capture.pixels);
        }
        capture.background = Some(crate::map_file::mean_spectrum(rows, cols, &values));
    }
    Ok(capture)
}

/// A headerless raw capture as `[input]` describes it: sample type and byte
/// order, pixels and A-lines per frame, the frame count (else as many as
/// the file holds), bytes before the data, before every frame and before
/// every A-line; `input.axes` the storage order from slowest to fastest.
pub fn open_raw(path: &Path, input: &CaptureLayout) -> Result<Capture> {
    let r = &input.raw;
    let missing: Vec<&str> = [("sample_type", r.sample_type.is_none()), ("pixels", r.pixels.is_none()), ("alines_per_frame", r.alines_per_frame.is_none())].iter().filter(|(_, m)| *m).map(|(k, _)| *k).collect();
    if !missing.is_empty() {
        bail!("a raw capture needs input.{} (and optionally byte_order, frames and the header sizes)", missing.join(", input."));
    }
    let name = r.sample_type.as_deref().unwrap_or_default();
    let stored = StoredType::parse(name, r.big_endian).with_context(|| format!("input.sample_type = \"{name}\": not a sample type"))?;
    let (pixels, alines) = (r.pixels.unwrap_or(0), r.alines_per_frame.unwrap_or(0));
    if pixels < 16 || alines == 0 {
        bail!("input.pixels = {pixels} and input.alines_per_frame = {alines}: need at least 16 pixels and 1 A-line");
    }
    let axes = input.axes.clone().unwrap_or_else(|| vec![AxisName::Frame, AxisName::Aline, AxisName::Pixel]);
    if axes.len() != 3 {
        bail!("input.axes names {} axes; a raw capture is stored as three (frame, aline, pixel in the order of storage, slowest first)", axes.len());
    }
    let size = stored.size as u64;
    let natural = axes == [AxisName::Frame, AxisName::Aline, AxisName::Pixel];
    if r.aline_header_bytes > 0 && !natural {
        bail!("input.aline_header_bytes needs the A-lines stored whole, one after another (axes = [\"frame\", \"aline\", \"pixel\"])");
    }
    if r.frame_header_bytes > 0 && axes[0] != AxisName::Frame {
        bail!("input.frame_header_bytes needs the frames stored one after another (axes starting with \"frame\")");
    }
    let aline_bytes = r.aline_header_bytes + pixels as u64 * size;
    let frame_bytes = r.frame_header_bytes + alines as u64 * aline_bytes;
    let len = std::fs::metadata(path).context("cannot read")?.len();
    if r.file_header_bytes > len {
        bail!("input.file_header_bytes = {} but the file has only {len} bytes", r.file_header_bytes);
    }
    let data = len - r.file_header_bytes;
    let whole = data / frame_bytes;
    let frames = match r.frames {
        Some(n) => n,
        None => {
            if whole == 0 || !data.is_multiple_of(frame_bytes) {
                bail!(
                    "{len} bytes do not hold whole frames of {frame_bytes} bytes after a {}-byte header ({whole} frames and {} bytes over); check pixels, alines_per_frame, sample_type and the header sizes",
                    r.file_header_bytes,
                    data % frame_bytes
                );
            }
            whole as usize
        }
    };
    let needed = r.file_header_bytes + frames as u64 * frame_bytes;
    if needed != len {
        let (how, by) = if needed > len { ("short by", needed - len) } else { ("longer by", len - needed) };
        bail!("the description ({frames} frames of {frame_bytes} bytes after a {}-byte header) needs {needed} bytes; the file has {len}, {how} {by} bytes; it would hold {whole} whole frames", r.file_header_bytes);
    }
    let layout = if natural {
        ByteLayout { base: r.file_header_bytes + r.frame_header_bytes + r.aline_header_bytes, frame: frame_bytes, aline: aline_bytes, pixel: size }
    } else {
        let shape: Vec<usize> = axes.iter().map(|a| match a {
            AxisName::Frame => frames,
            AxisName::Aline => alines,
            AxisName::Pixel => pixels,
        }).collect();
        let strides = dimension_strides(&shape, stored.size, false);
        let (mut frame, aline, pixel) = axis_strides(&strides, &axes);
        if axes[0] == AxisName::Frame {
            frame = frame_bytes;
        }
        ByteLayout { base: r.file_header_bytes + r.frame_header_bytes, frame, aline, pixel }
    };
    let file = ArrayFile::open(path, stored, layout, (frames, alines, pixels))?;
    let shape: Vec<usize> = axes.iter().map(|a| match a {
        AxisName::Frame => frames,
        AxisName::Aline => alines,
        AxisName::Pixel => pixels,
    }).collect();
    let detail = format!(
        "raw binary, {} {}-endian, {frames} frames × {alines} A-lines × {pixels} pixels; headers: file {} B, frame {} B, A-line {} B",
        stored.name(),
        if stored.big_endian { "big" } else { "little" },
        r.file_header_bytes,
        r.frame_header_bytes,
        r.aline_header_bytes
    );
    finish(path, input, file, FileFormat::Raw, detail, shape, axes)
}

/// A multi-page TIFF, one frame per page: rows are A-lines and columns
/// pixels, or the other way round with `axes = ["frame", "pixel", "aline"]`.
pub fn open_tiff(path: &Path, input: &CaptureLayout) -> Result<Capture> {
    let transposed = match input.axes.as_deref() {
        None => false,
        Some([AxisName::Frame, AxisName::Aline, AxisName::Pixel]) => false,
        Some([AxisName::Frame, AxisName::Pixel, AxisName::Aline]) => true,
        Some(other) => bail!("input.axes = {other:?}: a TIFF holds one frame per page, so the axes are [\"frame\", \"aline\", \"pixel\"] (rows are A-lines) or [\"frame\", \"pixel\", \"aline\"] (rows are pixels)"),
    };
    let pages = crate::tiff_pages::TiffPages::open(path, transposed)?;
    let (alines, pixels) = pages.frame_shape();
    let frames = pages.frames;
    let shape = vec![frames, pages.rows, pages.cols];
    let axes = if transposed { vec![AxisName::Frame, AxisName::Pixel, AxisName::Aline] } else { vec![AxisName::Frame, AxisName::Aline, AxisName::Pixel] };
    logical_dims(&shape, &axes, &format!("the TIFF of {frames} pages of {}×{}", pages.cols, pages.rows))?;
    // The held type from the first page.
    let first = pages.read_frame(0).context("reading page 0")?;
    let sample_type = match first {
        crate::capture::RawFrame::U8(_) => SampleType::U8,
        crate::capture::RawFrame::U16(_) => SampleType::U16,
        crate::capture::RawFrame::I16(_) => SampleType::I16,
        crate::capture::RawFrame::U32(_) => SampleType::U32,
        crate::capture::RawFrame::F32(_) => SampleType::F32,
        crate::capture::RawFrame::F64(_) => SampleType::F64,
    };
    let detail = format!("multi-page TIFF, {} pages of {} × {} ({}), {}", frames, pages.cols, pages.rows, pages.sample, if transposed { "rows are pixels" } else { "rows are A-lines" });
    finish_with(path, input, Source::Tiff(pages), (sample_type, sample_type.integer_max()), (FileFormat::Tiff, detail), (frames, alines, pixels), shape, axes)
}
