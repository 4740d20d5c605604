//! The cluster path for real: a single-node Slurm (slurmctld + slurmd from
//! Debian's slurm-wlm, configured under a temp dir, loopback only) runs the
//! script `fringeflow slurm-script` prints, as an array of 4 tasks over 8
//! simulated captures with `sbatch --wait`. Every capture must be processed
//! exactly once and the per-task batch summaries must merge into one.
//! Needs root and slurm-wlm (`make test` installs it).

mod common;
use common::*;
use std::path::{Path, PathBuf};
use std::process::Command;

struct Cluster {
    dir: PathBuf,
    script: PathBuf,
    port: String,
}

impl Cluster {
    fn start(dir: &Path) -> Cluster {
        let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/slurm/single-node.sh");
        let port = (20000 + std::process::id() % 20000).to_string();
        let o = Command::new("bash").arg(&script).arg("start").arg(dir).env("SLURM_TEST_PORT", &port).output().expect("bash runs");
        assert!(
            o.status.success(),
            "Slurm did not start: {}{}",
            String::from_utf8_lossy(&o.stdout),
            String::from_utf8_lossy(&o.stderr)
        );
        Cluster { dir: dir.to_path_buf(), script, port }
    }

    fn conf(&self) -> PathBuf {
        self.dir.join("slurm.conf")
    }
}

impl Drop for Cluster {
    fn drop(&mut self) {
        Command::new("bash").arg(&self.script).arg("stop").arg(&self.dir).env("SLURM_TEST_PORT", &self.port).status().ok();
    }
}

#[test]
fn job_array_processes_every_capture_exactly_once() {
    let work = tempfile::tempdir().unwrap();
    let cluster = Cluster::start(&work.path().join("slurm").tap_create());
    let caps: Vec<PathBuf> = (0..8).map(|i| simulate_scene(work.path(), &format!("arr-{i}"), &small_scene(180.0 + 25.0 * i as f64, 2, 16, 512)).0).collect();
    let list = work.path().join("captures.txt");
    std::fs::write(&list, caps.iter().map(|c| format!("{}\n", c.display())).collect::<String>()).unwrap();
    let pipeline = work.path().join("pipeline.toml");
    std::fs::write(&pipeline, "[window]\nkind = \"hann\"\n").unwrap();
    let out = work.path().join("out");

    let o = Command::new(bin())
        .args(["slurm-script", "--list"])
        .arg(&list)
        .arg("--pipeline")
        .arg(&pipeline)
        .arg("--out")
        .arg(&out)
        .args(["--tasks", "4", "--cpus-per-task", "1", "--mem", "500M", "--time", "00:10:00"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let script = String::from_utf8(o.stdout).unwrap();
    assert!(script.contains("#SBATCH --array=0-3") && script.contains("--resume"), "{script}");
    let job = work.path().join("job.sh");
    std::fs::write(&job, &script).unwrap();

    let o = Command::new("sbatch").arg("--wait").arg(&job).env("SLURM_CONF", cluster.conf()).env("HDF5_USE_FILE_LOCKING", "FALSE").output().unwrap();
    let logs: String = std::fs::read_dir(&out)
        .map(|rd| rd.flatten().filter(|e| e.file_name().to_string_lossy().starts_with("slurm-")).map(|e| std::fs::read_to_string(e.path()).unwrap_or_default()).collect())
        .unwrap_or_default();
    let daemon_log = std::fs::read_to_string(cluster.dir.join("log/slurmctld.log")).unwrap_or_default();
    assert!(
        o.status.success(),
        "sbatch: {}{}\ntask logs: {logs}\nslurmctld: {}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr),
        daemon_log.lines().rev().take(15).collect::<Vec<_>>().join("\n")
    );

    // Each task wrote its own summary; together they hold each capture once, done.
    let mut seen = Vec::new();
    for i in 0..4 {
        let b: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join(format!("batch-{i}-of-4.json"))).expect("one summary per task")).unwrap();
        assert_eq!(b["shard"]["index"], i);
        for c in b["captures"].as_array().unwrap() {
            assert_eq!(c["status"], "done", "{c}");
            seen.push(c["input"].as_str().unwrap().to_string());
        }
    }
    seen.sort();
    let mut expected: Vec<String> = caps.iter().map(|c| c.display().to_string()).collect();
    expected.sort();
    assert_eq!(seen, expected, "every capture exactly once");
    for c in &caps {
        assert!(out.join(c.file_stem().unwrap()).join("log.json").is_file());
    }
    let o = Command::new(bin()).arg("summarize").arg(&out).output().unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{text}{}", String::from_utf8_lossy(&o.stderr));
    assert!(text.contains("8 done, 0 skipped, 0 failed, 0 not run"), "{text}");
    let summary: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["report"]["captures"].as_array().unwrap().len(), 8);
    assert!(summary["problems"].as_array().unwrap().is_empty());
}

trait TapCreate {
    fn tap_create(self) -> Self;
}
impl TapCreate for PathBuf {
    fn tap_create(self) -> Self {
        std::fs::create_dir_all(&self).unwrap();
        self
    }
}
