//! The layers keep their order: every crate of the workspace depends only on
//! crates below it (read from `cargo metadata`, not from our own manifests'
//! text), io and core sit side by side without knowing each other, and the
//! simulator's truth cannot reach the physics the measurements are checked
//! against. A new crate must be placed in `LAYERS` before this test passes.

use std::collections::BTreeMap;
use std::path::Path;
use std::process::Command;

/// Each workspace crate and its layer (higher may depend on lower, never
/// on equal or higher). Common practice for layered Rust workspaces; the
/// cut is the one in the README's Layout section.
const LAYERS: &[(&str, u32)] = &[
    ("fringeflow-base", 0),
    ("fringeflow-io", 1),
    ("fringeflow-core", 1),
    ("fringeflow-contrast", 2),
    ("fringeflow-simulate", 2),
    ("fringeflow-measure", 3),
    ("fringeflow-report", 4),
    ("fringeflow", 5),
];

/// Package name → names of the workspace crates it depends on (normal and
/// build dependencies; dev-dependencies may reach up for tests only).
fn workspace_deps(manifest: &Path) -> BTreeMap<String, Vec<String>> {
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
    let out = Command::new(cargo)
        .args(["metadata", "--format-version", "1", "--no-deps", "--offline", "--manifest-path"])
        .arg(manifest)
        .output()
        .expect("cargo metadata runs");
    assert!(out.status.success(), "cargo metadata failed: {}", String::from_utf8_lossy(&out.stderr));
    let meta: serde_json::Value = serde_json::from_slice(&out.stdout).expect("cargo metadata prints JSON");
    let mut map = BTreeMap::new();
    for p in meta["packages"].as_array().expect("packages") {
        let deps = p["dependencies"]
            .as_array()
            .expect("dependencies")
            .iter()
            .filter(|d| d["kind"].is_null() || d["kind"] == "build")
            .filter_map(|d| d["name"].as_str())
            .filter(|n| n.starts_with("fringeflow"))
            .map(str::to_string)
            .collect();
        map.insert(p["name"].as_str().expect("name").to_string(), deps);
    }
    map
}

fn layer(name: &str) -> Option<u32> {
    LAYERS.iter().find(|(n, _)| *n == name).map(|(_, l)| *l)
}

#[test]
fn every_dependency_points_down() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let deps = workspace_deps(&root.join("Cargo.toml"));
    let members: Vec<&str> = deps.keys().map(String::as_str).collect();
    let listed: Vec<&str> = {
        let mut v: Vec<&str> = LAYERS.iter().map(|(n, _)| *n).collect();
        v.sort();
        v
    };
    assert_eq!(members, listed, "workspace crates and the layer table differ");
    let mut checked = 0;
    for (krate, on) in &deps {
        let own = layer(krate).unwrap();
        for d in on {
            let theirs = layer(d).unwrap_or_else(|| panic!("{krate} depends on {d}, which has no layer"));
            assert!(theirs < own, "{krate} (layer {own}) depends on {d} (layer {theirs}): a dependency must point down");
            checked += 1;
        }
    }
    // The top crate reaches every layer; a cut that left it with fewer
    // edges would mean crates were merged back.
    assert_eq!(deps["fringeflow"].len(), LAYERS.len() - 1);
    assert!(checked >= 15, "only {checked} edges seen");
}

#[test]
fn io_and_core_stay_apart_and_truth_stays_independent() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let deps = workspace_deps(&root.join("Cargo.toml"));
    assert!(!deps["fringeflow-io"].contains(&"fringeflow-core".to_string()));
    assert!(!deps["fringeflow-core"].contains(&"fringeflow-io".to_string()));
    // The simulator computes its ground truth with its own optics
    // (crates/simulate/src/optics.rs), never with the core's physics.
    let sim = &deps["fringeflow-simulate"];
    assert!(!sim.contains(&"fringeflow-core".to_string()), "simulate depends on core: {sim:?}");
    assert!(!sim.contains(&"fringeflow-contrast".to_string()));
    assert!(!sim.contains(&"fringeflow-measure".to_string()));
}

#[test]
fn python_binding_sits_over_the_libraries() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let deps = workspace_deps(&root.join("python/Cargo.toml"));
    let py = &deps["fringeflow-python"];
    assert!(!py.is_empty(), "the binding depends on no fringeflow crate");
    for d in py {
        assert!(layer(d).is_some(), "python binding depends on {d}, not a workspace crate");
    }
}
