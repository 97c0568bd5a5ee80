//! A failed allocation becomes that file's error, never the end of the
//! batch (issue 16, item 5). `measure` runs in a worker process under a
//! small supervisor (src/cli/supervise.rs): when the worker ends by a
//! fault, the image in progress is recorded as not measured and the rest of
//! the batch is measured. What a lab user expects of a batch tool (common
//! practice, no single source): one bad file never costs the others, and
//! the file is named with what happened.
//!
//! The faults are made two ways: for real (an address-space limit, `ulimit
//! -v`, under which a large image's buffers cannot be allocated, so the
//! standard library's allocation-failure handler aborts the process), and
//! on purpose through the validation build's fault hook
//! (`ARMSPACE_TEST_FAULT`, the `synth` feature), which ends the process
//! the way a failed allocation (the same handler), a panic, and the
//! kernel's out-of-memory killer (SIGKILL) do.
#![cfg(target_os = "linux")]

mod common;

use common::write_comb_png;
use serde_json::Value;
use std::path::Path;
use std::process::Command;

/// Four comb fields of known period (12, 16, 20, 24 px), quick to measure.
fn batch(dir: &Path) -> Vec<String> {
    std::fs::create_dir_all(dir.join("in")).unwrap();
    [12.0, 16.0, 20.0, 24.0]
        .iter()
        .map(|&p| {
            let name = format!("comb{p:02}.png");
            write_comb_png(&dir.join("in").join(&name), 600, 600, p);
            name
        })
        .collect()
}

struct Out {
    code: Option<i32>,
    // Read by the fault-hook tests only (the `synth` feature).
    #[cfg_attr(not(feature = "synth"), allow(dead_code))]
    stdout: String,
    stderr: String,
}

