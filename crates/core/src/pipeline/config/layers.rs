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
    /// Divide out the k-resampling's interpolation loss (computed from the
    /// plan's tables) before the attenuation estimate.
    pub attenuation_resampling_correction: bool,
    /// Flatten every B-scan to this surface (its label): each A-line is
    /// shifted in depth, sub-pixel, on the complex profile, so that the
    /// surface is straight. None: not flattened.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub flatten: Option<String>,
    /// Depth (in air, µm) the flattened surface is moved to; None: its
    /// median depth in the first B-scan.
    #[serde(deserialize_with = "de_optional_non_negative", skip_serializing_if = "Option::is_none")]
    pub flatten_depth_um: Option<f64>,
    /// Largest change of a surface from one slow-axis position to the next
    /// at the same A-line, µm: each surface is searched within this of the
    /// same surface at the previous position (a 3-D constraint). None: each
    /// B-scan on its own.
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub max_step_between_positions_um: Option<f64>,
    /// En face slabs between surfaces (`[[layers.slab]]`).
    #[serde(rename = "slab", skip_serializing_if = "Vec::is_empty")]
    pub slabs: Vec<SlabConfig>,
}

/// How a slab's values are projected along depth.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SlabProjection {
    /// Mean over the slab's rows (structure: of the linear intensity).
    #[default]
    Mean,
    /// Largest value.
    Max,
    /// Sum over the rows (structure: of the linear intensity).
    Sum,
}

impl SlabProjection {
    pub fn name(self) -> &'static str {
        match self {
            SlabProjection::Mean => "mean",
            SlabProjection::Max => "max",
            SlabProjection::Sum => "sum",
        }
    }
}

/// One en face slab (`[[layers.slab]]`): the rows of each A-line from its
/// top (a surface, or a depth from zero delay) plus an offset down to its
/// bottom plus an offset, depths in air.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SlabConfig {
    /// Names the slab's datasets and images (letters, digits, '-' and '_').
    pub name: String,
    /// Label of the surface at the top (or give `top_depth_um`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub top: Option<String>,
    #[serde(deserialize_with = "de_optional_non_negative", skip_serializing_if = "Option::is_none")]
    pub top_depth_um: Option<f64>,
    /// Added to the top, µm (positive: deeper).
    #[serde(deserialize_with = "crate::settings::de_finite")]
    pub top_offset_um: f64,
    /// Label of the surface at the bottom (or give `bottom_depth_um`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub bottom: Option<String>,
    #[serde(deserialize_with = "de_optional_non_negative", skip_serializing_if = "Option::is_none")]
    pub bottom_depth_um: Option<f64>,
    #[serde(deserialize_with = "crate::settings::de_finite")]
    pub bottom_offset_um: f64,
    pub projection: SlabProjection,
}

/// Where a slab's top or bottom lies: a surface (its index from the top)
/// or a depth, each with its offset, µm.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SlabEdge {
    Surface(usize, f64),
    Depth(f64),
}

impl SlabConfig {
    /// The slab's top and bottom, given the surfaces' labels (top first).
    pub fn edges(&self, labels: &[String]) -> Result<(SlabEdge, SlabEdge), String> {
        let edge = |which: &str, label: &Option<String>, depth: Option<f64>, offset: f64| -> Result<SlabEdge, String> {
            match (label, depth) {
                (Some(l), None) => match labels.iter().position(|x| x == l) {
                    Some(i) => Ok(SlabEdge::Surface(i, offset)),
                    None if labels.is_empty() => Err(format!("slab \"{}\": {which} names surface \"{l}\" but [layers] finds no surfaces (add [[layers.surface]])", self.name)),
                    None => Err(format!("slab \"{}\": {which} names surface \"{l}\", which does not exist (surfaces: {})", self.name, labels.join(", "))),
                },
                (None, Some(d)) => Ok(SlabEdge::Depth(d + offset)),
                (Some(_), Some(_)) => Err(format!("slab \"{}\": give {which} or {which}_depth_um, not both", self.name)),
                (None, None) => Err(format!("slab \"{}\": needs {which} (a surface label) or {which}_depth_um", self.name)),
            }
        };
        Ok((edge("top", &self.top, self.top_depth_um, self.top_offset_um)?, edge("bottom", &self.bottom, self.bottom_depth_um, self.bottom_offset_um)?))
    }
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
            attenuation_resampling_correction: true,
            flatten: None,
            flatten_depth_um: None,
            max_step_between_positions_um: None,
            slabs: Vec::new(),
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

    /// Index of the surface labelled `label`.
    pub fn surface_index(&self, label: &str) -> Option<usize> {
        self.labels().iter().position(|l| l == label)
    }

    /// The checks among the section's keys: separations, labels, the
    /// flattening surface and every slab (surfaces that exist, a bottom
    /// that is not above its top everywhere). Err: (key, message).
    pub fn check(&self) -> Result<(), (&'static str, String)> {
        for (i, surface) in self.surfaces.iter().enumerate() {
            if let Some(max) = surface.max_separation_um {
                if max <= surface.min_separation_um {
                    return Err(("surface", format!("surface {}: max_separation_um ({max}) must exceed min_separation_um ({})", i + 1, surface.min_separation_um)));
                }
            }
            if let Some(label) = &surface.label {
                if label.is_empty() || self.surfaces.iter().filter(|s| s.label.as_ref() == Some(label)).count() > 1 {
                    return Err(("surface", format!("surface {}: label \"{label}\" is empty or given twice", i + 1)));
                }
            }
        }
        let labels = self.labels();
        if let Some(f) = &self.flatten {
            if !labels.contains(f) {
                return Err(("flatten", format!("names surface \"{f}\", which does not exist (surfaces: {})", if labels.is_empty() { "none".to_string() } else { labels.join(", ") })));
            }
        }
        for (k, slab) in self.slabs.iter().enumerate() {
            if slab.name.is_empty() || !slab.name.chars().all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_') {
                return Err(("slab", format!("slab {}: name \"{}\" must be letters, digits, '-' or '_' (it names files)", k + 1, slab.name)));
            }
            if self.slabs.iter().filter(|s| s.name == slab.name).count() > 1 {
                return Err(("slab", format!("slab name \"{}\" given twice", slab.name)));
            }
            let (top, bottom) = slab.edges(&labels).map_err(|e| ("slab", e))?;
            // Surfaces stay in order, each at least min_separation_um below
            // the one above: a bottom that is that surely above the top
            // everywhere leaves the slab empty.
            let empty = match (top, bottom) {
                (SlabEdge::Depth(t), SlabEdge::Depth(b)) => b <= t,
                (SlabEdge::Surface(i, ot), SlabEdge::Surface(j, ob)) if j <= i => {
                    let gap: f64 = self.surfaces[j + 1..=i].iter().map(|s| s.min_separation_um).sum();
                    ob - ot <= gap
                }
                _ => false,
            };
            if empty {
                return Err(("slab", format!("slab \"{}\": its bottom is above (or at) its top at every A-line, so it holds nothing", slab.name)));
            }
        }
        Ok(())
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
