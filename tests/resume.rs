//! The journal of finished images and `measure --resume` (issue 17): a run
//! killed outright (SIGKILL, as by a batch scheduler or a power cut) loses
//! only the images in progress; a rerun with the same arguments and
//! `--resume` measures only the rest, and its report is the one an
//! uninterrupted run writes. What a lab user expects of a resumable batch
//! (common practice, no single source): a changed file is measured again,
//! other settings are refused with what differs, a record cut off by the
//! stop is left out with a warning, a damaged journal is named.
#![cfg(unix)]

mod common;

use common::repo_file;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

const DEMO: [&str; 4] = [
    "plate-CVF-SP4-step06mm.png",
    "plate-CVF-SP4-step12mm.png",
    "plate-CVF-SP4-step25mm.png",
    "plate-CVF-SP4-step50mm.png",
];

/// The demo's images three times over (in/1, in/2, in/3): twelve images of
/// a good part of a second each on one job, so that a kill after the first
/// records always finds most of the batch ahead.
fn batch(dir: &Path) {
    for k in 1..=3 {
        let sub = dir.join(format!("in/{k}"));
        std::fs::create_dir_all(&sub).unwrap();
        for name in DEMO {
            std::fs::copy(repo_file(&format!("fixtures/demo/{name}")), sub.join(name)).unwrap();
        }
    }
}

