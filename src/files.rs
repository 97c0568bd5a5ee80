//! Files at the edges: reading inputs without blocking on special files, and
//! writing outputs that never harm an input.
//!
//! Rules, each for a reason a lab meets:
//! - An output is never written over an input. Paths are compared after
//!   resolving links (`std::fs::canonicalize`), so `./img.png`, an absolute
//!   path and a symlink to the micrograph are all the same file.
//! - Regular files are written atomically (a temporary file in the same
//!   folder, flushed, then renamed), so a failure leaves the old file or none,
//!   never half a file. A symlink named as an output is followed and its
//!   target replaced; the link stays.
//! - A special file named as an output (a device such as `/dev/null`, a FIFO)
//!   is written through, never replaced: renaming over `/dev/null` would
//!   destroy the device for the whole machine.
//! - Inputs that are not regular files (FIFOs, devices, sockets) are not read:
//!   reading a FIFO waits for a writer that may never come.
//! - Text inputs (specifications, profiles, correlation libraries, reports)
//!   are bounded in size, so a wrong file named by mistake is refused at once.

use std::collections::HashSet;
use std::io::Write;
use std::path::{Path, PathBuf};

use crate::{Error, Result};

/// Largest text input read (specifications, profiles, correlation libraries,
/// reports fed to `stats`): far above any real one (a report of thousands of
/// images is a few MB), small enough that a wrong file is refused quickly.
pub const MAX_TEXT_BYTES: u64 = 64 * 1024 * 1024;

/// What a path names, seen through links.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Kind {
    Regular,
    Folder,
    /// A FIFO, character or block device, or socket.
    Special,
    Missing,
}

/// The kind of file `path` names, following links.
pub fn kind(path: &Path) -> Kind {
    match std::fs::metadata(path) {
        Ok(m) if m.is_file() => Kind::Regular,
        Ok(m) if m.is_dir() => Kind::Folder,
        Ok(_) => Kind::Special,
        Err(_) => Kind::Missing,
    }
}

/// Why a path that leads to no file cannot be followed, when it is a
/// symbolic link: "a link to nothing" (its target does not exist), or the
/// system's reason, for a loop of links "Too many levels of symbolic links"
/// (ELOOP in POSIX.1-2017 `<errno.h>`, given when resolving a path meets
/// more links than the system follows, as a loop always does). `None` when
/// `path` is not a link.
pub fn broken_link_reason(path: &Path) -> Option<String> {
    let m = std::fs::symlink_metadata(path).ok()?;
    if !m.file_type().is_symlink() {
        return None;
    }
    match std::fs::metadata(path) {
        Ok(_) => None,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Some("a link to nothing".into()),
        Err(e) => Some(format!("a link that cannot be followed: {e}")),
    }
}

/// The error for a path that leads to no file: a broken link named as
/// such, else a path that does not exist.
fn missing(path: &Path) -> Error {
    match broken_link_reason(path) {
        Some(reason) => Error::Input {
            path: path.to_path_buf(),
            reason,
        },
        None => Error::Missing {
            path: path.to_path_buf(),
        },
    }
}

/// A path as the report and the terminal show it: as it is when it is
/// valid UTF-8; otherwise each byte that is not part of valid UTF-8 written
/// as `\xNN` (a file name on Unix is any bytes), so that two names that
/// differ only there stay two names, and the name can be found again.
pub fn path_text(path: &Path) -> String {
    #[cfg(unix)]
    {
        use std::os::unix::ffi::OsStrExt;
        let bytes = path.as_os_str().as_bytes();
        let mut out = String::with_capacity(bytes.len());
        for chunk in bytes.utf8_chunks() {
            out.push_str(chunk.valid());
            for b in chunk.invalid() {
                out.push_str(&format!("\\x{b:02X}"));
            }
        }
        out
    }
    #[cfg(not(unix))]
    {
        path.display().to_string()
    }
}

/// Whether the path is not valid UTF-8 (and is shown with escapes, see
/// [`path_text`]).
pub fn path_is_not_utf8(path: &Path) -> bool {
    path.to_str().is_none()
}

