//! The JSON report: its contract (schema "armspace.report/1", documented in
//! README.md and schema/report.schema.json), its construction from the
//! pipeline's results, and its atomic writing.
//!
//! Later versions add fields; they never remove or retype one.
//!
//! The JSON Schema is generated from these types ([`json_schema`], schemars):
//! doc comments become its descriptions, and `#[schemars(...)]` attributes
//! add the constraints the Rust types cannot say (a positive length, the
//! names a string can take). `tests/schema.rs` checks the committed
//! schema/report.schema.json against it (`ARMSPACE_BLESS=1` rewrites it).

mod at;
mod csv_rows;
pub mod html;
mod map;
pub mod merge;
mod morphology;
pub mod names;
mod per_method;
mod points;
mod schema;
pub use at::{at_report, profile_report, AtMethodReport, AtReport, BinReport, ProfileReport};
pub use csv_rows::{csv_summary, CSV_COLUMNS};
pub use map::{map_report, MapReason, MapReport};
pub use morphology::{morphology_report, MorphologyReport, MorphologyThresholds};
pub use per_method::*;
pub use points::{points_csv, POINT_COLUMNS};
pub use schema::json_schema;

use crate::interpret::acceptance::{self, Acceptance, Decision, Spec};
use crate::methods::fft::FftOutcome;
use crate::methods::intercept::{Convention, InterceptOutcome};
use crate::methods::Detail;
use crate::pipeline::{ImageResult, MeasureOptions, Skipped};
use crate::units::{Pixels, UmPerPx};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

pub const SCHEMA: &str = "armspace.report/1";

/// Carried by every report.
pub const CAUTION: &str = "armspace results support, and never replace, the judgement of \
qualified personnel and the applicable specification and codes. Check the calibration and \
the pictures of what was measured before a result is used for the release of a casting.";

/// A batch of SDAS measurements. Later versions add fields; they never
/// remove or retype one. Lengths are micrometres unless a field name says
/// _px.
#[derive(Serialize, JsonSchema, Debug)]
#[schemars(
    title = "armspace report, schema armspace.report/1",
    extend("$id" = schema::ID)
)]
pub struct Report {
    /// The contract and its version.
    #[schemars(extend("const" = SCHEMA))]
    pub schema: &'static str,
    pub tool: Tool,
    /// Time of the run, RFC 3339 in UTC (SOURCE_DATE_EPOCH fixes it for
    /// reproducible output).
    #[schemars(regex(pattern = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2}Z$"))]
    pub created_utc: String,
    /// Carried by every report: results support, and never replace, the
    /// judgement of qualified personnel.
    #[schemars(length(min = 1))]
    pub caution: &'static str,
    pub parameters: Parameters,
    /// One entry per image, in input order.
    pub images: Vec<ImageReport>,
    /// Files passed over in folders, with the reason.
    pub skipped: Vec<SkippedReport>,
    pub summary: Summary,
}

/// The program that wrote the report.
#[derive(Serialize, JsonSchema, Debug)]
pub struct Tool {
    #[schemars(extend("const" = env!("CARGO_PKG_NAME")))]
    pub name: &'static str,
    pub version: &'static str,
}

/// Everything needed to repeat the run.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct Parameters {
    /// The inputs (files and folders) as given.
    pub inputs: Vec<String>,
    /// --um-per-px, when given.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub um_per_px: Option<f64>,
    /// --profile: the profile's name, value and stated uncertainty.
    pub profile: Option<ProfileParameters>,
    /// --scale-bar: the bar's stated length (um) and relative uncertainty.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub scale_bar_um: Option<f64>,
    #[schemars(range(min = 0))]
    pub scale_bar_rel_uncertainty: Option<f64>,
    /// --scale-bar auto: each bar's length read from its label.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub scale_bar_auto: bool,
    /// The methods asked for, in the order they run.
    #[schemars(schema_with = "schema::method_names")]
    #[serde(deserialize_with = "names::names")]
    pub methods: Vec<&'static str>,
    /// Images larger than this many megapixels are refused before decoding.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub max_megapixels: f64,
    pub preprocess: PreprocessParameters,
    pub fft: FftParameters,
    pub intercept: InterceptParameters,
    /// The spec (--spec): limits, zones, statistic and rule; absent without it.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "Spec")]
    pub spec: Option<Spec>,
    /// --correlation and what goes with it; absent without it.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "InterpretationParameters")]
    pub interpretation: Option<InterpretationParameters>,
    /// The points of --at as given, in order; absent without it.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub at: Vec<String>,
    /// The lines of --along as given, in order; absent without it.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub along: Vec<String>,
    /// --shard: this report holds one part of a batch split across runs
    /// (`armspace merge` joins the parts); absent in a whole batch's report.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub shard: Option<ShardParameters>,
}