/// The demo's arguments (scale bar, correlation, spec), one job.
fn args(out: &str, extra: &[&str]) -> Vec<String> {
    let spec = repo_file("fixtures/demo-spec.json").display().to_string();
    let mut a: Vec<String> = [
        "measure",
        "in",
        "--scale-bar",
        "200um",
        "--correlation",
        "al-si-coarsening",
        "--freezing-range",
        "50K",
        "--spec",
        &spec,
        "--overlay",
        "overlays",
        "--jobs",
        "1",
        "--out",
        out,
        "--csv",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    a.push(out.replace(".json", ".csv"));
    a.extend(extra.iter().map(|s| s.to_string()));
    a
}

fn command(dir: &Path, args: &[String]) -> Command {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_armspace"));
    cmd.args(args)
        .current_dir(dir)
        // The report's time is fixed, so that two runs compare whole.
        .env("SOURCE_DATE_EPOCH", "1700000000")
        .stdin(Stdio::null());
    cmd
}

struct Run {
    code: i32,
    stderr: String,
}

fn run(dir: &Path, args: &[String]) -> Run {
    let out = command(dir, args).output().unwrap();
    Run {
        code: out.status.code().unwrap_or(-1),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

/// Starts the run and kills it (SIGKILL) once its journal holds at least
/// `records` images; returns the journal's text as the kill left it.
fn killed_run(dir: &Path, args: &[String], records: usize) -> String {
    let journal = dir.join("r.json.journal");
    let mut child = command(dir, args)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let start = Instant::now();
    loop {
        let lines = std::fs::read_to_string(&journal)
            .map(|t| t.matches('\n').count())
            .unwrap_or(0);
        if lines > records {
            break;
        }
        if let Some(status) = child.try_wait().unwrap() {
            panic!("the run ended ({status}) before it could be killed");
        }
        assert!(start.elapsed() < Duration::from_secs(120), "no progress");
        std::thread::sleep(Duration::from_millis(5));
    }
    child.kill().unwrap(); // SIGKILL: no handler runs, nothing is tidied
    child.wait().unwrap();
    std::fs::read_to_string(&journal).unwrap()
}

fn report(path: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// The files the journal's complete records hold, in order.
fn recorded(journal: &str) -> Vec<String> {
    journal
        .lines()
        .skip(1)
        .filter_map(|l| serde_json::from_str::<serde_json::Value>(l).ok())
        .map(|r| r["image"]["file"].as_str().unwrap().to_string())
        .collect()
}

/// A reference run, uninterrupted, in `dir` (report ref.json, ref.csv).
fn reference(dir: &Path) -> Run {
    let r = run(dir, &args("ref.json", &[]));
    assert!(!dir.join("ref.json.journal").exists(), "{}", r.stderr);
    r
}

#[test]
fn a_killed_run_resumes_to_the_uninterrupted_report() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    batch(d);
    let full = reference(d);
    let journal = killed_run(d, &args("r.json", &[]), 2);
    let done = recorded(&journal);
    assert!(done.len() >= 2 && done.len() < 12, "{journal:.300}");
    assert!(journal.starts_with("{\"format\":\"armspace.journal/1\""));
    // The kill left no report: the outputs are as they were.
    assert!(!d.join("r.json").exists());

    let resumed = run(d, &args("r.json", &["--resume"]));
    assert_eq!(resumed.code, full.code, "{}", resumed.stderr);
    // Only the missing images were measured: one line each on stderr.
    for f in &done {
        assert!(
            !resumed.stderr.contains(&format!(" {f}:")),
            "{f} measured again:\n{}",
            resumed.stderr
        );
    }
    let measured_lines = resumed
        .stderr
        .lines()
        .filter(|l| l.contains(" in/"))
        .count();
    assert_eq!(measured_lines, 12 - done.len(), "{}", resumed.stderr);
    let mut got = report(&d.join("r.json"));
    let want = report(&d.join("ref.json"));
    assert_eq!(got["summary"]["from_journal"], done.len());
    assert_eq!(want["summary"]["from_journal"], 0);
    assert_eq!(got["summary"]["partial"], false);
    // Apart from the count taken over, the report is the uninterrupted one,
    // byte for byte; so is the CSV.
    got["summary"]["from_journal"] = 0.into();
    assert_eq!(got, want);
    let text = std::fs::read_to_string(d.join("r.json")).unwrap();
    let ref_text = std::fs::read_to_string(d.join("ref.json")).unwrap();
    let n = done.len();
    assert_eq!(
        text.replace(&format!("\"from_journal\": {n},"), "\"from_journal\": 0,"),
        ref_text
    );
    assert_eq!(
        std::fs::read(d.join("r.csv")).unwrap(),
        std::fs::read(d.join("ref.csv")).unwrap()
    );
    // The report is whole: its journal is gone.
    assert!(!d.join("r.json.journal").exists());
}

#[test]
fn a_changed_file_or_a_lost_overlay_is_measured_again() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    batch(d);
    let journal = killed_run(d, &args("r.json", &[]), 3);
    let done = recorded(&journal);
    assert!(done.len() >= 3, "{journal:.300}");
    // The first recorded file now holds another micrograph; the second's
    // overlay is deleted.
    let changed = &done[0];
    let other = if changed.ends_with("step12mm.png") {
        "step06mm"
    } else {
        "step12mm"
    };
    std::fs::copy(
        repo_file(&format!("fixtures/demo/plate-CVF-SP4-{other}.png")),
        d.join(changed),
    )
    .unwrap();
    let entries: Vec<serde_json::Value> = journal
        .lines()
        .skip(1)
        .filter_map(|l| serde_json::from_str(l).ok())
        .collect();
    let overlay = entries[1]["image"]["overlay"].as_str().unwrap().to_string();
    std::fs::remove_file(d.join(&overlay)).unwrap();

    let resumed = run(d, &args("r.json", &["--resume"]));
    assert!(
        resumed
            .stderr
            .contains(&format!("{changed}: changed since it was measured")),
        "{}",
        resumed.stderr
    );
    assert!(
        resumed.stderr.contains("is no longer there"),
        "{}",
        resumed.stderr
    );
    let rep = report(&d.join("r.json"));
    assert_eq!(rep["summary"]["from_journal"], done.len() - 2);
    let sha = armspace::load::sha256_hex(&std::fs::read(d.join(changed)).unwrap());
    let entry = rep["images"]
        .as_array()
        .unwrap()
        .iter()
        .find(|i| i["file"] == changed.as_str())
        .unwrap();
    assert_eq!(entry["sha256"], sha.as_str());
    assert!(d.join(&overlay).exists(), "the overlay is drawn again");
}

#[test]
fn other_settings_are_refused_with_what_differs() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    batch(d);
    killed_run(d, &args("r.json", &[]), 1);
    let mut other = args("r.json", &["--resume"]);
    let at = other.iter().position(|a| a == "200um").unwrap();
    other[at] = "210um".into();
    let r = run(d, &other);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("r.json.journal"), "{}", r.stderr);
    assert!(
        r.stderr
            .contains("parameters.scale_bar_um was 200.0 in that run, is 210.0 now"),
        "{}",
        r.stderr
    );
    assert!(!r.stderr.contains("measured in/"), "{}", r.stderr);
    assert!(!d.join("r.json").exists());
    // The journal is kept for a resume with the right arguments.
    assert!(d.join("r.json.journal").exists());
}

