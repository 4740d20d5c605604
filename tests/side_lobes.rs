//! Window side lobes on a flat-topped spectrum against Harris 1978
//! (Proc. IEEE 66:51, Table 1): rectangular −13.3 dB, Hann −31.5 dB,
//! Hamming −42.7 dB, Blackman −58.1 dB; each within 1 dB.

mod common;
use common::*;
use fringeflow::analysis::{highest_side_lobe_db, peak};

#[test]
fn highest_side_lobe_per_window_matches_harris_1978() {
    let dir = tempfile::tempdir().unwrap();
    // Flat spectrum over the whole band, linear-in-λ map, shallow mirror so the
    // cubic resampling error stays far below −58 dB.
    let scene = mirror_scene(200.0, "").replace("nonlinearity_nm = [3.0, -1.0]", "").replace(
        "[source]\ncentre_nm = 840.0\nfwhm_nm = 50.0",
        "[source]\nshape = \"flat\"\ncentre_nm = 840.0\nfwhm_nm = 50.0",
    );
    assert!(scene.contains("\"flat\""));
    let (capture, _) = simulate_scene(dir.path(), "flat", &scene);
    for (window, harris_db) in [("none", -13.3), ("hann", -31.5), ("hamming", -42.7), ("blackman", -58.1)] {
        let out = dir.path().join(window);
        run_ok(dir.path(), &[&capture], &format!("[window]\nkind = \"{window}\"\n[fft]\nzero_padding = 16\n"), &out);
        let v = read_volume(&out.join("flat/volume.h5"));
        let a = v.amplitude(0, 0);
        let (i, _) = peak(&a, 16, a.len());
        // Look within ±12 unpadded bins of the peak.
        let lobe = highest_side_lobe_db(&a, i, 12 * 16).expect("side lobes found");
        eprintln!("{window}: highest side lobe {lobe:.2} dB (Harris {harris_db} dB)");
        assert!((lobe - harris_db).abs() <= 1.0, "{window}: {lobe} vs {harris_db}");
    }
}
