//! Each method's part of the report: its value, interval and local
//! measurements in micrometres (tiles, lines, chains), built from the
//! method's outcome.

use super::*;
use crate::methods;

/// Each method's result and its local measurements, um (absent for a method
/// not run, and all absent without a calibration).
#[derive(Serialize, Deserialize, JsonSchema, Debug, Default)]
pub struct MethodsReport {
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "FftReport")]
    pub fft: Option<FftReport>,
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "InterceptReport")]
    pub intercept: Option<InterceptReport>,
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "CentresReport")]
    pub centres: Option<CentresReport>,
}

/// The centres method: arm-body centres linked into chains along rows
/// (spacing = end-to-end distance / gaps).
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "centres")]
pub struct CentresReport {
    pub value: Option<f64>,
    pub ci95: Option<[f64; 2]>,
    pub n_chains: usize,
    pub sd: Option<f64>,
    pub rel_accuracy_pct: Option<f64>,
    /// Chains in all that would bring %RA to the target, at the same spread.
    pub chains_for_target: Option<usize>,
    /// Arm-body centres found (after the thickness rule).
    pub n_centres: usize,
    /// Median distance between neighbouring parallel chains (the row or
    /// trunk spacing where the arms are cut across); never SDAS.
    pub row_spacing_um: Option<f64>,
    /// Median distance from a body's centre to the nearest centre on a
    /// distinct body (the larger of the two phases' medians); a method's
    /// value well above it is left out of the image's value.
    pub nearest_body_um: Option<f64>,
    /// Fraction of the chains whose nearest chain runs parallel to them, and
    /// the largest such fraction in the random point sets of the chance test.
    pub parallel_fraction: Option<f64>,
    pub chance_parallel_max: Option<f64>,
    /// The phase whose centres were taken as the arms ("darker", "brighter").
    #[schemars(extend("enum" = ["darker", "brighter", null]))]
    #[serde(deserialize_with = "names::optional_name")]
    pub arm_phase: Option<names::Name>,
    pub reason: Option<String>,
    /// A figure without the support a value needs; never used.
    pub indicative: Option<f64>,
    /// The chains, at most `MAX_LOCALS` of them (spread evenly over all
    /// when there are more; see `omitted`).
    pub chains: Vec<ChainReport>,
    /// The chains not listed, summarised (only when there are more than
    /// `MAX_LOCALS`).
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "LocalsOmitted")]
    pub omitted: Option<LocalsOmitted>,
}

#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct ChainReport {
    /// The centres along the chain, [x, y] in um from the top-left corner.
    pub points_um: Vec<[f64; 2]>,
    pub sdas_um: f64,
    /// Whether the chain entered the value (false: it runs across rows,
    /// its spacing longer than the distance to its nearest parallel chain).
    pub used: bool,
}

/// The line-intercept method.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "intercept", transform = schema::no_value_has_a_reason)]
pub struct InterceptReport {
    pub value: Option<f64>,
    pub ci95: Option<[f64; 2]>,
    pub n_lines: usize,
    pub sd: Option<f64>,
    pub rel_accuracy_pct: Option<f64>,
    /// Lines in all that would bring %RA to the target, at the same spread.
    pub lines_for_target: Option<usize>,
    #[schemars(schema_with = "schema::convention")]
    #[serde(deserialize_with = "names::name")]
    pub convention: names::Name,
    pub reason: Option<String>,
    /// A figure without the support a value needs (too few independent
    /// measurements for an interval, or an interval reaching zero): never
    /// used.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub indicative: Option<f64>,
    /// The test lines, at most `MAX_LOCALS` of them (spread evenly over
    /// all when there are more; see `omitted`).
    pub lines: Vec<LineReport>,
    /// The lines not listed, summarised (only when there are more than
    /// `MAX_LOCALS`).
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "LocalsOmitted")]
    pub omitted: Option<LocalsOmitted>,
}

