//! Absurd values from the command line, the environment and report files
//! end in a message and a non-panicking exit, never a crash, a hang or an
//! allocation without bound (issue: careless commands and hostile files).
//! Each case was found by reading the code for arithmetic and allocations
//! on values the user controls; the expected behaviour is the project's
//! own rule (a clear message naming the problem; the report kept).

use std::path::Path;
use std::process::{Command, Output, Stdio};

fn repo(rel: &str) -> String {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join(rel)
        .display()
        .to_string()
}

fn armspace(dir: &Path, args: &[&str], env: &[(&str, &str)]) -> Output {
    let mut c = Command::new(env!("CARGO_BIN_EXE_armspace"));
    c.args(args).current_dir(dir);
    for (k, v) in env {
        c.env(k, v);
    }
    c.output().expect("the armspace binary runs")
}

/// A status of 101 is Rust's panic; 134 an abort.
fn no_crash(o: &Output) {
    let code = o.status.code();
    assert!(
        code.is_some() && code != Some(101) && code != Some(134),
        "status {:?}: {}",
        code,
        String::from_utf8_lossy(&o.stderr)
    );
}

#[test]
fn a_profile_bin_under_a_pixel_is_refused_with_a_reason() {
    use armspace::pipeline::{measure_file, MeasureOptions};
    use armspace::spatial::parse_along;
    use armspace::units::UmPerPx;
    let opts = MeasureOptions {
        along: vec![parse_along("0,0:50,0:1e-12").unwrap()],
        ..MeasureOptions::manual(UmPerPx::new(0.5).unwrap())
    };
    let r = measure_file(
        Path::new(&repo("fixtures/demo/plate-CVF-SP4-step06mm.png")),
        &opts,
    );
    let p = &r.profiles[0];
    assert!(p.bins.is_empty());
    let reason = p.reason.as_deref().unwrap_or_default();
    assert!(reason.contains("narrower than a pixel"), "{reason}");
}

#[test]
fn a_report_date_past_year_9999_or_past_the_clock_is_ignored() {
    let tmp = tempfile::tempdir().unwrap();
    let img = repo("fixtures/demo/plate-CVF-SP4-step06mm.png");
    for (k, epoch) in ["253402300800", "18446744073709551615"].iter().enumerate() {
        let out = format!("r{k}.json");
        let o = armspace(
            tmp.path(),
            &["measure", &img, "--um-per-px", "0.5", "--out", &out],
            &[("SOURCE_DATE_EPOCH", epoch)],
        );
        no_crash(&o);
        let text = std::fs::read_to_string(tmp.path().join(&out)).expect("report written");
        let v: serde_json::Value = serde_json::from_str(&text).unwrap();
        assert!(
            v["created_utc"].as_str().is_some_and(|s| s.len() >= 20),
            "{}",
            v["created_utc"]
        );
    }
}

#[test]
fn the_label_readers_trace_to_a_full_stderr_loses_lines_not_the_run() {
    let tmp = tempfile::tempdir().unwrap();
    let Ok(full) = std::fs::OpenOptions::new().write(true).open("/dev/full") else {
        return; // not a Linux machine: nothing to check
    };
    let o = Command::new(env!("CARGO_BIN_EXE_armspace"))
        .args([
            "calibrate",
            &repo("fixtures/demo/plate-CVF-SP4-step06mm.png"),
            "--scale-bar",
            "200um",
        ])
        .current_dir(tmp.path())
        .env("ARMSPACE_LABEL_DEBUG", "1")
        .stdout(Stdio::piped())
        .stderr(Stdio::from(full))
        .output()
        .unwrap();
    no_crash(&o);
    assert!(o.status.success(), "status {:?}", o.status.code());
}

#[test]
fn a_part_report_with_an_absurd_count_or_total_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let demo = repo("fixtures/demo");
    let o = armspace(
        dir,
        &[
            "measure",
            &demo,
            "--scale-bar",
            "200um",
            "--out",
            "p1.json",
            "--shard",
            "1/2",
        ],
        &[("SOURCE_DATE_EPOCH", "1800000000")],
    );
    no_crash(&o);
    let text = std::fs::read_to_string(dir.join("p1.json")).unwrap();
    let edits: [(&str, serde_json::Value); 3] = [
        ("count", serde_json::json!(100_000_000_000u64)),
        ("count", serde_json::json!(1u64 << 62)),
        ("batch_images", serde_json::json!(u64::MAX)),
    ];
    for (k, (key, value)) in edits.into_iter().enumerate() {
        let mut v: serde_json::Value = serde_json::from_str(&text).unwrap();
        v["parameters"]["shard"][key] = value;
        let name = format!("edited{k}.json");
        std::fs::write(dir.join(&name), serde_json::to_string(&v).unwrap()).unwrap();
        let o = armspace(dir, &["merge", &name, "--out", "merged.json"], &[]);
        no_crash(&o);
        assert_eq!(
            o.status.code(),
            Some(2),
            "{}",
            String::from_utf8_lossy(&o.stderr)
        );
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(err.contains(&name), "{err}");
        assert!(!dir.join("merged.json").exists());
    }
}

#[test]
fn images_of_a_part_for_a_total_near_the_largest_count() {
    use armspace::report::merge::images_of_part;
    // Images i with i mod count + 1 == index, below total.
    assert_eq!(images_of_part(usize::MAX, 1, 2), usize::MAX / 2 + 1);
    assert_eq!(images_of_part(usize::MAX, 2, 2), usize::MAX / 2);
    assert_eq!(images_of_part(4, 1, 3), 2);
    assert_eq!(images_of_part(4, 3, 3), 1);
    assert_eq!(images_of_part(2, 3, 3), 0);
    assert_eq!(images_of_part(5, 0, 3), 0);
    // By counting, on small cases.
    for total in 0..12usize {
        for count in 1..5usize {
            for index in 1..=count {
                let n = (0..total).filter(|i| i % count + 1 == index).count();
                assert_eq!(images_of_part(total, index, count), n);
            }
        }
    }
}
