//! The report's `images[].at[]`: the local SDAS at each point asked for
//! with `measure --at`.

use super::{digits_for_uncertainty, names, round, schema};
use crate::spatial::AtResult;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// The SDAS at a point of the image (`--at X,Y[:R]`): the local
/// measurements that entered their method's value, within the radius of
/// the point, each method's read as its image value is, then combined as
/// the image's value is (two methods that agree, when more than one was
/// run). Null with a reason when they do not support a value.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "at")]
pub struct AtReport {
    /// The point as given on the command line.
    pub given: String,
    /// The point, um from the image's top-left corner (x to the right, y
    /// down).
    pub x_um: f64,
    pub y_um: f64,
    /// The point in pixels.
    pub x_px: f64,
    pub y_px: f64,
    /// The radius the value rests on, um: the one given, or the smallest
    /// that gives a value (the distance of the farthest measurement in it).
    /// Null when the point lies outside the image or no radius gives a value.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub radius_um: Option<f64>,
    /// `given` (R on the command line) or `smallest` (the smallest radius
    /// that gives a value).
    #[schemars(extend("enum" = ["given", "smallest"]))]
    #[serde(deserialize_with = "names::name")]
    pub radius_rule: names::Name,
    /// The local SDAS, um, rounded as the image's value; null with a reason.
    pub value_um: Option<f64>,
    /// Its 95 % interval (with the calibration's and the methods' shared
    /// uncertainty, as the image's), lower bound first.
    pub ci95_um: Option<[f64; 2]>,
    /// Local measurements behind the value (tiles, lines, chains).
    pub n: usize,
    /// Of those, how many count as independent (an FFT tile a quarter).
    #[schemars(range(min = 0))]
    pub n_eff: f64,
    /// The methods whose local values were combined into this one.
    #[schemars(schema_with = "schema::method_names")]
    #[serde(deserialize_with = "names::names")]
    pub methods: Vec<&'static str>,
    /// Why there is no value, when there is none.
    pub reason: Option<String>,
    /// Each method's local value within the radius.
    pub per_method: Vec<AtMethodReport>,
}

/// One method's local value at the point.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct AtMethodReport {
    #[schemars(schema_with = "schema::method_name")]
    #[serde(deserialize_with = "names::name")]
    pub method: names::Name,
    /// Its used local measurements within the radius.
    pub n: usize,
    #[schemars(range(min = 0))]
    pub n_eff: f64,
    /// Its local value, um (with its own bias in the interval), or null.
    pub value_um: Option<f64>,
    pub ci95_um: Option<[f64; 2]>,
    /// Why it has no local value, when it has none.
    pub reason: Option<String>,
}

/// The report entry of one point.
pub fn at_report(r: &AtResult, um_per_px: f64) -> AtReport {
    let e = &r.estimate;
    let digits = e
        .ci95
        .map_or(4, |[a, b]| digits_for_uncertainty(0.5 * (b.0 - a.0)));
    let px = |um: f64| round(um / um_per_px, 2);
    AtReport {
        given: r.spec.text.clone(),
        x_um: round(r.x_um, 4),
        y_um: round(r.y_um, 4),
        x_px: px(r.x_um),
        y_px: px(r.y_um),
        radius_um: r.radius_um.map(|v| round(v.0, 4)).filter(|v| *v > 0.0),
        radius_rule: if r.radius_given { "given" } else { "smallest" },
        value_um: e.value.map(|v| round(v.0, digits)),
        ci95_um: e
            .ci95
            .map(|[a, b]| [round(a.0, digits), round(b.0, digits)]),
        n: e.n,
        n_eff: round(e.n_eff, 1),
        methods: e.methods.iter().map(|m| m.name()).collect(),
        reason: e.reason.clone(),
        per_method: r.methods.iter().map(method_report).collect(),
    }
}

fn method_report(m: &crate::spatial::AtMethod) -> AtMethodReport {
    AtMethodReport {
        method: m.method.name(),
        n: m.n,
        n_eff: round(m.n_eff, 2),
        value_um: m.value.map(|v| round(v.0, 4)),
        ci95_um: m.ci95.map(|[a, b]| [round(a.0, 4), round(b.0, 4)]),
        reason: m.reason.clone(),
    }
}

