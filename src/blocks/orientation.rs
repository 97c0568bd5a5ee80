//! The structure tensor of an image: the local dominant gradient direction
//! and how one-directional the neighbourhood is (its coherence), at a
//! chosen smoothing scale (J. Bigun & G. Granlund, "Optimal orientation
//! detection of linear symmetry", Proc. 1st ICCV, 1987, 433-438). Used by
//! the intercept method to lay test lines along the trunks; the same field
//! serves any method or analysis that needs the arms' direction.

use crate::blocks::blur::{box_widths, gaussian_blur_in_place};
use crate::blocks::fixed_point::Fixed16;

/// Smoothed structure tensor components (Jxx, Jxy, Jyy), on a grid of
/// pitch `d` pixels: every pixel when `d` is 1, else the means of d x d
/// blocks of pixels (see [`Tensor::rebuild`]).
pub struct Tensor {
    /// Width and height of the grid.
    pub gw: usize,
    pub gh: usize,
    /// Grid pitch, pixels.
    pub d: usize,
    pub jxx: Vec<f32>,
    pub jxy: Vec<f32>,
    pub jyy: Vec<f32>,
}

/// Products of the central-difference gradients (gx^2, gx gy, gy^2) of an
/// image, before smoothing. They do not depend on the spacing scale; they
/// are computed a row at a time where a scale needs them (cheaper than
/// storing three whole-image arrays when the tensor is on a coarser grid),
/// and as whole arrays once per image for the scales that need every pixel.
pub struct GradientProducts<'a> {
    pub w: usize,
    pub h: usize,
    pub data: &'a Fixed16,
    pub mask: Option<&'a [bool]>,
    /// Rows with a masked pixel (the stencil of row y reads rows y - 1 to
    /// y + 1; rows clear of the mask skip the per-pixel lookups).
    pub masked_rows: Vec<bool>,
}

impl<'a> GradientProducts<'a> {
    /// Central-difference gradients of `data`; pixels whose stencil touches
    /// the mask or the border contribute nothing.
    pub fn new(data: &'a Fixed16, mask: Option<&'a [bool]>, w: usize, h: usize) -> Self {
        let masked_rows = match mask {
            Some(m) => m.chunks(w.max(1)).map(|r| r.iter().any(|&v| v)).collect(),
            None => vec![false; h],
        };
        Self {
            w,
            h,
            data,
            mask,
            masked_rows,
        }
    }

    /// The products of row `y` into `xx`, `xy`, `yy` (each of length w).
    pub fn row(&self, y: usize, xx: &mut [f32], xy: &mut [f32], yy: &mut [f32]) {
        let (w, h, data) = (self.w, self.h, self.data);
        xx.fill(0.0);
        xy.fill(0.0);
        yy.fill(0.0);
        if y == 0 || y + 1 >= h {
            return;
        }
        let near_mask = self.masked_rows[y - 1..=y + 1].iter().any(|&v| v);
        let mask = self.mask.filter(|_| near_mask);
        for x in 1..w.saturating_sub(1) {
            let i = y * w + x;
            if let Some(m) = mask {
                if m[i] || m[i - 1] || m[i + 1] || m[i - w] || m[i + w] {
                    continue;
                }
            }
            let gx = 0.5 * (data.at(i + 1) - data.at(i - 1));
            let gy = 0.5 * (data.at(i + w) - data.at(i - w));
            xx[x] = gx * gx;
            xy[x] = gx * gy;
            yy[x] = gy * gy;
        }
    }

    /// Product `k` (0: xx, 1: xy, 2: yy) of every pixel, row-major, into
    /// `out` (resized as needed). One product at a time: the three whole
    /// arrays are never held beside the three smoothed ones.
    pub fn component_into(&self, k: usize, out: &mut Vec<f32>) {
        out.clear();
        out.resize(self.w * self.h, 0.0);
        let mut rows = [
            vec![0.0f32; self.w],
            vec![0.0f32; self.w],
            vec![0.0f32; self.w],
        ];
        for y in 0..self.h {
            let [xx, xy, yy] = &mut rows;
            self.row(y, xx, xy, yy);
            out[y * self.w..(y + 1) * self.w].copy_from_slice(&rows[k.min(2)]);
        }
    }

