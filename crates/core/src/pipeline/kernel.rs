//! Which kernel variant the fast path runs, decided in one place: AVX-512
//! (the lane FFT and the AVX-512 background kernels, needing AVX-512F/BW,
//! AVX2 and FMA), AVX2 + FMA (rustfft's AVX2 FFT and the AVX2 resampling,
//! conversion and dB kernels) or scalar (portable code and rustfft's
//! scalar FFT). By default the best the CPU has; the environment variable
//! `FRINGEFLOW_KERNEL` (`avx512`, `avx2`, `scalar`) forces a lower one, so
//! that one machine can run and test every variant it supports, and
//! `fringeflow bench` times each of them with [`force`]. When nothing is
//! forced, each fused plan times the variants on its own shape and runs the
//! fastest (`fused::tune`). Every variant must match the f64 reference
//! stages within the fast path's tolerance.

use std::sync::atomic::{AtomicU8, Ordering};
use std::sync::OnceLock;

/// The environment variable that forces a variant.
pub const ENV: &str = "FRINGEFLOW_KERNEL";

#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Variant {
    Scalar,
    Avx2,
    Avx512,
}

impl Variant {
    pub fn name(self) -> &'static str {
        match self {
            Variant::Scalar => "scalar",
            Variant::Avx2 => "avx2",
            Variant::Avx512 => "avx512",
        }
    }

    pub fn parse(s: &str) -> Option<Variant> {
        match s.trim().to_ascii_lowercase().as_str() {
            "scalar" => Some(Variant::Scalar),
            "avx2" => Some(Variant::Avx2),
            "avx512" => Some(Variant::Avx512),
            _ => None,
        }
    }

    /// Whether this CPU can run it.
    pub fn supported(self) -> bool {
        match self {
            Variant::Scalar => true,
            #[cfg(target_arch = "x86_64")]
            Variant::Avx2 => std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma"),
            #[cfg(target_arch = "x86_64")]
            Variant::Avx512 => Variant::Avx2.supported() && std::is_x86_feature_detected!("avx512f") && std::is_x86_feature_detected!("avx512bw"),
            #[cfg(not(target_arch = "x86_64"))]
            _ => false,
        }
    }
}

/// Every variant this CPU runs, lowest first.
pub fn supported() -> Vec<Variant> {
    [Variant::Scalar, Variant::Avx2, Variant::Avx512].into_iter().filter(|v| v.supported()).collect()
}

/// The best variant this CPU runs.
pub fn best() -> Variant {
    *supported().last().expect("scalar always runs")
}

/// 0: not forced; else 1 + the variant (set by [`force`]).
static FORCED: AtomicU8 = AtomicU8::new(0);

/// What `FRINGEFLOW_KERNEL` asks for, read once: the variant, clamped to
/// the best the CPU has (with a warning on stderr), or an error message
/// for a value that names no variant.
fn from_env() -> &'static Result<Option<Variant>, String> {
    static ENV_CHOICE: OnceLock<Result<Option<Variant>, String>> = OnceLock::new();
    ENV_CHOICE.get_or_init(|| match std::env::var(ENV) {
        Err(_) => Ok(None),
        Ok(v) if v.trim().is_empty() || v.trim().eq_ignore_ascii_case("auto") => Ok(None),
        Ok(v) => match Variant::parse(&v) {
            None => Err(format!("{ENV}={v}: not a kernel variant (avx512, avx2, scalar or auto)")),
            Some(want) if !want.supported() => {
                eprintln!("warning: {ENV}={v}: this CPU lacks it; running {}", best().name());
                Ok(Some(best()))
            }
            Some(want) => Ok(Some(want)),
        },
    })
}

/// Checks `FRINGEFLOW_KERNEL` (for a clear error before any work).
pub fn check_env() -> Result<(), String> {
    from_env().clone().map(|_| ())
}

/// Forces `variant` (clamped to what the CPU has) for plans made from now
/// on in this process; `None` returns to the environment's or the best.
pub fn force(variant: Option<Variant>) {
    FORCED.store(variant.map_or(0, |v| 1 + v.min(best()) as u8), Ordering::SeqCst);
}

/// The variant forced by [`force`] or by `FRINGEFLOW_KERNEL`, if any, and
/// by which.
pub fn forced() -> Option<(Variant, &'static str)> {
    match FORCED.load(Ordering::Relaxed) {
        1 => Some((Variant::Scalar, "forced in this process")),
        2 => Some((Variant::Avx2, "forced in this process")),
        3 => Some((Variant::Avx512, "forced in this process")),
        _ => match from_env() {
            Ok(Some(v)) => Some((*v, ENV)),
            _ => None,
        },
    }
}

/// The variant the fast path runs when none is measured: the forced one,
/// else the best the CPU has. (A plan's own choice is in its `variant`;
/// see `fused::tune`.)
pub fn active() -> Variant {
    match FORCED.load(Ordering::Relaxed) {
        1 => Variant::Scalar,
        2 => Variant::Avx2,
        3 => Variant::Avx512,
        _ => match from_env() {
            Ok(Some(v)) => *v,
            _ => best(),
        },
    }
}

/// The AVX-512 kernels may run (the CPU has them and no lower variant is forced).
#[inline]
pub fn avx512() -> bool {
    active() >= Variant::Avx512
}

/// The AVX2 + FMA kernels may run.
#[inline]
pub fn avx2() -> bool {
    active() >= Variant::Avx2
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn variants_order_and_parse() {
        assert!(Variant::Scalar < Variant::Avx2 && Variant::Avx2 < Variant::Avx512);
        for v in [Variant::Scalar, Variant::Avx2, Variant::Avx512] {
            assert_eq!(Variant::parse(v.name()), Some(v));
        }
        assert_eq!(Variant::parse("sse"), None);
        assert!(supported().contains(&Variant::Scalar));
        assert_eq!(best(), *supported().last().unwrap());
    }
}
