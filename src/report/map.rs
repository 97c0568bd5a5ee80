//! The report's `images[].map`: the grid of local SDAS over the image
//! (`measure --map`, and `--points` which reads it).

use super::{digits_for_uncertainty, round};
use crate::spatial::map::Map;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// The local SDAS over the image on a grid of square cells, each cell's
/// value read from the local measurements within `radius_um` of its
/// centre by the rules of a point (`at`: each method's own statistics, two
/// methods that agree, one population around the centre). A cell without
/// that support is null.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
#[schemars(rename = "map")]
pub struct MapReport {
    /// The top-left corner of the first cell, um from the image's top-left
    /// corner (x to the right, y down): the image's corner.
    pub origin_um: [f64; 2],
    /// The cells' side, um (cell [r][c] spans x from origin + c step, y
    /// from origin + r step; the last row and column may reach past the
    /// image's edge, their centres are kept on it).
    #[schemars(range(min = 0))]
    pub step_um: f64,
    /// The radius of each cell's neighbourhood around its centre, um.
    #[schemars(range(min = 0))]
    pub radius_um: f64,
    /// The local spacing the radius was set from (10 of them; the median
    /// of the local measurements that may enter a local value), um.
    #[schemars(range(min = 0))]
    pub spacing_um: f64,
    pub columns: usize,
    pub rows: usize,
    /// Cells with a value.
    pub cells_with_value: usize,
    /// Local SDAS, um, row by row from the top, each row from the left;
    /// null where the neighbourhood gives no value.
    pub sdas_um: Vec<Vec<Option<f64>>>,
    /// Lower and upper bounds of each cell's 95 % interval, um (null with
    /// the value).
    pub ci95_low_um: Vec<Vec<Option<f64>>>,
    pub ci95_high_um: Vec<Vec<Option<f64>>>,
    /// The reasons cells have no value, each with how many cells it
    /// holds for (the numbers in a reason, which differ from cell to cell,
    /// are left out of its key), most frequent first.
    pub reasons: Vec<MapReason>,
    /// With --correlation: each cell's local solidification time, s, from
    /// the chosen law (null where the SDAS is); else absent.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub solidification_time_s: Option<Vec<Vec<Option<f64>>>>,
    /// With --correlation: each cell's cooling rate, K/s; else absent.
    #[serde(
        default,
        rename = "cooling_rate_K_per_s",
        skip_serializing_if = "Option::is_none"
    )]
    pub cooling_rate_k_per_s: Option<Vec<Vec<Option<f64>>>>,
    /// The map pictures written (with --map): the local SDAS, and with
    /// --correlation the local solidification time; null when not written
    /// (the image's warnings say why).
    pub picture_sdas: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub picture_solidification_time: Option<String>,
    /// Why there is no map (no local measurement may enter a local
    /// value); else null.
    pub reason: Option<String>,
}

/// A reason cells have no value, and how many.
#[derive(Serialize, Deserialize, JsonSchema, Debug)]
pub struct MapReason {
    pub reason: String,
    pub cells: usize,
}

/// The reason with its numbers taken out, so that cells refused for the
/// same cause count together.
fn reason_key(r: &str) -> String {
    let mut out = String::with_capacity(r.len());
    let mut in_number = false;
    for ch in r.chars() {
        if ch.is_ascii_digit() || (in_number && ch == '.') {
            if !in_number {
                out.push('#');
            }
            in_number = true;
        } else {
            in_number = false;
            out.push(ch);
        }
    }
    out
}

/// The report entry of a map, with each cell's local times (with a
/// correlation) and the pictures written.
pub fn map_report(
    m: &Map,
    times: &[Option<crate::interpret::LocalTimes>],
    pictures: &[(&'static str, Result<std::path::PathBuf, String>)],
) -> MapReport {
    let grid = |f: &dyn Fn(usize) -> Option<f64>| -> Vec<Vec<Option<f64>>> {
        (0..m.rows)
            .map(|r| (0..m.columns).map(|c| f(r * m.columns + c)).collect())
            .collect()
    };
    let digits = |k: usize| {
        m.cells[k]
            .ci95
            .map_or(4, |[a, b]| digits_for_uncertainty(0.5 * (b.0 - a.0)))
    };
    let mut reasons: Vec<MapReason> = vec![];
    for c in &m.cells {
        if c.value.is_some() {
            continue;
        }
        let key = reason_key(c.reason.as_deref().unwrap_or("no reason given"));
        match reasons.iter_mut().find(|r| r.reason == key) {
            Some(r) => r.cells += 1,
            None => reasons.push(MapReason {
                reason: key,
                cells: 1,
            }),
        }
    }
    reasons.sort_by(|a, b| b.cells.cmp(&a.cells).then(a.reason.cmp(&b.reason)));
    let picture = |what: &str| {
        pictures
            .iter()
            .find(|(w, _)| *w == what)
            .and_then(|(_, p)| p.as_ref().ok())
            .map(|p| p.display().to_string())
    };
    let with_times = !times.is_empty();
    MapReport {
        origin_um: m.origin_um.map(|v| round(v, 4)),
        step_um: round(m.step_um, 4),
        radius_um: round(m.radius_um, 4),
        spacing_um: round(m.spacing_um, 4),
        columns: m.columns,
        rows: m.rows,
        cells_with_value: m.valued(),
        sdas_um: grid(&|k| m.cells[k].value.map(|v| round(v.0, digits(k)))),
        ci95_low_um: grid(&|k| m.cells[k].ci95.map(|c| round(c[0].0, digits(k)))),
        ci95_high_um: grid(&|k| m.cells[k].ci95.map(|c| round(c[1].0, digits(k)))),
        reasons,
        solidification_time_s: with_times.then(|| {
            grid(&|k| {
                times
                    .get(k)
                    .and_then(|t| t.as_ref())
                    .and_then(|t| t.solidification_time_s.value)
            })
        }),
        cooling_rate_k_per_s: with_times.then(|| {
            grid(&|k| {
                times
                    .get(k)
                    .and_then(|t| t.as_ref())
                    .and_then(|t| t.cooling_rate_k_per_s.value)
            })
        }),
        picture_sdas: picture("sdas"),
        picture_solidification_time: picture("solidification_time"),
        reason: m.reason.clone(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reasons_count_together_without_their_numbers() {
        assert_eq!(
            reason_key("3 local measurement(s) (0.8 independent) within 12.5 um"),
            "# local measurement(s) (# independent) within # um"
        );
    }
}