/// SDAS against distance along a line (`--along X0,Y0:X1,Y1[:BIN]`): the
/// line cut into bins of equal length, each bin the square of that side
/// centred on the line, each bin's value read from the local measurements
/// in it as a point's is (`at`).
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "profile")]
pub struct ProfileReport {
    /// The line as given on the command line.
    pub given: String,
    /// The line's start and end, um from the top-left corner.
    pub from_um: [f64; 2],
    pub to_um: [f64; 2],
    /// The bins' length along the line (and their width across it), um.
    pub bin_um: f64,
    /// Why there is no profile (the line leaves the image); else null.
    pub reason: Option<String>,
    /// The bins, from the line's start.
    pub bins: Vec<BinReport>,
    /// The plot of the profile (PNG: SDAS, and with --correlation the
    /// local solidification time, against the distance along the line,
    /// each bin's interval as a band), when one was written; absent
    /// otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub plot: Option<String>,
}

/// One bin of a profile.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct BinReport {
    /// Distance of the bin's centre from the line's start, um.
    pub distance_um: f64,
    /// The bin's centre, um from the top-left corner.
    pub x_um: f64,
    pub y_um: f64,
    /// The bin's SDAS, um; null with a reason.
    pub value_um: Option<f64>,
    pub ci95_um: Option<[f64; 2]>,
    pub n: usize,
    #[schemars(range(min = 0))]
    pub n_eff: f64,
    #[schemars(schema_with = "schema::method_names")]
    #[serde(deserialize_with = "names::names")]
    pub methods: Vec<&'static str>,
    pub reason: Option<String>,
    /// Each method's value in the bin (as for a point).
    pub per_method: Vec<AtMethodReport>,
    /// With --correlation and a value: the bin's cooling rate from the
    /// chosen law (no alternatives); else absent.
    #[serde(
        default,
        rename = "cooling_rate_K_per_s",
        skip_serializing_if = "Option::is_none"
    )]
    pub cooling_rate_k_per_s: Option<crate::interpret::Quantity>,
    /// With --correlation and a value: the bin's local solidification
    /// time from the chosen law; else absent.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub solidification_time_s: Option<crate::interpret::Quantity>,
}

/// The report entry of one profile, with each bin's local times (with a
/// correlation) and the plot's path when one was written.
pub fn profile_report(
    p: &crate::spatial::Profile,
    times: Option<&[Option<crate::interpret::LocalTimes>]>,
    plot: Option<&std::path::Path>,
) -> ProfileReport {
    ProfileReport {
        given: p.spec.text.clone(),
        from_um: p.from_um.map(|v| round(v, 4)),
        to_um: p.to_um.map(|v| round(v, 4)),
        bin_um: round(p.bin_um, 4),
        reason: p.reason.clone(),
        plot: plot.map(|p| p.display().to_string()),
        bins: p
            .bins
            .iter()
            .enumerate()
            .map(|(k, b)| {
                let t = times.and_then(|t| t.get(k)).and_then(|t| t.as_ref());
                let e = &b.estimate;
                let digits = e
                    .ci95
                    .map_or(4, |[a, b]| digits_for_uncertainty(0.5 * (b.0 - a.0)));
                BinReport {
                    distance_um: round(b.distance_um, 4),
                    x_um: round(b.x_um, 4),
                    y_um: round(b.y_um, 4),
                    value_um: e.value.map(|v| round(v.0, digits)),
                    ci95_um: e
                        .ci95
                        .map(|[a, b]| [round(a.0, digits), round(b.0, digits)]),
                    n: e.n,
                    n_eff: round(e.n_eff, 1),
                    methods: e.methods.iter().map(|m| m.name()).collect(),
                    reason: e.reason.clone(),
                    per_method: b.methods.iter().map(method_report).collect(),
                    cooling_rate_k_per_s: t.map(|t| t.cooling_rate_k_per_s.clone()),
                    solidification_time_s: t.map(|t| t.solidification_time_s.clone()),
                }
            })
            .collect(),
    }
}
