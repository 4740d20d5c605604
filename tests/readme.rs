//! The README cannot drift: every ```sh block of README.md runs, in order,
//! in a copy of the repository's sample-data, pipelines and examples (a
//! temp dir standing in for the repository root), with the built binary on
//! PATH, and must exit 0; every "Printed here (excerpt)" block must appear,
//! line by line, in what the blocks before it printed. Blocks preceded by
//! `<!-- readme-test: skip (why) -->` are not run (package installs, the
//! build itself).
//!
//! `sbatch` is replaced by a stand-in that runs each task of the script's
//! job array in turn with the environment Slurm sets; tests/slurm.rs runs
//! the same kind of script under a real Slurm.

mod common;
use common::{copy_dir, doc_blocks as blocks};
use std::path::{Path, PathBuf};
use std::process::Command;

fn squeeze(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

const SBATCH_STAND_IN: &str = r#"#!/bin/bash
# Stand-in for sbatch: runs every task of the script's job array in turn.
set -euo pipefail
script="${@: -1}"
range=$(sed -n 's/^#SBATCH --array=//p' "$script")
first=${range%-*}; last=${range#*-}
for ((i = first; i <= last; i++)); do
  SLURM_ARRAY_TASK_ID=$i SLURM_ARRAY_TASK_COUNT=$((last - first + 1)) SLURM_ARRAY_TASK_MIN=$first \
    SLURM_ARRAY_TASK_MAX=$last SLURM_CPUS_PER_TASK=1 bash "$script"
done
echo "Submitted batch job 1"
"#;

#[test]
fn every_readme_command_block_runs_and_prints_what_it_says() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let readme = std::fs::read_to_string(root.join("README.md")).unwrap();
    let all = blocks(&readme);
    let runnable = all.iter().filter(|b| b.kind == "sh" && !b.skip).count();
    assert!(runnable >= 8, "only {runnable} runnable blocks found");

    let dir = tempfile::tempdir().unwrap();
    for d in ["sample-data", "pipelines", "examples"] {
        copy_dir(&root.join(d), &dir.path().join(d));
    }
    let shims = dir.path().join(".shims");
    std::fs::create_dir_all(&shims).unwrap();
    std::fs::write(shims.join("sbatch"), SBATCH_STAND_IN).unwrap();
    use std::os::unix::fs::PermissionsExt;
    std::fs::set_permissions(shims.join("sbatch"), std::fs::Permissions::from_mode(0o755)).unwrap();
    let bin_dir = Path::new(env!("CARGO_BIN_EXE_fringeflow")).parent().unwrap().to_path_buf();
    let path = format!("{}:{}:{}", shims.display(), bin_dir.display(), std::env::var("PATH").unwrap_or_default());

    let mut printed = String::new();
    let mut checked = 0;
    for b in &all {
        if b.kind == "sh" && !b.skip {
            let out = Command::new("bash")
                .args(["-euo", "pipefail", "-c", &b.text])
                .current_dir(dir.path())
                .env("PATH", &path)
                .env("HDF5_USE_FILE_LOCKING", "FALSE")
                .env_remove("SLURM_ARRAY_TASK_ID")
                .env_remove("SLURM_ARRAY_TASK_COUNT")
                .output()
                .unwrap();
            let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
            assert!(out.status.success(), "README.md line {}: the block exited {:?}:\n{}\n--- printed ---\n{text}", b.line, out.status.code(), b.text);
            printed += &text;
        } else if b.kind == "text" && b.printed {
            let seen = squeeze(&printed);
            for line in b.text.lines().filter(|l| !l.trim().is_empty()) {
                assert!(seen.contains(&squeeze(line)), "README.md line {}: the excerpt line\n  {line}\nis not in what the commands printed:\n{printed}", b.line);
                checked += 1;
            }
            printed.clear();
        }
    }
    assert!(checked >= 10, "only {checked} excerpt lines checked");
    // What the blocks say they write is there.
    for f in [
        "out/recon/phantom/bscan-0000.png",
        "out/recon/phantom/volume.h5",
        "out/recon/batch.json",
        "out/hamming/phantom/log.json",
        "out/mirrors/psf.png",
        "out/mirrors/rolloff.png",
        "out/cal/bench-cal.json",
        "out/cal/sweep/contact-sheet.png",
        "out/flow/flow-phantom/volume.h5",
        "out/night/recon/summary.json",
        "out/man/fringeflow.1",
        "out/fringeflow.bash",
        "out/my-pipeline.toml",
    ] {
        assert!(dir.path().join(f).is_file(), "{f} was not written");
    }
    // Nothing was written beside the copied folders but out/ (and the stand-in).
    let mut top: Vec<String> = std::fs::read_dir(dir.path()).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    top.sort();
    assert_eq!(top, [".shims", "examples", "out", "pipelines", "sample-data"]);
}