/// Which part of a batch a report holds (`measure --shard K/N`): the
/// batch's images in input order, the K-th of every N (image i, counted
/// from 0, goes to part i mod N + 1).
#[derive(Serialize, Deserialize, JsonSchema, Debug, Clone, Copy, PartialEq, Eq)]
pub struct ShardParameters {
    /// K, from 1.
    #[schemars(range(min = 1))]
    pub index: usize,
    /// N.
    #[schemars(range(min = 1))]
    pub count: usize,
    /// The images of the whole batch (files passed over not counted).
    pub batch_images: usize,
}

/// The interpretation settings (--correlation).
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct InterpretationParameters {
    /// The correlation's id.
    pub correlation: String,
    /// --composition: wt% by element symbol.
    #[schemars(schema_with = "schema::composition")]
    pub composition_wt_pct: crate::interpret::Composition,
    /// --freezing-range, K.
    #[serde(rename = "freezing_range_K")]
    pub freezing_range_k: Option<f64>,
    /// --extrapolate: values more than 3x beyond the fitted range are given.
    pub extrapolate: bool,
}

#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct InterceptParameters {
    /// "centre-to-centre" (L/(n-1)) or "length-over-count" (L/n).
    #[schemars(schema_with = "schema::convention")]
    #[serde(deserialize_with = "names::name")]
    pub convention: names::Name,
    /// The relative accuracy (%RA) the lines-for-target counts aim at.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub target_rel_accuracy_pct: f64,
}

pub fn convention_name(c: Convention) -> &'static str {
    match c {
        Convention::CentreToCentre => "centre-to-centre",
        Convention::LengthOverCount => "length-over-count",
    }
}

#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct ProfileParameters {
    pub name: String,
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub um_per_px: f64,
    #[schemars(range(min = 0))]
    pub rel_uncertainty: Option<f64>,
}

#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct PreprocessParameters {
    /// null: chosen per image from its size (reported per image in methods.fft).
    pub background_sigma_px: Option<f64>,
}

#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct FftParameters {
    pub min_period_px: f64,
    pub periods_per_tile: f64,
    pub min_quality: f64,
    pub max_masked_fraction: f64,
    pub coarse_window_max_px: usize,
}

/// One image: what was read, the calibration, the SDAS and each method's
/// detail. An image that could not be read has an `error` and no value.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "image", transform = schema::error_means_no_value)]
pub struct ImageReport {
    /// The path as given or as found in a folder.
    pub file: String,
    /// SHA-256 of the file's bytes, lower-case hex.
    #[schemars(regex(pattern = r"^[0-9a-f]{64}$"))]
    pub sha256: Option<String>,
    #[schemars(range(min = 1))]
    pub width: Option<u32>,
    #[schemars(range(min = 1))]
    pub height: Option<u32>,
    /// Bits per sample of the decoded image.
    #[schemars(extend("enum" = [8, 16, 32, null]))]
    pub bit_depth: Option<u8>,
    pub calibration: Option<CalibrationReport>,
    /// Rectangles excluded from measurement (scale bar, its box and label
    /// room, annotations but the outside of a round field of view, which
    /// is an ellipse's outside: see `annotations`), [x0, y0, x1, y1] in
    /// inclusive pixel indices.
    pub excluded_px: Vec<[u32; 4]>,
    /// Annotations found and left out of the measurement, with why.
    pub annotations: Vec<AnnotationReport>,
    pub sdas_um: SdasReport,
    pub methods: MethodsReport,
    /// What a reviewer should know about the result, in words.
    pub warnings: Vec<String>,
    /// The stable code of each warning (stage.what), in the order of
    /// `warnings`.
    #[schemars(inner(regex(pattern = r"^[a-z]+\.[a-z-]+$")))]
    #[serde(deserialize_with = "names::names")]
    pub warning_codes: Vec<&'static str>,
    /// Why the image could not be read or decoded; null when it was.
    pub error: Option<String>,
    /// Path of the picture of what was measured (with --overlay), else null.
    pub overlay: Option<String>,
    /// Cooling rate and solidification time (with --correlation), else absent.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "crate::interpret::Interpretation")]
    pub interpretation: Option<crate::interpret::Interpretation>,
    /// The decision against the spec's limit (with --spec), else absent.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "Acceptance")]
    pub acceptance: Option<Acceptance>,
    /// The local SDAS at each point asked for with --at, in the order
    /// given; absent without --at (and for an image that could not be
    /// measured).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub at: Vec<AtReport>,
    /// SDAS against distance along each line asked for with --along, in
    /// the order given; absent without --along.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub profile: Vec<ProfileReport>,
    /// The map of local SDAS over the image (with --map or --points);
    /// absent otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub map: Option<MapReport>,
    /// Columnar, equiaxed or mixed, from the coherence of the arms'
    /// directions over neighbourhoods (absent for an image that could not
    /// be measured).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub morphology: Option<MorphologyReport>,
}

