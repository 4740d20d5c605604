//! Property-based fuzzing (proptest) of the two places where outside data
//! enters: the pipeline-file parser and the capture reader's validation of
//! shapes, types, wavelength maps, backgrounds and attributes. Neither may
//! panic; errors are one line; what is accepted is consistent.
//! `make fuzz` runs many more cases (PROPTEST_CASES).

use fringeflow::pipeline::config::{InputConfig, PipelineConfig};
use proptest::prelude::*;

fn value() -> impl Strategy<Value = String> {
    prop_oneof![
        any::<i64>().prop_map(|v| v.to_string()),
        any::<f64>().prop_map(|v| if v.is_finite() { format!("{v:?}") } else { "nan".into() }),
        Just("inf".to_string()),
        Just("-0.0".to_string()),
        "[a-z ]{0,8}".prop_map(|s| format!("\"{s}\"")),
        Just("\"hann\"".to_string()),
        Just("\"cubic\"".to_string()),
        Just("\"median\"".to_string()),
        any::<bool>().prop_map(|b| b.to_string()),
        prop::collection::vec(-5.0f64..2000.0, 0..4).prop_map(|v| format!("{v:?}")),
        Just("[\"frame\", \"aline\", \"pixel\"]".to_string()),
        Just("[\"pixel\", \"pixel\"]".to_string()),
        Just("{ a = 1 }".to_string()),
    ]
}

fn key() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("method"), Just("samples"), Just("a2"), Just("a3"), Just("kind"), Just("tukey_alpha"),
        Just("gaussian_fwhm_fraction"), Just("gaussian_fwhm"), Just("zero_padding"), Just("crop_um"), Just("crop_px"), Just("mapping"),
        Just("black_db"), Just("white_db"), Just("db_min"), Just("bit_depth"), Just("dynamic_range_db"), Just("axes"),
        Just("fringes"), Just("wavelength_poly_nm"), Just("average"), Just("en_face_depth_um"),
        Just("enabled"), Just("floor"), Just("png"), Just("bogus"),
    ]
    .prop_map(String::from)
}

fn section() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("input"), Just("background"), Just("k_linearization"), Just("dispersion"), Just("shaping"),
        Just("window"), Just("fft"), Just("log_compression"), Just("volume"), Just("output"), Just("nowhere"),
    ]
    .prop_map(String::from)
}

fn pipeline_text() -> impl Strategy<Value = String> {
    prop::collection::vec((section(), prop::collection::vec((key(), value()), 0..4)), 0..5).prop_map(|sections| {
        sections
            .into_iter()
            .map(|(s, kv)| format!("[{s}]\n{}", kv.into_iter().map(|(k, v)| format!("{k} = {v}\n")).collect::<String>()))
            .collect()
    })
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 400,
        failure_persistence: Some(Box::new(proptest::test_runner::FileFailurePersistence::Direct("tests/fuzz_inputs.proptest-regressions"))),
        ..ProptestConfig::default()
    })]

    #[test]
    fn pipeline_parser_never_panics_and_round_trips(text in prop_oneof![pipeline_text(), ".{0,200}"]) {
        match PipelineConfig::from_str("fuzz.toml", &text) {
            Ok(mut config) => {
                // What is accepted serialises and reads back the same (as `rerun` needs);
                // the deprecation notices are messages, not settings, and are not serialised.
                config.deprecations.clear();
                let json = serde_json::to_string(&config).unwrap();
                let back: PipelineConfig = serde_json::from_str(&json).unwrap();
                prop_assert_eq!(back, config);
            }
            Err(e) => {
                let msg = e.to_string();
                prop_assert!(!msg.contains('\n'), "multi-line error: {}", msg);
                if let Some(line) = e.line {
                    prop_assert!(line >= 1 && line <= text.lines().count().max(1) + 1, "line {} of {}", line, text.lines().count());
                }
            }
        }
    }
}

