//! The journal of a `measure` run: each finished image's report, written
//! to disk as soon as the image is done, so that a run that is stopped (a
//! killed job, a power cut, Ctrl-C) can be resumed without measuring again
//! what it finished.
//!
//! The journal lies beside the report, named after it with `.journal`
//! added (`batch.json` -> `batch.json.journal`). It is JSON Lines, one
//! record per line:
//! - line 1, the header: `{"format": "armspace.journal/1", "fingerprint":
//!   {...}}`. The fingerprint is everything that decides an image's
//!   report: the tool's version, the report's `parameters` (inputs as
//!   given, calibration, methods, limits, spec, correlation settings), and
//!   what the report does not list (the stated uncertainty of
//!   `--um-per-px`, `--trust-calibration`, the overlay folder, a digest of
//!   the correlation entries in use). It is written atomically with the
//!   records carried over from an earlier journal.
//! - each further line: `{"image": {...}}`, the image's entry exactly as
//!   the report holds it (with the SHA-256 of the file that was measured),
//!   appended and synced to disk when the image is done; a stop loses at
//!   most the images in progress, and the last line at worst is cut off.
//!
//! Only images that were read are recorded (their SHA-256 is known);
//! files that could not be read fail again quickly and are not recorded.
//! An earlier entry stands for an image only when the file's SHA-256 is
//! still the one measured (a changed file is measured again) and its
//! overlay, when it had one, is still there (else the image is measured
//! again, which draws it). The reports read back are those the earlier run
//! wrote, so a resumed run's report is the one an uninterrupted run gives.

use crate::files::{self, Kind};
use crate::load::Input;
use crate::pipeline::MeasureOptions;
use crate::report::{self, ImageReport};
use crate::{Error, Result};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use serde_json::Value;
use std::collections::{BTreeSet, HashMap};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// The journal's format and its version (its header's `format`).
pub const FORMAT: &str = "armspace.journal/1";

/// Where the journal of the report `report` lies: beside it, its name with
/// `.journal` added.
pub fn path_for(report: &Path) -> PathBuf {
    let mut name = report.as_os_str().to_owned();
    name.push(".journal");
    PathBuf::from(name)
}

#[derive(Serialize)]
struct Fingerprint {
    tool: &'static str,
    version: &'static str,
    parameters: report::Parameters,
    um_per_px_rel_uncertainty: Option<f64>,
    trust_calibration: Option<crate::calibrate::CalibrationSource>,
    overlay_dir: Option<String>,
    /// Only when given, so that journals of runs without it still match.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    overlay_max_width: Option<u32>,
    /// Only when not the default PNG, for the same reason.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    overlay_format: Option<crate::overlay::PictureFormat>,
    correlation_entries_sha256: Option<String>,
}

/// Everything that decides an image's report in a run with `opts` over the
/// `inputs` as given (module docs), as JSON.
pub fn fingerprint(inputs: &[String], opts: &MeasureOptions) -> Value {
    // Paths as the user spelled them name the same files whatever trailing
    // separator or `./` they carry: `in/`, `./in` and `in` are one input.
    let inputs: Vec<String> = inputs.iter().map(|p| lexical(p)).collect();
    let f = Fingerprint {
        tool: env!("CARGO_PKG_NAME"),
        version: env!("CARGO_PKG_VERSION"),
        parameters: report::parameters(&inputs, opts),
        um_per_px_rel_uncertainty: opts.calibration.manual_rel_uncertainty,
        trust_calibration: opts.calibration.trust,
        overlay_dir: opts
            .overlay_dir
            .as_ref()
            .map(|d| lexical(&d.display().to_string())),
        overlay_max_width: opts.overlay_max_width,
        overlay_format: (opts.overlay_format != Default::default()).then_some(opts.overlay_format),
        // The report names the correlation; its coefficients and those of
        // the alternatives beside it may come from a file that changed.
        correlation_entries_sha256: opts.interpret.as_ref().map(|s| {
            crate::load::sha256_hex(format!("{:?}\n{:?}", s.correlation, s.library).as_bytes())
        }),
    };
    // Plain numbers, strings and maps of string keys always serialise; were
    // it ever to fail, the message stands in, the same on both runs.
    serde_json::to_value(&f).unwrap_or_else(|e| Value::String(format!("no fingerprint: {e}")))
}

/// A path with its `.` components and repeated or trailing separators
/// dropped, without touching the file system (`..` is kept: through a link
/// it need not mean the parent).
fn lexical(path: &str) -> String {
    let p: PathBuf = Path::new(path)
        .components()
        .filter(|c| !matches!(c, std::path::Component::CurDir))
        .collect();
    if p.as_os_str().is_empty() {
        ".".into()
    } else {
        p.display().to_string()
    }
}