/// The calibration applied to the image.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct CalibrationReport {
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub um_per_px: f64,
    /// The source whose value was applied.
    pub source: crate::calibrate::CalibrationSource,
    /// Relative standard uncertainty of um_per_px, when known.
    #[schemars(range(min = 0))]
    pub rel_uncertainty: Option<f64>,
    /// The scale bar, when the calibration came from it.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "BarReport")]
    pub bar: Option<BarReport>,
    /// The text read beside the bar (with `--scale-bar auto`, or checked
    /// against a length given), its length and confidence; absent when no
    /// label was read with confidence.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    #[schemars(with = "crate::calibrate::label::Label")]
    pub label: Option<crate::calibrate::label::Label>,
    /// The value each available source gave, by source name.
    #[schemars(schema_with = "schema::calibration_sources")]
    #[serde(deserialize_with = "names::name_map")]
    pub sources: std::collections::BTreeMap<&'static str, f64>,
}

/// A detected scale bar, pixel coordinates from the top-left corner
/// (inclusive indices).
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "bar")]
pub struct BarReport {
    /// Edge-to-edge length, px.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub length_px: f64,
    pub x0: u32,
    pub y0: u32,
    pub x1: u32,
    pub y1: u32,
    #[schemars(range(min = 1))]
    pub thickness_px: u32,
    pub polarity: crate::calibrate::scale_bar::Polarity,
    /// 0 to 1: the weakest of the fill, uniformity and edge-contrast tests.
    #[schemars(range(min = 0, max = 1))]
    pub confidence: f64,
    /// Contrasting box behind the bar, when there is one: [x0, y0, x1, y1].
    pub backing_box: Option<[u32; 4]>,
}

impl BarReport {
    pub fn of(b: &crate::calibrate::scale_bar::ScaleBar) -> Self {
        Self {
            length_px: round(b.length_px, 3),
            x0: b.x0,
            y0: b.y0,
            x1: b.x1,
            y1: b.y1,
            thickness_px: b.thickness_px,
            polarity: b.polarity,
            confidence: round(b.confidence, 3),
            backing_box: b.backing_box,
        }
    }
}

/// The calibration as reported.
pub fn calibration_report(c: &crate::calibrate::Calibration) -> CalibrationReport {
    CalibrationReport {
        um_per_px: c.um_per_px.get(),
        source: c.source,
        rel_uncertainty: c.rel_uncertainty.map(|u| round(u, 6)),
        bar: c.bar.as_ref().map(BarReport::of),
        label: c.label.clone(),
        sources: c
            .offers
            .iter()
            .map(|o| (o.source.name(), o.um_per_px.get()))
            .collect(),
    }
}

/// The image's SDAS from the methods that agree, um.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct SdasReport {
    /// Rounded to the uncertainty ([`digits_for_uncertainty`]).
    #[schemars(
        description = "The image's SDAS, um; it and ci95 are rounded to two significant digits of the interval's half-width. Null, with a reason, when there is no value."
    )]
    pub value: Option<f64>,
    /// 95 % interval, lower bound first.
    pub ci95: Option<[f64; 2]>,
    /// The value to 4 decimals, for programs that recompute with it.
    pub value_unrounded: Option<f64>,
    /// Local measurements behind the value (tiles, lines, chains).
    pub n: usize,
    /// Of those, how many count as independent (an FFT tile a quarter).
    #[schemars(range(min = 0))]
    pub n_eff: f64,
    /// The methods whose values were combined into this one.
    #[schemars(schema_with = "schema::method_names")]
    #[serde(deserialize_with = "names::names")]
    pub methods: Vec<&'static str>,
    /// Why there is no value, when there is none.
    pub reason: Option<String>,
    /// Methods that gave a value which did not enter this one, and why.
    pub left_out: Vec<LeftOutReport>,
    /// The standard uncertainties combined into `ci95` (null without a
    /// value).
    pub uncertainty: Option<BudgetReport>,
    /// Birge ratio of the combined values (null with fewer than two).
    #[schemars(range(min = 0))]
    pub birge_ratio: Option<f64>,
}

