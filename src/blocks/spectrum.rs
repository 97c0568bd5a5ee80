//! Windowed 2D power spectra of square tiles and sub-bin peak location.
//!
//! The window is the periodic Hann window w[k] = 0.5 - 0.5 cos(2 pi k / n),
//! as scipy.signal.get_window("hann", n) returns it (F. J. Harris, "On the use
//! of windows for harmonic analysis with the discrete Fourier transform",
//! Proc. IEEE 66 (1978) 51-83). The tile's windowed mean is removed first, so
//! the zero-frequency term does not leak into the lowest bins.

use rustfft::num_complex::Complex;
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;

/// Reusable buffers and FFT plan for tiles of one size.
pub struct SpectrumAnalyser {
    n: usize,
    fft: Arc<dyn Fft<f32>>,
    window: Vec<f32>,
    /// Sum of the 2D window, (sum of w)^2.
    window_sum: f64,
    buf: Vec<Complex<f32>>,
    tr: Vec<Complex<f32>>,
    scratch: Vec<Complex<f32>>,
}

impl SpectrumAnalyser {
    pub fn new(n: usize) -> Self {
        let mut planner = FftPlanner::new();
        let fft = planner.plan_fft_forward(n);
        let scratch = vec![Complex::new(0.0, 0.0); fft.get_inplace_scratch_len()];
        let window = hann(n);
        let w1: f64 = window.iter().map(|w| *w as f64).sum();
        Self {
            n,
            fft,
            window,
            window_sum: w1 * w1,
            // Row pairs (`power` packs two rows per transform), and the
            // columns u = 0..=n/2.
            buf: vec![Complex::new(0.0, 0.0); n.div_ceil(2) * n],
            tr: vec![Complex::new(0.0, 0.0); (n / 2 + 1) * n],
            scratch,
        }
    }

