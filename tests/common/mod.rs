//! Helpers shared by the integration tests.
#![allow(dead_code)]

pub mod fields;

use std::path::{Path, PathBuf};
use std::process::Command;

pub struct Run {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

/// Runs the armspace binary built for these tests.
pub fn armspace(args: &[&str]) -> Run {
    let out = Command::new(env!("CARGO_BIN_EXE_armspace"))
        .args(args)
        .env_remove("SOURCE_DATE_EPOCH")
        .output()
        .expect("the armspace binary runs");
    Run {
        code: out.status.code().unwrap_or(-1),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

/// A striped test image: a comb of bright bars of period `period` px across
/// x, with a little deterministic texture, written as 8-bit PNG.
pub fn write_comb_png(path: &Path, w: u32, h: u32, period: f64) {
    let img = image::GrayImage::from_fn(w, h, |x, y| {
        let phase = (x as f64 / period).fract();
        let base = if phase < 0.5 { 180.0 } else { 70.0 };
        let tex = ((x * 7 + y * 13) % 11) as f64;
        image::Luma([(base + tex) as u8])
    });
    img.save(path).expect("test image written");
}

pub fn path_str(p: &Path) -> String {
    p.display().to_string()
}

pub fn repo_file(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}