/// Reads a text input (UTF-8) of at most [`MAX_TEXT_BYTES`], refusing special
/// files and folders with a message naming the file; `what` says what the
/// file was meant to be ("specification", "profile file" ...).
pub fn read_text(path: &Path, what: &str) -> Result<String> {
    let input = |reason: String| Error::Input {
        path: path.to_path_buf(),
        reason,
    };
    match kind(path) {
        Kind::Regular => {}
        Kind::Folder => return Err(input(format!("is a folder, not a {what}"))),
        Kind::Special => {
            return Err(input(format!(
                "is not a regular file (a FIFO, device or socket); a {what} must be a file"
            )))
        }
        Kind::Missing => return Err(missing(path)),
    }
    let read_err = |source: std::io::Error| Error::Read {
        path: path.to_path_buf(),
        source,
    };
    let len = std::fs::metadata(path).map_err(read_err)?.len();
    if len > MAX_TEXT_BYTES {
        return Err(input(format!(
            "is {:.1} MB, too large for a {what} (at most {} MB)",
            len as f64 / 1e6,
            MAX_TEXT_BYTES / (1024 * 1024)
        )));
    }
    let bytes = std::fs::read(path).map_err(read_err)?;
    String::from_utf8(bytes).map_err(|_| input(format!("is not UTF-8 text; a {what} is JSON")))
}

/// Reads an image file, refusing special files and folders.
pub fn read_image_bytes(path: &Path) -> Result<Vec<u8>> {
    match kind(path) {
        Kind::Regular => std::fs::read(path).map_err(|source| Error::Read {
            path: path.to_path_buf(),
            source,
        }),
        Kind::Folder => Err(Error::Input {
            path: path.to_path_buf(),
            reason: "is a folder, not an image file".into(),
        }),
        Kind::Special => Err(Error::Input {
            path: path.to_path_buf(),
            reason: "is not a regular file (a FIFO, device or socket); not read".into(),
        }),
        Kind::Missing => Err(missing(path)),
    }
}

/// The size in bytes of an image file, without reading it (the same
/// refusals as [`read_image_bytes`]).
pub fn image_file_len(path: &Path) -> Result<u64> {
    match kind(path) {
        Kind::Regular => std::fs::metadata(path)
            .map(|m| m.len())
            .map_err(|source| Error::Read {
                path: path.to_path_buf(),
                source,
            }),
        _ => read_image_bytes(path).map(|b| b.len() as u64),
    }
}

/// An image file opened for reading its header (buffered; the same
/// refusals as [`read_image_bytes`]).
pub fn open_image(path: &Path) -> Result<std::io::BufReader<std::fs::File>> {
    match kind(path) {
        Kind::Regular => std::fs::File::open(path)
            .map(std::io::BufReader::new)
            .map_err(|source| Error::Read {
                path: path.to_path_buf(),
                source,
            }),
        _ => read_image_bytes(path).and_then(|_| {
            Err(Error::Input {
                path: path.to_path_buf(),
                reason: "is not a regular file".into(),
            })
        }),
    }
}

/// The memory available to this process, bytes (Linux): the least of
/// `MemAvailable` of /proc/meminfo, what its control group's memory limit
/// leaves (a container's limit: the machine's free memory is not the
/// container's), and what its address-space limit leaves (`ulimit -v`);
/// `None` elsewhere or when none can be read.
pub fn available_memory() -> Option<u64> {
    let read = |p: &str| std::fs::read_to_string(p).ok();
    let meminfo = read("/proc/meminfo").and_then(|t| {
        let line = t
            .lines()
            .find(|l| l.starts_with("MemAvailable:"))?
            .to_owned();
        let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
        kib.checked_mul(1024)
    });
    let cgroup = read("/proc/self/cgroup")
        .and_then(|t| cgroup_room(&t, &|p: &str| read(p).map(|s| s.trim().to_owned())));
    let address_space = read("/proc/self/limits").and_then(|limits| {
        let status = read("/proc/self/status")?;
        address_space_room(&limits, &status)
    });
    [meminfo, cgroup, address_space].into_iter().flatten().min()
}