/// A test line, its ends in um from the top-left corner.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct LineReport {
    pub x0_um: f64,
    pub y0_um: f64,
    pub x1_um: f64,
    pub y1_um: f64,
    /// Arms counted along the line.
    #[schemars(range(min = 2))]
    pub arms: usize,
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub sdas_um: f64,
}

/// The FFT method: SDAS from the spectral periodicity of tiles.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "fft", transform = schema::no_value_has_a_reason)]
pub struct FftReport {
    pub value: Option<f64>,
    pub ci95: Option<[f64; 2]>,
    /// Robust standard deviation of the used tiles' spacings.
    pub spread_um: Option<f64>,
    /// Tiles whose spacing entered the value.
    pub n_tiles: usize,
    /// Tiles whose spectra were analysed.
    pub n_tiles_analysed: usize,
    /// Side of the square tiles, px.
    pub window_px: usize,
    /// Side of the square tiles, um.
    pub window_um: f64,
    /// Mean direction along which the used tiles repeat, degrees
    /// counter-clockwise from the image's +x axis with y up, in [0, 180)
    /// (180 only by rounding).
    #[schemars(range(min = 0, max = 180))]
    pub orientation_deg: Option<f64>,
    /// Axial coherence of the used tiles' directions, 0 (all ways) to 1 (one
    /// way).
    #[schemars(range(min = 0, max = 1))]
    pub orientation_coherence: Option<f64>,
    /// The spacing between rows of spots, um, when most used tiles show two
    /// periods at right angles (the finer is the value, the coarser this).
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub row_spacing_um: Option<f64>,
    /// Whether the value is the spots' period along their rows, finer than
    /// the period the tiles first chose (the rows').
    pub read_along_rows: bool,
    /// A finer period at right angles that a minority of the used tiles
    /// show, too large a minority to call chance (the Wilson 95 % upper
    /// bound of its share reaches one half): the value may be the spacing
    /// between rows of arms cut across, and is then not used
    /// (`combine.rows-undecided`); null otherwise.
    pub rows_undecided: Option<RowsUndecidedReport>,
    pub reason: Option<String>,
    /// See `InterceptReport::indicative`.
    #[schemars(
        description = "A figure without the support a value needs (too few independent measurements for an interval, or an interval reaching zero): never used.",
        extend("exclusiveMinimum" = 0)
    )]
    pub indicative: Option<f64>,
    /// The analysed tiles, at most `MAX_LOCALS` of them (spread evenly over
    /// all when there are more; see `omitted`).
    pub tiles: Vec<TileReport>,
    /// The tiles not listed, summarised (only when there are more than
    /// `MAX_LOCALS`).
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "LocalsOmitted")]
    pub omitted: Option<LocalsOmitted>,
}

/// See `FftReport::rows_undecided`.
#[derive(Serialize, Deserialize, JsonSchema, Debug, PartialEq)]
pub struct RowsUndecidedReport {
    /// Median of the finer periods, um.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub period_um: f64,
    /// Used tiles that show it, and used tiles in all.
    pub tiles: usize,
    pub tiles_used: usize,
    /// Upper end of the Wilson 95 % interval of their share (each tile
    /// counting a quarter, as in the value's interval).
    #[schemars(range(min = 0.5, max = 1))]
    pub share_upper95: f64,
}

/// Local measurements a list leaves out: how many, and the spread of their
/// spacings.
#[derive(Serialize, Deserialize, JsonSchema, Debug, PartialEq)]
pub struct LocalsOmitted {
    /// Entries not listed.
    #[schemars(range(min = 1))]
    pub count: usize,
    /// Smallest, median and largest spacing among them, um (null when
    /// none of them has a spacing).
    pub sdas_um_min: Option<f64>,
    pub sdas_um_median: Option<f64>,
    pub sdas_um_max: Option<f64>,
}