/// An image's uncertainty budget: standard uncertainties, um.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct BudgetReport {
    /// The methods' statistics and the scatter between them, um.
    pub statistical_um: f64,
    /// The calibration, um (0 when a given um/px is taken as exact).
    pub calibration_um: f64,
    /// The bias the agreeing methods share on a field, um.
    pub method_bias_um: f64,
    /// The three in quadrature, um.
    pub combined_standard_um: f64,
    /// The factor from the combined standard uncertainty to the 95 %
    /// half-width.
    pub coverage_factor: f64,
}

/// A method that gave a value which did not enter the image's value.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct LeftOutReport {
    #[schemars(schema_with = "schema::method_name")]
    #[serde(deserialize_with = "names::name")]
    pub method: names::Name,
    pub reason: String,
}

/// A file passed over in a folder (not an image by its extension, one of
/// the tool's own pictures, ...), with the reason.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct SkippedReport {
    pub file: String,
    pub reason: String,
}

/// Counts of the batch and the range of its values.
#[derive(Serialize, JsonSchema, Debug)]
pub struct Summary {
    /// Images attempted (skipped files excluded).
    pub images: usize,
    /// Images with an SDAS value.
    pub measured: usize,
    /// Images read but without a value (nothing reliable to measure).
    pub without_value: usize,
    /// Images that could not be read or decoded.
    pub failed: usize,
    pub skipped: usize,
    /// Images not measured because the run was interrupted before them
    /// (listed with that error); not counted in `failed`.
    pub interrupted: usize,
    /// True when the run was interrupted: the report holds only part of
    /// what was asked, and a rerun is needed for the rest.
    pub partial: bool,
    /// Images taken from the journal of an earlier, interrupted run
    /// (`--resume`) instead of being measured again; 0 in a run that
    /// measured everything itself. Their entries are as that run wrote them.
    pub from_journal: usize,
    /// Range of the images' SDAS values, um (null when none was measured).
    pub sdas_um_min: Option<f64>,
    pub sdas_um_median: Option<f64>,
    pub sdas_um_max: Option<f64>,
    /// Verdicts per zone and for the batch (with --spec), else absent.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "AcceptanceSummary")]
    pub acceptance: Option<AcceptanceSummary>,
}

/// Verdicts of a batch against its spec: fail when any image failed;
/// otherwise indeterminate when any is indeterminate or was not assessed
/// (or could not be read); otherwise pass.
#[derive(Serialize, JsonSchema, Debug)]
pub struct AcceptanceSummary {
    pub verdict: Option<Decision>,
    pub pass: usize,
    pub fail: usize,
    pub indeterminate: usize,
    /// Images matching no zone of a spec without a general limit.
    pub not_assessed: usize,
    /// Images that could not be read (counted as indeterminate too).
    pub unreadable: usize,
    pub zones: Vec<ZoneSummary>,
}

/// The verdict of one zone, or of the images under the spec's general limit.
#[derive(Serialize, JsonSchema, Debug)]
pub struct ZoneSummary {
    /// The zone's name; null for images under the spec's general limit.
    pub zone: Option<String>,
    pub limit_um: Option<f64>,
    pub images: usize,
    pub pass: usize,
    pub fail: usize,
    pub indeterminate: usize,
    /// The zone's verdict: its worst image, or the pool's decision when the
    /// zone is pooled.
    pub verdict: Option<Decision>,
    /// A pooled zone (spec `pool`): its mean SDAS from its fields, the
    /// fields used and left out, and its decision; absent otherwise.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "crate::interpret::pool::PooledZone")]
    pub pooled: Option<crate::interpret::pool::PooledZone>,
}

