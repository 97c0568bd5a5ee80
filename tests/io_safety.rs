//! Outputs never harm inputs; special files are never read blindly nor
//! replaced; write failures are messages, never panics (issue: careless
//! commands and hostile files). The expectations are facts of the trade for
//! command-line tools on POSIX systems (common practice, no single source):
//! a device node must not be replaced by a regular file, reading a FIFO with
//! no writer blocks, and a closed or full output is an error status.

mod common;

use common::{path_str, repo_file};
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

struct Run {
    code: i32,
    stdout: String,
    stderr: String,
}

/// Runs armspace in `dir`, killing it (and failing the test) if it has not
/// finished within a minute: a hang on a special file is the failure the
/// tests below look for.
fn run_in(dir: &Path, args: &[&str], stdout: Option<std::fs::File>) -> Run {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_armspace"));
    cmd.args(args)
        .current_dir(dir)
        .stderr(Stdio::piped())
        .stdin(Stdio::null());
    match stdout {
        Some(f) => cmd.stdout(f),
        None => cmd.stdout(Stdio::piped()),
    };
    let mut child = cmd.spawn().expect("the armspace binary runs");
    let start = Instant::now();
    loop {
        if child.try_wait().unwrap().is_some() {
            break;
        }
        if start.elapsed() > Duration::from_secs(60) {
            let _ = child.kill();
            panic!("armspace {args:?} did not finish within 60 s (a hang)");
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    let out = child.wait_with_output().unwrap();
    Run {
        code: out.status.code().unwrap_or(-1),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

fn demo_copy(dir: &Path, name: &str) -> Vec<u8> {
    let src = repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png");
    std::fs::copy(&src, dir.join(name)).unwrap();
    std::fs::read(&src).unwrap()
}

#[test]
fn no_output_is_written_over_an_input() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let original = demo_copy(d, "img.png");
    #[cfg(unix)]
    std::os::unix::fs::symlink("img.png", d.join("link.png")).unwrap();
    let abs = path_str(&d.join("img.png"));
    let mut cases: Vec<Vec<&str>> = vec![
        vec!["--out", "img.png"],
        vec!["--out", "./img.png"],
        vec!["--out", &abs],
        vec!["--csv", "img.png"],
        vec!["--csv", "./img.png"],
    ];
    #[cfg(unix)]
    cases.push(vec!["--out", "link.png"]);
    for extra in cases {
        let mut args = vec!["measure", "img.png", "--um-per-px", "1.25"];
        args.extend(extra.iter());
        let run = run_in(d, &args, None);
        assert_eq!(run.code, 2, "{extra:?}: {}", run.stderr);
        assert!(
            run.stderr.contains("is an input of this run"),
            "{}",
            run.stderr
        );
        // Refused before measuring: no image line was printed.
        assert!(!run.stderr.contains("measured img.png"), "{}", run.stderr);
        assert_eq!(
            std::fs::read(d.join("img.png")).unwrap(),
            original,
            "{extra:?}"
        );
    }
    // An image found inside an input folder is protected too.
    std::fs::create_dir(d.join("folder")).unwrap();
    demo_copy(&d.join("folder"), "a.png");
    let run = run_in(
        d,
        &[
            "measure",
            "folder",
            "--um-per-px",
            "1.25",
            "--out",
            "folder/a.png",
        ],
        None,
    );
    assert_eq!(run.code, 2, "{}", run.stderr);
    assert_eq!(std::fs::read(d.join("folder/a.png")).unwrap(), original);
}

#[test]
fn unwritable_outputs_are_found_before_measuring_and_one_never_costs_the_other() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    demo_copy(d, "img.png");
    for (flag, target, says) in [
        ("--out", "no/such/folder/r.json", "does not exist"),
        ("--csv", "no/such/folder/r.csv", "does not exist"),
        ("--csv", ".", "is a folder"),
    ] {
        let run = run_in(
            d,
            &["measure", "img.png", "--um-per-px", "1.25", flag, target],
            None,
        );
        assert_eq!(run.code, 2, "{flag} {target}: {}", run.stderr);
        assert!(run.stderr.contains(says), "{}", run.stderr);
        assert!(!run.stderr.contains("measured img.png"), "{}", run.stderr);
    }
}

#[cfg(unix)]
#[test]
fn devices_are_written_through_and_full_outputs_are_errors() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    demo_copy(d, "img.png");
    let null = Path::new("/dev/null");
    if std::fs::metadata(null).is_ok() {
        let run = run_in(
            d,
            &[
                "measure",
                "img.png",
                "--um-per-px",
                "1.25",
                "--out",
                "/dev/null",
            ],
            None,
        );
        assert_eq!(run.code, 0, "{}", run.stderr);
        let m = std::fs::metadata(null).unwrap();
        assert!(!m.is_file(), "/dev/null was replaced by a regular file");
    }
    let Ok(full) = std::fs::OpenOptions::new().write(true).open("/dev/full") else {
        return; // no /dev/full on this system: nothing more to check
    };
    for args in [
        vec!["measure", "img.png", "--um-per-px", "1.25"],
        vec!["correlations"],
    ] {
        let run = run_in(d, &args, Some(full.try_clone().unwrap()));
        assert_eq!(run.code, 1, "{args:?}: {}", run.stderr);
        assert!(!run.stderr.contains("panicked"), "{}", run.stderr);
        assert!(run.stderr.contains("standard output"), "{}", run.stderr);
    }
}

#[cfg(unix)]
#[test]
fn special_files_and_link_loops_are_named_not_read() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::create_dir_all(d.join("f/sub")).unwrap();
    demo_copy(&d.join("f"), "a.png");
    std::os::unix::fs::symlink("..", d.join("f/sub/up")).unwrap();
    std::os::unix::fs::symlink("../a.png", d.join("f/sub/alias.png")).unwrap();
    let mkfifo = |p: &Path| {
        let ok = Command::new("mkfifo").arg(p).status().map(|s| s.success());
        ok.unwrap_or(false)
    };
    if !mkfifo(&d.join("f/pipe.png")) || !mkfifo(&d.join("spec.json")) {
        return; // no mkfifo on this system
    }
    let run = run_in(
        d,
        &["measure", "f", "--um-per-px", "1.25", "--out", "r.json"],
        None,
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    let rep: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("r.json")).unwrap()).unwrap();
    assert_eq!(
        rep["images"].as_array().unwrap().len(),
        1,
        "each image once"
    );
    let skipped = rep["skipped"].to_string();
    assert!(skipped.contains("not a regular file"), "{skipped}");
    assert!(skipped.contains("already walked"), "{skipped}");
    assert!(skipped.contains("the same file as"), "{skipped}");
    // Named directly: a FIFO image is a failed entry, a FIFO spec a usage error.
    let run = run_in(d, &["measure", "f/pipe.png", "--um-per-px", "1.25"], None);
    assert_eq!(run.code, 3, "{}", run.stderr);
    assert!(
        run.stderr.contains("f/pipe.png: is not a regular file"),
        "{}",
        run.stderr
    );
    let run = run_in(
        d,
        &[
            "measure",
            "f/a.png",
            "--um-per-px",
            "1.25",
            "--spec",
            "spec.json",
        ],
        None,
    );
    assert_eq!(run.code, 2, "{}", run.stderr);
    assert!(
        run.stderr.contains("spec.json: is not a regular file"),
        "{}",
        run.stderr
    );
    let run = run_in(d, &["stats", "spec.json"], None);
    assert_ne!(run.code, 0);
    assert!(run.stderr.contains("not a regular file"), "{}", run.stderr);
}