/// Most entries a method's list of local measurements holds in the report
/// (tiles, lines, chains). An image measures thousands to a hundred
/// thousand of them at 64 megapixels (110 889 FFT tiles on a fine field),
/// which would make a report of hundreds of megabytes per image; 10 000
/// entries, spread over the whole field, still show how the spacing varies
/// across it (a 100 x 100 grid of tiles), keep a report within a few
/// megabytes per method, and leave the lists of a micrograph of a few
/// megapixels whole (a 0.7-megapixel synthetic field of fine arms gave
/// 2128 tiles, the ladder's tile sizes overlapping).
pub const MAX_LOCALS: usize = 10_000;

/// At most [`MAX_LOCALS`] of `items`, evenly spread over the list (which
/// each method keeps in scan order), and the left-out ones summarised by
/// their spacings (`sdas` of an entry, um).
fn capped<T>(items: Vec<T>, sdas: impl Fn(&T) -> Option<f64>) -> (Vec<T>, Option<LocalsOmitted>) {
    let n = items.len();
    if n <= MAX_LOCALS {
        return (items, None);
    }
    // Entry i * n / MAX_LOCALS for i in 0..MAX_LOCALS: distinct, ascending.
    let mut keep = vec![false; n];
    for i in 0..MAX_LOCALS {
        keep[i * n / MAX_LOCALS] = true;
    }
    let mut kept = Vec::with_capacity(MAX_LOCALS);
    let mut left: Vec<f64> = Vec::new();
    for (item, k) in items.into_iter().zip(keep) {
        if k {
            kept.push(item);
        } else if let Some(v) = sdas(&item).filter(|v| v.is_finite()) {
            left.push(v);
        }
    }
    let median = crate::stats::median(&left);
    let (min, max) = left
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    let some = !left.is_empty();
    let omitted = LocalsOmitted {
        count: n - kept.len(),
        sdas_um_min: some.then_some(min),
        sdas_um_median: median,
        sdas_um_max: some.then_some(max),
    };
    (kept, Some(omitted))
}

/// A tile, its centre in um from the top-left corner.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct TileReport {
    pub x_um: f64,
    pub y_um: f64,
    /// Null when the tile gave no spacing.
    pub sdas_um: Option<f64>,
    /// Direction along which the spacing repeats, degrees counter-clockwise
    /// from +x with y up.
    pub dir_deg: Option<f64>,
    /// The chosen spectral peak's prominence.
    pub quality: f64,
    /// Whether the tile entered the value.
    pub used: bool,
}

/// Each method's report detail, in micrometres.
pub(super) fn methods_report(
    outcomes: &[methods::Outcome],
    cal: UmPerPx,
    opts: &MeasureOptions,
) -> MethodsReport {
    let mut m = MethodsReport::default();
    // Value, interval and reason come from the common outcome: the evidence
    // rule (`methods::require_support`) may have withdrawn a method's own
    // value, which then appears only as `indicative`.
    let value = |o: &methods::Outcome| o.value.map(|v| um(cal, v.0));
    let ci95 = |o: &methods::Outcome| o.ci95.map(|[a, b]| [um(cal, a.0), um(cal, b.0)]);
    let indicative = |o: &methods::Outcome| o.indicative.map(|v| um(cal, v.0));
    for o in outcomes {
        match &o.detail {
            Detail::Fft(f) => {
                m.fft = Some(FftReport {
                    value: value(o),
                    ci95: ci95(o),
                    reason: o.reason.clone(),
                    indicative: indicative(o),
                    ..fft_report(f, cal)
                })
            }
            Detail::Intercept(i) => {
                m.intercept = Some(InterceptReport {
                    value: value(o),
                    ci95: ci95(o),
                    reason: o.reason.clone(),
                    indicative: indicative(o),
                    ..intercept_report(i, cal, opts.intercept.convention, o.for_target)
                })
            }
            Detail::Centres(c) => {
                let (chains, omitted) = capped(
                    c.chains
                        .iter()
                        .map(|ch| ChainReport {
                            points_um: ch
                                .points
                                .iter()
                                .map(|p| [um(cal, p[0]), um(cal, p[1])])
                                .collect(),
                            sdas_um: um(cal, ch.spacing_px),
                            used: ch.used,
                        })
                        .collect(),
                    |ch| Some(ch.sdas_um),
                );
                m.centres = Some(CentresReport {
                    value: value(o),
                    ci95: ci95(o),
                    n_chains: c.n_chains,
                    sd: c.sd_px.map(|v| um(cal, v.0)),
                    rel_accuracy_pct: c.rel_accuracy_pct.map(|v| round(v, 2)),
                    chains_for_target: o.for_target,
                    n_centres: c.centres.len(),
                    row_spacing_um: c.row_spacing_px.map(|v| um(cal, v)),
                    nearest_body_um: c.nearest_body_px.map(|v| um(cal, v)),
                    parallel_fraction: c.parallel_fraction.map(|v| round(v, 3)),
                    chance_parallel_max: c.chance_parallel_max.map(|v| round(v, 3)),
                    arm_phase: c.arm_phase,
                    reason: o.reason.clone(),
                    indicative: indicative(o),
                    chains,
                    omitted,
                })
            }
        }
    }
    m
}

