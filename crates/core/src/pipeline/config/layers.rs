//! The `[layers]` section of the pipeline file: which surfaces (interfaces
//! between layers) to find in each B-scan, top first, each by the sign of
//! its axial intensity edge and its distance from the surface above. Off
//! (no surfaces) by default and then left out of the serialised pipeline
//! and its hash.

use serde::{Deserialize, Deserializer, Serialize};

use crate::settings::{de_non_negative, de_positive, de_usize_in};

fn de_smoothing<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    use serde::de::Error;
    let v = de_usize_in(d, 1, 63)?;
    if v % 2 == 0 {
        return Err(D::Error::custom(format!("value {v} out of range: must be an odd number from 1 to 63")));
    }
    Ok(v)
}

fn de_optional_non_negative<'de, D: Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
    de_non_negative(d).map(Some)
}

/// Which way the intensity changes across a surface, going down.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Polarity {
    /// Darker above, brighter below (or a bright interface line, found at
    /// its upper edge): the top of a sample, of a brighter layer.
    #[default]
    DarkToBright,
    /// Brighter above, darker below: the bottom of a bright layer.
    BrightToDark,
}

impl Polarity {
    pub fn name(self) -> &'static str {
        match self {
            Polarity::DarkToBright => "dark_to_bright",
            Polarity::BrightToDark => "bright_to_dark",
        }
    }
}

/// One surface to find (`[[layers.surface]]`).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SurfaceConfig {
    /// The user's name for it (default: its number from the top, 1 first).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub label: Option<String>,
    pub polarity: Polarity,
    /// Nearest and farthest it may lie below the surface above, µm of
    /// depth in air (ignored for the first surface).
    #[serde(deserialize_with = "de_non_negative")]
    pub min_separation_um: f64,
    #[serde(deserialize_with = "de_optional_non_negative", skip_serializing_if = "Option::is_none")]
    pub max_separation_um: Option<f64>,
    /// Group index of the layer below this surface (down to the next one),
    /// over `[layers] group_index`.
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub group_index: Option<f64>,
}

fn de_optional_positive<'de, D: Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
    de_positive(d).map(Some)
}

/// Layer segmentation: surfaces per B-scan as minimum-cost paths.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct LayersConfig {
    /// The surfaces, top first (none: off).
    #[serde(rename = "surface")]
    pub surfaces: Vec<SurfaceConfig>,
    /// Group index of the sample: thickness in tissue = depth difference
    /// in air / group index.
    #[serde(deserialize_with = "de_positive")]
    pub group_index: f64,
    /// The first surface is searched from this depth down, µm in air
    /// (keeps the search off the zero-delay region).
    #[serde(deserialize_with = "de_non_negative")]
    pub search_from_um: f64,
    /// Largest depth change of a surface from one A-line to the next, µm.
    #[serde(deserialize_with = "de_positive")]
    pub max_step_um: f64,
    /// A-lines averaged across (odd) for the edge image.
    #[serde(deserialize_with = "de_smoothing")]
    pub lateral_smoothing_alines: usize,
    /// An A-line where the intensity rises (or falls) across the path by
    /// less than this, or where the surface is not this far above the
    /// noise floor, has no surface (NaN there), dB.
    #[serde(deserialize_with = "de_positive")]
    pub min_edge_db: f64,
    /// The depth-resolved attenuation coefficient (Vermeer et al. 2014) in
    /// every layer: /attenuation_per_mm and each layer's median in the log.
    pub attenuation: bool,
    /// A-lines averaged (odd) before the ratio, against speckle.
    #[serde(deserialize_with = "de_smoothing")]
    pub attenuation_alines: usize,
    /// The system's −6 dB roll-off depth in air (from `measure rolloff`),
    /// µm: its Gaussian fall is divided out first. None: not corrected.
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub rolloff_6db_depth_um: Option<f64>,
}

impl Default for LayersConfig {
    fn default() -> Self {
        LayersConfig {
            surfaces: Vec::new(),
            group_index: 1.38,
            search_from_um: 20.0,
            max_step_um: 8.0,
            lateral_smoothing_alines: 5,
            min_edge_db: 3.0,
            attenuation: false,
            attenuation_alines: 9,
            rolloff_6db_depth_um: None,
        }
    }
}

impl LayersConfig {
    pub fn enabled(&self) -> bool {
        !self.surfaces.is_empty()
    }

    /// Group index of each layer between consecutive surfaces, top first.
    pub fn layer_group_indices(&self) -> Vec<f64> {
        self.surfaces.iter().take(self.surfaces.len().saturating_sub(1)).map(|s| s.group_index.unwrap_or(self.group_index)).collect()
    }

    /// Each surface's label: the user's, or its number from the top.
    pub fn labels(&self) -> Vec<String> {
        self.surfaces.iter().enumerate().map(|(i, s)| s.label.clone().unwrap_or_else(|| format!("{}", i + 1))).collect()
    }

    /// Checks what the depth axis decides: whether the surfaces fit in a
    /// B-scan `depth_um` deep at their smallest separations.
    pub fn check_fits(&self, depth_um: f64) -> Result<(), String> {
        let needed = self.search_from_um + self.surfaces.iter().skip(1).map(|s| s.min_separation_um).sum::<f64>();
        if self.enabled() && needed >= depth_um {
            return Err(format!(
                "layers: {} surfaces need at least {needed:.1} µm of depth (search_from_um plus each min_separation_um), but the B-scan is {depth_um:.1} µm deep",
                self.surfaces.len()
            ));
        }
        Ok(())
    }
}
