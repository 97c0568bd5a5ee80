//! Memory: the budget a run may use, the peak each image is estimated to
//! need from its header (before anything is decoded), the rule that weighs
//! a header's pixel count against the file's size, and the admission of a
//! batch's images so that the estimates of those measured at once stay
//! within the budget.
//!
//! What the estimate rests on (measured with `scripts/memory_peaks.sh`,
//! numbers in DEVELOPERS.md): while the methods run, the prepared image
//! (4 bytes a pixel) is held with what the method in progress needs; the
//! most is the intercept method's when its structure tensor is smoothed at
//! every pixel (windows under 4 px, arms finer than about 4 px): the phase
//! field and the smoothed grey values as 16-bit fixed point (2 + 2), the
//! lines' occupancy (a bit) and the three smoothed tensor components (12),
//! 20.1 bytes a pixel with the prepared image, 21 rounded up. Wider windows
//! put the tensor on a grid of at least 2 px (3 bytes a pixel or less);
//! fields measured at 64 megapixels peak at 13 to 14 bytes a pixel of
//! resident memory, the program and its allocator included. While loading,
//! the file's bytes, the decoder's samples and the grey floats are held
//! together.

use std::sync::{Condvar, Mutex};
use std::time::Duration;

/// Bytes a pixel the measurement holds at its peak (see the module docs:
/// 21 at the intercept method's finest tensor, plus the overlay's grey
/// level, a byte a pixel, kept while the methods run when pictures are
/// asked for).
pub const MEASURE_BYTES_PER_PX: u64 = 22;

/// Memory of the run that does not grow with the image: the program,
/// thread stacks, FFT plans and tiles, the report's entries.
pub const FIXED_BYTES: u64 = 64 << 20;

/// Budget used when the available memory cannot be read: 4 GiB, what
/// any machine that measures 64-megapixel fields has.
pub const FALLBACK_BUDGET_BYTES: u64 = 4 << 30;

/// Images with more pixels than this are held to
/// [`MAX_PIXELS_PER_FILE_BYTE`]: below it an image costs at most about half
/// a gigabyte and a few seconds whatever its file claims.
pub const COMPRESSION_CHECK_MIN_PX: u64 = 16_000_000;

/// Largest number of pixels a file may claim per byte it holds (above
/// [`COMPRESSION_CHECK_MIN_PX`]). A micrograph carries the camera's noise,
/// at least about one grey level: a lossless coder cannot store Gaussian
/// noise of standard deviation s levels in fewer than log2(s sqrt(2 pi e))
/// bits a pixel (its differential entropy, Shannon's source coding
/// theorem), about 2 bits at s = 1, i.e. 4 pixels a byte. A baseline JPEG
/// spends at least a DC and an end-of-block code on every 8 x 8 block,
/// 2 bits even with code tables optimised for the image, i.e. at most 256
/// pixels a byte, and a real field's texture costs far more. 200 pixels a
/// byte is thus beyond any real micrograph, and well within what a damaged
/// or forged header gives (a 440 KB PNG claiming 20000 x 20000 pixels holds
/// 900 a byte; a 70 KB JPEG claiming 19000 x 19000, 5000).
pub const MAX_PIXELS_PER_FILE_BYTE: f64 = 200.0;

/// What the header tells before decoding.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Header {
    pub width: u32,
    pub height: u32,
    /// Bytes a pixel of the decoder's output (channels x bytes a sample).
    pub decoded_bytes_per_px: u64,
    pub file_bytes: u64,
}

/// The estimated peak memory of measuring an image, in bytes: the larger of
/// the loading's (the file's bytes, the decoder's samples counted twice for
/// its own working buffers, and the grey floats) and the measurement's
/// ([`MEASURE_BYTES_PER_PX`]), plus [`FIXED_BYTES`].
pub fn estimate_peak(h: &Header) -> u64 {
    let px = h.width as u64 * h.height as u64;
    let load = h
        .file_bytes
        .saturating_add(px.saturating_mul(2 * h.decoded_bytes_per_px + 4));
    let measure = px.saturating_mul(MEASURE_BYTES_PER_PX);
    FIXED_BYTES.saturating_add(load.max(measure))
}

/// The default budget: three quarters of the memory available when the run
/// starts (Linux `MemAvailable`, [`crate::files::available_memory`]),
/// leaving the rest to the system and other programs, since the estimates
/// are upper bounds but not guarantees; [`FALLBACK_BUDGET_BYTES`] when it
/// cannot be read.
pub fn default_budget() -> u64 {
    crate::files::available_memory()
        .map(|a| a / 4 * 3)
        .unwrap_or(FALLBACK_BUDGET_BYTES)
}

/// Parses a memory size: a number with an optional unit, `B`, `K`/`KiB`,
/// `M`/`MiB`, `G`/`GiB`, `T`/`TiB` (powers of 1024) or `KB`, `MB`, `GB`,
/// `TB` (powers of 1000), case ignored ("4G", "1500MB", "2.5GiB").
pub fn parse_size(text: &str) -> Result<u64, String> {
    let t = text.trim();
    let split = t
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let value: f64 = num
        .parse()
        .map_err(|_| format!("'{text}' is not a memory size (a number with K, M, G or T)"))?;
    let factor: f64 = match unit.trim().to_ascii_lowercase().as_str() {
        "" | "b" => 1.0,
        "k" | "kib" => 1024.0,
        "m" | "mib" => 1024f64.powi(2),
        "g" | "gib" => 1024f64.powi(3),
        "t" | "tib" => 1024f64.powi(4),
        "kb" => 1e3,
        "mb" => 1e6,
        "gb" => 1e9,
        "tb" => 1e12,
        other => {
            return Err(format!(
                "'{text}': unknown unit '{other}' (use K, M, G, T or KB, MB, GB, TB)"
            ))
        }
    };
    let bytes = value * factor;
    if !(bytes.is_finite() && bytes >= 1.0 && bytes < u64::MAX as f64) {
        return Err(format!("'{text}' is not a usable memory size"));
    }
    Ok(bytes as u64)
}

