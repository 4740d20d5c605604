//! A wavelength map kept in a file of its own: a NumPy `.npy` vector (also
//! a 1×N or N×1 matrix), or text with one value per line or two columns
//! (pixel, wavelength) separated by a comma, tab or spaces; `#` starts a
//! comment. Values are returned as written (the caller applies the unit),
//! with the file's SHA-256 so a log can name the exact map.

use anyhow::{bail, Context, Result};
use std::path::Path;

use crate::array_file::{dimension_strides, ArrayFile, ByteLayout};
use crate::capture::RawFrame;

/// The map's values, one per pixel, and "sha256:<hex>" of the file.
pub fn read_map_file(path: &Path, pixels: usize) -> Result<(Vec<f64>, String)> {
    let bytes = std::fs::read(path).with_context(|| format!("wavelength file {}", path.display()))?;
    let digest = format!("sha256:{}", crate::hash::sha256_hex(&bytes));
    let values = if bytes.starts_with(crate::array_file::NPY_MAGIC) { npy_vector(path)? } else { text_values(path, &bytes)? };
    if values.len() != pixels {
        bail!("wavelength file {}: {} values, but the fringes have {pixels} pixels", path.display(), values.len());
    }
    Ok((values, digest))
}

/// Background spectra from a file: a `.npy` vector or (spectra × pixels)
/// matrix, or text with one spectrum per row (or a single column); their
/// mean per pixel and "sha256:<hex>" of the file.
pub fn read_background_file(path: &Path, pixels: usize) -> Result<(Vec<f64>, String)> {
    let bytes = std::fs::read(path).with_context(|| format!("background file {}", path.display()))?;
    let digest = format!("sha256:{}", crate::hash::sha256_hex(&bytes));
    let (rows, cols, values) = if bytes.starts_with(crate::array_file::NPY_MAGIC) {
        npy_values_at(path, 0).with_context(|| format!("background file {}", path.display()))?
    } else {
        let text = std::str::from_utf8(&bytes).with_context(|| format!("background file {}: neither .npy nor text", path.display()))?;
        let mut rows = Vec::new();
        for (i, line) in text.lines().enumerate() {
            let line = line.split('#').next().unwrap_or("").trim();
            if line.is_empty() {
                continue;
            }
            let row = line.split(|c: char| c == ',' || c == ';' || c.is_whitespace()).filter(|s| !s.is_empty()).map(|s| s.parse::<f64>().ok().filter(|v| v.is_finite())).collect::<Option<Vec<f64>>>();
            match row {
                Some(r) => rows.push(r),
                None => bail!("background file {} line {}: \"{line}\" holds something that is not a number", path.display(), i + 1),
            }
        }
        // One value per line: a single spectrum written as a column.
        if rows.iter().all(|r| r.len() == 1) {
            rows = vec![rows.into_iter().flatten().collect()];
        }
        let cols = rows.first().map_or(0, Vec::len);
        if rows.iter().any(|r| r.len() != cols) {
            bail!("background file {}: rows of different lengths", path.display());
        }
        (rows.len(), cols, rows.into_iter().flatten().collect())
    };
    if cols != pixels || rows == 0 {
        bail!("background file {}: {rows} spectra of {cols} values, but the fringes have {pixels} pixels", path.display());
    }
    Ok((mean_spectrum(rows, cols, &values), digest))
}

/// A 1-D or 2-D `.npy` array starting `at` bytes into `path`: its (rows,
/// columns) and values, row by row (a vector is one row).
pub fn npy_values_at(path: &Path, at: u64) -> Result<(usize, usize, Vec<f64>)> {
    let h = crate::array_file::read_npy_header_at(path, at)?;
    let (rows, cols) = match h.shape.as_slice() {
        [n] => (1, *n),
        [r, c] => (*r, *c),
        s => bail!("shape {s:?}: expected a vector or a matrix"),
    };
    let strides = dimension_strides(&[rows, cols], h.stored.size, h.fortran_order);
    let layout = ByteLayout { base: h.data_offset, frame: 0, aline: strides[0], pixel: strides[1] };
    let a = ArrayFile::open(path, h.stored, layout, (1, rows, cols))?;
    Ok((rows, cols, as_f64(a.read_frame(0)?)))
}

/// Mean per pixel of (rows × pixels) spectra.
pub fn mean_spectrum(rows: usize, cols: usize, values: &[f64]) -> Vec<f64> {
    (0..cols).map(|p| (0..rows).map(|r| values[r * cols + p]).sum::<f64>() / rows as f64).collect()
}

fn as_f64(frame: RawFrame) -> Vec<f64> {
    match frame {
        RawFrame::U8(v) => v.iter().map(|&x| x as f64).collect(),
        RawFrame::U16(v) => v.iter().map(|&x| x as f64).collect(),
        RawFrame::I16(v) => v.iter().map(|&x| x as f64).collect(),
        RawFrame::U32(v) => v.iter().map(|&x| x as f64).collect(),
        RawFrame::F32(v) => v.iter().map(|&x| x as f64).collect(),
        RawFrame::F64(v) => v.iter().copied().collect(),
    }
}

/// A `.npy` vector, or a matrix with one dimension of 1.
fn npy_vector(path: &Path) -> Result<Vec<f64>> {
    let (rows, cols, values) = npy_values_at(path, 0).with_context(|| format!("wavelength file {}", path.display()))?;
    if rows > 1 && cols > 1 {
        bail!("wavelength file {}: a {rows} × {cols} matrix is not a vector", path.display());
    }
    Ok(values)
}

/// One value per line, or (pixel, value) per line with the pixels in order
/// from 0 or from 1.
fn text_values(path: &Path, bytes: &[u8]) -> Result<Vec<f64>> {
    let text = std::str::from_utf8(bytes).with_context(|| format!("wavelength file {}: neither .npy nor text", path.display()))?;
    let mut values = Vec::new();
    let mut first_pixel = None;
    for (i, line) in text.lines().enumerate() {
        let line = line.split('#').next().unwrap_or("").trim();
        if line.is_empty() {
            continue;
        }
        let fields: Vec<&str> = line.split(|c: char| c == ',' || c == ';' || c.is_whitespace()).filter(|s| !s.is_empty()).collect();
        let number = |s: &str| s.parse::<f64>().ok().filter(|v| v.is_finite());
        let Some(parsed) = fields.iter().map(|s| number(s)).collect::<Option<Vec<f64>>>() else {
            // A header line of column names before any value is skipped.
            if values.is_empty() && first_pixel.is_none() && fields.iter().all(|s| s.parse::<f64>().is_err()) {
                continue;
            }
            bail!("wavelength file {} line {}: \"{line}\" is not a number", path.display(), i + 1);
        };
        match parsed.as_slice() {
            [v] => values.push(*v),
            [p, v] => {
                let start = *first_pixel.get_or_insert(*p);
                if *p != start + values.len() as f64 {
                    bail!("wavelength file {} line {}: pixel {p} out of order (expected {})", path.display(), i + 1, start + values.len() as f64);
                }
                values.push(*v);
            }
            _ => bail!("wavelength file {} line {}: {} columns; give one value, or pixel and value", path.display(), i + 1, parsed.len()),
        }
    }
    if values.is_empty() {
        bail!("wavelength file {}: no values", path.display());
    }
    Ok(values)
}
