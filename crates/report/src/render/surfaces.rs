//! Layer surfaces drawn over a grey B-scan: each surface a one-pixel line
//! in its own colour, joined across neighbouring A-lines, gaps where an
//! A-line has no surface. The colours are our own choice: distinct hues of
//! similar lightness, readable over grey (common practice).

/// Colours of the surfaces, top first (repeating after the last), with
/// the names the image's description gives them.
pub const SURFACE_COLOURS: [([u8; 3], &str); 6] = [
    ([255, 64, 48], "red"),
    ([40, 180, 255], "blue"),
    ([255, 214, 0], "yellow"),
    ([60, 220, 90], "green"),
    ([235, 90, 235], "magenta"),
    ([255, 150, 30], "orange"),
];

/// "label: colour" for each surface, top first.
pub fn surface_colour_names(labels: &[String]) -> String {
    labels.iter().enumerate().map(|(i, l)| format!("{l} {}", SURFACE_COLOURS[i % SURFACE_COLOURS.len()].1)).collect::<Vec<_>>().join(", ")
}

/// RGB bytes (A-lines across, depth down) of the grey image `grey`
/// (depth × A-lines, row-major) with each surface of `surfaces_um`
/// ([surface][A-line], µm; NaN: none) drawn at row (d − depth0) / step.
pub fn surfaces_over(grey: &[u8], depth: usize, alines: usize, surfaces_um: &[Vec<f32>], depth0_um: f64, step_um: f64) -> Vec<u8> {
    let mut rgb: Vec<u8> = grey.iter().flat_map(|&g| [g, g, g]).collect();
    let row = |d: f32| -> Option<usize> {
        let r = ((d as f64 - depth0_um) / step_um).round();
        (d.is_finite() && r >= 0.0 && (r as usize) < depth).then_some(r as usize)
    };
    for (i, surface) in surfaces_um.iter().enumerate() {
        let colour = SURFACE_COLOURS[i % SURFACE_COLOURS.len()].0;
        for a in 0..alines.min(surface.len()) {
            let Some(z) = row(surface[a]) else { continue };
            // Joined to the previous A-line's point by a vertical run.
            let (lo, hi) = match a.checked_sub(1).and_then(|b| row(surface[b])) {
                Some(prev) if prev.abs_diff(z) > 1 => (z.min(prev) + 1, z.max(prev) - 1),
                _ => (z, z),
            };
            for r in lo.min(z)..=hi.max(z) {
                let at = (r * alines + a) * 3;
                rgb[at..at + 3].copy_from_slice(&colour);
            }
        }
    }
    rgb
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_surface_is_drawn_at_its_row_and_the_rest_stays_grey() {
        let grey = vec![100u8; 10 * 4];
        let rgb = surfaces_over(&grey, 10, 4, &[vec![2.0, 2.0, f32::NAN, 8.0]], 0.0, 1.0);
        assert_eq!(&rgb[(2 * 4) * 3..(2 * 4) * 3 + 3], &[255, 64, 48]);
        assert_eq!(&rgb[(2 * 4 + 2) * 3..(2 * 4 + 2) * 3 + 3], &[100, 100, 100]);
        assert_eq!(&rgb[(8 * 4 + 3) * 3..(8 * 4 + 3) * 3 + 3], &[255, 64, 48]);
        assert_eq!(&rgb[(5 * 4) * 3..(5 * 4) * 3 + 3], &[100, 100, 100]);
    }
}