/// A size in words: "1.66 GiB", "512.0 MiB".
pub fn fmt_bytes(b: u64) -> String {
    let b = b as f64;
    if b >= 1024f64.powi(3) {
        format!("{:.2} GiB", b / 1024f64.powi(3))
    } else if b >= 1024f64.powi(2) {
        format!("{:.1} MiB", b / 1024f64.powi(2))
    } else {
        format!("{b:.0} bytes")
    }
}

/// A vector of `n` copies of `value`, or `None` when the memory cannot be
/// had (`Vec::try_reserve_exact`): for the large buffers, so that a failed
/// allocation becomes the image's error instead of ending the process.
pub fn try_filled<T: Clone>(n: usize, value: T) -> Option<Vec<T>> {
    let mut v = Vec::new();
    v.try_reserve_exact(n).ok()?;
    v.resize(n, value);
    Some(v)
}

/// The collecting of an iterator of known length into a vector whose
/// memory was reserved fallibly first (see [`try_filled`]).
pub fn try_collect<T>(n: usize, items: impl Iterator<Item = T>) -> Option<Vec<T>> {
    let mut v = Vec::new();
    v.try_reserve_exact(n).ok()?;
    v.extend(items);
    Some(v)
}

/// The budget of a batch shared by the images measured at once: an image
/// starts when its estimate fits beside those running (in input order, so
/// a large image waits until the ones before it are done and then runs
/// alone).
pub struct Gate {
    budget: u64,
    used: Mutex<u64>,
    freed: Condvar,
}

impl Gate {
    pub fn new(budget: u64) -> Self {
        Self {
            budget,
            used: Mutex::new(0),
            freed: Condvar::new(),
        }
    }

    /// Waits until `need` bytes fit beside those reserved (or nothing else
    /// runs), then reserves them. While waiting on a worker thread of rayon,
    /// it runs the pool's queued work (already admitted images) instead of
    /// idling. Returns the bytes reserved, to give to [`Gate::release`].
    pub fn acquire(&self, need: u64) -> u64 {
        let need = need.min(self.budget);
        loop {
            {
                let mut used = self.used.lock().unwrap_or_else(|e| e.into_inner());
                if *used == 0 || used.saturating_add(need) <= self.budget {
                    *used += need;
                    return need;
                }
            }
            if rayon::yield_now() != Some(rayon::Yield::Executed) {
                let used = self.used.lock().unwrap_or_else(|e| e.into_inner());
                // A short wait: a release between the check and this wait
                // notifies no one, so the check is repeated regularly.
                let _ = self
                    .freed
                    .wait_timeout(used, Duration::from_millis(20))
                    .map_err(|e| e.into_inner());
            }
        }
    }

    /// Gives back what [`Gate::acquire`] reserved.
    pub fn release(&self, reserved: u64) {
        let mut used = self.used.lock().unwrap_or_else(|e| e.into_inner());
        *used = used.saturating_sub(reserved);
        self.freed.notify_all();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes_parse_in_both_unit_families() {
        assert_eq!(parse_size("4G").unwrap(), 4 << 30);
        assert_eq!(parse_size("4 GiB").unwrap(), 4 << 30);
        assert_eq!(parse_size("1500MB").unwrap(), 1_500_000_000);
        assert_eq!(parse_size("512").unwrap(), 512);
        assert_eq!(parse_size("0.5k").unwrap(), 512);
        assert!(parse_size("lots").is_err());
        assert!(parse_size("4X").is_err());
        assert!(parse_size("0").is_err());
    }

    #[test]
    fn estimate_is_the_larger_stage() {
        // 8000 x 8000 grey 8-bit PNG of 46 MB: measuring (22 B/px) exceeds
        // loading (46 MB + 6 B/px).
        let h = Header {
            width: 8000,
            height: 8000,
            decoded_bytes_per_px: 1,
            file_bytes: 46_000_000,
        };
        assert_eq!(estimate_peak(&h), FIXED_BYTES + 64_000_000 * 22);
        // A 64-bit float RGB TIFF: loading (52 B/px) is the larger.
        let f = Header {
            decoded_bytes_per_px: 24,
            file_bytes: 24 * 64_000_000,
            ..h
        };
        assert_eq!(
            estimate_peak(&f),
            FIXED_BYTES + 24 * 64_000_000 + 52 * 64_000_000
        );
    }

    #[test]
    fn gate_admits_within_the_budget() {
        let g = Gate::new(100);
        let a = g.acquire(60);
        assert_eq!(*g.used.lock().unwrap(), 60);
        g.release(a);
        // More than the budget runs alone: reserved as the whole budget.
        assert_eq!(g.acquire(500), 100);
    }
}