/// Per-zone and batch verdicts from the images' acceptances.
pub fn acceptance_summary(spec: &Spec, images: &[ImageReport]) -> AcceptanceSummary {
    let count =
        |d: Decision, list: &[&Acceptance]| list.iter().filter(|a| a.decision == Some(d)).count();
    let assessed: Vec<&Acceptance> = images
        .iter()
        .filter_map(|i| i.acceptance.as_ref())
        .collect();
    let unreadable = images.iter().filter(|i| i.error.is_some()).count();
    let mut groups: Vec<(Option<String>, Option<f64>)> = spec
        .zones
        .iter()
        .map(|z| (Some(z.name.clone()), Some(z.limit_um)))
        .collect();
    if spec.limit_um.is_some() {
        groups.push((None, spec.limit_um));
    }
    // Images of pooled zones are decided by their zone's pool; the others
    // one by one.
    let mut verdicts: Vec<Option<Decision>> = assessed
        .iter()
        .filter(|a| !(a.limit_um.is_some() && spec.pools(a.zone.as_deref())))
        .map(|a| a.decision)
        .collect();
    let zones: Vec<ZoneSummary> = groups
        .into_iter()
        .map(|(zone, limit_um)| {
            let members: Vec<&Acceptance> = assessed
                .iter()
                .copied()
                .filter(|a| a.zone == zone && a.limit_um.is_some())
                .collect();
            let pooled = match limit_um {
                Some(limit) if spec.pools(zone.as_deref()) => {
                    let offered: Vec<crate::interpret::pool::Offered> = images
                        .iter()
                        .filter_map(|i| {
                            let a = i.acceptance.as_ref()?;
                            (a.zone == zone && a.limit_um.is_some()).then_some(
                                crate::interpret::pool::Offered {
                                    file: &i.file,
                                    acceptance: Some(a),
                                    error: i.error.is_some(),
                                },
                            )
                        })
                        .collect();
                    let (rule, guard) = spec.rule_of(zone.as_deref());
                    (!offered.is_empty())
                        .then(|| crate::interpret::pool::decide_zone(&offered, limit, rule, guard))
                }
                _ => None,
            };
            let verdict = match &pooled {
                Some(p) => Some(p.decision),
                None => acceptance::verdict(members.iter().map(|a| a.decision)),
            };
            if pooled.is_some() {
                verdicts.push(verdict);
            }
            ZoneSummary {
                images: members.len(),
                pass: count(Decision::Pass, &members),
                fail: count(Decision::Fail, &members),
                indeterminate: count(Decision::Indeterminate, &members),
                verdict,
                pooled,
                zone,
                limit_um,
            }
        })
        .collect();
    let not_assessed = assessed.iter().filter(|a| a.decision.is_none()).count();
    AcceptanceSummary {
        verdict: acceptance::verdict(verdicts),
        pass: count(Decision::Pass, &assessed),
        fail: count(Decision::Fail, &assessed),
        indeterminate: count(Decision::Indeterminate, &assessed),
        not_assessed,
        unreadable,
        zones,
    }
}

/// Rounds to `digits` decimals, for a report that reads well and compares
/// equal across runs.
pub fn round(x: f64, digits: i32) -> f64 {
    let f = 10f64.powi(digits);
    let r = (x * f).round() / f;
    if r == 0.0 {
        0.0
    } else {
        r
    }
}

/// Decimals that give the 95 % half-width `half` two significant digits,
/// to which the value and its interval are rounded (JCGM 100:2008, 7.2.6:
/// an uncertainty needs at most two significant digits, and the estimate is
/// rounded to the same place); at most 4, the report's precision.
pub fn digits_for_uncertainty(half: f64) -> i32 {
    if !(half.is_finite() && half > 0.0) {
        return 4;
    }
    (1 - half.log10().floor() as i32).min(4)
}

fn um(cal: UmPerPx, px: f64) -> f64 {
    round(cal.to_um(Pixels(px)).0, 4)
}

fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

/// An annotation left out of the measurement.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct AnnotationReport {
    /// What it is.
    #[schemars(extend("enum" = ["text", "band", "outside_field"]))]
    #[serde(deserialize_with = "names::name")]
    pub kind: names::Name,
    /// Its rectangle, [x0, y0, x1, y1] in inclusive pixel indices.
    pub box_px: [u32; 4],
    /// Letters found in it (for a band, those of the text regions in it;
    /// 0 for an outside field).
    pub glyphs: usize,
    /// Median letter height (px); 0 for a band or an outside field.
    pub letter_height_px: f64,
    /// For `outside_field`: the round field of view kept, [cx, cy, semi-axis
    /// x, semi-axis y] in px (the outside of this ellipse is left out; its
    /// `box_px` is the whole image and is not in `excluded_px`); else null.
    #[serde(default)]
    pub field_px: Option<[f64; 4]>,
    /// Why it was left out.
    pub reason: String,
}

