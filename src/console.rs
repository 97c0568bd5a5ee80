//! The lines a person reads on the terminal while a batch is measured: each
//! image's value or why there is none, its decision naming what was
//! compared, its interpretation and warnings, and the batch summary. Pure
//! text from the report types; the binary prints it.

use crate::interpret::acceptance::Statistic;
use crate::interpret::Quantity;
use crate::report::{self, ImageReport, Report};

/// An image's lines: its value or why there is none, the decision naming
/// what was compared, the interpretation, and its warnings.
pub fn image_lines(img: &ImageReport) -> Vec<String> {
    let mut lines = Vec::new();
    match (&img.error, img.sdas_um.value) {
        (Some(e), _) => lines.push(format!("error    {e}")),
        (None, Some(v)) => {
            // As many decimals as the report keeps (two significant digits
            // of the interval's half-width).
            let d = img
                .sdas_um
                .ci95
                .map_or(2, |[a, b]| report::digits_for_uncertainty(0.5 * (b - a)))
                .clamp(0, 4) as usize;
            let ci = img
                .sdas_um
                .ci95
                .map(|[a, b]| format!(" (95% CI {a:.d$} to {b:.d$})"))
                .unwrap_or_default();
            lines.push(format!(
                "measured {}: SDAS {v:.d$} um{ci}, n = {} ({:.1} independent)",
                img.file, img.sdas_um.n, img.sdas_um.n_eff
            ));
        }
        (None, None) => lines.push(format!(
            "no value {}: {}",
            img.file,
            img.sdas_um.reason.as_deref().unwrap_or("no reason given")
        )),
    }
    if let Some(a) = &img.acceptance {
        let zone = a
            .zone
            .as_deref()
            .map(|z| format!(" [{z}]"))
            .unwrap_or_default();
        // What was compared, named, with its interval and the limit.
        let statistic = match a.statistic {
            Statistic::Value => "image value",
            Statistic::MaxLocal => "largest local value",
        };
        let compared = match (a.compared_um, a.compared_ci95_um, a.limit_um) {
            (Some(v), Some([lo, hi]), Some(l)) => {
                format!(" ({statistic} {v:.2} um, 95% CI {lo:.2} to {hi:.2}; limit {l} um)")
            }
            (Some(v), None, Some(l)) => format!(" ({statistic} {v:.2} um; limit {l} um)"),
            (None, _, Some(l)) => format!(" ({statistic}: none; limit {l} um)"),
            _ => String::new(),
        };
        lines.push(match a.decision {
            Some(d) => format!(
                "  {}{zone}{compared}: {}",
                d.name().to_uppercase(),
                a.reason
            ),
            None => format!("  NOT ASSESSED{zone}: {}", a.reason),
        });
    }
    if let Some(i) = &img.interpretation {
        let q = |name: &str, unit: &str, v: &Quantity| match (v.value, v.ci95) {
            (Some(x), Some([a, b])) => format!("{name} {x} {unit} (95% CI {a} to {b})"),
            (Some(x), None) => format!("{name} {x} {unit}"),
            _ => format!("{name}: none"),
        };
        lines.push(format!(
            "  {}; {} [{}]",
            q("cooling rate", "K/s", &i.cooling_rate_k_per_s),
            q("solidification time", "s", &i.solidification_time_s),
            i.correlation.id
        ));
    }
    lines.extend(img.at.iter().map(at_line));
    for p in &img.profile {
        let valued = p.bins.iter().filter(|b| b.value_um.is_some()).count();
        lines.push(match &p.reason {
            Some(r) => format!("  along {}: no profile: {r}", p.given),
            None => format!(
                "  along {}: {} bin(s) of {:.1} um, {valued} with a value (images[].profile)",
                p.given,
                p.bins.len(),
                p.bin_um
            ),
        });
    }
    for p in &img.profile {
        if let Some(plot) = &p.plot {
            lines.push(format!("  picture: {plot} (profile along {})", p.given));
        }
    }
    if let Some(m) = &img.map {
        lines.push(match &m.reason {
            Some(r) => format!("  map: none: {r}"),
            None => format!(
                "  map: {} of {} cells of {:.1} um with a value (images[].map)",
                m.cells_with_value,
                m.columns * m.rows,
                m.step_um
            ),
        });
        for p in [&m.picture_sdas, &m.picture_solidification_time]
            .into_iter()
            .flatten()
        {
            lines.push(format!("  picture: {p}"));
        }
    }
    if let Some(m) = &img.morphology {
        let aniso = m
            .anisotropy
            .map(|a| format!("anisotropy {a:.2}; "))
            .unwrap_or_default();
        let counts = format!(
            "{} aligned, {} crossed, {} undecided neighbourhoods of {:.0} um",
            m.aligned, m.crossed, m.undecided, m.step_um
        );
        let growth = match (m.growth_direction_deg, m.growth_spread_deg) {
            (Some(d), Some(s)) => format!(", growth direction {d:.1} deg (spread {s:.1} deg)"),
            _ => String::new(),
        };
        lines.push(match (&m.class, &m.reason) {
            (Some(c), _) => format!("  morphology: {c}{growth} ({aniso}{counts})"),
            (None, r) => format!(
                "  morphology: none: {} ({aniso}{counts})",
                r.as_deref().unwrap_or("no reason given")
            ),
        });
    }
    if let Some(o) = &img.overlay {
        lines.push(format!("  picture: {o}"));
    }
    for w in &img.warnings {
        lines.push(format!("  warning: {w}"));
    }
    lines
}

