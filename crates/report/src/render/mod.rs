//! Pictures made from numbers: colour maps and images with a colour bar,
//! as RGB bytes for `io::png` to write. No file I/O here.

pub mod colour;
pub mod geometry;
pub mod surfaces;
pub mod viridis;

pub use surfaces::{surface_colour_names, surfaces_over};

use anyhow::{anyhow, Result};
use ndarray::ArrayView2;
use plotters::prelude::*;

/// An RGB image, row-major, 3 bytes a pixel.
pub struct RgbImage {
    pub width: usize,
    pub height: usize,
    pub bytes: Vec<u8>,
}

/// Columns added right of the image for the colour bar and its labels.
pub const COLOUR_BAR_COLUMNS: usize = 96;
const BAR_GAP: usize = 8;
const BAR_WIDTH: usize = 16;

/// A signed image (depth × A-lines) in the cool-warm map over
/// [−limit, +limit] (NaN black), one pixel per value, with a colour bar
/// labelled in `unit` to its right: + at the top, − at the bottom.
pub fn signed_with_colour_bar(values: ArrayView2<'_, f32>, limit: f64, unit: &str) -> Result<RgbImage> {
    let (height, alines) = values.dim();
    let width = alines + COLOUR_BAR_COLUMNS;
    let mut bytes = vec![0u8; width * height * 3];
    let table = colour::cool_warm_table();
    let index = |v: f64| (((v + limit) / (2.0 * limit)) * 255.0).round().clamp(0.0, 255.0) as usize;
    for d in 0..height {
        for a in 0..alines {
            let v = values[[d, a]];
            if !v.is_nan() {
                let c = table[index(v as f64)];
                bytes[(d * width + a) * 3..][..3].copy_from_slice(&c);
            }
        }
        // The bar: row d shows the value at that height, +limit at the top.
        let t = if height > 1 { 1.0 - d as f64 / (height - 1) as f64 } else { 0.5 };
        let c = table[(t * 255.0).round() as usize];
        for x in alines + BAR_GAP..alines + BAR_GAP + BAR_WIDTH {
            bytes[(d * width + x) * 3..][..3].copy_from_slice(&c);
        }
    }
    // Labels: +limit, 0, −limit beside the bar, and the unit.
    {
        let root = BitMapBackend::with_buffer(&mut bytes, (width as u32, height as u32)).into_drawing_area();
        let size = (height as f64 / 14.0).clamp(9.0, 15.0);
        let style = ("sans-serif", size).into_font().color(&WHITE);
        let x = (alines + BAR_GAP + BAR_WIDTH + 4) as i32;
        let h = height as i32;
        let fmt = |v: f64| if v.abs() >= 10.0 { format!("{v:+.0}") } else { format!("{v:+.1}") };
        let err = |e: DrawingAreaErrorKind<_>| anyhow!("drawing the colour bar: {e:?}");
        root.draw(&Text::new(fmt(limit), (x, 0), style.clone())).map_err(err)?;
        root.draw(&Text::new(fmt(-limit), (x, (h - size as i32 - 2).max(0)), style.clone())).map_err(err)?;
        if height as f64 > 4.0 * size {
            root.draw(&Text::new("0".to_string(), (x, h / 2 - size as i32 / 2), style.clone())).map_err(err)?;
            root.draw(&Text::new(unit.to_string(), (x, h / 4), style)).map_err(err)?;
        }
        root.present().map_err(err)?;
    }
    Ok(RgbImage { width, height, bytes })
}

/// A non-negative map (rows × columns, e.g. a thickness map: positions
/// down, A-lines across) in viridis (van der Walt and Smith, matplotlib
/// 2015; its 256-entry table, nearest entry) over [lo, hi], NaN
/// black, each row repeated `row_repeat` times so a few positions still
/// make a picture, with a colour bar labelled in `unit` to its right (hi
/// at the top, lo at the bottom, the middle value between).
pub fn sequential_with_colour_bar(values: ArrayView2<'_, f32>, lo: f64, hi: f64, unit: &str, row_repeat: usize) -> Result<RgbImage> {
    let (rows, cols) = values.dim();
    let repeat = row_repeat.max(1);
    let height = rows * repeat;
    let width = cols + COLOUR_BAR_COLUMNS;
    let mut bytes = vec![0u8; width * height * 3];
    let span = if hi > lo { hi - lo } else { 1.0 };
    let colour = |v: f64| viridis::VIRIDIS[(((v - lo) / span).clamp(0.0, 1.0) * 255.0).round() as usize];
    for y in 0..height {
        let r = y / repeat;
        for a in 0..cols {
            let v = values[[r, a]];
            if !v.is_nan() {
                bytes[(y * width + a) * 3..][..3].copy_from_slice(&colour(v as f64));
            }
        }
        let t = if height > 1 { 1.0 - y as f64 / (height - 1) as f64 } else { 0.5 };
        let c = colour(lo + t * span);
        for x in cols + BAR_GAP..cols + BAR_GAP + BAR_WIDTH {
            bytes[(y * width + x) * 3..][..3].copy_from_slice(&c);
        }
    }
    {
        let root = BitMapBackend::with_buffer(&mut bytes, (width as u32, height as u32)).into_drawing_area();
        let size = (height as f64 / 14.0).clamp(9.0, 15.0);
        let style = ("sans-serif", size).into_font().color(&WHITE);
        let x = (cols + BAR_GAP + BAR_WIDTH + 4) as i32;
        let h = height as i32;
        let fmt = |v: f64| if v.abs() >= 10.0 { format!("{v:.0}") } else { format!("{v:.2}") };
        let err = |e: DrawingAreaErrorKind<_>| anyhow!("drawing the colour bar: {e:?}");
        root.draw(&Text::new(format!("{} {unit}", fmt(lo + span)), (x, 0), style.clone())).map_err(err)?;
        root.draw(&Text::new(fmt(lo), (x, (h - size as i32 - 2).max(0)), style.clone())).map_err(err)?;
        if height as f64 > 4.0 * size {
            root.draw(&Text::new(fmt(lo + span / 2.0), (x, h / 2 - size as i32 / 2), style)).map_err(err)?;
        }
        root.present().map_err(err)?;
    }
    Ok(RgbImage { width, height, bytes })
}
