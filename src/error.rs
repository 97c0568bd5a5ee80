//! Errors as values: one enum for the library (the synthetic-image
//! generator `synth` keeps its own `SynthError`), each message saying what
//! is wrong and naming what it is about (the file, the value as given,
//! the options, the correlation). Checks that see only pixels or numbers (a
//! scale bar, a calibration, the CSV encoding) leave the file's name to the
//! caller that knows it. The `#[error]` texts are the messages users see and
//! tests match: rewording one is a change of behaviour.

use std::path::PathBuf;

#[derive(Debug, thiserror::Error)]
pub enum Error {
    #[error("{}: cannot read: {source}", path.display())]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{}: not a supported image (PNG, JPEG, TIFF or BMP): {reason}", path.display())]
    Format { path: PathBuf, reason: String },
    #[error("{}: the image data is damaged or truncated: {reason}", path.display())]
    Decode { path: PathBuf, reason: String },
    #[error(
        "{}: image is {width}x{height} pixels ({:.1} megapixels), over the limit of {limit_mpx} megapixels; raise it with --max-megapixels",
        path.display(), (*width as f64) * (*height as f64) / 1e6
    )]
    TooLarge {
        path: PathBuf,
        width: u32,
        height: u32,
        limit_mpx: f64,
    },
    /// The header claims more pixels than the file's size can hold for a
    /// real micrograph (see `memory::MAX_PIXELS_PER_FILE_BYTE`).
    #[error(
        "{}: the header claims {width}x{height} pixels ({:.1} megapixels) for a file of {file_bytes} bytes, {per_byte:.0} pixels a byte, beyond the {} a real micrograph compresses to; the header is likely damaged or forged, so the file is refused before decoding (give --allow-high-compression if the image is genuine)",
        path.display(), (*width as f64) * (*height as f64) / 1e6, crate::memory::MAX_PIXELS_PER_FILE_BYTE
    )]
    ImplausibleSize {
        path: PathBuf,
        width: u32,
        height: u32,
        file_bytes: u64,
        per_byte: f64,
    },
    /// The image's estimated peak memory exceeds the run's budget.
    #[error(
        "{}: image is {width}x{height} pixels; measuring it needs about {} of memory (estimated from its header), over the memory budget of {}; refused before decoding (raise --memory-budget if the machine has the memory)",
        path.display(), crate::memory::fmt_bytes(*estimate), crate::memory::fmt_bytes(*budget)
    )]
    OverBudget {
        path: PathBuf,
        width: u32,
        height: u32,
        estimate: u64,
        budget: u64,
    },
    /// Memory for one of the image's large buffers could not be had.
    #[error("{}: not enough memory to {what}", path.display())]
    OutOfMemory { path: PathBuf, what: String },
    #[error("{}: image is {width}x{height} pixels, too small to measure (at least {min}x{min} needed)", path.display())]
    TooSmall {
        path: PathBuf,
        width: u32,
        height: u32,
        min: u32,
    },
    #[error("{}: path does not exist", path.display())]
    Missing { path: PathBuf },
    #[error("{}: cannot write: {source}", path.display())]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{}: {reason}", path.display())]
    Input { path: PathBuf, reason: String },
    /// A value that cannot be used: an option's argument as given, or a
    /// micrometres-per-pixel calibration however it was obtained. `reason`
    /// quotes the value and says what is wrong; the option is named by
    /// whoever reports the error (the argument parser prints "invalid value
    /// ... for '--option'").
    #[error("{reason}")]
    Value { reason: String },
    /// An image's calibration cannot be settled: no scale bar stands out,
    /// the resolution tags are unusable, no source was given, or the source
    /// named as trusted has no value. These checks see the image's pixels
    /// and numbers, not its file, so the caller says which image it was.
    #[error("{reason}")]
    Calibration { reason: String },
    /// A correlation that cannot be used as asked: a composition it
    /// excludes or needs, a model parameter out of range, an unknown id, an
    /// invalid entry. `reason` says what; a caller that knows the entry's id
    /// or file puts it in front.
    #[error("{reason}")]
    Correlation { reason: String },
    /// Options that do not go together, or one given without another it
    /// needs; `reason` names them.
    #[error("{reason}")]
    Usage { reason: String },
    /// The CSV summary could not be encoded; the caller names the file it
    /// was meant for.
    #[error("{reason}")]
    Csv { reason: String },
}

pub type Result<T> = std::result::Result<T, Error>;

/// At most `max` characters of `text` (its start and end, with the count
/// left out between), for a message that quotes an input: a wrong file of
/// megabytes then gives a message of a line, not of megabytes.
pub fn excerpt(text: &str, max: usize) -> String {
    let n = text.chars().count();
    if n <= max {
        return text.to_string();
    }
    let half = max / 2;
    let head: String = text.chars().take(half).collect();
    let tail: String = text.chars().skip(n - half).collect();
    format!(
        "{head} [... {} characters left out ...] {tail}",
        n - 2 * half
    )
}

/// Something a reviewer should know about a result: a stable code that
/// programs and tests match, and a message in words. Codes are
/// `stage.what` (for example `fft.few-tiles`); they never change once
/// released, while messages may be reworded.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Warning {
    pub code: &'static str,
    pub message: String,
}

impl Warning {
    pub fn new(code: &'static str, message: impl Into<String>) -> Self {
        Self {
            code,
            message: message.into(),
        }
    }
}

impl std::fmt::Display for Warning {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
    }
}
