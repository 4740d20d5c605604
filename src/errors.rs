//! Stable kinds of failure, recorded beside every free-text reason in a
//! batch summary so that scripts can act on them without parsing prose.
//!
//! | kind | what failed |
//! |---|---|
//! | `not-found` | the capture file does not exist |
//! | `not-hdf5` | the file is not HDF5, or its superblock is damaged |
//! | `truncated` | the HDF5 file is shorter than its header records |
//! | `dataset-missing` | a dataset the pipeline names is not in the capture |
//! | `bad-shape` | rank, size or axis order of a dataset |
//! | `bad-type` | a sample type fringeflow does not read |
//! | `wavelength-map` | the map is missing, implausible or not monotonic |
//! | `background` | the background dataset is unusable |
//! | `non-finite` | NaN or infinite samples |
//! | `bad-metadata` | an attribute with an impossible value |
//! | `no-space` | the output device is full |
//! | `permission` | the output cannot be written |
//! | `output-exists` | the output path holds something fringeflow did not make |
//! | `pipeline` | a setting cannot be applied to this capture |
//! | `memory` | the plan needs more memory than the machine has |
//! | `io` | any other read or write failure |
//! | `other` | anything else |

/// The kind of a failure.
pub fn kind_of(e: &anyhow::Error) -> &'static str {
    let text = format!("{e:#}");
    let has = |s: &str| text.contains(s);
    if has("no such file") {
        "not-found"
    } else if has("not an HDF5 file") || has("not a valid HDF5") || has("cannot open as HDF5") {
        "not-hdf5"
    } else if has("truncated HDF5") {
        "truncated"
    } else if has("not found") && has("dataset") {
        "dataset-missing"
    } else if has("wavelength map") || has("wavelength_poly_nm") || has("calibration file") {
        "wavelength-map"
    } else if has("background '") || has("background.method") {
        "background"
    } else if has("has type") && has("supported") {
        "bad-type"
    } else if has("has rank") || has("is empty (shape") || has("pixels per spectrum") || has("input.axes") {
        "bad-shape"
    } else if has("NaN") || has("infinite") {
        "non-finite"
    } else if has("attribute") {
        "bad-metadata"
    } else if has("No space left") {
        "no-space"
    } else if has("ermission denied") || has("Read-only file system") {
        "permission"
    } else if has("not made by fringeflow") || has("not a fringeflow output") || has("rename the capture") {
        "output-exists"
    } else if has("needs about") && has("memory") {
        "memory"
    } else if has("volume.") || has("fft.") || has("doppler") || has("angiography") || has("registration") || has("k_linearization") || has("dispersion") || has("shaping") {
        "pipeline"
    } else if has("reading") || has("writing") || has("creating") {
        "io"
    } else {
        "other"
    }
}