pub fn image_report(r: &ImageResult, opts: &MeasureOptions) -> ImageReport {
    let cal = r.calibration.as_ref().map(|c| c.um_per_px);
    ImageReport {
        file: crate::files::path_text(&r.file),
        sha256: r.info.as_ref().map(|i| i.sha256.clone()),
        width: r.info.as_ref().map(|i| i.width),
        height: r.info.as_ref().map(|i| i.height),
        bit_depth: r.info.as_ref().map(|i| i.bit_depth),
        calibration: r.calibration.as_ref().map(calibration_report),
        excluded_px: r.excluded.clone(),
        annotations: r
            .annotations
            .iter()
            .map(|a| AnnotationReport {
                kind: a.kind.as_str(),
                box_px: a.rect,
                glyphs: a.glyphs,
                letter_height_px: round(a.letter_height_px, 1),
                field_px: a.field_px.map(|f| f.map(|v| round(v, 1))),
                reason: a.reason(),
            })
            .collect(),
        sdas_um: {
            let digits = r
                .sdas
                .ci95
                .map_or(4, |[a, b]| digits_for_uncertainty(0.5 * (b.0 - a.0)));
            SdasReport {
                value: r.sdas.value.map(|v| round(v.0, digits)),
                ci95: r
                    .sdas
                    .ci95
                    .map(|[a, b]| [round(a.0, digits), round(b.0, digits)]),
                value_unrounded: r.sdas.value.map(|v| round(v.0, 4)),
                n: r.sdas.n,
                n_eff: round(r.sdas.n_eff, 1),
                methods: r.sdas.methods.iter().map(|m| m.name()).collect(),
                reason: r.sdas.reason.clone(),
                left_out: r
                    .sdas
                    .left_out
                    .iter()
                    .map(|(m, why)| LeftOutReport {
                        method: m.name(),
                        reason: why.clone(),
                    })
                    .collect(),
                birge_ratio: r.sdas.birge_ratio.map(|b| round(b, 4)),
                uncertainty: r.sdas.budget.map(|b| BudgetReport {
                    statistical_um: round(b.statistical_um, 4),
                    calibration_um: round(b.calibration_um, 4),
                    method_bias_um: round(b.method_bias_um, 4),
                    combined_standard_um: round(b.combined_um, 4),
                    coverage_factor: round(b.coverage_factor, 4),
                }),
            }
        },
        methods: match cal {
            Some(c) => methods_report(&r.methods, c, opts),
            None => MethodsReport::default(),
        },
        warnings: r.warnings.iter().map(|w| w.message.clone()).collect(),
        warning_codes: r.warnings.iter().map(|w| w.code).collect(),
        error: r.error.clone(),
        overlay: r.overlay.as_deref().map(crate::files::path_text),
        interpretation: match &r.interpretation {
            Some(Ok(i)) => Some(i.rounded()),
            _ => None,
        },
        acceptance: r.acceptance.as_ref().map(|a| Acceptance {
            compared_um: a.compared_um.map(|v| round(v, 4)),
            compared_ci95_um: a.compared_ci95_um.map(|[x, y]| [round(x, 4), round(y, 4)]),
            ..a.clone()
        }),
        at: match cal {
            Some(c) => r.at.iter().map(|a| at_report(a, c.get())).collect(),
            None => vec![],
        },
        profile: r
            .profiles
            .iter()
            .enumerate()
            .map(|(k, p)| {
                profile_report(
                    p,
                    r.profile_times.get(k).map(|t| t.as_slice()),
                    r.profile_plots
                        .get(k)
                        .and_then(|p| p.as_ref().ok())
                        .map(|p| p.as_path()),
                )
            })
            .collect(),
        map: r
            .map
            .as_ref()
            .map(|m| map_report(m, &r.map_times, &r.map_pictures)),
        morphology: r.morphology.as_ref().map(morphology_report),
    }
}

/// One image of a batch as the report takes it: measured in this run, or
/// taken from the journal of an earlier one.
#[derive(Debug)]
pub struct BatchImage {
    pub report: ImageReport,
    /// Not measured: the run was interrupted before this image.
    pub interrupted: bool,
    /// Taken from the journal of an earlier run (`--resume`) or of an
    /// attempt that a fault stopped (the supervisor of `measure`).
    pub from_journal: bool,
}

impl BatchImage {
    /// An image measured (or attempted, or passed over by an interrupt) in
    /// this run.
    pub fn measured(r: &ImageResult, opts: &MeasureOptions) -> Self {
        Self {
            report: image_report(r, opts),
            interrupted: r.interrupted,
            from_journal: false,
        }
    }

    /// An image's report read back from the journal of an earlier run.
    pub fn from_journal(report: ImageReport) -> Self {
        Self {
            report,
            interrupted: false,
            from_journal: true,
        }
    }

    /// Whether the image has a value (as [`ImageResult::measured`]).
    pub fn has_value(&self) -> bool {
        self.report.error.is_none() && self.report.sdas_um.value.is_some()
    }
}

/// Assembles the report of a batch from the results of this run.
pub fn build(
    inputs: &[String],
    opts: &MeasureOptions,
    results: &[ImageResult],
    skipped: &[Skipped],
    created_utc: String,
) -> Report {
    let images = results
        .iter()
        .map(|r| BatchImage::measured(r, opts))
        .collect();
    assemble(inputs, opts, images, skipped, created_utc)
}

