use armspace::load::{load, LoadOptions};
use armspace::methods::fft::*;
use armspace::preprocess::{prepare, PreprocessParams};
use std::time::Instant;
fn main() {
    let a: Vec<String> = std::env::args().collect();
    let t = Instant::now();
    let l = load(std::path::Path::new(&a[1]), &LoadOptions::default()).unwrap();
    let t1 = t.elapsed();
    let p = prepare(&l.image, None, &PreprocessParams::default());
    let t2 = t.elapsed();
    let o = measure(&p, &FftParams::default());
    let t3 = t.elapsed();
    println!(
        "load {:?} prep {:?} fft {:?} window {} tiles {}",
        t1,
        t2 - t1,
        t3 - t2,
        o.window_px,
        o.n_tiles_analysed
    );
}