#[derive(Debug, Clone)]
enum Dtype { U8, U16, I16, U32, F32, F64, I8, U64, I32 }

#[derive(Debug, Clone)]
struct CaptureSpec {
    shape: Vec<usize>,
    dtype: Dtype,
    /// Length (None: the pixel count, so that many cases are accepted) and
    /// kind: 0 increasing, 1 decreasing, 2 folded, 3 NaN, 4 2-D.
    map: Option<(Option<usize>, u8)>,
    background: Option<Vec<usize>>,
    full_scale: Option<bool>, // true: f64, false: string
    nan_at: Option<usize>,
}

fn capture_spec() -> impl Strategy<Value = CaptureSpec> {
    // Mostly plausible layouts (rank 2–3, a spectral axis of 16–40 pixels),
    // sometimes anything at all.
    let plausible = (prop::collection::vec(1usize..4, 1..3), 16usize..40).prop_map(|(mut lead, pixels)| {
        lead.push(pixels);
        lead
    });
    let anything = prop::collection::vec(prop_oneof![0usize..4, 16usize..40], 0..5);
    (
        prop_oneof![3 => plausible, 1 => anything],
        prop_oneof![
            3 => prop_oneof![Just(Dtype::U8), Just(Dtype::U16), Just(Dtype::I16), Just(Dtype::U32), Just(Dtype::F32), Just(Dtype::F64)],
            1 => prop_oneof![Just(Dtype::I8), Just(Dtype::U64), Just(Dtype::I32)],
        ],
        prop_oneof![
            4 => (Just(None), prop_oneof![3 => Just(0u8), 1 => Just(1u8)]).prop_map(Some),
            1 => (prop::option::of(0usize..45), 0u8..5).prop_map(Some),
            1 => Just(None),
        ],
        prop_oneof![3 => Just(None), 1 => prop::collection::vec(0usize..40, 0..4).prop_map(Some)],
        prop::option::of(any::<bool>()),
        prop_oneof![3 => Just(None), 1 => (0usize..10_000).prop_map(Some)],
    )
        .prop_map(|(shape, dtype, map, background, full_scale, nan_at)| CaptureSpec { shape, dtype, map, background, full_scale, nan_at })
}

