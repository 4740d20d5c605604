//! En face slabs between surfaces: each A-line's rows from a slab's top (a
//! surface or a depth, plus an offset) down to its bottom, and the
//! projection of an image over them (mean, max or sum) into one value per
//! A-line — of the structure (linear intensity, given back in dB) and of
//! every angiography map (its unmasked values).
//!
//! Must agree with: the flat-depth slab of `angiography::slabs` when both
//! edges are depths (test), and a direct sum over the rows (test).

use ndarray::ArrayView2;

use crate::pipeline::config::{SlabEdge, SlabProjection};

/// Rows [start, end) of each A-line between `top` and `bottom` (µm in
/// air): from the first row at or below the top to the last row above the
/// bottom. None where a surface is missing or the slab is empty there.
pub fn rows(top: SlabEdge, bottom: SlabEdge, surfaces_um: &[Vec<f32>], depth_um: &[f64], alines: usize) -> Vec<Option<(usize, usize)>> {
    let n = depth_um.len();
    let first = |z: f64| depth_um.iter().position(|&d| d >= z).unwrap_or(n);
    let at = |edge: SlabEdge, a: usize| -> Option<f64> {
        match edge {
            SlabEdge::Depth(z) => Some(z),
            SlabEdge::Surface(i, offset) => surfaces_um.get(i).map(|s| s[a] as f64 + offset).filter(|z| z.is_finite()),
        }
    };
    (0..alines)
        .map(|a| {
            let (t, b) = (at(top, a)?, at(bottom, a)?);
            let (lo, hi) = (first(t), first(b));
            (hi > lo).then_some((lo, hi))
        })
        .collect()
}

/// Projection of a dB image over each A-line's rows: the mean, max or sum
/// of the linear intensity, in dB (NaN where the A-line has no rows).
pub fn structure(db: ArrayView2<'_, f32>, rows: &[Option<(usize, usize)>], projection: SlabProjection) -> Vec<f32> {
    rows.iter()
        .enumerate()
        .map(|(a, r)| match r {
            None => f32::NAN,
            Some((lo, hi)) => {
                let column = db.slice(ndarray::s![*lo..*hi, a]);
                match projection {
                    SlabProjection::Max => column.iter().copied().fold(f32::NEG_INFINITY, f32::max),
                    _ => {
                        let sum: f64 = column.iter().map(|&d| 10f64.powf(d as f64 / 10.0)).sum();
                        let v = if projection == SlabProjection::Mean { sum / (hi - lo) as f64 } else { sum };
                        (10.0 * v.log10()) as f32
                    }
                }
            }
        })
        .collect()
}

/// Projection of a flow map over each A-line's rows. A masked pixel (NaN:
/// too little signal to measure motion) counts as no flow, zero, so the
/// mean over a slab is not made of the few noisy pixels that pass the
/// threshold in a dark layer (common practice in angiography en face
/// projection); NaN only where the A-line has no rows.
pub fn flow(map: ArrayView2<'_, f32>, rows: &[Option<(usize, usize)>], projection: SlabProjection) -> Vec<f32> {
    rows.iter()
        .enumerate()
        .map(|(a, r)| {
            let Some((lo, hi)) = r else { return f32::NAN };
            let values = map.slice(ndarray::s![*lo..*hi, a]);
            let (mut sum, mut count, mut max) = (0.0f64, 0usize, f32::NAN);
            for &v in values.iter().filter(|v| !v.is_nan()) {
                sum += v as f64;
                count += 1;
                if max.is_nan() || v > max {
                    max = v;
                }
            }
            match projection {
                SlabProjection::Mean => (sum / (hi - lo) as f64) as f32,
                SlabProjection::Sum => sum as f32,
                SlabProjection::Max if count == 0 => 0.0,
                SlabProjection::Max => max,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    #[test]
    fn rows_follow_the_surfaces_and_offsets() {
        let depth: Vec<f64> = (0..50).map(|d| d as f64 * 2.0).collect();
        let surfaces = vec![vec![10.0f32, 11.0, f32::NAN], vec![40.0, 60.0, 50.0]];
        let r = rows(SlabEdge::Surface(0, 4.0), SlabEdge::Surface(1, -2.0), &surfaces, &depth, 3);
        // 14 µm → row 7; 38 µm → row 19 (exclusive); 15 µm → row 8; 58 → 29.
        assert_eq!(r, vec![Some((7, 19)), Some((8, 29)), None]);
        let flat = rows(SlabEdge::Depth(20.0), SlabEdge::Depth(30.0), &surfaces, &depth, 3);
        assert_eq!(flat, vec![Some((10, 15)); 3]);
        assert_eq!(rows(SlabEdge::Surface(1, 0.0), SlabEdge::Surface(0, 0.0), &surfaces, &depth, 3), vec![None; 3]);
    }

    #[test]
    fn projections_over_the_rows() {
        let db = Array2::from_shape_fn((6, 2), |(d, a)| if a == 0 { 10.0 * d as f32 } else { 20.0 });
        let r = vec![Some((1, 3)), Some((0, 6))];
        // Linear intensities 10 and 100: mean 55, sum 110, max 20 dB.
        let mean = structure(db.view(), &r, SlabProjection::Mean);
        assert!((mean[0] as f64 - 10.0 * 55f64.log10()).abs() < 1e-4 && (mean[1] - 20.0).abs() < 1e-5);
        assert!((structure(db.view(), &r, SlabProjection::Sum)[0] as f64 - 10.0 * 110f64.log10()).abs() < 1e-4);
        assert_eq!(structure(db.view(), &r, SlabProjection::Max)[0], 20.0);
        let mut map = Array2::from_shape_fn((6, 2), |(d, _)| d as f32);
        map[[2, 0]] = f32::NAN;
        // A-line 0: rows 1 and 2, row 2 masked (no flow): mean 0.5.
        assert_eq!(flow(map.view(), &r, SlabProjection::Mean), vec![0.5, 2.5]);
        assert_eq!(flow(map.view(), &r, SlabProjection::Sum), vec![1.0, 15.0]);
        assert_eq!(flow(map.view(), &r, SlabProjection::Max), vec![1.0, 5.0]);
        let masked = Array2::from_elem((6, 2), f32::NAN);
        let none = flow(masked.view(), &[None, Some((2, 3))], SlabProjection::Mean);
        assert!(none[0].is_nan() && none[1] == 0.0);
    }
}
