//! Columnar, equiaxed or mixed (`images[].morphology`) on synthetic fields
//! whose truth says which they are (the generator's `morphology`, and its
//! `primary_angle_deg` for the trunks' direction).

/// Fresh seed 9602, styles clean and lace (twelve fields each; the
/// generator draws the truth's morphology in these styles; `cut` and
/// `dense` do not use it). No field is read as the opposite class
/// (columnar as equiaxed or the reverse): a field the method cannot tell
/// gets no class or, with crossed neighbourhoods in a columnar field,
/// `mixed`. A columnar field's growth direction lies within 5 degrees of
/// the drawn trunks' (the target) or within its reported spread.
/// Figures are printed (--nocapture); the 95 % target is assessed
/// in DEVELOPERS.md on seeds 9602 and 9603 over four styles.
#[test]
fn morphology_of_synthetic_fields() {
    use armspace::pipeline::{measure_file, MeasureOptions};
    use armspace::synth::{write_set_styled, Morphology, Style};
    use armspace::units::UmPerPx;
    let mut lines = Vec::new();
    let (mut right, mut classified, mut fields) = (0, 0, 0);
    for style in [Style::Clean, Style::Lace] {
        let dir = tempfile::tempdir().unwrap();
        let truths = write_set_styled(dir.path(), 9602, 12, Some(style)).unwrap();
        for t in truths {
            fields += 1;
            let opts = MeasureOptions::manual(UmPerPx::new(t.um_per_px).unwrap());
            let r = measure_file(&dir.path().join(&t.file), &opts);
            let m = r.morphology.expect("every measured image has a morphology");
            let truth = match t.morphology {
                Morphology::Columnar => "columnar",
                Morphology::Equiaxed => "equiaxed",
            };
            let got = m.class.map(|c| c.name());
            lines.push(format!(
                "{style:?} {} {truth}: {got:?} ({} aligned, {} crossed), anisotropy {:?}, direction {:?} (truth {:?}), spread {:?}",
                t.file, m.aligned, m.crossed, m.anisotropy, m.growth_dir_deg, t.primary_angle_deg, m.growth_spread_deg
            ));
            let Some(got) = got else {
                assert!(m.reason.is_some(), "{}", t.file);
                continue;
            };
            classified += 1;
            right += usize::from(got == truth);
            assert!(
                !matches!(
                    (truth, got),
                    ("columnar", "equiaxed") | ("equiaxed", "columnar")
                ),
                "{style:?} {}: {truth} read as {got}",
                t.file
            );
            if let (Morphology::Columnar, "columnar", Some(a), Some(g)) =
                (t.morphology, got, t.primary_angle_deg, m.growth_dir_deg)
            {
                let e = ((g - a + 90.0).rem_euclid(180.0) - 90.0).abs();
                let spread = m.growth_spread_deg.unwrap_or(0.0);
                assert!(
                    e <= 5.0_f64.max(spread),
                    "{style:?} {}: direction {g:.1} against {a:.1} ({e:.1} deg, spread {spread:.1})",
                    t.file
                );
            }
        }
    }
    eprintln!(
        "{}\n{right} of {classified} classified right, {fields} fields",
        lines.join("\n")
    );
    assert!(classified > 0);
}