fn write(path: &std::path::Path, spec: &CaptureSpec) {
    let f = fringeflow::io::h5::create_file(path).unwrap();
    let n: usize = spec.shape.iter().product();
    let mut data: Vec<f64> = (0..n).map(|i| (i % 97) as f64).collect();
    if let (Some(i), Dtype::F32 | Dtype::F64) = (spec.nan_at, &spec.dtype) {
        if n > 0 {
            data[i % n] = f64::NAN;
        }
    }
    let arr = ndarray::ArrayD::from_shape_vec(ndarray::IxDyn(&spec.shape), data).unwrap();
    macro_rules! put {
        ($t:ty) => {
            f.new_dataset_builder().with_data(&arr.mapv(|v| v as $t)).create("fringes").unwrap()
        };
    }
    let ds = match spec.dtype {
        Dtype::U8 => put!(u8), Dtype::U16 => put!(u16), Dtype::I16 => put!(i16), Dtype::U32 => put!(u32),
        Dtype::F32 => put!(f32), Dtype::F64 => put!(f64), Dtype::I8 => put!(i8), Dtype::U64 => put!(u64), Dtype::I32 => put!(i32),
    };
    match spec.full_scale {
        Some(true) => fringeflow::io::h5::write_attr(&ds, "full_scale", 50.0f64).unwrap(),
        Some(false) => fringeflow::io::h5::write_attr_str(&ds, "full_scale", "lots").unwrap(),
        None => {}
    }
    if let Some((len, kind)) = spec.map {
        let len = len.unwrap_or(spec.shape.last().copied().unwrap_or(0));
        let mut m: Vec<f64> = (0..len).map(|p| 800.0 + p as f64).collect();
        match kind {
            1 => m.reverse(),
            2 if len > 3 => m[len / 2] = m[0],
            3 if len > 0 => m[len - 1] = f64::NAN,
            _ => {}
        }
        if kind == 4 {
            let a = ndarray::Array2::from_shape_vec((1, len), m).unwrap();
            f.new_dataset_builder().with_data(&a).create("wavelength_nm").unwrap();
        } else {
            fringeflow::io::h5::write_1d(&f, "wavelength_nm", &m).unwrap();
        }
    }
    if let Some(shape) = &spec.background {
        let n: usize = shape.iter().product();
        let b = ndarray::ArrayD::from_shape_vec(ndarray::IxDyn(shape), vec![1.0f64; n]).unwrap();
        f.new_dataset_builder().with_data(&b).create("background").unwrap();
    }
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 300,
        failure_persistence: Some(Box::new(proptest::test_runner::FileFailurePersistence::Direct("tests/fuzz_inputs.proptest-regressions"))),
        ..ProptestConfig::default()
    })]

    #[test]
    fn capture_reader_validates_without_panicking(spec in capture_spec()) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("fuzz.h5");
        write(&path, &spec);
        match fringeflow::run::open_capture(&path, &InputConfig::default()) {
            Ok(c) => {
                // Accepted: consistent with what was written.
                prop_assert!(matches!(spec.shape.len(), 2 | 3));
                prop_assert_eq!(c.frames * c.alines * c.pixels, spec.shape.iter().product::<usize>());
                prop_assert_eq!(c.wavelength_nm.len(), c.pixels);
                prop_assert!(c.pixels >= 16);
                prop_assert!(!matches!(spec.dtype, Dtype::I8 | Dtype::U64 | Dtype::I32));
                let mut frame = ndarray::Array2::zeros(c.frame_shape());
                for f in 0..c.frames {
                    if let Err(e) = c.read_frame(f, &mut frame) {
                        prop_assert!(e.to_string().contains("NaN"), "{}", e);
                    }
                }
            }
            Err(e) => {
                let msg = format!("{e:#}");
                prop_assert!(!msg.contains('\n'), "multi-line error: {}", msg);
                prop_assert!(!msg.is_empty());
            }
        }
    }
}

/// The generator reaches the happy path often enough to test it: at least
/// 5 % of generated captures are valid and accepted.
#[test]
fn generated_captures_are_often_valid() {
    use proptest::strategy::ValueTree;
    let mut runner = proptest::test_runner::TestRunner::deterministic();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("gen.h5");
    let mut accepted = 0;
    for _ in 0..400 {
        let spec = capture_spec().new_tree(&mut runner).unwrap().current();
        write(&path, &spec);
        if fringeflow::run::open_capture(&path, &InputConfig::default()).is_ok() {
            accepted += 1;
        }
    }
    eprintln!("{accepted} of 400 generated captures accepted");
    assert!(accepted >= 20, "{accepted}");
}

/// One step of the lock and staging fuzz: on output `name` (0–2), from
/// "process" `who` (0–2, each with its own lock handles).
#[derive(Debug, Clone)]
enum Step {
    Lock(usize, usize),
    Unlock(usize, usize),
    Stage(usize, usize),
    Commit(usize, usize),
    Abandon(usize, usize),
    UserDir(usize),
    UserFile(usize),
    RemoveUser(usize),
}

