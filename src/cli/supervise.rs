//! The supervisor of `armspace measure`: a failed allocation (or any other
//! fault that ends the process) becomes the error of the file being
//! measured, and the rest of the batch is still measured.
//!
//! Stable Rust cannot turn a failed allocation into an error that unwinds:
//! the allocator's failure ends the process (SIGABRT), the kernel's
//! out-of-memory killer ends it with SIGKILL, and a stack overflow with
//! SIGSEGV. The whole-image buffers that are allocated fallibly (the grey
//! image, the distance transform) already fail as the file's error; this
//! covers every other one. `measure` therefore runs as two processes: this
//! small one, and a worker (the same program with the same arguments, and
//! `ARMSPACE_WORKER_DIR` naming a private folder) that does the run. The
//! worker notes in that folder when it begins and when it finishes each
//! image. When it ends by such a fault, the supervisor reads which images
//! were in progress:
//! - one image: it is recorded as not measured, with the fault named, and
//!   the batch is run again, taking over the images finished (from the
//!   journal beside the report, `--resume`, or the worker's own journal in
//!   the notes folder when the report goes to stdout; not with `--points`);
//! - several (images measured side by side): each of them is run alone in
//!   the next attempt (it takes the whole memory budget), so that a fault
//!   names one image;
//! - none (the fault came outside any image): the run has failed, status 1.
//!
//! Every other ending (a status, an interrupt, a signal the user sends to
//! stop) is passed on as it is. Each attempt either records one more image
//! as not measured or runs more images alone, so the attempts are bounded
//! by twice the number of images.

