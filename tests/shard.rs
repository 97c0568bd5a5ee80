//! A batch split into parts (`measure --shard K/N`) and joined (`merge`)
//! gives the report, CSV and exit status of one run over the whole batch:
//! the reference is the single run itself (the parts must change nothing
//! but where the work is done). The parts that cannot be joined are
//! refused with a message naming the part.

use std::path::Path;
use std::process::Command;

struct Run {
    code: i32,
    stderr: String,
}

/// Runs armspace in `dir` with a fixed report time (SOURCE_DATE_EPOCH), so
/// that two reports of the same batch compare byte for byte.
fn run_in(dir: &Path, args: &[&str]) -> Run {
    let out = Command::new(env!("CARGO_BIN_EXE_armspace"))
        .args(args)
        .current_dir(dir)
        .env("SOURCE_DATE_EPOCH", "1800000000")
        .output()
        .expect("the armspace binary runs");
    Run {
        code: out.status.code().unwrap_or(-1),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

fn repo(rel: &str) -> String {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join(rel)
        .display()
        .to_string()
}

#[test]
fn three_parts_joined_give_the_single_runs_report() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    // The demo's four micrographs (with a file passed over: truth.json) and
    // its spec, so that the zones' verdicts are computed over the parts.
    let demo = repo("fixtures/demo");
    let spec = repo("fixtures/demo-spec.json");
    let common = [
        demo.as_str(),
        "--scale-bar",
        "200um",
        "--correlation",
        "al-si-coarsening",
        "--freezing-range",
        "50K",
        "--spec",
        spec.as_str(),
        "--overlay",
        "pictures",
    ];
    let whole = run_in(
        dir,
        &[
            &["measure"][..],
            &common,
            &["--out", "whole.json", "--csv", "whole.csv"],
        ]
        .concat(),
    );
    let mut codes = vec![];
    for k in 1..=3 {
        let out = format!("part{k}.json");
        let shard = format!("{k}/3");
        let r = run_in(
            dir,
            &[
                &["measure"][..],
                &common,
                &["--out", &out, "--shard", &shard],
            ]
            .concat(),
        );
        assert!(r.code != 1 && r.code != 2, "part {k}: {}", r.stderr);
        codes.push(r.code);
    }
    // Any order of the parts.
    let merged = run_in(
        dir,
        &[
            "merge",
            "part3.json",
            "part1.json",
            "part2.json",
            "--out",
            "merged.json",
            "--csv",
            "merged.csv",
            "--html",
            "merged.html",
        ],
    );
    assert_eq!(merged.code, whole.code, "{}", merged.stderr);
    let read = |f: &str| std::fs::read_to_string(dir.join(f)).unwrap();
    assert_eq!(read("merged.json"), read("whole.json"));
    assert_eq!(read("merged.csv"), read("whole.csv"));
    // Four images in three parts: 2, 1, 1; the file passed over in part 1.
    let part = |k: usize| -> serde_json::Value {
        serde_json::from_str(&read(&format!("part{k}.json"))).unwrap()
    };
    let sizes: Vec<usize> = (1..=3)
        .map(|k| part(k)["images"].as_array().unwrap().len())
        .collect();
    assert_eq!(sizes, [2, 1, 1]);
    assert_eq!(part(1)["skipped"].as_array().unwrap().len(), 1);
    assert_eq!(part(2)["skipped"].as_array().unwrap().len(), 0);
    assert_eq!(part(2)["parameters"]["shard"]["index"], 2);
    assert_eq!(part(2)["parameters"]["shard"]["batch_images"], 4);
    // The page embeds the parts' pictures.
    let page = read("merged.html");
    assert_eq!(page.matches("data:image/jpeg;base64,").count(), 4);
}

#[test]
fn parts_that_do_not_make_one_batch_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let demo = repo("fixtures/demo");
    let measure = |extra: &[&str]| {
        run_in(
            dir,
            &[
                &["measure", demo.as_str(), "--scale-bar", "200um"][..],
                extra,
            ]
            .concat(),
        )
    };
    for k in 1..=2 {
        let (out, shard) = (format!("p{k}.json"), format!("{k}/2"));
        let r = measure(&["--out", &out, "--shard", &shard]);
        assert!(r.code != 1 && r.code != 2, "{}", r.stderr);
    }
    measure(&["--out", "whole.json"]);
    measure(&["--out", "other.json", "--shard", "2/2", "--method", "fft"]);
    measure(&["--out", "of3.json", "--shard", "2/3"]);
    let cases: [(&[&str], &str); 6] = [
        (&["p1.json"], "part(s) 2/2 missing"),
        (&["p1.json", "p1.json"], "p1.json and p1.json are both part 1/2"),
        (&["p1.json", "whole.json"], "whole.json: not a part of a split batch"),
        (
            &["p1.json", "other.json"],
            "other.json: measured with other parameters than p1.json (`parameters.methods` differs)",
        ),
        (&["p1.json", "of3.json"], "of3.json: part 2/3 of a batch of 4 images"),
        (&["p1.json", "p2.json", "--out", "p2.json"], "p2.json: is an input of this run"),
    ];
    for (args, words) in cases {
        let r = run_in(dir, &[&["merge"][..], args].concat());
        assert_eq!(r.code, 2, "{args:?}: {}", r.stderr);
        assert!(r.stderr.contains(words), "{args:?}: {}", r.stderr);
    }
    // Nothing was written by a refused join.
    assert!(!dir.join("merged.json").exists());
    let bad = run_in(
        dir,
        &[
            "measure",
            demo.as_str(),
            "--um-per-px",
            "1",
            "--shard",
            "3/2",
        ],
    );
    assert_eq!(bad.code, 2);
    assert!(bad.stderr.contains("is not a part K/N"), "{}", bad.stderr);
}