/// What the control group's memory limit leaves (limit less usage), from
/// /proc/self/cgroup's text; `read` gives a file's trimmed text. cgroup v2
/// (`0::/PATH`: memory.max, memory.current) or v1 (`N:memory:/PATH`:
/// memory.limit_in_bytes, memory.usage_in_bytes), under /sys/fs/cgroup; a
/// container often sees its own group at the root of the mount, so the
/// root is tried when the path is not there. `None` without a limit ("max",
/// or v1's largest page-rounded value).
fn cgroup_room(cgroup: &str, read: &dyn Fn(&str) -> Option<String>) -> Option<u64> {
    // v1 writes "no limit" as the largest multiple of the page size; any
    // limit beyond an exbibyte is no limit.
    const NO_LIMIT: u64 = 1 << 60;
    for line in cgroup.lines() {
        let mut parts = line.splitn(3, ':');
        let (Some(id), Some(controllers), Some(path)) = (parts.next(), parts.next(), parts.next())
        else {
            continue;
        };
        let (dir, limit_file, usage_file) = if id == "0" && controllers.is_empty() {
            ("/sys/fs/cgroup", "memory.max", "memory.current")
        } else if controllers.split(',').any(|c| c == "memory") {
            (
                "/sys/fs/cgroup/memory",
                "memory.limit_in_bytes",
                "memory.usage_in_bytes",
            )
        } else {
            continue;
        };
        let path = path.trim_end_matches('/');
        for base in [format!("{dir}{path}"), dir.to_owned()] {
            let Some(limit) = read(&format!("{base}/{limit_file}")) else {
                continue;
            };
            let Ok(limit) = limit.parse::<u64>() else {
                return None; // "max": no limit
            };
            if limit >= NO_LIMIT {
                return None;
            }
            let usage = read(&format!("{base}/{usage_file}"))
                .and_then(|u| u.parse::<u64>().ok())
                .unwrap_or(0);
            return Some(limit.saturating_sub(usage));
        }
    }
    None
}