/// Assembles the report of a batch whose images are measured in this run or
/// taken from a journal, in input order.
pub fn assemble(
    inputs: &[String],
    opts: &MeasureOptions,
    batch: Vec<BatchImage>,
    skipped: &[Skipped],
    created_utc: String,
) -> Report {
    let skipped = skipped
        .iter()
        .map(|s| SkippedReport {
            file: crate::files::path_text(&s.file),
            reason: s.reason.clone(),
        })
        .collect();
    assemble_from(parameters(inputs, opts), batch, skipped, created_utc)
}

/// Assembles the report of a batch from its parameters, its images in
/// input order and the files passed over: the summary and the spec's
/// verdicts are computed here, from the images' entries alone (so that
/// the parts of a batch measured apart give the same report when joined,
/// see [`merge`]).
pub fn assemble_from(
    parameters: Parameters,
    batch: Vec<BatchImage>,
    skipped: Vec<SkippedReport>,
    created_utc: String,
) -> Report {
    let interrupted = batch.iter().filter(|b| b.interrupted).count();
    let failed = batch.iter().filter(|b| b.report.error.is_some()).count() - interrupted;
    let measured = batch.iter().filter(|b| b.has_value()).count();
    let from_journal = batch.iter().filter(|b| b.from_journal).count();
    let n = batch.len();
    let images: Vec<ImageReport> = batch.into_iter().map(|b| b.report).collect();
    let values: Vec<f64> = images.iter().filter_map(|i| i.sdas_um.value).collect();
    let summary = Summary {
        images: n,
        measured,
        without_value: n - measured - failed - interrupted,
        failed,
        skipped: skipped.len(),
        interrupted,
        partial: interrupted > 0,
        from_journal,
        sdas_um_min: values.iter().copied().reduce(f64::min),
        sdas_um_median: crate::stats::median(&values).map(|v| round(v, 4)),
        sdas_um_max: values.iter().copied().reduce(f64::max),
        acceptance: parameters
            .spec
            .as_ref()
            .map(|spec| acceptance_summary(spec, &images)),
    };
    Report {
        schema: SCHEMA,
        tool: Tool {
            name: env!("CARGO_PKG_NAME"),
            version: env!("CARGO_PKG_VERSION"),
        },
        created_utc,
        caution: CAUTION,
        parameters,
        images,
        skipped,
        summary,
    }
}

/// The report's record of what determines the measurement.
pub fn parameters(inputs: &[String], opts: &MeasureOptions) -> Parameters {
    Parameters {
        inputs: inputs.to_vec(),
        um_per_px: opts.calibration.manual.map(|v| v.get()),
        profile: opts
            .calibration
            .profile
            .as_ref()
            .map(|p| ProfileParameters {
                name: p.name.clone(),
                um_per_px: p.um_per_px.get(),
                rel_uncertainty: p.rel_uncertainty,
            }),
        scale_bar_um: opts.calibration.scale_bar.map(|b| b.length.0),
        scale_bar_rel_uncertainty: opts.calibration.scale_bar.map(|b| b.rel_uncertainty),
        scale_bar_auto: opts.calibration.read_label && opts.calibration.scale_bar.is_none(),
        methods: opts.methods.iter().map(|m| m.name()).collect(),
        max_megapixels: opts.load.max_megapixels,
        preprocess: PreprocessParameters {
            background_sigma_px: opts.preprocess.background_sigma_px,
        },
        fft: FftParameters {
            min_period_px: opts.fft.min_period_px,
            periods_per_tile: opts.fft.periods_per_tile,
            min_quality: opts.fft.min_quality,
            max_masked_fraction: opts.fft.max_masked_fraction,
            coarse_window_max_px: opts.fft.coarse_window_max_px,
        },
        intercept: InterceptParameters {
            convention: convention_name(opts.intercept.convention),
            target_rel_accuracy_pct: opts.target_rel_accuracy_pct,
        },
        spec: opts.spec.clone(),
        interpretation: opts.interpret.as_ref().map(|s| InterpretationParameters {
            correlation: s.correlation.id.clone(),
            composition_wt_pct: s.composition.clone(),
            freezing_range_k: s.freezing_range.map(|k| k.0),
            extrapolate: s.extrapolate,
        }),
        at: opts.at.iter().map(|a| a.text.clone()).collect(),
        along: opts.along.iter().map(|a| a.text.clone()).collect(),
        shard: None,
    }
}