    /// Means of the products over the `d` x `d` blocks of the image (blocks
    /// at the right and bottom edges hold what is left), row-major.
    pub fn block_means(&self, d: usize, out: [&mut Vec<f32>; 3]) {
        let (w, h) = (self.w, self.h);
        let (gw, gh) = (w.div_ceil(d), h.div_ceil(d));
        let mut rows = [vec![0.0f32; w], vec![0.0f32; w], vec![0.0f32; w]];
        let mut acc = [vec![0.0f64; gw], vec![0.0f64; gw], vec![0.0f64; gw]];
        let [o0, o1, o2] = out;
        let mut out = [o0, o1, o2];
        for o in out.iter_mut() {
            o.clear();
            o.resize(gw * gh, 0.0);
        }
        for by in 0..gh {
            for a in acc.iter_mut() {
                a.iter_mut().for_each(|v| *v = 0.0);
            }
            let (y0, y1) = (by * d, ((by + 1) * d).min(h));
            for y in y0..y1 {
                let [r0, r1, r2] = &mut rows;
                self.row(y, r0, r1, r2);
                for (a, r) in acc.iter_mut().zip(&rows) {
                    // The usual pitches with the block width known to the
                    // compiler (unrolled); the same sums in the same order.
                    match d {
                        2 => add_block_sums::<2>(a, r),
                        3 => add_block_sums::<3>(a, r),
                        4 => add_block_sums::<4>(a, r),
                        5 => add_block_sums::<5>(a, r),
                        6 => add_block_sums::<6>(a, r),
                        _ => {
                            for (s, block) in a.iter_mut().zip(r.chunks(d)) {
                                *s += block.iter().map(|&v| v as f64).sum::<f64>();
                            }
                        }
                    }
                }
            }
            for (o, a) in out.iter_mut().zip(&acc) {
                for (bx, (ov, s)) in o[by * gw..(by + 1) * gw].iter_mut().zip(a).enumerate() {
                    let cols = ((bx + 1) * d).min(w) - bx * d;
                    *ov = (*s / ((y1 - y0) * cols) as f64) as f32;
                }
            }
        }
    }
}

impl Tensor {
    pub fn empty() -> Self {
        Self {
            gw: 0,
            gh: 0,
            d: 1,
            jxx: Vec::new(),
            jxy: Vec::new(),
            jyy: Vec::new(),
        }
    }

    /// Makes this the gradient products smoothed by a Gaussian of `sigma`
    /// pixels, reusing the buffers of the previous scale.
    ///
    /// A wide window is computed on a coarser grid. The smoothed tensor
    /// holds no detail finer than its window: a Gaussian of standard
    /// deviation sigma passes spatial frequency f with gain
    /// exp(-2 pi^2 sigma^2 f^2), so on a grid of pitch d = sigma/2 the
    /// Nyquist frequency 1/(2d) keeps exp(-2 pi^2), about 3e-9: nothing
    /// that matters aliases, and values between grid points are
    /// interpolated bilinearly (C. E. Shannon's sampling theorem; the
    /// interpolation's own smoothing, a triangle of half-width d, at most
    /// d/sqrt 6 = 0.2 sigma of standard deviation, widens the window by
    /// about 2 %). The products are first averaged over d x d blocks (a box
    /// of variance (d^2 - 1)/12 per axis), then blurred on the grid by the
    /// rest of the variance, so the window keeps its sigma. The grid's
    /// Gaussian is then at least 2 grid steps wide, where the three-box
    /// cascade's odd widths move its variance in steps; of the pitches up
    /// to sigma/2 the one whose window's variance is nearest the
    /// full-resolution cascade's is used ([`grid_pitch`]), and the window's
    /// sigma then lies within 9 % of the one asked for from sigma = 4 up
    /// (the full-resolution cascade's own steps: within 4.3 %; computed
    /// from the widths, see the tests). The window is a guide for where
    /// the test lines go and which way (one arm spacing, a choice of scale,
    /// not a measured quantity), so a window some per cent wider or
    /// narrower changes no spacing read on the lines. Below sigma = 4 the
    /// grid is every pixel: each product is written into its reused buffer
    /// and blurred there (the same result as blurring at full resolution,
    /// bit for bit). The coarse grid keeps the tensor at 3 bytes a pixel or
    /// less (12 at full resolution): what lets a 64-megapixel field of fine
    /// arms be measured within 1 GB.
    pub fn rebuild(&mut self, g: &GradientProducts, sigma: f64) {
        let d = grid_pitch(sigma);
        self.d = d;
        if d == 1 {
            (self.gw, self.gh) = (g.w, g.h);
            // Each product computed into its smoothed array and blurred
            // there in place: the same arithmetic as blurring a copy (the
            // first pass reads the same values), without the copy.
            for (k, dst) in [&mut self.jxx, &mut self.jxy, &mut self.jyy]
                .into_iter()
                .enumerate()
            {
                g.component_into(k, dst);
                gaussian_blur_in_place(dst, g.w, g.h, sigma);
            }
            return;
        }
        let (gw, gh) = (g.w.div_ceil(d), g.h.div_ceil(d));
        (self.gw, self.gh) = (gw, gh);
        let rest = coarse_sigma(sigma, d);
        g.block_means(d, [&mut self.jxx, &mut self.jxy, &mut self.jyy]);
        for dst in [&mut self.jxx, &mut self.jxy, &mut self.jyy] {
            gaussian_blur_in_place(dst, gw, gh, rest);
        }
    }