/// What the address-space limit (`Max address space` of /proc/self/limits,
/// the soft one) leaves beside the process's size (`VmSize` of
/// /proc/self/status); `None` when unlimited or unreadable. Address space
/// is more than resident memory (thread stacks and allocator arenas are
/// reserved whole), so this is a bound the process meets before its
/// resident memory does.
fn address_space_room(limits: &str, status: &str) -> Option<u64> {
    let line = limits
        .lines()
        .find(|l| l.starts_with("Max address space"))?;
    let soft: u64 = line
        .trim_start_matches("Max address space")
        .split_whitespace()
        .next()?
        .parse()
        .ok()?; // "unlimited" does not parse
    let size_kib: u64 = status
        .lines()
        .find(|l| l.starts_with("VmSize:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()?;
    Some(soft.saturating_sub(size_kib.saturating_mul(1024)))
}

/// The file an output path will land on, links resolved: the canonical path
/// of an existing target, or the canonical folder joined with the name.
/// `None` when the folder does not exist.
pub fn resolved_output(path: &Path) -> Option<PathBuf> {
    if let Ok(p) = std::fs::canonicalize(path) {
        return Some(p);
    }
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let name = path.file_name()?;
    std::fs::canonicalize(dir).ok().map(|d| d.join(name))
}

/// The set of files a run reads, by their resolved paths, against which every
/// output is checked.
#[derive(Clone, Debug, Default)]
pub struct Protected {
    files: HashSet<PathBuf>,
}

impl Protected {
    pub fn new<'a>(inputs: impl IntoIterator<Item = &'a Path>) -> Self {
        Self {
            files: inputs
                .into_iter()
                .filter_map(|p| std::fs::canonicalize(p).ok())
                .collect(),
        }
    }

    /// Adds one more file that must not be written over (a spec, a profile).
    pub fn add(&mut self, path: &Path) {
        if let Ok(p) = std::fs::canonicalize(path) {
            self.files.insert(p);
        }
    }

    /// Whether writing to `path` would replace a protected file.
    pub fn is_protected(&self, path: &Path) -> bool {
        resolved_output(path).is_some_and(|p| self.files.contains(&p))
    }

    /// Checks, before anything is measured, that `path` can take the output
    /// called `role` ("report", "CSV summary"): it is not an input, not a
    /// folder, and its folder exists and accepts a new file. Special files
    /// (devices, FIFOs) pass: they are written through.
    pub fn check_output(&self, path: &Path, role: &str) -> Result<()> {
        let refuse = |reason: String| Error::Input {
            path: path.to_path_buf(),
            reason,
        };
        if self.is_protected(path) {
            return Err(refuse(format!(
                "is an input of this run; the {role} would be written over it (choose another name)"
            )));
        }
        match kind(path) {
            Kind::Folder => {
                return Err(refuse(format!("is a folder; the {role} needs a file name")))
            }
            Kind::Special => return Ok(()),
            Kind::Regular | Kind::Missing => {}
        }
        let target = resolved_output(path).ok_or_else(|| {
            refuse(format!(
                "the folder for the {role} does not exist (create it first)"
            ))
        })?;
        probe_folder(&target)
            .map_err(|e| refuse(format!("the {role} cannot be written in its folder: {e}")))
    }
}

/// Creates and removes a temporary file beside `target`, the only sure test
/// that the folder accepts new files (permissions, read-only mounts, quotas).
fn probe_folder(target: &Path) -> std::io::Result<()> {
    let tmp = temp_beside(target, "probe");
    std::fs::File::create(&tmp)?;
    std::fs::remove_file(&tmp)
}

fn temp_beside(target: &Path, tag: &str) -> PathBuf {
    let dir = match target.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = target
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    dir.join(format!(".{name}.{tag}-{}", std::process::id()))
}

/// Writes an output file: atomically for a regular (or new) file, following
/// a link to its target; through, without replacing it, for a special file.
pub fn write_output(path: &Path, bytes: &[u8]) -> Result<()> {
    let err = |source: std::io::Error| Error::Write {
        path: path.to_path_buf(),
        source,
    };
    match kind(path) {
        Kind::Folder => return Err(err(std::io::Error::other("is a folder"))),
        Kind::Special => {
            let mut f = std::fs::OpenOptions::new()
                .write(true)
                .open(path)
                .map_err(err)?;
            f.write_all(bytes).map_err(err)?;
            return f.flush().map_err(err);
        }
        Kind::Regular | Kind::Missing => {}
    }
    // A link to an existing file is followed, so the link stays and its
    // target is replaced; a dangling link cannot be resolved and is itself
    // replaced by the new file.
    let target = match std::fs::symlink_metadata(path) {
        Ok(m) if m.file_type().is_symlink() => resolved_output(path).ok_or_else(|| {
            err(std::io::Error::new(
                std::io::ErrorKind::NotFound,
                "a link whose target's folder does not exist",
            ))
        })?,
        _ => path.to_path_buf(),
    };
    let dir = match target.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !dir.is_dir() {
        return Err(err(std::io::Error::new(
            std::io::ErrorKind::NotFound,
            format!("folder {} does not exist", dir.display()),
        )));
    }
    let tmp = temp_beside(&target, "tmp");
    let result = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, &target)
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(err(e));
    }
    Ok(())
}

/// Writes to standard output, returning the failure (a closed pipe, a full
/// disk) as a value instead of panicking as `print!` does.
pub fn write_stdout(text: &str) -> std::io::Result<()> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    out.flush()
}

/// The PNG text entry (keyword, value) that marks a picture written by this
/// tool, so that a later run over a folder holding its overlays does not
/// measure them as micrographs.
pub const OWN_PICTURE_TEXT: (&str, &str) = ("Software", "armspace overlay");

/// Whether `path` is a PNG written by this tool: its text entry
/// [`OWN_PICTURE_TEXT`] stands before the image data (the encoder writes it
/// with the header), so only the file's first chunks are read.
pub fn is_own_picture(path: &Path) -> bool {
    use std::io::Read;
    let Ok(f) = std::fs::File::open(path) else {
        return false;
    };
    let mut head = Vec::new();
    if f.take(64 * 1024).read_to_end(&mut head).is_err() {
        return false;
    }
    own_picture_bytes(&head)
}