/// `armspace measure in --um-per-px 1 ARGS` in `dir`, with `TMPDIR` inside
/// `dir/tmp` (to see that the supervisor's notes are cleaned up) and the
/// fault hook set to `fault` when given.
fn measure(dir: &Path, args: &[&str], fault: Option<&str>) -> Out {
    let tmp = dir.join("tmp");
    std::fs::create_dir_all(&tmp).unwrap();
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_armspace"));
    cmd.current_dir(dir)
        .args(["measure", "in", "--um-per-px", "1"])
        .args(args)
        .env("TMPDIR", &tmp)
        .env("RUST_BACKTRACE", "0")
        .env_remove("ARMSPACE_TEST_FAULT")
        .env_remove("SOURCE_DATE_EPOCH");
    if let Some(f) = fault {
        cmd.env("ARMSPACE_TEST_FAULT", f);
    }
    let out = cmd.output().unwrap();
    Out {
        code: out.status.code(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

/// Each image's file name and, measured, its value or, failed, its error.
fn results(report: &Value) -> Vec<(String, Option<f64>, Option<String>)> {
    report["images"]
        .as_array()
        .unwrap()
        .iter()
        .map(|i| {
            let file = i["file"].as_str().unwrap();
            let name = Path::new(file).file_name().unwrap().to_string_lossy();
            (
                name.into_owned(),
                i["sdas_um"]["value"].as_f64(),
                i["error"].as_str().map(str::to_owned),
            )
        })
        .collect()
}

fn read_report(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// The batch measured with no fault: the values the others must keep.
fn clean_values(dir: &Path) -> Vec<(String, Option<f64>)> {
    let out = measure(dir, &["--out", "clean.json"], None);
    assert_eq!(out.code, Some(0), "{}", out.stderr);
    results(&read_report(&dir.join("clean.json")))
        .into_iter()
        .map(|(n, v, _)| (n, v))
        .collect()
}

/// The faulted image has an error naming `what`; every other image has
/// the value of the run without a fault.
fn check(
    results: &[(String, Option<f64>, Option<String>)],
    clean: &[(String, Option<f64>)],
    faulted: &[&str],
    what: &str,
) {
    assert_eq!(results.len(), clean.len());
    for ((name, value, error), (clean_name, clean_value)) in results.iter().zip(clean) {
        assert_eq!(name, clean_name);
        if faulted.contains(&name.as_str()) {
            let e = error.as_deref().unwrap_or_default();
            assert!(e.contains(name.as_str()) && e.contains(what), "{name}: {e}");
            assert!(e.contains("recorded as not measured"), "{e}");
            assert_eq!(*value, None);
        } else {
            assert_eq!(error, &None, "{name}");
            assert!(value.is_some(), "{name}");
            assert_eq!(value, clean_value, "{name}");
        }
    }
}

fn no_leftovers(dir: &Path) {
    assert!(!dir.join("r.json.journal").exists(), "journal left behind");
    assert!(!dir.join("r.json.lock").exists(), "lock left behind");
    let tmp: Vec<_> = std::fs::read_dir(dir.join("tmp")).unwrap().collect();
    assert!(tmp.is_empty(), "supervisor notes left in TMPDIR: {tmp:?}");
}

/// The batch measured once without a fault and once with the fault `kind`
/// on the images numbered `which` and the arguments `args`: the second
/// run exits 3 (an image not measured, as for any file that fails), its
/// report (from `r.json`, else stdout) holds the faulted images with an
/// error naming `what` and the others with the values of the first run,
/// and it leaves no journal, lock or notes. Returns the report, the run and
/// the folder, for the test's own checks.
#[cfg(feature = "synth")]
fn faulted_run(
    args: &[&str],
    kind: &str,
    which: &[usize],
    what: &str,
) -> (Value, Out, tempfile::TempDir, Vec<String>) {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let names = batch(d);
    let clean = clean_values(d);
    let faulted: Vec<&str> = which.iter().map(|&i| names[i].as_str()).collect();
    let out = measure(d, args, Some(&format!("{kind}:{}", faulted.join(","))));
    assert_eq!(out.code, Some(3), "{}", out.stderr);
    let rep: Value = if args.contains(&"r.json") {
        read_report(&d.join("r.json"))
    } else {
        serde_json::from_str(&out.stdout).unwrap()
    };
    check(&results(&rep), &clean, &faulted, what);
    no_leftovers(d);
    (rep, out, dir, names)
}

#[cfg(feature = "synth")]
#[test]
fn a_failed_allocation_ends_only_its_image() {
    let (_, out, dir, _) = faulted_run(
        &["--out", "r.json", "--csv", "r.csv", "--jobs", "1"],
        "alloc",
        &[1],
        "a memory allocation failed",
    );
    assert!(
        out.stderr.contains("measuring it stopped the run"),
        "{}",
        out.stderr
    );
    // The CSV is written whole too, a row per image.
    let csv = std::fs::read_to_string(dir.path().join("r.csv")).unwrap();
    assert!(
        csv.lines().filter(|l| l.contains("comb")).count() >= 4,
        "{csv}"
    );
}

#[cfg(feature = "synth")]
#[test]
fn a_panic_is_the_images_error_and_the_report_still_goes_to_stdout() {
    // No --out: the report on stdout is the last attempt's, whole; the
    // images finished before the fault are taken over from the worker's
    // own journal, not measured again.
    let (rep, out, _, _) = faulted_run(&["--jobs", "1"], "panic", &[3], "a panic");
    let before_fault = out
        .stderr
        .lines()
        .take_while(|l| !l.contains("measuring it stopped the run"))
        .filter(|l| l.starts_with("measured ") || l.starts_with("no value "))
        .count();
    assert_eq!(
        rep["summary"]["from_journal"].as_u64(),
        Some(before_fault as u64),
        "{}",
        out.stderr
    );
}

#[cfg(feature = "synth")]
#[test]
fn the_out_of_memory_killer_is_named() {
    faulted_run(
        &["--out", "r.json", "--jobs", "1"],
        "kill",
        &[0],
        "the process was killed",
    );
}

/// Two images in progress side by side when the process ends: which one
/// ended it is unknown, so both are measured again alone, and each of
/// them ends its own attempt.
#[cfg(feature = "synth")]
#[test]
fn images_measured_side_by_side_are_measured_again_alone() {
    let (_, out, _, _) = faulted_run(
        &["--out", "r.json", "--jobs", "2"],
        "alloc-late",
        &[0, 1],
        "a memory allocation failed",
    );
    assert!(
        out.stderr.contains("measured side by side")
            && out.stderr.contains("each of them measured alone"),
        "{}",
        out.stderr
    );
}

/// A real failed allocation, no hook: under an address-space limit of
/// 500 MB, with a memory budget stated far above it (so that the budget
/// does not refuse the image first), a 36-megapixel field cannot be
/// measured (its estimate is about 0.8 GB); the small fields can.
#[test]
fn a_real_failed_allocation_is_the_files_error() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let names = batch(d);
    let clean = clean_values(d);
    // Grey noise with a comb: a real field compresses far less than 200
    // pixels a byte (so the header check passes), and decodes whole.
    let mut state = 0x2545_f491_4f6c_dd1d_u64;
    let big = image::GrayImage::from_fn(6000, 6000, |x, _| {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        let noise = (state >> 58) as u8; // 0..63
        image::Luma([if (x / 10) % 2 == 0 { 150 } else { 60 } + noise])
    });
    big.save(d.join("in/big.png")).unwrap();
    let exe = env!("CARGO_BIN_EXE_armspace");
    std::fs::create_dir_all(d.join("tmp")).unwrap();
    let out = Command::new("sh")
        .current_dir(d)
        .env("TMPDIR", d.join("tmp"))
        .env("RUST_BACKTRACE", "0")
        .env_remove("ARMSPACE_TEST_FAULT")
        .args([
            "-c",
            "ulimit -v 500000 && exec \"$0\" \"$@\"",
            exe,
            "measure",
            "in",
            "--um-per-px",
            "1",
            "--memory-budget",
            "8G",
            "--jobs",
            "1",
            "--out",
            "r.json",
        ])
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(3), "{stderr}");
    let got = results(&read_report(&d.join("r.json")));
    let (big_result, small): (Vec<_>, Vec<_>) =
        got.into_iter().partition(|(n, _, _)| n == "big.png");
    let e = big_result[0].2.as_deref().unwrap_or_default();
    // Here the decoder's buffer fails first, in the allocator (the
    // supervisor's path); were the grey image's fallible allocation to
    // fail first on another machine, the file's error says so itself.
    assert!(
        e.contains("a memory allocation failed") || e.contains("not enough memory"),
        "big.png: {e}\n{stderr}"
    );
    check(&small, &clean, &[], "");
    assert_eq!(small.len(), names.len());
    no_leftovers(d);
}

/// With `--points` (every image's local measurements in one table, which
/// a journal does not keep) the later attempt measures every image again,
/// and the table is written whole, without the faulted image.
#[cfg(feature = "synth")]
#[test]
fn with_a_point_table_every_image_is_measured_again() {
    let (rep, _, dir, names) = faulted_run(
        &["--out", "r.json", "--points", "p.csv", "--jobs", "1"],
        "alloc",
        &[2],
        "a memory allocation failed",
    );
    assert_eq!(rep["summary"]["from_journal"].as_u64(), Some(0));
    let table = std::fs::read_to_string(dir.path().join("p.csv")).unwrap();
    for (i, name) in names.iter().enumerate() {
        assert_eq!(table.contains(name.as_str()), i != 2, "{name}");
    }
}

/// The notes of a supervisor killed outright (its worker dies with it) are
/// removed by the next run; those of a live process's number are kept.
#[test]
fn notes_of_a_killed_supervisor_are_removed_by_the_next_run() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    batch(d);
    let tmp = d.join("tmp");
    std::fs::create_dir_all(&tmp).unwrap();
    // A process that has ended: its number names no process now.
    let mut ended = Command::new("true").spawn().unwrap();
    let dead = ended.id();
    ended.wait().unwrap();
    let stale = tmp.join(format!("armspace-{dead}-1-0.supervisor"));
    let live = tmp.join(format!("armspace-{}-1-0.supervisor", std::process::id()));
    for notes in [&stale, &live] {
        std::fs::create_dir(notes).unwrap();
        std::fs::write(notes.join("progress"), "{\"begin\":\"x\"}\n").unwrap();
    }
    let out = measure(d, &["--out", "r.json"], None);
    assert_eq!(out.code, Some(0), "{}", out.stderr);
    assert!(!stale.exists(), "the dead run's notes are left");
    assert!(live.exists(), "a live process's notes were removed");
    std::fs::remove_dir_all(&live).unwrap();
    no_leftovers(d);
}

/// A report to a device (`--out /dev/stdout`) has no journal: the later
/// attempt measures every image again instead of refusing to resume.
#[cfg(feature = "synth")]
#[test]
fn a_report_to_a_device_is_measured_again_whole() {
    let (rep, _, _, _) = faulted_run(
        &["--out", "/dev/stdout", "--jobs", "1"],
        "alloc",
        &[1],
        "a memory allocation failed",
    );
    assert_eq!(rep["summary"]["from_journal"].as_u64(), Some(0));
}