use super::{EXIT_FATAL, EXIT_USAGE};
use armspace::files::path_text;
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, BTreeSet};
use std::io::{BufRead, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// The variable that makes a `measure` process the worker: the folder of
/// its progress notes and of the supervisor's instructions.
pub(super) const WORKER_ENV: &str = "ARMSPACE_WORKER_DIR";

/// Set for a worker whose supervisor holds the report's lock.
pub(super) const LOCK_HELD_ENV: &str = "ARMSPACE_WORKER_LOCK_HELD";

/// Panics exit with this status (Rust's runtime).
const PANIC_STATUS: i32 = 101;

/// What the supervisor tells a worker of a later attempt.
#[derive(Serialize, Deserialize, Default, Debug)]
pub(super) struct Retry {
    /// Images (as `path_text` gives them) recorded as not measured, with
    /// the reason.
    pub failed: BTreeMap<String, String>,
    /// Images to be run alone.
    pub alone: BTreeSet<String>,
    /// Take over the images the worker's own journal holds (a report that
    /// goes to stdout has no journal beside it; the worker keeps one in
    /// the notes folder).
    #[serde(default)]
    pub resume: bool,
}

/// One progress note of the worker, a JSON line.
#[derive(Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
enum Note {
    Begin(String),
    End(String),
}

/// The worker's side: its notes and its instructions.
pub(super) struct Worker {
    log: std::sync::Mutex<std::fs::File>,
    dir: PathBuf,
    pub retry: Retry,
}

impl Worker {
    /// The worker of a supervisor, when this process is one. An unusable
    /// folder is a usage error for the run (it is made by the supervisor;
    /// only a hand-set variable can name a wrong one).
    pub fn from_env() -> Result<Option<Self>, String> {
        let Some(dir) = std::env::var_os(WORKER_ENV) else {
            return Ok(None);
        };
        let dir = PathBuf::from(dir);
        let log = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(dir.join("progress"))
            .map_err(|e| format!("{}: cannot write the progress notes: {e}", dir.display()))?;
        let retry = match std::fs::read(dir.join("retry.json")) {
            Ok(bytes) => serde_json::from_slice(&bytes)
                .map_err(|e| format!("{}: unreadable retry notes: {e}", dir.display()))?,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Retry::default(),
            Err(e) => return Err(format!("{}: {e}", dir.display())),
        };
        watch_supervisor(dir.clone());
        Ok(Some(Self {
            log: std::sync::Mutex::new(log),
            dir,
            retry,
        }))
    }

    /// Where the worker keeps its journal when the report has no file to
    /// keep it beside.
    pub fn journal(&self) -> PathBuf {
        self.dir.join("journal")
    }

    fn note(&self, note: &Note) {
        // One write of a whole line (appended): lines of threads never mix.
        // A note that cannot be written costs only the naming of an image
        // after a fault, never the run.
        if let Ok(mut line) = serde_json::to_vec(note) {
            line.push(b'\n');
            let mut f = self.log.lock().unwrap_or_else(|e| e.into_inner());
            let _ = f.write_all(&line);
        }
    }

    /// Noted before an image is read.
    pub fn begin(&self, path: &Path) {
        self.note(&Note::Begin(path_text(path)));
        fault_hook(path);
    }

    /// Noted once an image's result is recorded.
    pub fn end(&self, path: &Path) {
        self.note(&Note::End(path_text(path)));
    }
}

/// The worker ends when its supervisor does: a run killed (by hand, by a
/// batch scheduler) is killed whole, as it was when it was one process. A
/// thread looks every 50 ms whether the parent is still the supervisor
/// (a process whose parent ends is given another); then it removes the
/// notes the supervisor can no longer remove and ends the process at once
/// with the status of a kill, leaving the journal for `--resume`.
fn watch_supervisor(notes: PathBuf) {
    #[cfg(unix)]
    {
        let parent = std::os::unix::process::parent_id();
        let spawned = std::thread::Builder::new()
            .name("supervisor-watch".into())
            .spawn(move || loop {
                std::thread::sleep(std::time::Duration::from_millis(50));
                if std::os::unix::process::parent_id() != parent {
                    let _ = std::fs::remove_dir_all(&notes);
                    std::process::exit(128 + 9);
                }
            });
        if let Err(e) = spawned {
            say!("armspace: note: the run will not stop with its supervisor: {e}");
        }
    }
    #[cfg(not(unix))]
    let _ = notes;
}

/// A fault on purpose, for the tests of the supervisor (the `synth`
/// feature's validation build only): `ARMSPACE_TEST_FAULT=KIND:NAMES` ends
/// the process when an image whose file name is one of NAMES (separated by
/// commas) begins, as a failed allocation does (`alloc`: the standard
/// library's handler for it, which aborts; `alloc-late`: the same a second
/// later), as an internal error does (`panic`), or as the kernel's
/// out-of-memory killer does (`kill`: SIGKILL).
#[cfg(feature = "synth")]
fn fault_hook(path: &Path) {
    let Ok(spec) = std::env::var("ARMSPACE_TEST_FAULT") else {
        return;
    };
    let Some((kind, name)) = spec.split_once(':') else {
        return;
    };
    let file = path.file_name().and_then(|n| n.to_str());
    if !name.split(',').any(|n| Some(n) == file) {
        return;
    }
    match kind {
        "alloc" | "alloc-late" => {
            if kind == "alloc-late" {
                // Long enough for the other images begun beside it to be
                // in progress when it ends the process.
                std::thread::sleep(std::time::Duration::from_secs(1));
            }
            let layout = std::alloc::Layout::from_size_align(1 << 40, 8)
                .unwrap_or(std::alloc::Layout::new::<u64>());
            std::alloc::handle_alloc_error(layout)
        }
        "panic" => panic!("fault injected for a test"),
        "kill" => {
            signal(std::process::id(), Signal::Kill);
            std::thread::sleep(std::time::Duration::from_secs(60));
        }
        _ => {}
    }
}

#[cfg(not(feature = "synth"))]
fn fault_hook(_: &Path) {}

#[allow(dead_code)] // `Kill` is sent by the test build's fault hook only.
enum Signal {
    Interrupt,
    Kill,
}

/// Sends a signal to a process (Unix; nothing elsewhere).
fn signal(pid: u32, sig: Signal) {
    #[cfg(unix)]
    {
        let sig = match sig {
            Signal::Interrupt => libc::SIGINT,
            Signal::Kill => libc::SIGKILL,
        };
        if let Ok(pid) = libc::pid_t::try_from(pid) {
            // SAFETY: kill(2) takes plain integers and touches no memory
            // of this process; a process that has ended gives ESRCH.
            unsafe {
                libc::kill(pid, sig);
            }
        }
    }
    #[cfg(not(unix))]
    let _ = (pid, sig);
}

/// How a worker ended.
enum Ending {
    /// Passed on: a status, or a signal that stops a run on purpose.
    Pass(ExitCode),
    /// A fault: what it was, in words.
    Fault(String),
}

fn ending(status: std::process::ExitStatus) -> Ending {
    if let Some(code) = status.code() {
        if code == PANIC_STATUS {
            return Ending::Fault("an internal error (a panic)".into());
        }
        return Ending::Pass(ExitCode::from(u8::try_from(code).unwrap_or(EXIT_FATAL)));
    }
    #[cfg(unix)]
    {
        use std::os::unix::process::ExitStatusExt;
        if let Some(sig) = status.signal() {
            return match sig {
                6 => Ending::Fault(
                    "the process aborted: a memory allocation failed (too little memory for this image), or an internal error".into(),
                ),
                9 => Ending::Fault(
                    "the process was killed: by the system when memory ran out, or by hand".into(),
                ),
                11 | 7 | 4 | 8 => Ending::Fault(format!(
                    "the process crashed (signal {sig}: a stack overflow or an internal fault)"
                )),
                // SIGINT, SIGTERM, SIGHUP and the rest: someone stopped the
                // run; the shell's status for a signal.
                _ => Ending::Pass(ExitCode::from(128u8.saturating_add(sig as u8))),
            };
        }
    }
    Ending::Pass(ExitCode::from(super::EXIT_FATAL))
}

/// A private folder for one run's notes, removed when dropped.
struct NotesDir(PathBuf);

impl NotesDir {
    fn create() -> std::io::Result<Self> {
        let base = std::env::temp_dir();
        remove_stale(&base);
        let stamp = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_nanos())
            .unwrap_or(0);
        for i in 0..100u32 {
            let dir = base.join(format!(
                "armspace-{}-{stamp}-{i}.supervisor",
                std::process::id()
            ));
            match std::fs::create_dir(&dir) {
                Ok(()) => return Ok(Self(dir)),
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => continue,
                Err(e) => return Err(e),
            }
        }
        Err(std::io::Error::other("no free name"))
    }
}

