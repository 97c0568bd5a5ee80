use armspace::load::{load, LoadOptions};
use armspace::methods::fft::*;
use armspace::preprocess::{prepare, PreprocessParams};
fn main() {
    let a: Vec<String> = std::env::args().collect();
    let l = load(std::path::Path::new(&a[1]), &LoadOptions::default()).unwrap();
    let p = prepare(&l.image, None, &PreprocessParams::default());
    let params = FftParams::default();
    for n in [32usize, 48, 64, 96, 128, 192, 256, 384] {
        if n > p.image.width.min(p.image.height) {
            break;
        }
        let t = analyse_tiles(&p, n, n / 2, &params);
        let mut v: Vec<f64> = t
            .iter()
            .filter(|t| t.quality >= 6.0)
            .map(|t| t.spacing_px)
            .collect();
        v.sort_by(|a, b| a.total_cmp(b));
        let q: Vec<f64> = t
            .iter()
            .filter(|t| t.quality >= 6.0)
            .map(|t| t.quality)
            .collect();
        let med = if v.is_empty() {
            f64::NAN
        } else {
            v[v.len() / 2]
        };
        let p25 = if v.is_empty() {
            f64::NAN
        } else {
            v[v.len() / 4]
        };
        let p75 = if v.is_empty() {
            f64::NAN
        } else {
            v[3 * v.len() / 4]
        };
        let mq = armspace::stats::median(&q).unwrap_or(0.0);
        println!(
            "n {n:4} tiles {:4} reliable {:4} median {med:.2} iqr {p25:.2}-{p75:.2} medq {mq:.1}",
            t.len(),
            v.len()
        );
    }
}
