//! Same capture and pipeline → byte-identical PNG and volume.h5, and a log
//! that differs only in its timing section. Also: the committed sample
//! capture is exactly what the simulator makes from its scene file.

mod common;
use common::*;

#[test]
fn two_runs_give_identical_outputs() {
    let dir = tempfile::tempdir().unwrap();
    let capture = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data/layered-phantom.h5");
    let pipeline = std::fs::read_to_string(std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/default.toml")).unwrap();
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    run_ok(dir.path(), &[&capture], &pipeline, &a);
    run_ok(dir.path(), &[&capture], &pipeline, &b);
    let names = ["bscan-0000.png", "bscan-0001.png", "volume.h5"];
    for name in names {
        let x = std::fs::read(a.join("layered-phantom").join(name)).unwrap();
        let y = std::fs::read(b.join("layered-phantom").join(name)).unwrap();
        assert!(!x.is_empty());
        assert!(x == y, "{name} differs between runs");
    }
    let log = |d: &std::path::Path| -> serde_json::Value {
        let mut v: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("layered-phantom/log.json")).unwrap()).unwrap();
        assert!(v["timing"]["total_seconds"].as_f64().unwrap() > 0.0);
        v.as_object_mut().unwrap().remove("timing");
        v
    };
    let (la, lb) = (log(&a), log(&b));
    assert_eq!(la, lb);
    // The log names everything a rerun needs.
    assert_eq!(la["input_hash"].as_str().unwrap(), fringeflow::io::hash::input_hash(&capture).unwrap());
    assert_eq!(la["pipeline"]["k_linearization"]["method"], "cubic");
    assert_eq!(la["derived"]["background_method"], "recorded");
    assert_eq!(la["frames"].as_array().unwrap().len(), 2);
    // Nothing but the capture's directory, the batch summary and the batch's
    // page is left in the output root (no lock, no staging directory).
    let mut entries: Vec<_> = std::fs::read_dir(&a).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    entries.sort();
    assert_eq!(entries, vec!["batch.json".to_string(), "index.html".to_string(), "layered-phantom".to_string()]);
}

#[test]
fn sample_capture_regenerates_byte_identically_from_its_scene() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let dir = tempfile::tempdir().unwrap();
    let scene = std::fs::read_to_string(root.join("sample-data/layered-phantom.toml")).unwrap();
    let (capture, _) = simulate_scene(dir.path(), "phantom", &scene);
    let fresh = std::fs::read(capture).unwrap();
    let committed = std::fs::read(root.join("sample-data/layered-phantom.h5")).unwrap();
    assert!(fresh == committed, "sample-data/layered-phantom.h5 is stale: run `make sample-data`");
}
