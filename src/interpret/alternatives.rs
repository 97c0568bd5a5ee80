//! The other correlations of the same alloy family, interpreted beside the
//! chosen one and compared with it on the chosen law's quantity.

use super::*;

/// Whether two entries are for the same alloy family (the family names of
/// the library, compared without regard to case).
pub fn same_family(a: &Correlation, b: &Correlation) -> bool {
    let f = |c: &Correlation| c.alloy_family.trim().to_lowercase();
    !f(a).is_empty() && f(a) == f(b)
}

/// The interpretation with the chosen correlation, and beside it every
/// other entry of `library` for the same alloy family that applies to the
/// composition ([`Interpretation::alternatives`], each with its
/// [`Comparison`] to the chosen one); entries of the family that do not
/// apply are listed with the reason. A warning says when two laws disagree
/// beyond their 95 % intervals: the choice of law then matters more than
/// the measurement.
pub fn interpret_with_alternatives(
    corr: &Correlation,
    library: &[Correlation],
    req: &Request,
) -> Result<Interpretation> {
    let mut out = interpret(corr, req)?;
    for other in library
        .iter()
        .filter(|c| c.id != corr.id && same_family(c, corr))
    {
        match interpret(other, req) {
            Ok(mut alt) => {
                let cmp = compare(&out, &alt);
                if cmp.intervals_overlap == Some(false) {
                    out.warnings.push(format!(
                        "correlations '{}' and '{}' disagree beyond their 95 % intervals on the {}: {} against {} (ratio {}); the choice of law matters more than the measurement here",
                        corr.id,
                        other.id,
                        match cmp.quantity {
                            Some("cooling_rate_K_per_s") => "cooling rate (K/s)",
                            Some(_) => "solidification time (s)",
                            None => "result",
                        },
                        describe(cmp.chosen_value, cmp.chosen_ci95),
                        describe(cmp.value, cmp.ci95),
                        cmp.ratio.map_or("?".into(), |r| format!("{}", round_significant(r, 3)))
                    ));
                }
                alt.comparison = Some(cmp);
                out.alternatives.push(alt);
            }
            Err(e) => out.alternatives_not_applicable.push(NotApplicable {
                id: other.id.clone(),
                reason: e.to_string(),
            }),
        }
    }
    Ok(out)
}

fn describe(value: Option<f64>, ci: Option<[f64; 2]>) -> String {
    let r = |x: f64| round_significant(x, 4);
    match (value, ci) {
        (Some(v), Some([a, b])) => format!("{} ({} to {})", r(v), r(a), r(b)),
        (Some(v), None) => format!("{}", r(v)),
        _ => "none".into(),
    }
}

/// How an alternative compares with the chosen interpretation, on the
/// chosen law's own quantity when the alternative gives it, else on the
/// other one. The widest interval each has is compared (with the scatter
/// when published, else the measurement's).
fn compare(chosen: &Interpretation, alt: &Interpretation) -> Comparison {
    let pick = |i: &Interpretation, cr: bool| {
        if cr {
            i.cooling_rate_k_per_s.clone()
        } else {
            i.solidification_time_s.clone()
        }
    };
    let first_cr = chosen.correlation.form == Form::CoolingRate.name();
    let found = [first_cr, !first_cr].into_iter().find_map(|cr| {
        let (a, b) = (pick(chosen, cr), pick(alt, cr));
        (a.value.is_some() && b.value.is_some()).then_some((cr, a, b))
    });
    let Some((cr, a, b)) = found else {
        return Comparison {
            quantity: None,
            chosen_value: None,
            chosen_ci95: None,
            value: None,
            ci95: None,
            ratio: None,
            intervals_overlap: None,
            note: "no quantity both laws give (a freezing range links the two forms)".into(),
        };
    };
    let ia = a.ci95_with_scatter.or(a.ci95);
    let ib = b.ci95_with_scatter.or(b.ci95);
    let overlap = match (ia, ib) {
        (Some([a0, a1]), Some([b0, b1])) => Some(a0 <= b1 && b0 <= a1),
        _ => None,
    };
    let note = match overlap {
        Some(true) => "the intervals overlap".to_string(),
        Some(false) => {
            "the intervals do not overlap: the laws disagree beyond their intervals".to_string()
        }
        None => "no interval on one side: agreement cannot be judged".to_string(),
    };
    Comparison {
        quantity: Some(if cr {
            "cooling_rate_K_per_s"
        } else {
            "solidification_time_s"
        }),
        chosen_value: a.value,
        chosen_ci95: ia,
        value: b.value,
        ci95: ib,
        // Two finite values can have a quotient beyond f64 (1e300 over
        // 1e-10): then there is no ratio to report.
        ratio: a
            .value
            .zip(b.value)
            .map(|(x, y)| y / x)
            .filter(|r| r.is_finite() && *r > 0.0),
        intervals_overlap: overlap,
        note,
    }
}
