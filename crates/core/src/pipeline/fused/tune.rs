//! The kernel variant of a fused plan, chosen by measurement: when no
//! variant is forced, every variant the CPU runs is planned for the actual
//! pipeline (same pixels, k samples, FFT length, depth, interpolation and
//! background method) and timed briefly on a synthetic frame of that shape;
//! the fastest is kept (a lower variant must win by more than
//! [`MARGIN`] to displace a higher one, so timing noise does not flip it).
//! The choice is cached per CPU model, fringeflow version and plan shape,
//! in memory for the process and in a small JSON file in the user's cache
//! folder, so a shape is measured once per machine.
//!
//! `FRINGEFLOW_TUNING` switches it: `off` plans the best variant the CPU
//! has without timing anything and touches no file; `remeasure` times again
//! and rewrites the cached entry; unset (or `cache`) uses the cache. The
//! folder is `$FRINGEFLOW_CACHE_DIR`, else `$XDG_CACHE_HOME/fringeflow`,
//! else `~/.cache/fringeflow`. A cache that cannot be read or written is
//! ignored (the plan is measured instead). Forcing a variant
//! (`FRINGEFLOW_KERNEL`, `bench --kernel`) skips all of this.
//!
//! Every variant computes the same reconstruction within the fast path's
//! tolerance (tests), so the choice changes speed only; log.json records
//! which variant ran and why, and `rerun` forces the logged one.

use std::collections::{BTreeMap, HashMap};
use std::path::PathBuf;
use std::sync::Mutex;
use std::time::Instant;

use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::{FusedPlan, FusedTimer, Reference};
use crate::pipeline::kernel::{self, Variant};

/// The environment variable that switches the measurement.
pub const ENV: &str = "FRINGEFLOW_TUNING";
/// The environment variable naming the cache folder.
pub const CACHE_DIR_ENV: &str = "FRINGEFLOW_CACHE_DIR";
/// The cache file's name inside the cache folder.
pub const CACHE_FILE: &str = "kernel-choice.json";
/// A lower variant replaces a higher one only when this much faster (5 %).
pub const MARGIN: f64 = 1.05;
/// A-lines of the synthetic timing frame (16 blocks of 16).
const TIMING_ALINES: usize = 256;
/// Timed repeats per variant (the fastest counts), after one warm-up.
const REPEATS: usize = 5;

/// How a plan's variant was chosen (recorded in log.json).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Choice {
    /// "measured", "cached", "forced by FRINGEFLOW_KERNEL", "forced in this
    /// process" or "tuning off".
    pub source: String,
    /// The measured rate of each variant (A-lines per second on the timing
    /// frame), when measured or cached.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub alines_per_second: BTreeMap<Variant, f64>,
    /// The cache entry's key (CPU model, version, plan shape).
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub key: String,
}