#[test]
fn a_cut_off_last_record_is_left_out_with_a_warning() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    batch(d);
    let journal = killed_run(d, &args("r.json", &[]), 2);
    let done = recorded(&journal);
    // Half a record more, as a stop in the middle of a write leaves it.
    let half: String = journal.lines().nth(1).unwrap().chars().take(500).collect();
    std::fs::write(d.join("r.json.journal"), format!("{journal}{half}")).unwrap();
    let r = run(d, &args("r.json", &["--resume"]));
    assert!(matches!(r.code, 0 | 3 | 4 | 5), "{}", r.stderr);
    assert!(
        r.stderr.contains("warning:") && r.stderr.contains("is incomplete"),
        "{}",
        r.stderr
    );
    let rep = report(&d.join("r.json"));
    assert_eq!(rep["summary"]["from_journal"], done.len());
    assert_eq!(rep["summary"]["images"], 12);
    assert_eq!(rep["summary"]["partial"], false);
}

#[test]
fn a_damaged_journal_is_named_and_nothing_is_measured() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    batch(d);
    let journal = killed_run(d, &args("r.json", &[]), 2);
    let mut lines: Vec<&str> = journal.lines().collect();
    lines[1] = "{\"image\": {\"file\": 7}}";
    std::fs::write(d.join("r.json.journal"), lines.join("\n") + "\n").unwrap();
    let r = run(d, &args("r.json", &["--resume"]));
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr.contains("r.json.journal: line 2 is not a record"),
        "{}",
        r.stderr
    );
    assert!(!r.stderr.contains("panicked"), "{}", r.stderr);
    // Not a journal at all.
    std::fs::write(d.join("r.json.journal"), "\u{0}\u{0}garbage").unwrap();
    let r = run(d, &args("r.json", &["--resume"]));
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr
            .contains("r.json.journal: line 1 is not the header"),
        "{}",
        r.stderr
    );
}

#[test]
fn without_resume_the_journal_is_replaced_and_with_none_everything_is_measured() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    batch(d);
    killed_run(d, &args("r.json", &[]), 1);
    let r = run(d, &args("r.json", &[]));
    assert!(
        r.stderr.contains("replacing the journal r.json.journal"),
        "{}",
        r.stderr
    );
    assert_eq!(report(&d.join("r.json"))["summary"]["from_journal"], 0);
    assert!(!d.join("r.json.journal").exists());
    let r = run(d, &args("r.json", &["--resume"]));
    assert!(
        r.stderr
            .contains("no journal r.json.journal to resume from"),
        "{}",
        r.stderr
    );
    assert_eq!(report(&d.join("r.json"))["summary"]["from_journal"], 0);
}

#[test]
fn the_journal_is_never_written_over_an_input_and_needs_a_report_file() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // An image named as the journal of the report would be.
    std::fs::copy(
        repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png"),
        d.join("r.json.journal"),
    )
    .unwrap();
    let before = std::fs::read(d.join("r.json.journal")).unwrap();
    let r = run(
        d,
        &[
            "measure",
            "r.json.journal",
            "--scale-bar",
            "200um",
            "--out",
            "r.json",
        ]
        .map(String::from),
    );
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr.contains("the journal would be written over it"),
        "{}",
        r.stderr
    );
    assert_eq!(std::fs::read(d.join("r.json.journal")).unwrap(), before);
    // --resume without a report file has no journal to read.
    let r = run(
        d,
        &[
            "measure",
            "r.json.journal",
            "--scale-bar",
            "200um",
            "--resume",
        ]
        .map(String::from),
    );
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("--out"), "{}", r.stderr);
}

/// Two runs given the same --out: the second is refused before it measures
/// anything or touches the first one's journal (usage error, status 2), and
/// the lock is gone once the first run has ended.
#[test]
fn a_second_run_on_the_same_report_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r.json");
    let lock = dir.path().join("r.json.lock");
    // The first run, stood in for by a lock held by this process.
    let held = armspace::journal::RunLock::acquire(&out).unwrap();
    assert!(lock.exists());
    let img = dir.path().join("a.png");
    image::GrayImage::from_pixel(64, 64, image::Luma([128]))
        .save(&img)
        .unwrap();
    let run = std::process::Command::new(env!("CARGO_BIN_EXE_armspace"))
        .args([
            "measure",
            img.to_str().unwrap(),
            "--um-per-px",
            "1",
            "--out",
        ])
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(run.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(
        stderr.contains("another armspace run is writing this report"),
        "{stderr}"
    );
    assert!(!out.exists());
    drop(held);
    assert!(!lock.exists());
    let run = std::process::Command::new(env!("CARGO_BIN_EXE_armspace"))
        .args([
            "measure",
            img.to_str().unwrap(),
            "--um-per-px",
            "1",
            "--out",
        ])
        .arg(&out)
        .output()
        .unwrap();
    assert!(matches!(run.status.code(), Some(0) | Some(3)), "{run:?}");
    assert!(out.exists() && !lock.exists());
}