/// The comment a JPEG picture of this tool carries ("Software: armspace
/// overlay", from [`OWN_PICTURE_TEXT`]).
pub fn own_picture_comment() -> Vec<u8> {
    format!("{}: {}", OWN_PICTURE_TEXT.0, OWN_PICTURE_TEXT.1).into_bytes()
}

fn own_picture_bytes(head: &[u8]) -> bool {
    const SIGNATURE: &[u8] = b"\x89PNG\r\n\x1a\n";
    if head.starts_with(&[0xFF, 0xD8]) {
        return own_jpeg_bytes(head);
    }
    if !head.starts_with(SIGNATURE) {
        return false;
    }
    let want: Vec<u8> = [
        OWN_PICTURE_TEXT.0.as_bytes(),
        &[0],
        OWN_PICTURE_TEXT.1.as_bytes(),
    ]
    .concat();
    let mut at = SIGNATURE.len();
    while at + 8 <= head.len() {
        let len = u32::from_be_bytes([head[at], head[at + 1], head[at + 2], head[at + 3]]) as usize;
        let kind = &head[at + 4..at + 8];
        let data = head.get(at + 8..at + 8 + len);
        match (kind, data) {
            (b"IDAT", _) | (_, None) => return false,
            (b"tEXt", Some(d)) if d.starts_with(&want) => return true,
            _ => at += 12 + len,
        }
    }
    false
}

/// Whether a JPEG's segments before its scan data hold the comment of
/// [`own_picture_comment`] (ITU-T T.81 B.1.1.4: each marker segment after
/// SOI is FF, a marker byte and a two-byte length that counts itself).
fn own_jpeg_bytes(head: &[u8]) -> bool {
    let want = own_picture_comment();
    let mut at = 2;
    while at + 4 <= head.len() {
        if head[at] != 0xFF {
            return false;
        }
        let marker = head[at + 1];
        let len = u16::from_be_bytes([head[at + 2], head[at + 3]]) as usize;
        if marker == 0xDA || len < 2 {
            return false; // start of scan: no comment before the image data
        }
        if marker == 0xFE && head.get(at + 4..at + 2 + len) == Some(&want[..]) {
            return true;
        }
        at += 2 + len;
    }
    false
}

#[cfg(test)]
mod tests {
    use super::*;