#[derive(Serialize, Deserialize)]
struct Header {
    format: String,
    fingerprint: Value,
}

#[derive(Serialize)]
struct RecordOut<'a> {
    image: &'a ImageReport,
}

#[derive(Deserialize)]
struct RecordIn {
    image: ImageReport,
}

/// The images of an earlier journal whose fingerprint is this run's.
#[derive(Debug)]
pub struct Earlier {
    images: HashMap<String, ImageReport>,
    /// What the reader should know: a record cut off at the end.
    pub notes: Vec<String>,
}

/// What [`Earlier::sort`] decides for each input, in input order.
#[derive(Debug)]
pub struct Sorted {
    /// The earlier report of each input taken over; None for the inputs to
    /// measure (and for entries that are not images).
    pub taken: Vec<Option<ImageReport>>,
    /// Inputs with an earlier entry that cannot stand, and why.
    pub notes: Vec<String>,
}

impl Earlier {
    /// Images recorded.
    pub fn len(&self) -> usize {
        self.images.len()
    }

    pub fn is_empty(&self) -> bool {
        self.images.is_empty()
    }

    /// Takes over the earlier report of every input whose file is the one
    /// measured (by SHA-256) and whose overlay, if it had one, is still
    /// there; the others are to be measured. Files are hashed in parallel
    /// (on the current rayon pool).
    pub fn sort(mut self, inputs: &[Input]) -> Sorted {
        let current: Vec<Option<String>> = inputs
            .par_iter()
            .map(|i| match i {
                Input::Image(p) if self.images.contains_key(&key(p)) => files::read_image_bytes(p)
                    .ok()
                    .map(|b| crate::load::sha256_hex(&b)),
                _ => None,
            })
            .collect();
        let mut notes = Vec::new();
        let taken = inputs
            .iter()
            .zip(current)
            .map(|(input, sha)| {
                let Input::Image(p) = input else { return None };
                let earlier = self.images.remove(&key(p))?;
                let file = p.display();
                if sha.is_none() || sha != earlier.sha256 {
                    notes.push(format!(
                        "{file}: changed since it was measured (or cannot be read): measured again"
                    ));
                    return None;
                }
                if let Some(o) = &earlier.overlay {
                    if !files::is_own_picture(Path::new(o)) {
                        notes.push(format!(
                            "{file}: its overlay {o} is no longer there: measured again"
                        ));
                        return None;
                    }
                }
                Some(earlier)
            })
            .collect();
        Sorted { taken, notes }
    }
}

fn key(path: &Path) -> String {
    files::path_text(path)
}

/// Reads the journal at `path` for a resumed run: None when there is none;
/// an error naming the file when it is not a journal, is damaged before its
/// last line, or was written with another fingerprint (saying what
/// differs). A last record cut off by the stop is left out with a note.
pub fn read(path: &Path, fingerprint: &Value) -> Result<Option<Earlier>> {
    if files::kind(path) == Kind::Missing && files::broken_link_reason(path).is_none() {
        return Ok(None);
    }
    let text = files::read_text(path, "journal")?;
    let bad = |reason: String| Error::Input {
        path: path.to_path_buf(),
        reason,
    };
    const AGAIN: &str =
        "delete it, or run without --resume to measure every image again (which replaces it)";
    let lines: Vec<&str> = text.split_inclusive('\n').collect();
    let Some(first) = lines.first() else {
        return Err(bad(format!("is empty, not a journal of armspace; {AGAIN}")));
    };
    let header: Header = serde_json::from_str(first.trim_end()).map_err(|e| {
        bad(format!(
            "line 1 is not the header of a journal of armspace ({e}); {AGAIN}"
        ))
    })?;
    if header.format != FORMAT {
        return Err(bad(format!(
            "is a journal of format '{}', which this armspace does not read (it reads {FORMAT}); {AGAIN}",
            crate::error::excerpt(&header.format, 60)
        )));
    }
    let diffs = differences(&header.fingerprint, fingerprint);
    if !diffs.is_empty() {
        return Err(Error::Usage {
            reason: format!(
                "{}: the journal is of a run with other settings, so its images are not taken over: {}. Give the arguments of that run to resume it, or run without --resume to measure every image again (which replaces the journal)",
                path.display(),
                diffs.join("; ")
            ),
        });
    }
    let mut images = HashMap::new();
    let mut notes = Vec::new();
    for (i, line) in lines.iter().enumerate().skip(1) {
        let body = line.trim_end_matches(['\n', '\r']);
        if body.trim_matches(['\0', ' ', '\t']).is_empty() && i + 1 < lines.len() {
            continue;
        }
        match serde_json::from_str::<RecordIn>(body) {
            Ok(r) if r.image.sha256.is_some() => {
                images.insert(r.image.file.clone(), r.image);
            }
            Ok(_) => {
                return Err(bad(format!(
                    "line {} is a record without the image's SHA-256, which this armspace never writes; {AGAIN}",
                    i + 1
                )))
            }
            Err(_) if i + 1 == lines.len() => notes.push(format!(
                "{}: its last record (line {}) is incomplete, cut off when the run was stopped: left out, that image is measured again",
                path.display(),
                i + 1
            )),
            Err(e) => {
                return Err(bad(format!(
                    "line {} is not a record of the journal ({e}): the journal is damaged; {AGAIN}",
                    i + 1
                )))
            }
        }
    }
    Ok(Some(Earlier { images, notes }))
}