/// Removes the notes of supervisors that were killed outright (they could
/// not remove their own; their workers died with them): folders named
/// `armspace-PID-*.supervisor` whose PID is no process now (Linux: no
/// /proc/PID). A live process of that number, even another program, keeps
/// the folder: only notes of certainly dead runs go.
fn remove_stale(base: &Path) {
    #[cfg(target_os = "linux")]
    {
        let Ok(entries) = std::fs::read_dir(base) else {
            return;
        };
        for entry in entries.flatten() {
            let name = entry.file_name();
            let Some(name) = name.to_str() else {
                continue;
            };
            let Some(pid) = name
                .strip_prefix("armspace-")
                .filter(|n| n.ends_with(".supervisor"))
                .and_then(|n| n.split('-').next())
                .and_then(|p| p.parse::<u32>().ok())
            else {
                continue;
            };
            if pid != std::process::id() && !Path::new(&format!("/proc/{pid}")).exists() {
                let _ = std::fs::remove_dir_all(entry.path());
            }
        }
    }
    #[cfg(not(target_os = "linux"))]
    let _ = base;
}

impl Drop for NotesDir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// The images a worker began and did not finish, in the order begun.
fn in_progress(progress: &Path) -> Vec<String> {
    let Ok(f) = std::fs::File::open(progress) else {
        return Vec::new();
    };
    let mut open: Vec<String> = Vec::new();
    for line in std::io::BufReader::new(f).lines().map_while(|l| l.ok()) {
        // The last line may be cut off by the fault: it is not a note.
        match serde_json::from_str::<Note>(&line) {
            Ok(Note::Begin(p)) => open.push(p),
            Ok(Note::End(p)) => open.retain(|q| *q != p),
            Err(_) => {}
        }
    }
    open
}