    // The file formats are the kernel's: proc(5) for /proc/self/cgroup,
    // limits and status; Documentation/admin-guide/cgroup-v2.rst
    // (memory.max "max" or bytes, memory.current) and cgroup-v1/memory.rst
    // (memory.limit_in_bytes, memory.usage_in_bytes; no limit is the
    // largest page multiple, 9223372036854771712 with 4 KiB pages).
    #[test]
    fn a_control_groups_memory_limit_bounds_the_room() {
        let files = |entries: &'static [(&'static str, &'static str)]| {
            move |p: &str| {
                entries
                    .iter()
                    .find(|(k, _)| *k == p)
                    .map(|(_, v)| v.to_string())
            }
        };
        // v2, the group's own folder.
        let v2 = files(&[
            ("/sys/fs/cgroup/job/memory.max", "1073741824"),
            ("/sys/fs/cgroup/job/memory.current", "73741824"),
        ]);
        assert_eq!(cgroup_room("0::/job\n", &v2), Some(1_000_000_000));
        // v2 without a limit.
        let v2max = files(&[("/sys/fs/cgroup/memory.max", "max")]);
        assert_eq!(cgroup_room("0::/\n", &v2max), None);
        // v1, the group seen at the mount's root inside a container.
        let v1 = files(&[
            ("/sys/fs/cgroup/memory/memory.limit_in_bytes", "2147483648"),
            ("/sys/fs/cgroup/memory/memory.usage_in_bytes", "147483648"),
        ]);
        let text = "9:name=systemd:/\n4:memory:/docker/abc\n0::/\n";
        assert_eq!(cgroup_room(text, &v1), Some(2_000_000_000));
        // v1 without a limit.
        let v1none = files(&[(
            "/sys/fs/cgroup/memory/memory.limit_in_bytes",
            "9223372036854771712",
        )]);
        assert_eq!(cgroup_room("4:memory:/\n", &v1none), None);
        assert_eq!(cgroup_room("garbage", &v1), None);
    }

    #[test]
    fn an_address_space_limit_bounds_the_room() {
        let limits =
            "Limit                     Soft Limit           Hard Limit           Units     \n\
Max data size             unlimited            unlimited            bytes     \n\
Max address space         524288000            unlimited            bytes     \n";
        let status = "Name:\tarmspace\nVmPeak:\t  9000 kB\nVmSize:\t    4000 kB\n";
        assert_eq!(
            address_space_room(limits, status),
            Some(524_288_000 - 4_096_000)
        );
        let unlimited = limits.replace("524288000", "unlimited");
        assert_eq!(address_space_room(&unlimited, status), None);
    }

    #[test]
    fn atomic_write_replaces_and_cleans_up() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("r.json");
        write_output(&p, b"one").unwrap();
        write_output(&p, b"two").unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"two");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
        let missing = dir.path().join("no/such/r.json");
        let e = write_output(&missing, b"x").unwrap_err().to_string();
        assert!(e.contains("does not exist"), "{e}");
    }

    #[cfg(unix)]
    #[test]
    fn a_link_is_followed_and_kept() {
        let dir = tempfile::tempdir().unwrap();
        let real = dir.path().join("real.json");
        std::fs::write(&real, b"old").unwrap();
        let link = dir.path().join("link.json");
        std::os::unix::fs::symlink(&real, &link).unwrap();
        write_output(&link, b"new").unwrap();
        assert!(std::fs::symlink_metadata(&link)
            .unwrap()
            .file_type()
            .is_symlink());
        assert_eq!(std::fs::read(&real).unwrap(), b"new");
    }

    #[cfg(unix)]
    #[test]
    fn a_device_is_written_through_not_replaced() {
        let null = Path::new("/dev/null");
        if kind(null) != Kind::Special {
            return; // no /dev/null on this machine: nothing to check
        }
        write_output(null, b"discarded").unwrap();
        assert_eq!(kind(null), Kind::Special);
    }

    #[test]
    fn an_input_is_protected_under_any_spelling() {
        let dir = tempfile::tempdir().unwrap();
        let img = dir.path().join("img.png");
        std::fs::write(&img, b"micrograph").unwrap();
        let protected = Protected::new([img.as_path()]);
        let other_spelling = dir.path().join(".").join("img.png");
        let e = protected
            .check_output(&other_spelling, "report")
            .unwrap_err()
            .to_string();
        assert!(e.contains("is an input"), "{e}");
        assert!(protected
            .check_output(&dir.path().join("r.json"), "report")
            .is_ok());
        let e = protected
            .check_output(&dir.path().join("none/r.json"), "report")
            .unwrap_err()
            .to_string();
        assert!(e.contains("does not exist"), "{e}");
    }

    #[test]
    fn own_pictures_are_recognised() {
        let dir = tempfile::tempdir().unwrap();
        let img = image::RgbImage::from_pixel(8, 8, image::Rgb([1, 2, 3]));
        let own = dir.path().join("own.png");
        crate::overlay::write_png(&own, &img).unwrap();
        assert!(is_own_picture(&own));
        let other = dir.path().join("other.png");
        img.save(&other).unwrap();
        assert!(!is_own_picture(&other));
    }

    #[test]
    fn text_inputs_are_bounded_and_typed() {
        let dir = tempfile::tempdir().unwrap();
        let e = read_text(dir.path(), "specification")
            .unwrap_err()
            .to_string();
        assert!(e.contains("is a folder"), "{e}");
        let bin = dir.path().join("b.json");
        std::fs::write(&bin, [0xff, 0xfe, 0x00]).unwrap();
        let e = read_text(&bin, "specification").unwrap_err().to_string();
        assert!(e.contains("not UTF-8"), "{e}");
    }
}