    /// Dominant gradient direction (radians, image axes, y down, in
    /// (-pi/2, pi/2]) and coherence at pixel (x, y).
    #[inline]
    pub fn at(&self, x: usize, y: usize) -> (f64, f64) {
        let j = self.components(x, y);
        (j.theta(), j.coherence())
    }

    /// The tensor at pixel (x, y), interpolated on a coarse grid.
    #[inline]
    pub fn components(&self, x: usize, y: usize) -> Components {
        let (a, b, c) = if self.d == 1 {
            let i = y * self.gw + x;
            (self.jxx[i] as f64, self.jxy[i] as f64, self.jyy[i] as f64)
        } else {
            // Cell k holds the mean of pixels k d .. k d + d - 1, centred
            // at k d + (d - 1)/2.
            let d = self.d as f64;
            let gx = ((x as f64 - 0.5 * (d - 1.0)) / d).clamp(0.0, (self.gw - 1) as f64);
            let gy = ((y as f64 - 0.5 * (d - 1.0)) / d).clamp(0.0, (self.gh - 1) as f64);
            let (x0, y0) = (gx as usize, gy as usize);
            let (x1, y1) = ((x0 + 1).min(self.gw - 1), (y0 + 1).min(self.gh - 1));
            let (fx, fy) = (gx - x0 as f64, gy - y0 as f64);
            let w = [
                (1.0 - fx) * (1.0 - fy),
                fx * (1.0 - fy),
                (1.0 - fx) * fy,
                fx * fy,
            ];
            let idx = [
                y0 * self.gw + x0,
                y0 * self.gw + x1,
                y1 * self.gw + x0,
                y1 * self.gw + x1,
            ];
            let lerp =
                |v: &[f32]| -> f64 { w.iter().zip(&idx).map(|(wk, &i)| wk * v[i] as f64).sum() };
            (lerp(&self.jxx), lerp(&self.jxy), lerp(&self.jyy))
        };
        Components { a, b, c }
    }
}

/// The tensor (Jxx, Jxy, Jyy) at one point. Its coherence is cheaper than
/// its direction (no arctangent), so a test on both asks the coherence
/// first.
#[derive(Clone, Copy)]
pub struct Components {
    pub a: f64,
    pub b: f64,
    pub c: f64,
}

impl Components {
    /// Dominant gradient direction, radians (0 for a zero tensor).
    #[inline]
    pub fn theta(self) -> f64 {
        if self.a + self.c <= 0.0 {
            return 0.0;
        }
        0.5 * (2.0 * self.b).atan2(self.a - self.c)
    }