impl Choice {
    fn plain(source: &str) -> Self {
        Choice { source: source.to_string(), alines_per_second: BTreeMap::new(), key: String::new() }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Mode {
    Off,
    Cache,
    Remeasure,
}

fn mode() -> Result<Mode, String> {
    match std::env::var(ENV) {
        Err(_) => Ok(Mode::Cache),
        Ok(v) => match v.trim().to_ascii_lowercase().as_str() {
            "" | "cache" | "on" => Ok(Mode::Cache),
            "off" => Ok(Mode::Off),
            "remeasure" => Ok(Mode::Remeasure),
            _ => Err(format!("{ENV}={v}: not a tuning mode (cache, remeasure or off)")),
        },
    }
}

/// Checks `FRINGEFLOW_TUNING` (for a clear error before any work).
pub fn check_env() -> Result<(), String> {
    mode().map(|_| ())
}

/// The cache file, if a cache folder can be named.
pub fn cache_path() -> Option<PathBuf> {
    let non_empty = |k: &str| std::env::var_os(k).filter(|v| !v.is_empty()).map(PathBuf::from);
    let dir = non_empty(CACHE_DIR_ENV)
        .or_else(|| non_empty("XDG_CACHE_HOME").map(|d| d.join("fringeflow")))
        .or_else(|| non_empty("HOME").map(|d| d.join(".cache").join("fringeflow")))?;
    Some(dir.join(CACHE_FILE))
}

/// The CPU's model: its name and family/model/stepping numbers (from
/// /proc/cpuinfo on Linux; virtual machines often give a bare name).
pub fn cpu_model() -> String {
    let info = std::fs::read_to_string("/proc/cpuinfo").unwrap_or_default();
    let field = |name: &str| info.lines().find(|l| l.split(':').next().is_some_and(|k| k.trim() == name)).and_then(|l| l.split_once(':')).map(|(_, v)| v.trim().to_string());
    match field("model name") {
        Some(n) => format!("{n} (family {} model {} stepping {})", field("cpu family").unwrap_or_default(), field("model").unwrap_or_default(), field("stepping").unwrap_or_default()),
        None => format!("unknown {} CPU", std::env::consts::ARCH),
    }
}

/// The cache key of a plan: CPU model, the variants it runs, fringeflow's
/// version and the plan's shape.
fn key(fused: &FusedPlan) -> String {
    let background = match fused.reference {
        Reference::None => "none",
        Reference::Fixed(_) => "fixed",
        Reference::Mean => "mean",
        Reference::Median => "median",
    };
    let variants: Vec<&str> = kernel::supported().iter().map(|v| v.name()).collect();
    format!(
        "{} [{}] fringeflow {} | pixels {} k {} fft {} depth {} {} background {}",
        cpu_model(),
        variants.join(","),
        env!("CARGO_PKG_VERSION"),
        fused.pixels,
        fused.k_samples,
        fused.fft_length,
        fused.depth,
        if fused.cubic { "cubic" } else { "linear" },
        background
    )
}

/// The cache file's contents.
#[derive(Debug, Default, Serialize, Deserialize)]
struct CacheFile {
    #[serde(default)]
    note: String,
    #[serde(default)]
    choices: std::collections::BTreeMap<String, CachedChoice>,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
struct CachedChoice {
    variant: Variant,
    alines_per_second: BTreeMap<Variant, f64>,
}

fn read_cache(path: &std::path::Path) -> CacheFile {
    std::fs::read(path).ok().and_then(|b| serde_json::from_slice(&b).ok()).unwrap_or_default()
}

/// Adds one entry (read, merge, write to a temporary file, rename: a
/// concurrent writer can at worst drop another's entry, which is then
/// measured again).
fn write_cache(path: &std::path::Path, key: &str, entry: &CachedChoice) {
    let Some(dir) = path.parent() else { return };
    if std::fs::create_dir_all(dir).is_err() {
        return;
    }
    let mut file = read_cache(path);
    file.note = "fringeflow's measured choice of kernel variant per CPU, version and plan shape; safe to delete (FRINGEFLOW_TUNING=off stops its use)".into();
    file.choices.insert(key.to_string(), entry.clone());
    let Ok(bytes) = serde_json::to_vec_pretty(&file) else { return };
    let tmp = dir.join(format!(".{CACHE_FILE}.{}.tmp", std::process::id()));
    if std::fs::write(&tmp, bytes).is_ok() && std::fs::rename(&tmp, path).is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
}

/// Choices made in this process, by key.
static MEMORY: Mutex<Option<HashMap<String, CachedChoice>>> = Mutex::new(None);

fn remembered(key: &str) -> Option<CachedChoice> {
    MEMORY.lock().unwrap_or_else(|e| e.into_inner()).as_ref().and_then(|m| m.get(key).cloned())
}

fn remember(key: &str, entry: &CachedChoice) {
    MEMORY.lock().unwrap_or_else(|e| e.into_inner()).get_or_insert_with(HashMap::new).insert(key.to_string(), entry.clone());
}

/// A frame of the plan's shape: a smooth spectrum with a few fringes and
/// pseudo-random noise, as u16 (the usual line-camera type).
fn timing_frame(pixels: usize) -> Array2<u16> {
    let mut state = 0x9E37_79B9_7F4A_7C15u64;
    let frame = Array2::from_shape_fn((TIMING_ALINES, pixels), |(a, p)| {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        let x = p as f64 / pixels as f64;
        let envelope = 1800.0 * (-((x - 0.5) / 0.25).powi(2)).exp();
        let fringe = 120.0 * (2.0 * std::f64::consts::PI * (60.0 + (a % 7) as f64 * 40.0) * x).cos();
        (300.0 + envelope + fringe + (state % 41) as f64) as u16
    });
    frame
}

/// The fastest of REPEATS runs of `fused` on `frame`, as A-lines per second.
fn time_plan(fused: &FusedPlan, frame: &Array2<u16>, image: &mut Array2<f32>) -> f64 {
    let timer = FusedTimer::default();
    fused.process_raw_image(super::Samples::U16(frame.view()), image, &timer);
    let mut best = f64::INFINITY;
    for _ in 0..REPEATS {
        let t = Instant::now();
        fused.process_raw_image(super::Samples::U16(frame.view()), image, &timer);
        best = best.min(t.elapsed().as_secs_f64());
    }
    // The timing frame leaves no state behind (the median's hint).
    *fused.median_hint.lock().unwrap_or_else(|e| e.into_inner()) = Default::default();
    TIMING_ALINES as f64 / best.max(1e-9)
}

/// The variant to keep from measured rates: the fastest, unless a higher
/// variant is within [`MARGIN`] of it.
fn pick(rates: &BTreeMap<Variant, f64>) -> Variant {
    let (&fastest, &rate) = rates.iter().max_by(|a, b| a.1.total_cmp(b.1)).expect("at least one variant");
    rates.iter().filter(|(v, r)| **v > fastest && **r * MARGIN >= rate).map(|(v, _)| *v).max().unwrap_or(fastest)
}

/// The fused plan for `plan`, built by `make` for the chosen variant.
pub fn planned(make: impl Fn(Variant) -> FusedPlan) -> FusedPlan {
    if let Some((v, why)) = kernel::forced() {
        let mut f = make(v);
        f.choice = Choice::plain(&if why == kernel::ENV { format!("forced by {why}") } else { why.to_string() });
        return f;
    }
    let mode = mode().unwrap_or(Mode::Cache);
    let variants = kernel::supported();
    if mode == Mode::Off || variants.len() == 1 {
        let mut f = make(kernel::best());
        f.choice = Choice::plain(if mode == Mode::Off { "tuning off" } else { "only variant" });
        return f;
    }
    // The best variant's plan gives the key (and is one of the candidates).
    let top = make(kernel::best());
    let key = key(&top);
    let path = cache_path();
    let known = if mode == Mode::Remeasure {
        None
    } else {
        remembered(&key).map(|c| (c, "cached")).or_else(|| {
            let c = path.as_deref().map(read_cache).and_then(|f| f.choices.get(&key).cloned()).filter(|c| variants.contains(&c.variant))?;
            remember(&key, &c);
            Some((c, "cached"))
        })
    };
    if let Some((c, source)) = known {
        let mut f = if c.variant == top.variant { top } else { make(c.variant) };
        f.choice = Choice { source: source.into(), alines_per_second: c.alines_per_second, key };
        return f;
    }
    let frame = timing_frame(top.pixels);
    let mut image = Array2::<f32>::zeros((top.depth, TIMING_ALINES));
    let mut plans = vec![top];
    for &v in variants.iter().rev().skip(1) {
        plans.push(make(v));
    }
    let rates: BTreeMap<Variant, f64> = plans.iter().map(|f| (f.variant, time_plan(f, &frame, &mut image))).collect();
    let chosen = pick(&rates);
    let entry = CachedChoice { variant: chosen, alines_per_second: rates.clone() };
    remember(&key, &entry);
    if let Some(p) = &path {
        write_cache(p, &key, &entry);
    }
    let mut f = plans.into_iter().find(|f| f.variant == chosen).expect("the chosen variant was planned");
    f.choice = Choice { source: "measured".into(), alines_per_second: rates, key };
    f
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pick_prefers_the_fastest_beyond_the_margin() {
        let r = |a: f64, b: f64, c: f64| BTreeMap::from([(Variant::Avx512, a), (Variant::Avx2, b), (Variant::Scalar, c)]);
        assert_eq!(pick(&r(100.0, 50.0, 10.0)), Variant::Avx512);
        assert_eq!(pick(&r(100.0, 120.0, 10.0)), Variant::Avx2);
        // Within 5 %: the higher variant stays.
        assert_eq!(pick(&r(100.0, 104.0, 10.0)), Variant::Avx512);
        assert_eq!(pick(&r(10.0, 50.0, 52.0)), Variant::Avx2);
        assert_eq!(pick(&r(10.0, 50.0, 60.0)), Variant::Scalar);
    }
}