/// The line of one `--at` point: where, within what radius, the value with
/// its interval and support, or why there is none.
fn at_line(a: &report::AtReport) -> String {
    let radius = match (a.radius_um, a.radius_rule) {
        (Some(r), "given") => format!(" within {r:.1} um"),
        (Some(r), _) => format!(" within {r:.1} um (the smallest radius with a value)"),
        (None, _) => String::new(),
    };
    let place = format!(
        "  at {} ({:.1} um, {:.1} um){radius}",
        a.given, a.x_um, a.y_um
    );
    match (a.value_um, a.ci95_um) {
        (Some(v), Some([lo, hi])) => format!(
            "{place}: SDAS {v} um (95% CI {lo} to {hi}), n = {} ({:.1} independent) [{}]",
            a.n,
            a.n_eff,
            a.methods.join(", ")
        ),
        _ => format!(
            "{place}: no value: {}",
            a.reason.as_deref().unwrap_or("no reason given")
        ),
    }
}

/// The batch's closing lines: counts, each acceptance zone's tally and the
/// batch verdict.
pub fn batch_lines(rep: &Report) -> Vec<String> {
    let s = &rep.summary;
    let mut lines = vec![format!(
        "{} image(s): {} measured, {} without a value, {} failed, {} skipped",
        s.images, s.measured, s.without_value, s.failed, s.skipped
    )];
    if s.from_journal > 0 {
        lines.push(format!(
            "{} of them taken over from a journal (an earlier run with --resume, or an attempt a fault stopped), not measured again",
            s.from_journal
        ));
    }
    if s.partial {
        lines.push(format!(
            "interrupted: {} image(s) not measured; the report is partial (summary.partial), run again for the rest",
            s.interrupted
        ));
    }
    if let Some(a) = &s.acceptance {
        for z in &a.zones {
            lines.push(format!(
                "zone {} (limit {} um): {} image(s), {} pass, {} fail, {} indeterminate: {}",
                z.zone.as_deref().unwrap_or("(general limit)"),
                z.limit_um.map_or("none".into(), |l| l.to_string()),
                z.images,
                z.pass,
                z.fail,
                z.indeterminate,
                z.verdict.map_or("no images", |d| d.name())
            ));
            if let Some(p) = &z.pooled {
                let value = match (p.value_um, p.ci95_um) {
                    (Some(v), Some([lo, hi])) => {
                        format!("pooled mean {v:.2} um (95% CI {lo:.2} to {hi:.2})")
                    }
                    (Some(v), None) => format!("pooled mean {v:.2} um (no interval)"),
                    _ => "no pooled mean".to_string(),
                };
                lines.push(format!(
                    "  {value} of {} field(s), {} left out: {}; {}",
                    p.fields_used.len(),
                    p.fields_left_out.len(),
                    p.decision.name().to_uppercase(),
                    p.reason
                ));
                for l in &p.fields_left_out {
                    lines.push(format!("  left out of the pool: {}: {}", l.file, l.reason));
                }
            }
        }
        if a.not_assessed > 0 {
            lines.push(format!(
                "{} image(s) matched no zone and were not assessed",
                a.not_assessed
            ));
        }
        lines.push(format!(
            "batch verdict: {}",
            a.verdict
                .map_or("no images".to_string(), |d| d.name().to_uppercase())
        ));
    }
    lines
}
