//! docs/bring-your-own-data.md cannot drift: every ```sh block of it runs,
//! in order, in a temp dir holding a copy of sample-data, with the built
//! binary on PATH, and must exit 0. The page's last block compares every
//! recipe's volume with the HDF5 original's (h5py, an independent reader);
//! this test also checks that it printed one line per recipe.

mod common;
use common::{copy_dir, doc_blocks};
use std::path::{Path, PathBuf};
use std::process::Command;

#[test]
fn every_recipe_runs_and_gives_the_original_volume() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let page = std::fs::read_to_string(root.join("docs/bring-your-own-data.md")).unwrap();
    let blocks: Vec<_> = doc_blocks(&page).into_iter().filter(|b| b.kind == "sh" && !b.skip).collect();
    assert!(blocks.len() >= 6, "only {} runnable blocks", blocks.len());
    let dir = tempfile::tempdir().unwrap();
    copy_dir(&root.join("sample-data"), &dir.path().join("sample-data"));
    let bin_dir = Path::new(env!("CARGO_BIN_EXE_fringeflow")).parent().unwrap().to_path_buf();
    let path = format!("{}:{}", bin_dir.display(), std::env::var("PATH").unwrap_or_default());
    let mut last = String::new();
    for b in &blocks {
        let out = Command::new("bash").args(["-euo", "pipefail", "-c", &b.text]).current_dir(dir.path()).env("PATH", &path).env("HDF5_USE_FILE_LOCKING", "FALSE").output().unwrap();
        last = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
        assert!(out.status.success(), "docs/bring-your-own-data.md line {}: exited {:?}:\n{}\n--- printed ---\n{last}", b.line, out.status.code(), b.text);
    }
    for recipe in ["npy/scan", "raw/dump", "mat/export", "tiff/stack"] {
        assert!(last.contains(&format!("{recipe} identical to the HDF5 original")), "{recipe}: {last}");
    }
}