#[test]
fn overlays_are_not_measured_on_a_later_run() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    demo_copy(d, "img.png");
    let run = run_in(
        d,
        &[
            "measure",
            ".",
            "--um-per-px",
            "1.25",
            "--overlay",
            "pictures",
        ],
        None,
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    assert_eq!(std::fs::read_dir(d.join("pictures")).unwrap().count(), 1);
    let run = run_in(d, &["measure", ".", "--um-per-px", "1.25"], None);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    assert_eq!(rep["images"].as_array().unwrap().len(), 1, "{}", run.stderr);
    assert!(
        rep["skipped"].to_string().contains("written by armspace"),
        "{}",
        rep["skipped"]
    );
}

/// Ctrl-C in the middle of a batch: the images in progress finish, the rest
/// are listed as not measured, and the report and the CSV are written whole
/// and say they are partial (what a lab user expects of an interrupted
/// batch; no single source). SIGINT is sent with kill(1) once the first
/// image's line is on stderr; one job, so that most images are still ahead.
#[cfg(unix)]
#[test]
fn an_interrupted_batch_leaves_a_whole_partial_report() {
    use std::io::{BufRead, BufReader};
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::create_dir(d.join("imgs")).unwrap();
    // The demo's 12 mm step takes a good part of a second per copy, far
    // longer than the signal takes to arrive.
    for i in 0..20 {
        std::fs::copy(
            repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png"),
            d.join(format!("imgs/f{i:02}.png")),
        )
        .unwrap();
    }
    let mut child = Command::new(env!("CARGO_BIN_EXE_armspace"))
        .current_dir(d)
        .args([
            "measure",
            "imgs",
            "--um-per-px",
            "1.25",
            "--jobs",
            "1",
            "--out",
            "r.json",
            "--csv",
            "r.csv",
        ])
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut lines = BufReader::new(child.stderr.take().unwrap()).lines();
    let mut seen = Vec::new();
    for line in lines.by_ref() {
        let line = line.unwrap();
        let first = line.starts_with("measured ");
        seen.push(line);
        if first {
            break;
        }
    }
    let killed = Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .unwrap();
    assert!(killed.success());
    seen.extend(lines.map(|l| l.unwrap()));
    let status = child.wait().unwrap();
    let stderr = seen.join("\n");
    // Some images were not measured: exit 3, as for any image not measured.
    assert_eq!(status.code(), Some(3), "{stderr}");
    assert!(stderr.contains("the report is partial"), "{stderr}");
    let rep: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("r.json")).unwrap()).unwrap();
    let s = &rep["summary"];
    assert_eq!(s["partial"], true);
    assert_eq!(s["images"], 20);
    let (measured, interrupted) = (
        s["measured"].as_u64().unwrap(),
        s["interrupted"].as_u64().unwrap(),
    );
    assert!(measured >= 1 && interrupted >= 1, "{s}");
    assert_eq!(measured + interrupted, 20, "{s}");
    assert_eq!(s["failed"], 0);
    let images = rep["images"].as_array().unwrap();
    let not = images
        .iter()
        .filter(|i| i["error"] == "not measured: the run was interrupted before this image")
        .count() as u64;
    assert_eq!(not, interrupted);
    // The CSV has the header and one row per image, the rows not measured
    // with their error.
    let csv = std::fs::read_to_string(d.join("r.csv")).unwrap();
    assert_eq!(csv.lines().count(), 21);
    assert_eq!(
        csv.matches("not measured: the run was interrupted").count() as u64,
        interrupted
    );
    // The journal keeps the images finished; --resume takes them over and
    // measures the rest, leaving a whole report and no journal.
    assert!(d.join("r.json.journal").exists(), "{stderr}");
    assert!(stderr.contains("--resume"), "{stderr}");
    let resumed = Command::new(env!("CARGO_BIN_EXE_armspace"))
        .current_dir(d)
        .args([
            "measure",
            "imgs",
            "--um-per-px",
            "1.25",
            "--out",
            "r.json",
            "--csv",
            "r.csv",
            "--resume",
        ])
        .stdin(Stdio::null())
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&resumed.stderr);
    assert!(resumed.status.success(), "{err}");
    let rep: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("r.json")).unwrap()).unwrap();
    let s = &rep["summary"];
    assert_eq!(s["partial"], false, "{s}");
    assert_eq!(s["measured"], 20, "{s}");
    assert_eq!(s["from_journal"], measured, "{s}");
    assert!(!d.join("r.json.journal").exists(), "{err}");
}
