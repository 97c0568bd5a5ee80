//! The point table (`measure --points FILE.csv`): every local measurement
//! of every image, one row each, with the supported local SDAS of the map
//! cell it lies in and, with a correlation, that cell's local
//! solidification time and cooling rate; for a simulation's
//! post-processor.

use crate::pipeline::ImageResult;

/// The point table's columns, in order. Without a correlation the last six
/// are empty.
pub const POINT_COLUMNS: [&str; 19] = [
    "file",
    "method",
    "x_um",
    "y_um",
    "measured_um",
    "enters_local_values",
    "sdas_um",
    "ci95_low_um",
    "ci95_high_um",
    "cell_x_um",
    "cell_y_um",
    "cell_radius_um",
    "reason",
    "solidification_time_s",
    "solidification_time_ci95_low_s",
    "solidification_time_ci95_high_s",
    "cooling_rate_K_per_s",
    "cooling_rate_ci95_low_K_per_s",
    "cooling_rate_ci95_high_K_per_s",
];

/// The point table of the images measured in this run, as CSV text.
///
/// Each row is one local measurement (an FFT tile at its centre, an
/// intercept line at its mid-point, a chain of arm centres at its
/// centroid): `measured_um` is its own reading, which has no interval of
/// its own; `sdas_um` and its interval are the local SDAS of the map cell
/// holding the point (the cell's neighbourhood read by the rules of
/// `--at`), empty with the `reason` where the neighbourhood gives no
/// value. The local times are those of that value.
pub fn points_csv(results: &[ImageResult], fft_min_quality: f64) -> crate::Result<String> {
    let encoding = |e: &dyn std::fmt::Display| crate::Error::Csv {
        reason: e.to_string(),
    };
    let mut w = csv::WriterBuilder::new().from_writer(Vec::new());
    w.write_record(POINT_COLUMNS).map_err(|e| encoding(&e))?;
    let num = |v: Option<f64>, digits: i32| {
        v.map(|x| format!("{}", super::round(x, digits)))
            .unwrap_or_default()
    };
    for r in results {
        let Some(cal) = r.calibration.as_ref().map(|c| c.um_per_px) else {
            continue;
        };
        let file = crate::files::path_text(&r.file);
        for e in &r.locals {
            let cell_k = r
                .map
                .as_ref()
                .and_then(|m| Some((m, m.cell_index(e.x_um, e.y_um)?)));
            let cell = cell_k.map(|(m, k)| &m.cells[k]);
            let times = cell_k
                .and_then(|(_, k)| r.map_times.get(k))
                .and_then(|t| t.as_ref());
            let reason = match (&r.map, cell) {
                (Some(m), _) if m.reason.is_some() => m.reason.clone().unwrap_or_default(),
                (_, Some(c)) => c.reason.clone().unwrap_or_default(),
                _ => "the point lies on no map cell".into(),
            };
            let q = |x: Option<&crate::interpret::Quantity>| {
                let v = x.and_then(|q| q.value);
                let ci = x.and_then(|q| q.ci95);
                [
                    num(v, 6),
                    num(ci.map(|c| c[0]), 6),
                    num(ci.map(|c| c[1]), 6),
                ]
            };
            let [tf, tf_lo, tf_hi] = q(times.map(|t| &t.solidification_time_s));
            let [cr, cr_lo, cr_hi] = q(times.map(|t| &t.cooling_rate_k_per_s));
            let enters = crate::spatial::enters_local_values(e, &r.methods, fft_min_quality);
            let record = [
                file.clone(),
                e.method.name().to_string(),
                num(Some(e.x_um), 3),
                num(Some(e.y_um), 3),
                num(Some(cal.to_um(e.local.spacing).0), 4),
                enters.to_string(),
                num(cell.and_then(|c| c.value).map(|v| v.0), 4),
                num(cell.and_then(|c| c.ci95).map(|c| c[0].0), 4),
                num(cell.and_then(|c| c.ci95).map(|c| c[1].0), 4),
                num(cell.map(|c| c.x_um), 3),
                num(cell.map(|c| c.y_um), 3),
                num(r.map.as_ref().map(|m| m.radius_um), 3),
                if cell.is_some_and(|c| c.value.is_some()) {
                    String::new()
                } else {
                    reason
                },
                tf,
                tf_lo,
                tf_hi,
                cr,
                cr_lo,
                cr_hi,
            ];
            w.write_record(&record).map_err(|e| encoding(&e))?;
        }
    }
    let bytes = w.into_inner().map_err(|e| encoding(&e))?;
    String::from_utf8(bytes).map_err(|e| encoding(&e))
}
