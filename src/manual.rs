//! Lines measured by hand: a CSV with one test line per row (its length in
//! micrometres and the number of arms it crosses), so that a lab can set its
//! manual practice beside the automatic methods, with the same statistics.
//!
//! ```text
//! length_um,arms
//! 212.5,6
//! 180,5
//! ```
//!
//! Each line's spacing follows the convention chosen, as for `measure`:
//! centre to centre (the default), length / (arms - 1), where `length_um` is
//! the distance between the centres of the first and last arms counted; or
//! length over count, length / arms (the line method as usually taught: the
//! line spans as many arm periods as it crosses arms). Other columns are
//! ignored; a header row naming `length_um` and `arms` is required. A
//! length must be a finite positive number of at most 100 mm, the widest
//! field of a micrograph ([`crate::interpret::plausibility::FIELD_WIDTH_RANGE_UM`]):
//! a longer one is a unit slip, and would overflow the statistics.

use crate::methods::intercept::Convention;

use crate::stats::{measurements_for_target, Summary};
use crate::{Error, Result};
use serde::Serialize;

/// One hand-measured line.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct ManualLine {
    pub length_um: f64,
    pub arms: u32,
    pub sdas_um: f64,
}

/// The statistics of a set of hand-measured lines.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ManualStats {
    pub file: String,
    pub convention: &'static str,
    pub n_lines: usize,
    pub mean_um: f64,
    pub sd_um: f64,
    pub ci95_um: [f64; 2],
    pub rel_accuracy_pct: f64,
    pub target_rel_accuracy_pct: f64,
    /// Lines needed for the target %RA at the same mean and spread.
    pub lines_for_target: Option<usize>,
    pub lines: Vec<ManualLine>,
}

/// Reads lines from CSV text under a convention; `origin` names the file in
/// messages.
pub fn parse(text: &str, origin: &str, convention: Convention) -> Result<Vec<ManualLine>> {
    let bad = |reason: String| Error::Input {
        path: origin.into(),
        reason,
    };
    let mut rdr = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .flexible(true)
        .comment(Some(b'#'))
        .from_reader(text.as_bytes());
    let headers = rdr
        .headers()
        .map_err(|e| bad(format!("cannot read the header row: {e}")))?
        .clone();
    let col = |name: &str| {
        headers
            .iter()
            .position(|h| h.eq_ignore_ascii_case(name))
            .ok_or_else(|| {
                bad(format!(
                    "no '{name}' column (the header row must name length_um and arms; it has: {})",
                    crate::error::excerpt(&headers.iter().collect::<Vec<_>>().join(", "), 200)
                ))
            })
    };
    let (li, ai) = (col("length_um")?, col("arms")?);
    let mut lines = Vec::new();
    for (k, rec) in rdr.records().enumerate() {
        let row = k + 2;
        let rec = rec.map_err(|e| bad(format!("row {row}: {e}")))?;
        let field = |i: usize, name: &str| {
            rec.get(i)
                .filter(|s| !s.is_empty())
                .ok_or_else(|| bad(format!("row {row}: no {name} value")))
        };
        // Values are quoted in messages at most 40 characters long.
        let quoted = |i: usize| crate::error::excerpt(&rec[i], 40);
        let length: f64 = field(li, "length_um")?.parse().map_err(|_| {
            bad(format!(
                "row {row}: length_um '{}' is not a number",
                quoted(li)
            ))
        })?;
        let arms_text = field(ai, "arms")?;
        let arms: u32 = arms_text.parse().map_err(|_| {
            if arms_text.bytes().all(|b| b.is_ascii_digit()) {
                bad(format!(
                    "row {row}: arms '{}' is beyond the largest count read ({})",
                    quoted(ai),
                    u32::MAX
                ))
            } else {
                bad(format!(
                    "row {row}: arms '{}' is not a whole number",
                    quoted(ai)
                ))
            }
        })?;
        // Rust reads "1e400" as infinity: a number, but no length.
        if !length.is_finite() {
            return Err(bad(format!(
                "row {row}: length_um '{}' is not a finite number",
                quoted(li)
            )));
        }
        if length <= 0.0 {
            return Err(bad(format!("row {row}: length_um must be positive")));
        }
        let widest = crate::interpret::plausibility::FIELD_WIDTH_RANGE_UM[1];
        if length > widest {
            return Err(bad(format!(
                "row {row}: length_um {} is longer than any micrograph's field (at most {} um, 100 mm); most likely a unit slip",
                crate::units::fmt_num(length),
                widest
            )));
        }
        let spacings = match convention {
            Convention::LengthOverCount => arms as f64,
            Convention::CentreToCentre => arms.saturating_sub(1) as f64,
        };
        if spacings < 1.0 {
            return Err(bad(format!(
                "row {row}: {arms} arm(s) give no spacing under the {} convention (at least {} needed)",
                crate::report::convention_name(convention),
                if convention == Convention::CentreToCentre { 2 } else { 1 }
            )));
        }
        // A length near the smallest f64 (5e-324) over many spacings
        // underflows to a spacing of 0, which no statistic can use (its
        // relative accuracy is 0 / 0): refused, with what was given.
        let sdas_um = length / spacings;
        if sdas_um <= 0.0 {
            return Err(bad(format!(
                "row {row}: length_um {} over {} spacing(s) is smaller than any number armspace holds",
                crate::units::fmt_num(length),
                spacings
            )));
        }
        lines.push(ManualLine {
            length_um: length,
            arms,
            sdas_um,
        });
    }
    Ok(lines)
}

