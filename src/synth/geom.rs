//! Shape primitives and their antialiased rasterisation into a coverage field.

use rayon::prelude::*;

/// Smooth perturbation of a capsule's width and centre line along its axis.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Wobble {
    pub w_amp: f32,
    pub w_k1: f32,
    pub w_p1: f32,
    pub w_k2: f32,
    pub w_p2: f32,
    pub c_amp: f32,
    pub c_k: f32,
    pub c_p: f32,
}

impl Wobble {
    pub const NONE: Wobble = Wobble {
        w_amp: 0.0,
        w_k1: 0.0,
        w_p1: 0.0,
        w_k2: 0.0,
        w_p2: 0.0,
        c_amp: 0.0,
        c_k: 0.0,
        c_p: 0.0,
    };

    #[inline]
    fn width_factor(&self, t: f32) -> f32 {
        if self.w_amp == 0.0 {
            return 1.0;
        }
        1.0 + self.w_amp
            * (0.6 * (self.w_k1 * t + self.w_p1).sin() + 0.4 * (self.w_k2 * t + self.w_p2).sin())
    }

    #[inline]
    fn offset(&self, t: f32) -> f32 {
        if self.c_amp == 0.0 {
            return 0.0;
        }
        self.c_amp * (self.c_k * t + self.c_p).sin()
    }
}

/// A drawable primitive. Radii are multiplied by the global width scale `k`.
#[derive(Clone, Copy, Debug)]
pub(crate) enum Shape {
    /// Capsule from `(ax, ay)` along unit `(dx, dy)` for `len`, radius
    /// interpolated from `r0` (root) to `r1` (tip), rounded ends.
    Arm {
        ax: f32,
        ay: f32,
        dx: f32,
        dy: f32,
        len: f32,
        r0: f32,
        r1: f32,
        /// Phase offset of the wobble along the axis (for split trunks).
        t0: f32,
        wob: Wobble,
    },
    /// Ellipse centred at `(cx, cy)`, semi-axis `a` along unit `(dx, dy)`
    /// (scaled by `sqrt(k)`), semi-axis `b` across it (scaled by `k`).
    Blob {
        cx: f32,
        cy: f32,
        dx: f32,
        dy: f32,
        a: f32,
        b: f32,
    },
}

#[derive(Clone, Copy, Debug)]
pub(crate) struct Item {
    pub shape: Shape,
    pub grain: u32,
    /// Stems (trunks, primary arms) follow the width scale only as `sqrt(k)`,
    /// so area tuning mostly acts on the secondary arms.
    pub stem: bool,
}

impl Item {
    pub fn arm(shape: Shape, grain: u32) -> Item {
        Item {
            shape,
            grain,
            stem: false,
        }
    }

    pub fn stem(shape: Shape, grain: u32) -> Item {
        Item {
            shape,
            grain,
            stem: true,
        }
    }

    fn scale(&self, k: f32) -> f32 {
        if self.stem {
            k.sqrt()
        } else {
            k
        }
    }
}

impl Shape {
    /// Inclusive pixel bbox clipped to the image, `None` if outside.
    fn bbox(&self, k: f32, w: usize, h: usize) -> Option<(usize, usize, usize, usize)> {
        let (xmin, ymin, xmax, ymax) = match *self {
            Shape::Arm {
                ax,
                ay,
                dx,
                dy,
                len,
                r0,
                r1,
                wob,
                ..
            } => {
                let bx = ax + dx * len;
                let by = ay + dy * len;
                let m = r0.max(r1) * k * (1.0 + wob.w_amp.abs()) + wob.c_amp.abs() + 1.5;
                (
                    ax.min(bx) - m,
                    ay.min(by) - m,
                    ax.max(bx) + m,
                    ay.max(by) + m,
                )
            }
            Shape::Blob { cx, cy, a, b, .. } => {
                let m = (a * k.max(k.sqrt())).max(b * k) + 1.5;
                (cx - m, cy - m, cx + m, cy + m)
            }
        };
        if !(xmax >= 0.0 && ymax >= 0.0 && xmin <= (w - 1) as f32 && ymin <= (h - 1) as f32) {
            return None;
        }
        let x0 = xmin.max(0.0).ceil() as usize;
        let y0 = ymin.max(0.0).ceil() as usize;
        let x1 = (xmax.floor() as usize).min(w - 1);
        let y1 = (ymax.floor() as usize).min(h - 1);
        if x0 > x1 || y0 > y1 {
            return None;
        }
        Some((x0, y0, x1, y1))
    }

