//! B-scans at their physical aspect for figures and slides: the grey image
//! resampled so that one screen pixel is the same distance across and down,
//! with a scale bar and a dB colour bar burnt in. The raw-pixel PNGs (one
//! pixel per A-line and depth bin) stay the images for analysis.

use anyhow::{anyhow, Result};
use image::{imageops, GrayImage};
use plotters::prelude::*;

use super::RgbImage;

/// Largest side of a resampled B-scan, pixels.
pub const MAX_SIDE: usize = 4096;
/// Smallest longer side, pixels: small B-scans are enlarged to it.
pub const MIN_SIDE: usize = 800;
/// Columns right of the image for the colour bar and its labels.
const BAR_COLUMNS: usize = 110;
const BAR_GAP: usize = 10;
const BAR_WIDTH: usize = 16;

/// A B-scan drawn at its physical aspect.
pub struct ScaledBscan {
    pub image: RgbImage,
    /// Size of one pixel of the B-scan part, µm (the same across and down).
    pub pixel_um: f64,
    /// Width of the B-scan part (the colour bar is to its right), pixels.
    pub bscan_width: usize,
    pub bscan_height: usize,
    /// The scale bar's length, µm, and where it is drawn (left end x, row y, length in pixels).
    pub scale_bar_um: f64,
    pub scale_bar_px: [usize; 3],
}

/// A round length near a fifth of `span`: 1, 2 or 5 times a power of ten.
fn round_length(span: f64) -> f64 {
    let target = span / 5.0;
    let m = 10f64.powf(target.log10().floor());
    [5.0, 2.0, 1.0].iter().map(|f| f * m).find(|&v| v <= target).unwrap_or(m)
}

/// `grey`: the frame's grey levels (depth × A-lines, 0–255) under `black`
/// to `white` dB; `depth_um`, `aline_um`: the pixel spacings. The pixel of
/// the result is the smaller spacing (neither axis is shrunk), smaller
/// still when the longer side would stay under [`MIN_SIDE`], larger when it
/// would pass [`MAX_SIDE`].
pub fn physical_aspect(grey: &[u8], depth: usize, alines: usize, depth_um: f64, aline_um: f64, black: f64, white: f64) -> Result<ScaledBscan> {
    let (height_um, width_um) = (depth as f64 * depth_um, alines as f64 * aline_um);
    // At least MIN_SIDE pixels on the longer side, so the scale bar is long
    // enough to be read to 2 %.
    let pixel_um = depth_um.min(aline_um).min(height_um.max(width_um) / MIN_SIDE as f64).max(height_um.max(width_um) / MAX_SIDE as f64);
    let (w, h) = (((width_um / pixel_um).round() as usize).max(1), ((height_um / pixel_um).round() as usize).max(1));
    let raw = GrayImage::from_raw(alines as u32, depth as u32, grey.to_vec()).ok_or_else(|| anyhow!("grey image of the wrong size"))?;
    let scaled = imageops::resize(&raw, w as u32, h as u32, imageops::FilterType::Triangle);
    let width = w + BAR_COLUMNS;
    let mut bytes = vec![255u8; width * h * 3];
    for (y, row) in scaled.rows().enumerate() {
        for (x, p) in row.enumerate() {
            bytes[(y * width + x) * 3..][..3].fill(p.0[0]);
        }
        // The colour bar: white (the white level) at the top.
        let g = if h > 1 { (255.0 * (1.0 - y as f64 / (h - 1) as f64)).round() as u8 } else { 128 };
        for x in w + BAR_GAP..w + BAR_GAP + BAR_WIDTH {
            bytes[(y * width + x) * 3..][..3].fill(g);
        }
    }
    // Scale bar: a round length near a fifth of the narrower side, white on
    // a dark outline, in the lower left corner.
    let scale_bar_um = round_length(width_um.min(height_um));
    let bar_px = (scale_bar_um / pixel_um).round() as usize;
    let (bx, by) = (12usize.min(w / 10), h.saturating_sub(14));
    {
        let root = BitMapBackend::with_buffer(&mut bytes, (width as u32, h as u32)).into_drawing_area();
        let err = |e: DrawingAreaErrorKind<_>| anyhow!("drawing the scale and colour bars: {e:?}");
        let size = (h as f64 / 24.0).clamp(10.0, 18.0);
        if bar_px >= 4 && bar_px < w {
            root.draw(&Rectangle::new([(bx as i32 - 1, by as i32 - 3), ((bx + bar_px) as i32 + 1, by as i32 + 3)], BLACK.filled())).map_err(err)?;
            root.draw(&Rectangle::new([(bx as i32, by as i32 - 2), ((bx + bar_px) as i32, by as i32 + 2)], WHITE.filled())).map_err(err)?;
            let label = format!("{} µm", crate::plot::tick(&scale_bar_um));
            root.draw(&Text::new(label, (bx as i32, by as i32 - 6 - size as i32), ("sans-serif", size).into_font().color(&WHITE))).map_err(err)?;
        }
        let x = (w + BAR_GAP + BAR_WIDTH + 4) as i32;
        let style = ("sans-serif", size).into_font().color(&BLACK);
        root.draw(&Text::new(format!("{white:.1} dB"), (x, 3), style.clone())).map_err(err)?;
        root.draw(&Text::new(format!("{black:.1} dB"), (x, (h as i32 - size as i32 - 2).max(0)), style)).map_err(err)?;
        root.present().map_err(err)?;
    }
    Ok(ScaledBscan { image: RgbImage { width, height: h, bytes }, pixel_um, bscan_width: w, bscan_height: h, scale_bar_um, scale_bar_px: [bx, by, bar_px] })
}

#[cfg(test)]
mod tests {
    #[test]
    fn round_lengths() {
        assert_eq!(super::round_length(1000.0), 200.0);
        assert_eq!(super::round_length(2388.0), 200.0);
        assert_eq!(super::round_length(260.0), 50.0);
    }
}