fn intercept_report(
    i: &InterceptOutcome,
    cal: UmPerPx,
    convention: Convention,
    lines_for_target: Option<usize>,
) -> InterceptReport {
    let (lines, omitted) = capped(
        i.lines
            .iter()
            .map(|l| LineReport {
                x0_um: um(cal, l.x0_px),
                y0_um: um(cal, l.y0_px),
                x1_um: um(cal, l.x1_px),
                y1_um: um(cal, l.y1_px),
                arms: l.arms,
                sdas_um: um(cal, l.spacing_px),
            })
            .collect(),
        |l| Some(l.sdas_um),
    );
    InterceptReport {
        value: i.value_px.map(|v| um(cal, v.0)),
        ci95: i.ci95_px.map(|[a, b]| [um(cal, a.0), um(cal, b.0)]),
        n_lines: i.n_lines,
        sd: i.sd_px.map(|v| um(cal, v.0)),
        rel_accuracy_pct: i.rel_accuracy_pct.map(|v| round(v, 2)),
        lines_for_target,
        convention: convention_name(convention),
        reason: i.reason.clone(),
        indicative: None,
        lines,
        omitted,
    }
}

fn fft_report(f: &FftOutcome, cal: UmPerPx) -> FftReport {
    let (tiles, omitted) = capped(
        f.tiles
            .iter()
            .map(|t| TileReport {
                x_um: um(cal, t.cx_px),
                y_um: um(cal, t.cy_px),
                sdas_um: finite(t.spacing_px).map(|v| um(cal, v)),
                dir_deg: finite(t.dir_deg).map(|v| round(v, 2)),
                quality: round(t.quality, 3),
                used: t.used,
            })
            .collect(),
        |t| t.sdas_um,
    );
    FftReport {
        value: f.value_px.map(|v| um(cal, v.0)),
        ci95: f.ci95_px.map(|[a, b]| [um(cal, a.0), um(cal, b.0)]),
        spread_um: f.spread_px.map(|v| um(cal, v.0)),
        n_tiles: f.n_tiles_used,
        n_tiles_analysed: f.n_tiles_analysed,
        window_px: f.window_px,
        window_um: um(cal, f.window_px as f64),
        orientation_deg: f.orientation_deg.map(|v| round(v, 2)),
        orientation_coherence: f.orientation_coherence.map(|v| round(v, 3)),
        row_spacing_um: f.row_spacing_px.map(|v| um(cal, v.0)),
        read_along_rows: f.read_along_rows,
        rows_undecided: f.rows_undecided.map(|r| RowsUndecidedReport {
            period_um: um(cal, r.period_px),
            tiles: r.tiles,
            tiles_used: r.used,
            share_upper95: round(r.share_upper95, 3),
        }),
        reason: f.reason.clone(),
        indicative: None,
        tiles,
        omitted,
    }
}