    /// Approximate signed distance (negative inside), good near the edge.
    #[inline]
    fn sdf(&self, px: f32, py: f32, k: f32) -> f32 {
        match *self {
            Shape::Arm {
                ax,
                ay,
                dx,
                dy,
                len,
                r0,
                r1,
                t0,
                wob,
            } => {
                let rx = px - ax;
                let ry = py - ay;
                let t = rx * dx + ry * dy;
                let q = -rx * dy + ry * dx;
                let tc = t.clamp(0.0, len);
                let frac = if len > 0.0 { tc / len } else { 0.0 };
                let r = (r0 + (r1 - r0) * frac) * k * wob.width_factor(tc + t0);
                let o = wob.offset(tc + t0);
                let dq = q - o;
                if t == tc {
                    dq.abs() - r
                } else {
                    let dt = t - tc;
                    (dt * dt + dq * dq).sqrt() - r
                }
            }
            Shape::Blob {
                cx,
                cy,
                dx,
                dy,
                a,
                b,
            } => {
                let rx = px - cx;
                let ry = py - cy;
                let u = rx * dx + ry * dy;
                let v = -rx * dy + ry * dx;
                // width follows k, length only sqrt(k): rows of blobs stay rows
                let aa = (a * k.sqrt()).max(0.25);
                let bb = (b * k).max(0.25);
                let e = ((u / aa).powi(2) + (v / bb).powi(2)).sqrt();
                if e < 1e-6 {
                    return -aa.min(bb);
                }
                let gx = u / (aa * aa * e);
                let gy = v / (bb * bb * e);
                let g = (gx * gx + gy * gy).sqrt().max(1e-6);
                (e - 1.0) / g
            }
        }
    }
}

const BAND: usize = 32;

/// Rasterise `items` with width scale `k` into a coverage field in [0, 1]
/// (max-composited, 1 px linear antialiasing ramp) and an owner map holding
/// the grain id of the shape that dominates each pixel (`u32::MAX` = none).
/// With `clip`, a shape only paints pixels whose clip id equals its grain.
pub(crate) fn rasterize(
    items: &[Item],
    k: f32,
    w: usize,
    h: usize,
    clip: Option<&[u32]>,
) -> (Vec<f32>, Vec<u32>) {
    let nbands = h.div_ceil(BAND);
    let boxes: Vec<Option<(usize, usize, usize, usize)>> = items
        .iter()
        .map(|it| it.shape.bbox(it.scale(k), w, h))
        .collect();
    let mut buckets: Vec<Vec<u32>> = vec![Vec::new(); nbands];
    for (i, bb) in boxes.iter().enumerate() {
        if let Some((_, y0, _, y1)) = bb {
            for bucket in buckets.iter_mut().take(y1 / BAND + 1).skip(y0 / BAND) {
                bucket.push(i as u32);
            }
        }
    }
    let mut phase = vec![0.0f32; w * h];
    let mut owner = vec![u32::MAX; w * h];
    phase
        .par_chunks_mut(BAND * w)
        .zip(owner.par_chunks_mut(BAND * w))
        .enumerate()
        .for_each(|(band, (ph, ow))| {
            let ys = band * BAND;
            let rows = ph.len() / w;
            for &i in &buckets[band] {
                let i = i as usize;
                let Some((x0, y0, x1, y1)) = boxes[i] else {
                    continue;
                };
                let item = &items[i];
                let ki = item.scale(k);
                let ya = y0.max(ys);
                let yb = y1.min(ys + rows - 1);
                for y in ya..=yb {
                    let row = (y - ys) * w;
                    for x in x0..=x1 {
                        if let Some(c) = clip {
                            if c[y * w + x] != item.grain {
                                continue;
                            }
                        }
                        let d = item.shape.sdf(x as f32, y as f32, ki);
                        if d >= 0.5 {
                            continue;
                        }
                        let cov = (0.5 - d).min(1.0);
                        let idx = row + x;
                        if cov > ph[idx] {
                            ph[idx] = cov;
                            ow[idx] = item.grain;
                        }
                    }
                }
            }
        });
    (phase, owner)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn synth_disc_area_matches_pi_r2() {
        let items = [Item::arm(
            Shape::Blob {
                cx: 50.3,
                cy: 49.6,
                dx: 1.0,
                dy: 0.0,
                a: 20.0,
                b: 20.0,
            },
            0,
        )];
        let (ph, _) = rasterize(&items, 1.0, 100, 100, None);
        let area: f64 = ph.iter().map(|&v| v as f64).sum();
        let expect = std::f64::consts::PI * 400.0;
        assert!((area - expect).abs() / expect < 0.01, "{area} vs {expect}");
    }

    #[test]
    fn synth_capsule_area() {
        let items = [Item::stem(
            Shape::Arm {
                ax: 20.0,
                ay: 50.0,
                dx: 0.6,
                dy: 0.8,
                len: 30.0,
                r0: 5.0,
                r1: 5.0,
                t0: 0.0,
                wob: Wobble::NONE,
            },
            0,
        )];
        let (ph, _) = rasterize(&items, 1.0, 120, 120, None);
        let area: f64 = ph.iter().map(|&v| v as f64).sum();
        let expect = 30.0 * 10.0 + std::f64::consts::PI * 25.0;
        assert!((area - expect).abs() / expect < 0.01, "{area} vs {expect}");
    }
}
