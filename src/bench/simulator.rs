//! The simulator timed on the sample scene: vectorised kernels against the
//! standard library functions on one thread.

use anyhow::Result;
use std::time::Instant;

use super::*;

/// The simulator on the sample scene, vectorised kernels against the
/// standard library's functions.
pub(super) fn time_simulator(opts: &BenchOptions) -> Result<SimulatorPoint> {
    const SAMPLE: &str = include_str!("../../sample-data/layered-phantom.toml");
    let scene = crate::simulate::scene::Scene::from_str("sample-data/layered-phantom.toml", SAMPLE).map_err(|e| anyhow::anyhow!("{e}"))?;
    std::fs::create_dir_all(&opts.work_dir)?;
    let path = opts.work_dir.join("simulator-bench.h5");
    let time = |standard: bool| -> Result<f64> {
        crate::simulate::use_standard_library_math(standard);
        let t = Instant::now();
        crate::simulate::simulate(&scene, &path)?;
        Ok(t.elapsed().as_secs_f64())
    };
    // Warm the page cache and the allocator once, untimed, so the first
    // timed run does not pay for them alone.
    time(false)?;
    let fast = median(vec![time(false)?, time(false)?, time(false)?]);
    let plain = time(true);
    let serial = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .map_err(|e| anyhow::anyhow!("{e}"))
        .and_then(|pool| pool.install(|| time(true)));
    crate::simulate::use_standard_library_math(false);
    let plain = plain?;
    let serial = serial?;
    std::fs::remove_file(&path).ok();
    std::fs::remove_file(crate::simulate::truth_path(&path)).ok();
    Ok(SimulatorPoint { scene: "sample-data/layered-phantom.toml".into(), alines: scene.frames * scene.alines, vectorised_seconds: fast, standard_library_seconds: plain, speed_up: plain / fast,
        threads: rayon::current_num_threads(),
        serial_scalar_seconds: serial,
        speed_up_over_serial_scalar: serial / fast,
    })
}
