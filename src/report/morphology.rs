//! The report's `images[].morphology`: columnar, equiaxed or mixed, from
//! the coherence of the arms' directions over neighbourhoods.

use super::round;
use crate::spatial::morphology::{self as m, Morphology};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// How the method reads the morphology, in words (the report names it).
pub const METHOD: &str = "doubled-angle coherence of the arms' directions in spectral tiles (the FFT method's tile analysis at its tile size for the arm spacing, tiles side by side, each counted when its peak has the method's quality and its period is within a factor of sqrt 2 of the arm spacing): each neighbourhood (a disc of 10 spacings around each cell of a grid of cells 10 spacings wide, laid as the map's from the spacing the tiles were sized for) is aligned when the mean resultant length R of its tiles' doubled directions is at least aligned_min_r and the Rayleigh test finds a common direction at rayleigh_alpha, crossed when R is below aligned_min_r, undecided otherwise or with fewer than 3 tiles; the image is columnar when at least class_share of its decided neighbourhoods are aligned and the aligned ones share a direction (R of their directions at least aligned_min_r), equiaxed when at least class_share are crossed or the aligned ones share no direction, mixed otherwise; with fewer than min_decided decided neighbourhoods the image's tiles are read together as one neighbourhood (aligned: columnar, crossed: equiaxed, never mixed) when they cover at least whole_image_cover of its area";

/// Columnar, equiaxed or mixed, from the arms' directions.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "morphology")]
pub struct MorphologyReport {
    /// `columnar`, `equiaxed` or `mixed`; null with `reason`.
    #[schemars(extend("enum" = ["columnar", "equiaxed", "mixed", null]))]
    pub class: Option<String>,
    /// Why there is no class, when there is none.
    pub reason: Option<String>,
    /// The method, in words.
    pub method: String,
    /// The thresholds the method uses (their reasons are in the source and
    /// in DEVELOPERS.md).
    pub thresholds: MorphologyThresholds,
    /// Tiles over the image that give a direction.
    pub tiles: usize,
    /// The arm spacing the scales were set from (the image's value, else
    /// the median local measurement), um.
    pub spacing_um: f64,
    /// Mean resultant length of all samples' doubled directions: 0
    /// when the arms show no preferred direction over the image, 1 when
    /// they all repeat along one.
    pub anisotropy: Option<f64>,
    /// The direction of the aligned neighbourhoods' arms (the trunks'
    /// growth direction in a columnar zone, as an axis), degrees
    /// counter-clockwise from the image's x axis as seen on screen, [0,
    /// 180); null when no aligned neighbourhoods share a direction.
    pub growth_direction_deg: Option<f64>,
    /// Circular standard deviation of the aligned neighbourhoods' sample
    /// directions, degrees.
    pub growth_spread_deg: Option<f64>,
    /// Mean resultant length of the aligned neighbourhoods' directions.
    pub aligned_agreement: Option<f64>,
    /// `neighbourhoods` (the class from the share of aligned
    /// neighbourhoods) or `whole image` (fewer than min_decided decided
    /// neighbourhoods: the image's tiles read together as one
    /// neighbourhood; never mixed); null without a class.
    #[schemars(extend("enum" = ["neighbourhoods", "whole image", null]))]
    pub decided_by: Option<String>,
    /// The neighbourhoods: cells of `step_um` (laid as `map`'s, from `spacing_um`), discs of
    /// `radius_um` around their centres.
    pub step_um: f64,
    pub radius_um: f64,
    pub columns: usize,
    pub rows: usize,
    pub aligned: usize,
    pub crossed: usize,
    pub undecided: usize,
    /// Each neighbourhood, row by row from the top: `aligned`, `crossed`,
    /// or null (undecided).
    pub cells: Vec<Vec<Option<String>>>,
}

/// The thresholds of the morphology.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct MorphologyThresholds {
    pub aligned_min_r: f64,
    pub rayleigh_alpha: f64,
    pub class_share: f64,
    pub min_decided: usize,
    pub radius_spacings: f64,
    pub period_ratio_max: f64,
    pub whole_image_cover: f64,
}

pub fn morphology_report(x: &Morphology) -> MorphologyReport {
    let cells = (0..x.rows)
        .map(|r| {
            (0..x.columns)
                .map(|c| {
                    x.cells[r * x.columns + c]
                        .aligned
                        .map(|a| if a { "aligned" } else { "crossed" }.to_string())
                })
                .collect()
        })
        .collect();
    MorphologyReport {
        class: x.class.map(|c| c.name().to_string()),
        reason: x.reason.clone(),
        method: METHOD.to_string(),
        thresholds: MorphologyThresholds {
            aligned_min_r: m::ALIGNED_MIN_R,
            rayleigh_alpha: m::RAYLEIGH_ALPHA,
            class_share: m::CLASS_SHARE,
            min_decided: m::MIN_DECIDED,
            radius_spacings: crate::spatial::map::MAP_RADIUS_SPACINGS,
            period_ratio_max: m::PERIOD_RATIO_MAX,
            whole_image_cover: m::WHOLE_IMAGE_COVER,
        },
        tiles: x.samples,
        spacing_um: round(x.spacing_um, 4),
        anisotropy: x.anisotropy.map(|v| round(v, 3)),
        growth_direction_deg: x.growth_dir_deg.map(|v| round(v, 1)),
        growth_spread_deg: x.growth_spread_deg.map(|v| round(v, 1)),
        aligned_agreement: x.aligned_agreement.map(|v| round(v, 3)),
        decided_by: x.class.map(|_| {
            if x.whole_image {
                "whole image"
            } else {
                "neighbourhoods"
            }
            .to_string()
        }),
        step_um: round(x.step_um, 4),
        radius_um: round(x.radius_um, 4),
        columns: x.columns,
        rows: x.rows,
        aligned: x.aligned,
        crossed: x.crossed,
        undecided: x.cells.len() - x.aligned - x.crossed,
        cells,
    }
}
