//! Errors as values, each naming the file (or parameter) and what is wrong.

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
    #[error("{}: image is {width}x{height} pixels, too small to measure (at least {min}x{min} needed)", path.display())]
    TooSmall {
        path: PathBuf,
        width: u32,
        height: u32,
        min: u32,
    },
    #[error("{}: path does not exist", path.display())]
    Missing { path: PathBuf },
    #[error("invalid {name}: {reason}")]
    Parameter { name: String, reason: String },
    #[error("{}: cannot write: {source}", path.display())]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{}: {reason}", path.display())]
    Input { path: PathBuf, reason: String },
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