fn step() -> impl Strategy<Value = Step> {
    let (n, w) = (0usize..3, 0usize..3);
    prop_oneof![
        (n.clone(), w.clone()).prop_map(|(n, w)| Step::Lock(n, w)),
        (n.clone(), w.clone()).prop_map(|(n, w)| Step::Unlock(n, w)),
        (n.clone(), w.clone()).prop_map(|(n, w)| Step::Stage(n, w)),
        (n.clone(), w.clone()).prop_map(|(n, w)| Step::Commit(n, w)),
        (n.clone(), w.clone()).prop_map(|(n, w)| Step::Abandon(n, w)),
        n.clone().prop_map(Step::UserDir),
        n.clone().prop_map(Step::UserFile),
        n.prop_map(Step::RemoveUser),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    /// Random interleavings of taking and releasing capture locks, staging,
    /// committing and abandoning outputs, and a user putting their own
    /// files at output paths: never two holders of one lock, never a panic,
    /// the user's files never replaced, nothing staged left after release.
    #[test]
    fn locks_and_staging_hold_their_promises(steps in prop::collection::vec(step(), 1..40)) {
        use fringeflow::batch::lock::OutputLock;
        use fringeflow::io::staging::Staging;
        let dir = tempfile::tempdir().unwrap();
        let name = |n: usize| format!("cap{n}");
        let mut locks: std::collections::HashMap<(usize, usize), OutputLock> = Default::default();
        let mut staged: std::collections::HashMap<(usize, usize), Staging> = Default::default();
        let mut user = [false; 3];
        for s in steps {
            match s {
                Step::Lock(n, w) => {
                    let held_by_other = locks.keys().any(|&(m, v)| m == n && v != w);
                    let mine = locks.contains_key(&(n, w));
                    if !mine {
                        match OutputLock::acquire(dir.path(), &name(n)) {
                            Ok(l) => {
                                prop_assert!(!held_by_other, "two holders of {}", name(n));
                                locks.insert((n, w), l);
                            }
                            Err(e) => prop_assert!(held_by_other, "refused although free: {e}"),
                        }
                    }
                }
                Step::Unlock(n, w) => {
                    locks.remove(&(n, w));
                }
                Step::Stage(n, w) => {
                    if let std::collections::hash_map::Entry::Vacant(slot) = staged.entry((n, w)) {
                        match Staging::new(dir.path(), &name(n)) {
                            Ok(st) => {
                                prop_assert!(!user[n], "staged over the user's {}", name(n));
                                std::fs::write(st.path("log.json"), "{}").unwrap();
                                slot.insert(st);
                            }
                            Err(e) => prop_assert!(user[n], "staging refused: {e}"),
                        }
                    }
                }
                Step::Commit(n, w) => {
                    if let Some(st) = staged.remove(&(n, w)) {
                        let r = st.commit();
                        prop_assert_eq!(r.is_ok(), !user[n], "commit with user files {}: {:?}", user[n], r.err().map(|e| e.to_string()));
                    }
                }
                Step::Abandon(n, w) => {
                    staged.remove(&(n, w));
                }
                Step::UserDir(n) | Step::UserFile(n) => {
                    let p = dir.path().join(name(n));
                    if !p.exists() {
                        if matches!(s, Step::UserDir(_)) {
                            std::fs::create_dir(&p).unwrap();
                            std::fs::write(p.join("notes.txt"), "mine").unwrap();
                        } else {
                            std::fs::write(&p, "mine").unwrap();
                        }
                        user[n] = true;
                    }
                }
                Step::RemoveUser(n) => {
                    if user[n] {
                        let p = dir.path().join(name(n));
                        if p.is_dir() { std::fs::remove_dir_all(&p).unwrap() } else { std::fs::remove_file(&p).unwrap() }
                        user[n] = false;
                    }
                }
            }
            // The user's files are exactly as they left them.
            for (n, &u) in user.iter().enumerate() {
                if u {
                    let p = dir.path().join(name(n));
                    let text = if p.is_dir() { std::fs::read_to_string(p.join("notes.txt")) } else { std::fs::read_to_string(&p) };
                    let text = text.ok();
                    prop_assert_eq!(text.as_deref(), Some("mine"));
                }
            }
        }
        drop(staged);
        drop(locks);
        // Nothing hidden left behind.
        let left: Vec<String> = std::fs::read_dir(dir.path()).unwrap().flatten().map(|e| e.file_name().to_string_lossy().into_owned()).filter(|n| n.starts_with('.')).collect();
        prop_assert!(left.is_empty(), "left behind: {:?}", left);
    }
}