/// Statistics of hand-measured lines (at least two).
pub fn summarise(
    lines: Vec<ManualLine>,
    origin: &str,
    target_pct: f64,
    convention: Convention,
) -> Result<ManualStats> {
    let values: Vec<f64> = lines.iter().map(|l| l.sdas_um).collect();
    let s = Summary::of(&values).ok_or_else(|| Error::Input {
        path: origin.into(),
        reason: format!(
            "at least two lines are needed for an interval ({} given)",
            values.len()
        ),
    })?;
    Ok(ManualStats {
        file: origin.to_string(),
        convention: crate::report::convention_name(convention),
        n_lines: s.n,
        mean_um: s.mean,
        sd_um: s.sd,
        ci95_um: s.ci95(),
        rel_accuracy_pct: s.rel_accuracy_pct,
        target_rel_accuracy_pct: target_pct,
        lines_for_target: measurements_for_target(&s, target_pct),
        lines,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_worked_set_of_manual_lines() {
        // Five lines worked by hand: 100/5 = 20, 132/6 = 22, 90/5 = 18,
        // 84/4 = 21, 95/5 = 19 um. Mean 20, s = sqrt(10/4) = 1.5811,
        // t(0.975, 4) = 2.776 (NIST/SEMATECH e-Handbook, table 1.3.6.7.2),
        // half-width 2.776 * 1.5811 / sqrt(5) = 1.963, %RA = 9.81.
        let text =
            "length_um,arms,operator\n100,5,A\n132,6,A\n# a comment\n90,5,B\n84,4,B\n95,5,B\n";
        let c = Convention::LengthOverCount;
        let s = summarise(parse(text, "m.csv", c).unwrap(), "m.csv", 10.0, c).unwrap();
        assert_eq!(s.n_lines, 5);
        assert!((s.mean_um - 20.0).abs() < 1e-12);
        assert!((s.sd_um - 2.5f64.sqrt()).abs() < 1e-12);
        assert!((s.ci95_um[1] - 21.963).abs() < 2e-3);
        assert!((s.rel_accuracy_pct - 9.81).abs() < 0.01);
        assert_eq!(s.lines_for_target, Some(5));
        // Centre to centre: the same lengths between first and last arm
        // centres span one spacing fewer: 100/4 = 25 um, 132/5 = 26.4 um.
        let c = Convention::CentreToCentre;
        let s = summarise(parse(text, "m.csv", c).unwrap(), "m.csv", 10.0, c).unwrap();
        assert!((s.lines[0].sdas_um - 25.0).abs() < 1e-12);
        assert!((s.lines[1].sdas_um - 26.4).abs() < 1e-12);
        assert_eq!(s.convention, "centre-to-centre");
    }

    #[test]
    fn bad_files_are_named_with_the_row() {
        for (text, words) in [
            ("length,arms\n1,2\n", "no 'length_um' column"),
            ("length_um,arms\n10,x\n", "row 2: arms 'x'"),
            ("length_um,arms\n10,3\nabc,3\n", "row 3: length_um 'abc'"),
            ("length_um,arms\n-4,3\n", "must be positive"),
            ("length_um,arms\n10,0\n", "at least 1"),
            ("length_um,arms\n10,1\n", "at least 2"),
            ("length_um,arms\n10,\n", "no arms value"),
            (
                "length_um,arms\n1e400,3\n",
                "'1e400' is not a finite number",
            ),
            ("length_um,arms\n1e300,3\n", "1e300 is longer than any"),
            (
                "length_um,arms\n10,99999999999\n",
                "beyond the largest count read",
            ),
        ] {
            // "at least 1" is the length-over-count floor, "at least 2" the
            // centre-to-centre one (a single arm has no centre-to-centre span).
            let c = if words == "at least 1" {
                Convention::LengthOverCount
            } else {
                Convention::CentreToCentre
            };
            let e = parse(text, "m.csv", c).unwrap_err().to_string();
            assert!(e.contains("m.csv") && e.contains(words), "{text:?}: {e}");
        }
        let c = Convention::CentreToCentre;
        let one = parse("length_um,arms\n10,2\n", "m.csv", c).unwrap();
        assert!(summarise(one, "m.csv", 10.0, c)
            .unwrap_err()
            .to_string()
            .contains("at least two"));
    }
}
