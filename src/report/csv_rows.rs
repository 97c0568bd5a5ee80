//! The CSV summary: one row per image, the columns of [`CSV_COLUMNS`].

use super::*;

/// Columns of the CSV summary, one row per image. The `pooled_zone_*`
/// columns repeat, on each row of a zone the spec pools, that zone's pool
/// (its mean, interval, between-field sd, fields used, decision, fields to
/// decide and reason) and say what the pool took from this row's image;
/// they are empty for images of zones not pooled.
pub const CSV_COLUMNS: [&str; 41] = [
    "file",
    "um_per_px",
    "calibration_source",
    "sdas_um",
    "ci95_low_um",
    "ci95_high_um",
    "n",
    "fft_um",
    "intercept_um",
    "cooling_rate_K_per_s",
    "solidification_time_s",
    "zone",
    "limit_um",
    "decision",
    "warnings",
    "error",
    "reason",
    "warning_codes",
    "centres_um",
    "statistic",
    "compared_um",
    "compared_ci95_low_um",
    "compared_ci95_high_um",
    "calibration_rel_uncertainty",
    "cooling_rate_ci95_low_K_per_s",
    "cooling_rate_ci95_high_K_per_s",
    "solidification_time_ci95_low_s",
    "solidification_time_ci95_high_s",
    "correlation",
    "tool",
    "schema",
    "caution",
    "pooled_zone_um",
    "pooled_zone_ci95_low_um",
    "pooled_zone_ci95_high_um",
    "pooled_zone_between_field_sd_um",
    "pooled_zone_fields_used",
    "pooled_zone_decision",
    "pooled_zone_fields_to_decide",
    "pooled_zone_reason",
    "pooled_zone_this_field",
];

/// The pool of the zone an image was offered to (spec `pool`), if any: the
/// zone's summary whose pool names the file among the fields used or left
/// out.
fn pooled_zone_of<'a>(
    report: &'a Report,
    image: &ImageReport,
) -> Option<&'a crate::interpret::pool::PooledZone> {
    let a = image.acceptance.as_ref()?;
    report
        .summary
        .acceptance
        .as_ref()?
        .zones
        .iter()
        .filter(|z| z.zone == a.zone)
        .filter_map(|z| z.pooled.as_ref())
        .find(|p| {
            p.fields_used.contains(&image.file)
                || p.fields_left_out.iter().any(|l| l.file == image.file)
        })
}

/// What a pool took from a file: "used", or "left out: " and the reason.
fn field_part(pool: &crate::interpret::pool::PooledZone, file: &str) -> String {
    match pool.fields_left_out.iter().find(|l| l.file == file) {
        Some(l) => format!("left out: {}", l.reason),
        None => "used".into(),
    }
}

/// The CSV summary of a report: the header on the first row (so that a
/// spreadsheet's import finds it and the delimiter), then a row per image in
/// the report's order. Columns are only ever added at the end. The tool,
/// the report's schema and the caution are columns of every row, so that no
/// row travels without them. Empty cells are nulls.
pub fn csv_summary(report: &Report) -> crate::Result<String> {
    let encoding = |e: &dyn std::fmt::Display| crate::Error::Csv {
        reason: e.to_string(),
    };
    let mut out = String::new();
    let mut w = csv::WriterBuilder::new().from_writer(Vec::new());
    w.write_record(CSV_COLUMNS).map_err(|e| encoding(&e))?;
    let num = |v: Option<f64>| v.map(|x| format!("{x}")).unwrap_or_default();
    for i in &report.images {
        let cal = i.calibration.as_ref();
        let interp = i.interpretation.as_ref();
        let acc = i.acceptance.as_ref();
        let record = [
            i.file.clone(),
            num(cal.map(|c| c.um_per_px)),
            cal.map(|c| {
                serde_json::to_value(c.source)
                    .ok()
                    .and_then(|v| v.as_str().map(String::from))
                    .unwrap_or_default()
            })
            .unwrap_or_default(),
            num(i.sdas_um.value),
            num(i.sdas_um.ci95.map(|c| c[0])),
            num(i.sdas_um.ci95.map(|c| c[1])),
            i.sdas_um.n.to_string(),
            num(i.methods.fft.as_ref().and_then(|f| f.value)),
            num(i.methods.intercept.as_ref().and_then(|m| m.value)),
            num(interp.and_then(|t| t.cooling_rate().map(|r| r.0))),
            num(interp.and_then(|t| t.solidification_time().map(|t| t.0))),
            acc.and_then(|a| a.zone.clone()).unwrap_or_default(),
            num(acc.and_then(|a| a.limit_um)),
            acc.and_then(|a| a.decision)
                .map(|d| d.name().to_string())
                .unwrap_or_else(|| {
                    if acc.is_some() {
                        "not assessed".into()
                    } else {
                        String::new()
                    }
                }),
            i.warnings.len().to_string(),
            i.error.clone().unwrap_or_default(),
            i.sdas_um.reason.clone().unwrap_or_default(),
            i.warning_codes.join(";"),
            num(i.methods.centres.as_ref().and_then(|m| m.value)),
            acc.map(|a| {
                serde_json::to_value(a.statistic)
                    .ok()
                    .and_then(|v| v.as_str().map(String::from))
                    .unwrap_or_default()
            })
            .unwrap_or_default(),
            num(acc.and_then(|a| a.compared_um)),
            num(acc.and_then(|a| a.compared_ci95_um.map(|c| c[0]))),
            num(acc.and_then(|a| a.compared_ci95_um.map(|c| c[1]))),
            num(cal.and_then(|c| c.rel_uncertainty)),
            num(interp.and_then(|t| t.cooling_rate_k_per_s.ci95.map(|c| c[0]))),
            num(interp.and_then(|t| t.cooling_rate_k_per_s.ci95.map(|c| c[1]))),
            num(interp.and_then(|t| t.solidification_time_s.ci95.map(|c| c[0]))),
            num(interp.and_then(|t| t.solidification_time_s.ci95.map(|c| c[1]))),
            interp.map(|t| t.correlation.id.clone()).unwrap_or_default(),
            format!("{} {}", report.tool.name, report.tool.version),
            report.schema.to_string(),
            report.caution.to_string(),
        ];
        let pool = pooled_zone_of(report, i);
        let pooled = [
            num(pool.and_then(|p| p.value_um)),
            num(pool.and_then(|p| p.ci95_um.map(|c| c[0]))),
            num(pool.and_then(|p| p.ci95_um.map(|c| c[1]))),
            num(pool.and_then(|p| p.between_field_sd_um)),
            pool.map(|p| p.fields_used.len().to_string())
                .unwrap_or_default(),
            pool.map(|p| p.decision.name().to_string())
                .unwrap_or_default(),
            pool.and_then(|p| p.fields_to_decide)
                .map(|n| n.to_string())
                .unwrap_or_default(),
            pool.map(|p| p.reason.clone()).unwrap_or_default(),
            pool.map(|p| field_part(p, &i.file)).unwrap_or_default(),
        ];
        let record: Vec<String> = record.into_iter().chain(pooled).collect();
        w.write_record(&record).map_err(|e| encoding(&e))?;
    }
    let bytes = w.into_inner().map_err(|e| encoding(&e))?;
    out.push_str(&String::from_utf8_lossy(&bytes));
    Ok(out)
}