/// Runs `measure` under a supervisor, or returns `None` when this process
/// is to do the run itself: it is the worker, or no worker can be started
/// (then the run goes on in this process, as without a supervisor, with a
/// note).
pub(super) fn supervise(report: Option<&Path>, resume: bool, points: bool) -> Option<ExitCode> {
    let report_to_file = report.is_some();
    if std::env::var_os(WORKER_ENV).is_some() {
        return None;
    }
    let exe = match std::env::current_exe() {
        Ok(e) => e,
        Err(e) => {
            say!("armspace: note: running without a supervisor (the program's own path is unknown: {e}); a failed allocation ends the whole run");
            return None;
        }
    };
    let notes = match NotesDir::create() {
        Ok(d) => d,
        Err(e) => {
            say!(
                "armspace: note: running without a supervisor (no private folder in {}: {e}); a failed allocation ends the whole run",
                std::env::temp_dir().display()
            );
            return None;
        }
    };
    // The worker runs in a process group of its own, so that an interrupt
    // (Ctrl-C at the terminal, or sent to this process) reaches it once,
    // passed on from here: the first makes it finish what is in progress
    // and write a partial report, a second stops it at once, as without a
    // supervisor. This process waits for it either way.
    // The handler is set once a worker runs: if none can be started, this
    // process does the run and sets its own.
    static WORKER: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(0);
    let pass_interrupts_on = || {
        ctrlc::set_handler(|| {
            let pid = WORKER.load(std::sync::atomic::Ordering::SeqCst);
            if pid != 0 {
                signal(pid, Signal::Interrupt);
            }
        })
    };
    // The report's lock is held here, for the whole run with its attempts:
    // a supervisor killed outright releases it at once (the system does),
    // and its worker ends with it. One that cannot be taken for another
    // reason than a run holding it is left to the worker, which names what
    // is wrong with --out.
    let lock = match report.map(armspace::journal::RunLock::acquire) {
        Some(Ok(lock)) => Some(lock),
        Some(Err(e @ armspace::Error::Input { .. })) => {
            say!("armspace: {e}");
            return Some(ExitCode::from(EXIT_USAGE));
        }
        _ => None,
    };
    let args: Vec<std::ffi::OsString> = std::env::args_os().skip(1).collect();
    // A later attempt takes over the images the earlier ones finished,
    // from the journal beside the report (`--resume`) or, for a report to
    // stdout, from the worker's own; not with --points, which needs every
    // image measured in one run (it refuses --resume).
    let mut retry = Retry {
        resume: !points,
        ..Retry::default()
    };
    let mut attempt = 0usize;
    loop {
        attempt += 1;
        let mut cmd = std::process::Command::new(&exe);
        cmd.args(&args).env(WORKER_ENV, &notes.0);
        if lock.is_some() {
            cmd.env(LOCK_HELD_ENV, "1");
        }
        if attempt > 1 && report_to_file && !points && !resume {
            cmd.arg("--resume");
        }
        #[cfg(unix)]
        std::os::unix::process::CommandExt::process_group(&mut cmd, 0);
        // The worker is killed by the system the moment this process ends
        // (Linux); elsewhere its own watch ends it within 50 ms.
        #[cfg(target_os = "linux")]
        // SAFETY: prctl(2) is async-signal-safe and the closure touches no
        // memory shared with the parent.
        unsafe {
            std::os::unix::process::CommandExt::pre_exec(&mut cmd, || {
                if libc::prctl(libc::PR_SET_PDEATHSIG, libc::SIGKILL) == -1 {
                    return Err(std::io::Error::last_os_error());
                }
                Ok(())
            });
        }
        let status = match cmd.spawn() {
            Ok(mut child) => {
                WORKER.store(child.id(), std::sync::atomic::Ordering::SeqCst);
                if attempt == 1 {
                    if let Err(e) = pass_interrupts_on() {
                        say!("armspace: note: Ctrl-C will not leave a partial report: {e}");
                    }
                }
                let waited = child.wait();
                WORKER.store(0, std::sync::atomic::Ordering::SeqCst);
                match waited {
                    Ok(s) => s,
                    Err(e) => {
                        say!("armspace: lost the worker: {e}");
                        return Some(ExitCode::from(EXIT_FATAL));
                    }
                }
            }
            Err(e) if attempt == 1 => {
                drop(lock); // this process takes it again for its run
                say!("armspace: note: running without a supervisor (cannot start the worker {}: {e}); a failed allocation ends the whole run", exe.display());
                return None;
            }
            Err(e) => {
                say!(
                    "armspace: cannot start the worker {} again: {e}",
                    exe.display()
                );
                return Some(ExitCode::from(EXIT_FATAL));
            }
        };
        let what = match ending(status) {
            Ending::Pass(code) => return Some(code),
            Ending::Fault(what) => what,
        };
        let progress = notes.0.join("progress");
        let open = in_progress(&progress);
        let grew = match open.as_slice() {
            [] => {
                say!("armspace: the run stopped outside any image's measurement ({what}); no report was written");
                return Some(ExitCode::from(EXIT_FATAL));
            }
            [one] => {
                say!("armspace: {one}: measuring it stopped the run ({what}); it is recorded as not measured and the batch is run again");
                retry.failed.insert(
                    one.clone(),
                    format!("measuring it stopped the program ({what}); recorded as not measured so that the rest of the batch could be measured"),
                )
                .is_none()
            }
            several => {
                say!(
                    "armspace: the run stopped ({what}) while {} images were measured side by side ({}); the batch is run again with each of them measured alone",
                    several.len(),
                    several.join(", ")
                );
                let before = retry.alone.len();
                retry.alone.extend(several.iter().cloned());
                retry.alone.len() > before
            }
        };
        // Each attempt records an image or runs more images alone; one that
        // does neither would repeat itself.
        if !grew {
            say!("armspace: the run stopped again the same way ({what}); giving up");
            return Some(ExitCode::from(EXIT_FATAL));
        }
        let written = serde_json::to_vec(&retry)
            .map_err(std::io::Error::other)
            .and_then(|bytes| std::fs::write(notes.0.join("retry.json"), bytes))
            .and_then(|()| std::fs::write(&progress, b""));
        if let Err(e) = written {
            say!(
                "armspace: cannot keep the supervisor's notes in {}: {e}",
                notes.0.display()
            );
            return Some(ExitCode::from(EXIT_FATAL));
        }
    }
}

/// A worker that cannot read its instructions: a usage error.
pub(super) fn worker_error(e: &str) -> ExitCode {
    say!("armspace: {e}");
    ExitCode::from(EXIT_USAGE)
}