/// Where two fingerprints differ, one phrase per field ("parameters.um_per_px
/// was 0.5 in that run, is 0.6 now"), fields by their JSON path.
pub fn differences(was: &Value, now: &Value) -> Vec<String> {
    let mut out = Vec::new();
    diff("", was, now, &mut out);
    out
}

fn diff(at: &str, was: &Value, now: &Value, out: &mut Vec<String>) {
    match (was, now) {
        (Value::Object(a), Value::Object(b)) => {
            let keys: BTreeSet<&String> = a.keys().chain(b.keys()).collect();
            for k in keys {
                let path = if at.is_empty() {
                    k.clone()
                } else {
                    format!("{at}.{k}")
                };
                let null = Value::Null;
                diff(
                    &path,
                    a.get(k).unwrap_or(&null),
                    b.get(k).unwrap_or(&null),
                    out,
                );
            }
        }
        _ if was == now => {}
        _ => {
            let show = |v: &Value| crate::error::excerpt(&v.to_string(), 200);
            let at = if at.is_empty() { "the fingerprint" } else { at };
            out.push(format!(
                "{at} was {} in that run, is {} now",
                show(was),
                show(now)
            ));
        }
    }
}

/// The lock of one report: held by the run writing it, so that two runs
/// given the same `--out` do not write each other's journal and report
/// (the second is refused before it measures anything). An advisory lock
/// on `REPORT.lock` (`File::try_lock`, flock on Unix): the system releases
/// it when the process ends, however it ends, so a killed run leaves no
/// stale lock. The file is removed when the lock is dropped.
#[derive(Debug)]
pub struct RunLock {
    path: PathBuf,
    _file: std::fs::File,
}

impl RunLock {
    /// Takes the lock beside the report `out`, or says which run holds it.
    pub fn acquire(out: &Path) -> Result<Self> {
        let mut name = out.as_os_str().to_os_string();
        name.push(".lock");
        let path = PathBuf::from(name);
        let file = std::fs::OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|source| Error::Write {
                path: path.clone(),
                source,
            })?;
        match file.try_lock() {
            Ok(()) => Ok(Self { path, _file: file }),
            Err(std::fs::TryLockError::WouldBlock) => Err(Error::Input {
                path: out.to_path_buf(),
                reason: format!(
                    "another armspace run is writing this report (it holds {}); wait for it to finish, or name another --out",
                    path.display()
                ),
            }),
            Err(std::fs::TryLockError::Error(source)) => Err(Error::Write { path, source }),
        }
    }
}

impl Drop for RunLock {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.path);
    }
}

/// The journal being written by a run.
#[derive(Debug)]
pub struct Journal {
    path: PathBuf,
    /// None once a write failed: the run goes on without a journal.
    file: Mutex<Option<std::fs::File>>,
}

