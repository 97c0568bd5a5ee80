use armspace::load::{load, LoadOptions};
use armspace::methods::fft::*;
use armspace::methods::spectrum::SpectrumAnalyser;
use armspace::preprocess::{prepare, PreprocessParams};
fn main() {
    let a: Vec<String> = std::env::args().collect();
    let l = load(std::path::Path::new(&a[1]), &LoadOptions::default()).unwrap();
    let n: usize = a[2].parse().unwrap();
    let p = prepare(&l.image, None, &PreprocessParams::default());
    let (x, y) = ((p.image.width - n) / 2, (p.image.height - n) / 2);
    let mut an = SpectrumAnalyser::new(n);
    let mut buf = Vec::new();
    an.power(&p.image.data, p.image.width, x, y, &mut buf);
    let params = FftParams::default();
    let (cs, o) = candidates(&buf, n, &params);
    println!(
        "orientation {:.1} anisotropy {:.2}",
        o.dir_deg, o.anisotropy
    );
    for c in cs.iter().take(10) {
        println!(
            "period {:.2} dir {:.1} prom {:.1}",
            c.period_px(),
            c.dir_deg(),
            c.prominence
        );
    }
    let b = choose_peak(&buf, n, &params).unwrap();
    println!(
        "chosen period {:.2} dir {:.1} prom {:.1}",
        b.period_px(),
        b.dir_deg(),
        b.prominence
    );
}
