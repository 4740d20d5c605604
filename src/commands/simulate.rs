//! `fringeflow simulate`: a capture and its ground truth from a scene file.

use std::path::Path;
use std::io::IsTerminal;
use std::process::ExitCode;

use super::fail;
use crate::cli::SimulateArgs;

pub fn command(a: SimulateArgs, quiet: bool) -> ExitCode {
    simulate(&a.scene, &a.out, a.json, quiet)
}

fn simulate(scene_path: &Path, out: &Path, json: bool, quiet: bool) -> ExitCode {
    use fringeflow::io::toml_file::{kind_hint, sniff, FileKind};
    if let (FileKind::Hdf5, Some(hint)) = (sniff(scene_path), kind_hint(FileKind::Hdf5)) {
        return fail(2, format!("{}: not a scene file: {hint}", scene_path.display()));
    }
    if let Ok(text) = std::fs::read_to_string(scene_path) {
        for notice in fringeflow::simulate::scene::Scene::deprecations(&scene_path.display().to_string(), &text) {
            fringeflow::output::warn(&notice);
        }
    }
    let scene = match fringeflow::simulate::scene::Scene::from_file(scene_path) {
        Ok(s) => s,
        Err(e) => return fail(2, e),
    };
    if out.is_dir() {
        return fail(2, format!("--out {}: is a folder; give the capture file to write, e.g. {}", out.display(), out.join("capture.h5").display()));
    }
    let started = std::time::Instant::now();
    let bar = (!quiet && std::io::stderr().is_terminal()).then(|| {
        let b = indicatif::ProgressBar::new(scene.frames as u64);
        b.set_style(indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} frames simulated, {elapsed} elapsed, about {eta} left").unwrap());
        b
    });
    let result = fringeflow::simulate::simulate_with_progress(&scene, out, &|done| {
        if let Some(b) = &bar {
            b.set_position(done as u64);
        }
    });
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    match result {
        Ok(_) => {
            let truth = fringeflow::simulate::truth_path(out);
            if json {
                outln!(
                    "{}",
                    fringeflow::json_doc::line(fringeflow::json_doc::SIMULATE, &serde_json::json!({
                        "scene": scene_path.display().to_string(),
                        "capture": out.display().to_string(),
                        "truth": truth.display().to_string(),
                        "frames": scene.frames,
                        "alines": scene.alines,
                        "pixels": scene.spectrometer.pixels,
                        "seconds": started.elapsed().as_secs_f64(),
                    }))
                );
            } else if !quiet {
                errln!("wrote {} and {} ({:.1} s)", out.display(), truth.display(), started.elapsed().as_secs_f64());
            }
            ExitCode::SUCCESS
        }
        Err(e) => fail(1, format!("{e:#}")),
    }
}