impl Journal {
    /// Starts the journal at `path`, replacing any there: the header with
    /// `fingerprint`, and the records `carried` over from an earlier journal,
    /// written atomically and synced; later records are appended.
    pub fn start(path: &Path, fingerprint: &Value, carried: &[&ImageReport]) -> Result<Self> {
        let header = Header {
            format: FORMAT.into(),
            fingerprint: fingerprint.clone(),
        };
        let mut text = to_line(&header, path)?;
        for image in carried {
            text.push_str(&to_line(&RecordOut { image }, path)?);
        }
        files::write_output(path, text.as_bytes())?;
        let file = std::fs::OpenOptions::new()
            .append(true)
            .open(path)
            .map_err(|source| Error::Write {
                path: path.to_path_buf(),
                source,
            })?;
        sync_folder(path);
        Ok(Self {
            path: path.to_path_buf(),
            file: Mutex::new(Some(file)),
        })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Appends the report of a finished image and returns once it is on
    /// disk. Ok(false) when it is not recorded: the file was not read (no
    /// SHA-256), its entry would not read back the same, or an earlier write
    /// failed. After a failed write the journal is given up (the error is
    /// returned once); the run itself goes on.
    pub fn record(&self, image: &ImageReport) -> Result<bool> {
        if image.sha256.is_none() {
            return Ok(false);
        }
        let line = to_line(&RecordOut { image }, &self.path)?;
        if !reads_back(&line) {
            return Ok(false);
        }
        let mut guard = self.file.lock().unwrap_or_else(|p| p.into_inner());
        let Some(file) = guard.as_mut() else {
            return Ok(false);
        };
        let written = file
            .write_all(line.as_bytes())
            .and_then(|()| file.sync_data());
        match written {
            Ok(()) => Ok(true),
            Err(source) => {
                *guard = None;
                Err(Error::Write {
                    path: self.path.clone(),
                    source,
                })
            }
        }
    }

    /// Removes the journal (once the report is written whole).
    pub fn remove(self) -> Result<()> {
        drop(self.file);
        std::fs::remove_file(&self.path).map_err(|source| Error::Write {
            path: self.path,
            source,
        })
    }
}

/// A record as one line of JSON with its newline.
fn to_line(value: &impl Serialize, path: &Path) -> Result<String> {
    let mut line = serde_json::to_string(value).map_err(|e| Error::Write {
        path: path.to_path_buf(),
        source: std::io::Error::other(e),
    })?;
    line.push('\n');
    Ok(line)
}

/// Whether a record reads back into the same entry (a number the JSON
/// cannot carry would not): only such records are kept, so that a resumed
/// report is the uninterrupted one.
fn reads_back(line: &str) -> bool {
    serde_json::from_str::<RecordIn>(line)
        .ok()
        .and_then(|r| serde_json::to_string(&RecordOut { image: &r.image }).ok())
        .is_some_and(|again| again == line.trim_end())
}

/// Syncs the folder of a new file, so that the file's name survives a
/// power cut too (best effort: not every system allows it).
fn sync_folder(path: &Path) {
    #[cfg(unix)]
    {
        let dir = match path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => Path::new("."),
        };
        if let Ok(d) = std::fs::File::open(dir) {
            let _ = d.sync_all();
        }
    }
    #[cfg(not(unix))]
    let _ = path;
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_folder_spelled_three_ways_is_one_input() {
        // Path syntax (POSIX): a trailing separator, a leading `./` and a
        // repeated separator name the same directory entry.
        for p in ["in/", "./in", "in", ".//in//"] {
            assert_eq!(lexical(p), "in", "{p}");
        }
        assert_eq!(lexical("./"), ".");
        assert_eq!(lexical("a/../b"), "a/../b");
    }

    #[test]
    fn the_journal_lies_beside_the_report() {
        assert_eq!(
            path_for(Path::new("out/batch.json")),
            Path::new("out/batch.json.journal")
        );
    }

    #[test]
    fn differences_name_the_fields() {
        let was = serde_json::json!({"parameters": {"um_per_px": 0.5, "methods": ["fft"]}, "version": "0.1.0"});
        let now = serde_json::json!({"parameters": {"um_per_px": 0.6, "methods": ["fft"]}, "version": "0.1.0"});
        let d = differences(&was, &now);
        assert_eq!(d, ["parameters.um_per_px was 0.5 in that run, is 0.6 now"]);
        assert!(differences(&was, &was).is_empty());
    }

    #[test]
    fn damaged_journals_are_named() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("r.json.journal");
        let fp = serde_json::json!({"v": 1});
        assert!(read(&p, &fp).unwrap().is_none());
        std::fs::write(&p, "").unwrap();
        let e = read(&p, &fp).unwrap_err().to_string();
        assert!(
            e.contains("r.json.journal") && e.contains("is empty"),
            "{e}"
        );
        std::fs::write(&p, "{\"format\": \"armspace.journal/1\", \"fingerprint\": {\"v\": 1}}\nnot json\n{\"image\": 1}\n").unwrap();
        let e = read(&p, &fp).unwrap_err().to_string();
        assert!(e.contains("r.json.journal") && e.contains("line 2"), "{e}");
        // A cut-off last line is left out with a note.
        std::fs::write(
            &p,
            "{\"format\": \"armspace.journal/1\", \"fingerprint\": {\"v\": 1}}\n{\"image\": {\"fi",
        )
        .unwrap();
        let earlier = read(&p, &fp).unwrap().unwrap();
        assert!(earlier.is_empty());
        assert!(
            earlier.notes[0].contains("incomplete"),
            "{:?}",
            earlier.notes
        );
        let e = read(&p, &serde_json::json!({"v": 2}))
            .unwrap_err()
            .to_string();
        assert!(e.contains("v was 1 in that run, is 2 now"), "{e}");
    }
}