/// What a batch amounts to, for the exit status of `measure`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Outcome {
    /// Every image measured (and, with a spec, every one passed).
    Ok,
    /// At least one image failed its limit: the casting failed.
    LimitFailed,
    /// At least one file could not be measured (unreadable, or nothing
    /// reliable to measure): the tool could not do its job for it.
    NotMeasured,
    /// Everything measured, but at least one decision is indeterminate or an
    /// image matched no limit.
    Indeterminate,
}

/// The batch's outcome, most serious first: a failed limit, then a file not
/// measured, then an indeterminate decision.
pub fn outcome(report: &Report) -> Outcome {
    let s = &report.summary;
    let verdict = s.acceptance.as_ref().and_then(|a| a.verdict);
    if verdict == Some(Decision::Fail) {
        Outcome::LimitFailed
    } else if s.measured < s.images {
        Outcome::NotMeasured
    } else if verdict == Some(Decision::Indeterminate) {
        Outcome::Indeterminate
    } else {
        Outcome::Ok
    }
}

/// Current time as RFC 3339 UTC, or the time given by the SOURCE_DATE_EPOCH
/// environment variable (reproducible builds convention) when it is set.
pub fn now_utc() -> String {
    // RFC 3339 has four-digit years: 253402300799 is 9999-12-31T23:59:59Z.
    // A value past it, or one the clock cannot add, is ignored like one
    // that does not parse.
    let t = std::env::var("SOURCE_DATE_EPOCH")
        .ok()
        .and_then(|s| s.trim().parse::<u64>().ok())
        .filter(|&s| s <= 253_402_300_799)
        .and_then(|s| std::time::UNIX_EPOCH.checked_add(std::time::Duration::from_secs(s)))
        .unwrap_or_else(std::time::SystemTime::now);
    rfc3339_or_epoch(t)
}

/// `t` in RFC 3339 to the second.
fn rfc3339_or_epoch(t: std::time::SystemTime) -> String {
    // A clock set before 1970 (humantime formats only times after the
    // epoch, and panics on others) or past year 9999 is written as the
    // epoch: the date of the report is then plainly not the run's.
    let latest = std::time::UNIX_EPOCH + std::time::Duration::from_secs(253_402_300_799);
    let t = if t < std::time::UNIX_EPOCH || t > latest {
        std::time::UNIX_EPOCH
    } else {
        t
    };
    humantime::format_rfc3339_seconds(t).to_string()
}

/// Pretty-printed JSON with a final newline.
pub fn to_json(report: &Report) -> String {
    let mut s = serde_json::to_string_pretty(report).unwrap_or_else(|e| {
        // Serialising plain structs of numbers and strings cannot fail; if it
        // ever did, say so in the output rather than panic.
        format!("{{\"error\": \"report serialisation failed: {e}\"}}")
    });
    s.push('\n');
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    // A machine whose clock is before 1970 (a flat clock battery can set
    // one): humantime panics on such times, which cost the report after
    // every image was measured.
    #[test]
    fn a_clock_before_1970_or_past_9999_gives_the_epoch() {
        let before = std::time::UNIX_EPOCH - std::time::Duration::from_secs(1);
        assert_eq!(rfc3339_or_epoch(before), "1970-01-01T00:00:00Z");
        let after = std::time::UNIX_EPOCH + std::time::Duration::from_secs(253_402_300_800);
        assert_eq!(rfc3339_or_epoch(after), "1970-01-01T00:00:00Z");
        // Unix time 1 000 000 000 (common practice, no single source: the
        // widely noted "billennium" of September 2001).
        let t = std::time::UNIX_EPOCH + std::time::Duration::from_secs(1_000_000_000);
        assert_eq!(rfc3339_or_epoch(t), "2001-09-09T01:46:40Z");
    }

    #[test]
    fn rounding_to_the_uncertainty() {
        // JCGM 100:2008, 7.2.6: two significant digits of the uncertainty.
        assert_eq!(digits_for_uncertainty(14.8), 0); // 41.1115 +- 14.8 -> 41 +- 15
        assert_eq!(round(41.1115, digits_for_uncertainty(14.8)), 41.0);
        assert_eq!(digits_for_uncertainty(0.65), 2); // 17.57 +- 0.65
        assert_eq!(digits_for_uncertainty(1.2), 1);
        assert_eq!(digits_for_uncertainty(250.0), -1); // to tens
        assert_eq!(round(1234.0, -1), 1230.0);
        assert_eq!(digits_for_uncertainty(1e-7), 4);
        assert_eq!(digits_for_uncertainty(f64::NAN), 4);
    }

    #[test]
    fn rounding() {
        assert_eq!(round(1.234_56, 2), 1.23);
        assert_eq!(round(-0.000_01, 2), 0.0);
        assert!(round(-0.000_01, 2).is_sign_positive());
    }
}
