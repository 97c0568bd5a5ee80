//! Whole-image arrays of smoothed values held as 16-bit fixed point over
//! their own range: half the memory of 32-bit floats (128 MB rather than
//! 256 MB on a 64-megapixel image), for arrays that are only sampled.
//!
//! Why 16 bits lose nothing a measurement can see: the values stored are
//! smoothed images (a blurred phase indicator in 0..1, smoothed grey
//! levels). The step is the range / 65535, so a stored value is within
//! half a step, 7.6e-6 of the range, of the float. The input itself
//! resolves no finer: an 8-bit micrograph has steps of 1/255 of its range
//! and a 16-bit one of 1/65535, and the rounding is below both; and the
//! quantities read from these arrays (where a profile crosses a level, how
//! deep a neck is) carry the image's noise, far above 1e-5 of the range.

/// A `w` x `h` row-major array of values `lo + step * q`.
pub struct Fixed16 {
    pub w: usize,
    pub h: usize,
    lo: f32,
    step: f32,
    q: Vec<u16>,
}

impl Fixed16 {
    /// Rounds `values` (row-major, `w` x `h`) to the nearest of 65536
    /// levels spread over their finite range; a value that is not finite
    /// is stored as the range's low end. The floats are consumed, so they
    /// are freed as soon as the copy is made.
    pub fn from_f32(values: Vec<f32>, w: usize, h: usize) -> Self {
        debug_assert_eq!(values.len(), w * h);
        let (mut lo, mut hi) = (f32::INFINITY, f32::NEG_INFINITY);
        for &v in values.iter().filter(|v| v.is_finite()) {
            lo = lo.min(v);
            hi = hi.max(v);
        }
        if lo > hi {
            (lo, hi) = (0.0, 0.0);
        }
        // A constant array keeps its value exactly (every q is 0).
        let step = if hi > lo {
            ((hi as f64 - lo as f64) / 65535.0) as f32
        } else {
            1.0
        };
        let q = values
            .iter()
            .map(|&v| {
                if v.is_finite() {
                    ((v as f64 - lo as f64) / step as f64)
                        .round()
                        .clamp(0.0, 65535.0) as u16
                } else {
                    0
                }
            })
            .collect();
        drop(values);
        Self { w, h, lo, step, q }
    }

    /// The largest difference between a stored value and the float it was
    /// made from (half a step).
    pub fn max_error(&self) -> f32 {
        if self.q.iter().all(|&q| q == 0) {
            0.0
        } else {
            0.5 * self.step
        }
    }

    /// The value of pixel `i` (row-major index).
    #[inline]
    pub fn at(&self, i: usize) -> f32 {
        self.lo + self.step * self.q[i] as f32
    }

    /// Bilinear interpolation at (x, y), pixels, clamped to the image.
    #[inline]
    pub fn bilinear(&self, x: f64, y: f64) -> f32 {
        let (w, h) = (self.w, self.h);
        let x = x.clamp(0.0, (w - 1) as f64);
        let y = y.clamp(0.0, (h - 1) as f64);
        // x, y >= 0 here, so truncation is the floor.
        let (x0, y0) = (x as usize, y as usize);
        let (x1, y1) = ((x0 + 1).min(w - 1), (y0 + 1).min(h - 1));
        let (fx, fy) = ((x - x0 as f64) as f32, (y - y0 as f64) as f32);
        let top = self.at(y0 * w + x0) * (1.0 - fx) + self.at(y0 * w + x1) * fx;
        let bot = self.at(y1 * w + x0) * (1.0 - fx) + self.at(y1 * w + x1) * fx;
        top * (1.0 - fy) + bot * fy
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// Every stored value is within the stated error of its float, and
        /// the error is half a 65535th of the range.
        #[test]
        fn values_within_half_a_step(
            v in proptest::collection::vec(-1.0e3f32..1.0e3, 1..400)
        ) {
            let n = v.len();
            let f = Fixed16::from_f32(v.clone(), n, 1);
            let (lo, hi) = v.iter().fold((f32::MAX, f32::MIN), |(a, b), &x| (a.min(x), b.max(x)));
            let range = (hi - lo) as f64;
            prop_assert!(f.max_error() as f64 <= 0.5 * range / 65535.0 * (1.0 + 1e-5) + 1e-30);
            for (i, &x) in v.iter().enumerate() {
                // f32 arithmetic in `at` adds a rounding of the value's own
                // size (2^-24 relative) to the half step.
                let tol = f.max_error() as f64 + 2.0 * f32::EPSILON as f64 * x.abs().max(lo.abs()).max(hi.abs()) as f64;
                prop_assert!((f.at(i) as f64 - x as f64).abs() <= tol, "{} vs {}", f.at(i), x);
            }
        }
    }

    #[test]
    fn constant_and_non_finite() {
        let f = Fixed16::from_f32(vec![0.25; 6], 3, 2);
        assert_eq!(f.at(4), 0.25);
        assert_eq!(f.max_error(), 0.0);
        let g = Fixed16::from_f32(vec![f32::NAN, 1.0, 3.0, f32::INFINITY], 2, 2);
        assert_eq!(g.at(0), 1.0);
        assert_eq!(g.at(2), 3.0);
        assert_eq!(g.at(3), 1.0);
    }

    #[test]
    fn bilinear_matches_the_float_interpolation() {
        // A ramp in x and y is reproduced by bilinear interpolation exactly
        // in exact arithmetic (a plane is bilinear); here within the stated
        // error.
        let (w, h) = (7, 5);
        let v: Vec<f32> = (0..w * h)
            .map(|i| 0.3 * (i % w) as f32 + 0.1 * (i / w) as f32)
            .collect();
        let f = Fixed16::from_f32(v, w, h);
        for &(x, y) in &[(0.0, 0.0), (2.5, 1.25), (5.9, 3.9), (-3.0, 10.0)] {
            let (cx, cy) = (f64::clamp(x, 0.0, 6.0), f64::clamp(y, 0.0, 4.0));
            let exact = 0.3 * cx + 0.1 * cy;
            // Interpolation weights sum to 1, so the error is at most the
            // corners' (half a step), plus f32 rounding.
            let tol = f.max_error() as f64 + 1e-6;
            assert!((f.bilinear(x, y) as f64 - exact).abs() <= tol, "{x} {y}");
        }
    }
}