    /// Power spectrum |F(u, v)|^2 of the tile whose top-left corner is at
    /// (x0, y0) in a row-major image of width `stride`. The result is indexed
    /// [v * n + u] with u, v the unshifted DFT indices (0 is zero frequency;
    /// index k stands for frequency k/n when k < n/2, (k - n)/n otherwise).
    pub fn power(&mut self, img: &[f32], stride: usize, x0: usize, y0: usize, out: &mut Vec<f64>) {
        let n = self.n;
        // Windowed mean: sum over rows of w[y] x (sum over the row of w[x] v).
        // Each row's sum is a serial chain of additions; ROWS rows are summed
        // side by side so the chains overlap. Every row is still summed in
        // order of x, and the rows are added to `wxsum` in order of y, so the
        // mean is bit for bit that of one row at a time.
        const ROWS: usize = 4;
        let row_at = |y: usize| &img[(y0 + y) * stride + x0..(y0 + y) * stride + x0 + n];
        let mut wxsum = 0.0f64;
        let mut y = 0;
        while y + ROWS <= n {
            let rows: [&[f32]; ROWS] = std::array::from_fn(|k| row_at(y + k));
            let mut s = [0.0f64; ROWS];
            for (x, w) in self.window.iter().enumerate() {
                for (sk, row) in s.iter_mut().zip(&rows) {
                    *sk += row[x] as f64 * *w as f64;
                }
            }
            for (k, sk) in s.iter().enumerate() {
                wxsum += self.window[y + k] as f64 * sk;
            }
            y += ROWS;
        }
        for y in y..n {
            let s: f64 = row_at(y)
                .iter()
                .zip(&self.window)
                .map(|(v, w)| *v as f64 * *w as f64)
                .sum();
            wxsum += self.window[y] as f64 * s;
        }
        let mean = if self.window_sum > 0.0 {
            (wxsum / self.window_sum) as f32
        } else {
            0.0
        };
        // The tile is real, so its spectrum is Hermitian, F(-u, -v) = F(u, v)*:
        // two rows go through one complex FFT (one as the real part, one as
        // the imaginary part) and are separated by that symmetry, and only
        // the columns u = 0..=n/2 need the second pass. Half the transforms
        // of the direct 2D FFT, the same spectrum up to rounding.
        // An odd n pairs its last row with zeros.
        let half = n / 2;
        let pairs = n.div_ceil(2);
        for j in 0..pairs {
            let (ya, yb) = (2 * j, (2 * j + 1).min(n - 1));
            let ra = &img[(y0 + ya) * stride + x0..(y0 + ya) * stride + x0 + n];
            let rb = &img[(y0 + yb) * stride + x0..(y0 + yb) * stride + x0 + n];
            let wa = self.window[ya];
            let wb = if 2 * j + 1 < n { self.window[yb] } else { 0.0 };
            let dst = &mut self.buf[j * n..(j + 1) * n];
            for (((d, a), b), wx) in dst.iter_mut().zip(ra).zip(rb).zip(&self.window) {
                *d = Complex::new((a - mean) * wa * wx, (b - mean) * wb * wx);
            }
        }
        self.fft
            .process_with_scratch(&mut self.buf, &mut self.scratch);
        // Row spectra, columns u = 0..=n/2, into `tr` as [u * n + y]:
        // with z = a + i b, A(u) = (Z(u) + Z(-u)*) / 2 and
        // B(u) = (Z(u) - Z(-u)*) / (2 i).
        // In blocks of rows so that the column-wise writes stay in cache.
        let cols = half + 1;
        const J: usize = 8;
        for bj in (0..pairs).step_by(J) {
            for u in 0..cols {
                let m = (n - u) % n;
                for j in bj..(bj + J).min(pairs) {
                    let zu = self.buf[j * n + u];
                    let zm = self.buf[j * n + m].conj();
                    let a = (zu + zm) * 0.5;
                    self.tr[u * n + 2 * j] = a;
                    if 2 * j + 1 < n {
                        let d = zu - zm;
                        self.tr[u * n + 2 * j + 1] = Complex::new(0.5 * d.im, -0.5 * d.re);
                    }
                }
            }
        }
        self.fft
            .process_with_scratch(&mut self.tr, &mut self.scratch);
        // Every element is written below; a buffer of the right size is
        // reused as it is.
        if out.len() != n * n {
            out.clear();
            out.resize(n * n, 0.0);
        }
        // Power of the columns u = 0..=n/2 in blocks of B x B (within a block
        // each output row is a slice), then the rest by symmetry,
        // P(u, v) = P(n - u, n - v).
        const B: usize = 16;
        for bv in (0..n).step_by(B) {
            for bu in (0..cols).step_by(B) {
                let ue = (bu + B).min(cols);
                for v in bv..(bv + B).min(n) {
                    let row = &mut out[v * n + bu..v * n + ue];
                    for (o, u) in row.iter_mut().zip(bu..ue) {
                        *o = self.tr[u * n + v].norm_sqr() as f64;
                    }
                }
            }
        }
        for v in 0..n {
            let mirror = (n - v) % n;
            for u in cols..n {
                out[v * n + u] = out[mirror * n + (n - u)];
            }
        }
    }
}

/// Periodic Hann window of length n.
pub fn hann(n: usize) -> Vec<f32> {
    (0..n)
        .map(|k| (0.5 - 0.5 * (std::f64::consts::TAU * k as f64 / n as f64).cos()) as f32)
        .collect()
}

/// Offset of a spectral peak from its largest bin, in bins, from the
/// magnitudes (not powers) of that bin and its two neighbours:
/// delta = 2 (|X+| - |X-|) / (|X-| + 2 |X0| + |X+|).
///
/// For the periodic Hann window this is exact for a single tone: the window's
/// kernel near its main lobe is |W(d)| = K / (d (1 - d^2)) x |sin(pi d)| / pi,
/// and substituting d = delta, 1 - delta, 1 + delta gives numerator 12 delta K / D
/// and denominator 12 K / D with D = (1 - delta^2)(4 - delta^2). For a broad
/// symmetric peak it behaves as a centroid. Result within [-0.5, 0.5].
pub fn hann_peak_offset(left: f64, mid: f64, right: f64) -> f64 {
    let (l, m, r) = (left.max(0.0), mid.max(0.0), right.max(0.0));
    let denom = l + 2.0 * m + r;
    if denom <= 0.0 || !denom.is_finite() {
        return 0.0;
    }
    (2.0 * (r - l) / denom).clamp(-0.5, 0.5)
}

