//! `fringeflow bench`: the throughput report (bare FFT against the
//! pipeline, end to end, contrast, simulator), printed and optionally saved.

use std::io::IsTerminal;
use std::process::ExitCode;

use super::fail;
use crate::cli::BenchArgs;

pub fn command(a: BenchArgs, quiet: bool) -> ExitCode {
    let BenchArgs { capture, work_dir, alines, repeats, no_scaling, no_end_to_end, no_simulator, no_sizes, no_readers, kernel, report: report_path, json } = a;
    if let Some(k) = &kernel {
        match fringeflow::pipeline::kernel::Variant::parse(k) {
            Some(v) if v.supported() => fringeflow::pipeline::kernel::force(Some(v)),
            Some(v) => return fail(2, format!("--kernel {}: this CPU lacks it (it has {})", v.name(), fringeflow::pipeline::kernel::supported().iter().map(|v| v.name()).collect::<Vec<_>>().join(", "))),
            None => return fail(2, format!("--kernel {k}: not a kernel variant (avx512, avx2 or scalar)")),
        }
    }
    if let Some(c) = &capture {
        if !c.is_file() {
            return fail(2, format!("--capture {}: no such file", c.display()));
        }
    }
    let opts = fringeflow::bench::BenchOptions {
        capture,
        work_dir,
        alines,
        repeats,
        scaling: !no_scaling,
        end_to_end: !no_end_to_end,
        simulator: !no_simulator,
        progress: !quiet && std::io::stderr().is_terminal(),
        sizes: !no_sizes,
        readers: !no_readers,
    };
    let report = match fringeflow::bench::run_bench(&opts) {
        Ok(r) => r,
        Err(e) => return fail(1, format!("{e:#}")),
    };
    if json {
        outln!("{}", fringeflow::json_doc::pretty(fringeflow::json_doc::BENCH, &report));
    } else {
        out!("{}", report.render());
    }
    if let Some(path) = report_path {
        let written = fringeflow::io::staging::write_atomically(&path, |tmp| {
            std::fs::write(tmp, serde_json::to_vec_pretty(&report)?)?;
            Ok(())
        });
        if let Err(e) = written {
            return fail(1, format!("{}: {e:#}", path.display()));
        }
    }
    ExitCode::SUCCESS
}