    /// (l1 - l2) / (l1 + l2) (0 for a zero tensor).
    #[inline]
    pub fn coherence(self) -> f64 {
        let (a, b, c) = (self.a, self.b, self.c);
        let tr = a + c;
        if tr <= 0.0 {
            return 0.0;
        }
        ((a - c).powi(2) + 4.0 * b * b).sqrt() / tr
    }
}

/// Adds to `acc[k]` the sum of `row[k D .. k D + D]` (the last block holds
/// what is left), each sum taken in order as f64.
pub fn add_block_sums<const D: usize>(acc: &mut [f64], row: &[f32]) {
    let blocks = row.chunks_exact(D);
    let rest = blocks.remainder();
    let full = row.len() / D;
    for (s, block) in acc.iter_mut().zip(blocks) {
        *s += block.iter().map(|&v| v as f64).sum::<f64>();
    }
    if !rest.is_empty() {
        acc[full] += rest.iter().map(|&v| v as f64).sum::<f64>();
    }
}

/// Variance of the three-box cascade that approximates a Gaussian of
/// `sigma` (a box of odd width w has variance (w^2 - 1)/12; the cascade's
/// variances add).
pub fn cascade_variance(sigma: f64) -> f64 {
    box_widths(sigma, 3)
        .iter()
        .map(|&w| ((w * w) as f64 - 1.0) / 12.0)
        .sum()
}

/// Sigma, in grid steps, of the cascade on a grid of pitch `d` that leaves
/// the window a variance of sigma^2 after the d x d block means.
pub fn coarse_sigma(sigma: f64, d: usize) -> f64 {
    let df = d as f64;
    (sigma * sigma - (df * df - 1.0) / 12.0).max(0.0).sqrt() / df
}

/// Pitch of the structure tensor's grid for a window of `sigma` pixels
/// (see [`Tensor::rebuild`]): at most half of sigma, so nothing that
/// matters aliases, and of those pitches the one whose window (block means
/// plus the grid's box cascade, whose odd widths move its variance in
/// steps) has the variance nearest that of the full-resolution cascade, so
/// the window stays the one the full-resolution path uses within the
/// grid's granularity (the larger pitch on a tie). 1 below sigma = 4.
pub fn grid_pitch(sigma: f64) -> usize {
    let d_max = if sigma.is_finite() {
        (sigma / 2.0).floor() as usize
    } else {
        1
    };
    if d_max < 2 {
        return 1;
    }
    let target = cascade_variance(sigma);
    let realised = |d: usize| {
        let df = d as f64;
        (df * df - 1.0) / 12.0 + df * df * cascade_variance(coarse_sigma(sigma, d))
    };
    (2..=d_max)
        .rev()
        .min_by(|&a, &b| {
            (realised(a) - target)
                .abs()
                .total_cmp(&(realised(b) - target).abs())
        })
        .unwrap_or(1)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The window the coarse grid realises: a d x d block mean (a discrete
    /// uniform of d values has variance (d^2 - 1)/12 per axis) followed by
    /// the grid's cascade, scaled by d; variances of convolved kernels add
    /// (both facts of probability, no single source). Within 9 % of the
    /// sigma asked for from 4 px to 200 px, with a pitch of at most sigma/2,
    /// and every pixel below sigma = 4, as `Tensor::rebuild` states.
    #[test]
    fn grid_window_stays_near_the_asked_sigma() {
        let mut worst: f64 = 0.0;
        for k in 0..=19600 {
            let sigma = 4.0 + 0.01 * k as f64;
            let d = grid_pitch(sigma);
            assert!(
                d >= 2 && d as f64 <= sigma / 2.0,
                "sigma {sigma}: pitch {d}"
            );
            let df = d as f64;
            let realised =
                (df * df - 1.0) / 12.0 + df * df * cascade_variance(coarse_sigma(sigma, d));
            worst = worst.max((realised.sqrt() / sigma - 1.0).abs());
        }
        assert!(worst <= 0.09, "worst relative window error {worst}");
        for sigma in [0.5, 1.0, 2.5, 3.99] {
            assert_eq!(grid_pitch(sigma), 1);
        }
        assert_eq!(grid_pitch(f64::NAN), 1);
    }
}