/// Lengths up to `max` whose only prime factors are 2, 3 and 5 and that are
/// even: sizes for which the FFT is fast.
pub fn smooth_sizes(max: usize) -> Vec<usize> {
    let mut out = Vec::new();
    let mut p2 = 2usize;
    while p2 <= max {
        let mut p3 = p2;
        while p3 <= max {
            let mut p5 = p3;
            while p5 <= max {
                out.push(p5);
                p5 *= 5;
            }
            p3 *= 3;
        }
        p2 *= 2;
    }
    out.sort_unstable();
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hann_matches_definition() {
        // scipy.signal.get_window("hann", 8) (periodic): 0, 0.14645, 0.5, 0.85355, 1, ...
        let w = hann(8);
        let expected = [
            0.0,
            0.146_446_6,
            0.5,
            0.853_553_4,
            1.0,
            0.853_553_4,
            0.5,
            0.146_446_6,
        ];
        for (a, b) in w.iter().zip(expected) {
            assert!((*a as f64 - b).abs() < 1e-6);
        }
    }

    /// The n x n tile with its windowed mean removed, times the 2D Hann
    /// window, in f64: what the transform is applied to.
    fn windowed(img: &[f32], n: usize) -> Vec<f64> {
        let w = hann(n);
        let ww = |i: usize| (w[i % n] * w[i / n]) as f64;
        let wsum: f64 = (0..n * n).map(ww).sum();
        let mean = (0..n * n).map(|i| ww(i) * img[i] as f64).sum::<f64>() / wsum;
        (0..n * n).map(|i| (img[i] as f64 - mean) * ww(i)).collect()
    }

    #[test]
    fn parseval_holds_for_a_tile() {
        // Parseval's theorem for the DFT: sum |F|^2 = n^2 * sum |f|^2 (2D, n x n).
        let n = 48;
        let img: Vec<f32> = (0..n * n)
            .map(|i| (((i * 7919) % 101) as f32 / 50.0) - 1.0)
            .collect();
        let mut a = SpectrumAnalyser::new(n);
        let mut p = Vec::new();
        a.power(&img, n, 0, 0, &mut p);
        let energy: f64 = windowed(&img, n).iter().map(|v| v * v).sum();
        let total: f64 = p.iter().sum();
        assert!((total / (energy * (n * n) as f64) - 1.0).abs() < 1e-4);
        // The windowed mean is removed: no power at zero frequency.
        assert!(p[0] < 1e-6 * total);
    }

    #[test]
    fn power_matches_a_direct_dft() {
        // The definition of the 2D DFT, F(u, v) = sum f(x, y)
        // exp(-2 pi i (u x + v y) / n), evaluated directly in f64 on the
        // windowed, mean-removed tile: the packed real-input transform must
        // give the same power at every bin, both halves of the spectrum.
        // An even size (the ones the methods use) and an odd one (the last
        // row is paired with zeros).
        for n in [24, 15] {
            let img: Vec<f32> = (0..n * n)
                .map(|i| {
                    let (x, y) = ((i % n) as f32, (i / n) as f32);
                    (0.7 * x + 0.3 * y).sin() + ((i * 7919) % 37) as f32 / 37.0 + 0.01 * x * y
                })
                .collect();
            let mut a = SpectrumAnalyser::new(n);
            let mut p = Vec::new();
            a.power(&img, n, 0, 0, &mut p);
            let f = windowed(&img, n);
            let mut max = 0.0f64;
            let mut direct = vec![0.0f64; n * n];
            for v in 0..n {
                for u in 0..n {
                    let (mut re, mut im) = (0.0f64, 0.0f64);
                    for y in 0..n {
                        for x in 0..n {
                            let ph =
                                -std::f64::consts::TAU * ((u * x + v * y) % n) as f64 / n as f64;
                            re += f[y * n + x] * ph.cos();
                            im += f[y * n + x] * ph.sin();
                        }
                    }
                    direct[v * n + u] = re * re + im * im;
                    max = max.max(direct[v * n + u]);
                }
            }
            for i in 0..n * n {
                assert!(
                    (p[i] - direct[i]).abs() <= 1e-5 * max,
                    "bin {i}: {} vs {}",
                    p[i],
                    direct[i]
                );
            }
        }
    }

    #[test]
    fn smooth_sizes_are_smooth_and_even() {
        let s = smooth_sizes(200);
        assert!(s.contains(&96) && s.contains(&120) && s.contains(&128) && s.contains(&150));
        assert!(!s.contains(&98) && !s.contains(&75));
        for v in s {
            let mut m = v;
            for p in [2, 3, 5] {
                while m % p == 0 {
                    m /= p;
                }
            }
            assert_eq!(m, 1);
            assert_eq!(v % 2, 0);
        }
    }
}
