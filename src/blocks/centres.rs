//! Centres of the bodies of one phase: maxima of its Euclidean distance
//! transform, with the radius of the largest disc inscribed there.
//!
//! A secondary arm, cut along or across, is a body of the primary phase; the
//! point of a body farthest from the other phase is a maximum of the
//! distance transform, and the distance there is the body's half-thickness.
//! An elongated arm has a ridge of such maxima along its axis; which of them
//! belong to one body is decided by whoever links them
//! ([`neck_between`]), not here.
//!
//! Distance transform: P. F. Felzenszwalb and D. P. Huttenlocher, "Distance
//! transforms of sampled functions", Theory of Computing 8 (2012) 415-428,
//! as implemented by `imageproc::distance_transform::euclidean_squared_distance_transform`.

/// A body centre, pixels from the top-left corner (y down).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Centre {
    pub x: f64,
    pub y: f64,
    /// Radius of the largest disc of the phase centred here, pixels.
    pub r: f64,
}

/// Euclidean distance from each pixel of the phase to the nearest pixel not
/// of it (0 outside the phase). Pixels outside the image count as not of
/// the phase, so a body cut by the border is not taken as thicker than it
/// shows.
///
/// The transform is separable (Felzenszwalb and Huttenlocher 2012, section
/// 2.2): a pass down each column gives the vertical distance to the nearest
/// pixel not of the phase (the border rows above and below the image
/// count), and a pass along each row takes the lower envelope of the
/// parabolas (x - x')^2 + g(x')^2, with the columns left and right of the
/// image at g = 0. The column pass runs row by row (a running count down,
/// then a running count up), and each row is transformed as soon as its
/// column distances are final, so the only whole-image array is the output
/// (4 bytes a pixel; the general transform of `imageproc` holds an 8-byte
/// float image and a padded copy of the input). The row pass is the same
/// arithmetic as `imageproc::distance_transform`'s (same intersection
/// formula and comparisons, in f64 on exact integers), so the distances
/// are the same numbers bit for bit (checked in the tests against it).
/// `None` when the output cannot be allocated.
pub fn distance(phase: &[bool], w: usize, h: usize) -> Option<Vec<f32>> {
    let n = w.checked_mul(h)?;
    if phase.len() != n {
        return None;
    }
    // Vertical distances first held as integers (exact for any height),
    // then replaced row by row by the final distance's bits.
    let mut g: Vec<u32> = Vec::new();
    g.try_reserve_exact(n).ok()?;
    // Downward count: rows above the image are not of the phase.
    let mut run = vec![0u32; w];
    for y in 0..h {
        let row = &phase[y * w..(y + 1) * w];
        for x in 0..w {
            run[x] = if row[x] { run[x].saturating_add(1) } else { 0 };
        }
        g.extend_from_slice(&run);
    }
    // Upward count (rows below the image are not of the phase), the
    // smaller of the two, then the row pass of that row.
    run.fill(0);
    let mut f = vec![0f64; w + 2];
    let mut env = Envelope::new(w + 2);
    let mut out_row = vec![0f64; w + 2];
    for y in (0..h).rev() {
        let row = &phase[y * w..(y + 1) * w];
        let grow = &mut g[y * w..(y + 1) * w];
        for x in 0..w {
            run[x] = if row[x] { run[x].saturating_add(1) } else { 0 };
            let v = grow[x].min(run[x]) as f64;
            f[x + 1] = v * v;
        }
        // f[0] and f[w + 1], the columns beside the image, stay 0.
        env.transform(&f, &mut out_row);
        for x in 0..w {
            grow[x] = (out_row[x + 1].sqrt() as f32).to_bits();
        }
    }
    // Same size and alignment: the allocation is reused.
    Some(g.into_iter().map(f32::from_bits).collect())
}

/// The lower envelope of parabolas of one row (Felzenszwalb and
/// Huttenlocher 2012, algorithm 1), with its buffers reused between rows.
struct Envelope {
    locations: Vec<usize>,
    boundaries: Vec<f64>,
}

impl Envelope {
    fn new(len: usize) -> Self {
        Self {
            locations: vec![0; len],
            boundaries: vec![f64::NAN; len + 1],
        }
    }

    /// `out[q] = min over p of (q - p)^2 + f[p]`, for finite `f`.
    fn transform(&mut self, f: &[f64], out: &mut [f64]) {
        let (loc, bnd) = (&mut self.locations, &mut self.boundaries);
        if f.is_empty() {
            return;
        }
        let inter = |p: usize, q: usize| {
            let (fp, fq, p, q) = (f[p], f[q], p as f64, q as f64);
            ((fq + q * q) - (fp + p * p)) / (2.0 * q - 2.0 * p)
        };
        let mut k = 0;
        loc[0] = 0;
        bnd[0] = f64::NEG_INFINITY;
        bnd[1] = f64::INFINITY;
        for q in 1..f.len() {
            let mut s = inter(loc[k], q);
            while s <= bnd[k] {
                k -= 1;
                s = inter(loc[k], q);
            }
            k += 1;
            loc[k] = q;
            bnd[k] = s;
            bnd[k + 1] = f64::INFINITY;
        }
        let mut k = 0;
        for (q, o) in out.iter_mut().enumerate().take(f.len()) {
            while bnd[k + 1] < q as f64 {
                k += 1;
            }
            let d = q as f64 - loc[k] as f64;
            *o = d * d + f[loc[k]];
        }
    }
}

/// Local maxima of the distance `d` (at least as large as the 8 neighbours,
/// strictly larger than those before them in scan order, so that a flat
/// plateau gives one point) with a radius of at least `min_r`. Then, from
/// the thickest down, a maximum that lies inside the inscribed disc of one
/// already kept is dropped: it is a bump on the same body's ridge, not
/// another body. Positions are refined to sub-pixel by a parabola through
/// the neighbours in x and in y.
pub fn maxima(d: &[f32], w: usize, h: usize, min_r: f64) -> Vec<Centre> {
    let mut cands = Vec::new();
    for y in 1..h.saturating_sub(1) {
        for x in 1..w.saturating_sub(1) {
            let v = d[y * w + x];
            if (v as f64) < min_r {
                continue;
            }
            let mut is_max = true;
            'n: for dy in -1i64..=1 {
                for dx in -1i64..=1 {
                    if dx == 0 && dy == 0 {
                        continue;
                    }
                    let j = ((y as i64 + dy) as usize) * w + (x as i64 + dx) as usize;
                    let before = dy < 0 || (dy == 0 && dx < 0);
                    if d[j] > v || (before && d[j] == v) {
                        is_max = false;
                        break 'n;
                    }
                }
            }
            if is_max {
                let at = |xx: usize, yy: usize| d[yy * w + xx] as f64;
                let refine = |m: f64, c: f64, p: f64| {
                    let den = m - 2.0 * c + p;
                    if den < -1e-9 {
                        (0.5 * (m - p) / den).clamp(-0.5, 0.5)
                    } else {
                        0.0
                    }
                };
                let c = at(x, y);
                cands.push(Centre {
                    x: x as f64 + refine(at(x - 1, y), c, at(x + 1, y)),
                    y: y as f64 + refine(at(x, y - 1), c, at(x, y + 1)),
                    r: c,
                });
            }
        }
    }
    // Thickest first; ties in scan order, so the result is deterministic.
    cands.sort_by(|a, b| b.r.total_cmp(&a.r));
    let mut grid = Grid::new(w, h, cands.first().map_or(1.0, |c| c.r.max(1.0)));
    let mut kept: Vec<Centre> = Vec::new();
    for c in cands {
        let inside = grid.near(c.x, c.y).any(|&k| {
            let o = kept[k];
            (o.x - c.x).hypot(o.y - c.y) < o.r
        });
        if !inside {
            grid.insert(c.x, c.y, kept.len());
            kept.push(c);
        }
    }
    kept
}

/// A bucket grid with cells as large as the largest radius, so that every
/// kept centre whose disc may contain a point lies in the 3 x 3 cells round it.
struct Grid {
    cell: f64,
    gw: usize,
    gh: usize,
    cells: Vec<Vec<usize>>,
}

impl Grid {
    fn new(w: usize, h: usize, cell: f64) -> Self {
        let gw = (w as f64 / cell).ceil() as usize + 1;
        let gh = (h as f64 / cell).ceil() as usize + 1;
        Self {
            cell,
            gw,
            gh,
            cells: vec![Vec::new(); gw * gh],
        }
    }
    fn key(&self, x: f64, y: f64) -> (usize, usize) {
        (
            ((x / self.cell) as usize).min(self.gw - 1),
            ((y / self.cell) as usize).min(self.gh - 1),
        )
    }
    fn insert(&mut self, x: f64, y: f64, k: usize) {
        let (cx, cy) = self.key(x, y);
        self.cells[cy * self.gw + cx].push(k);
    }
    fn near(&self, x: f64, y: f64) -> impl Iterator<Item = &usize> {
        let (cx, cy) = self.key(x, y);
        let xs = cx.saturating_sub(1)..=(cx + 1).min(self.gw - 1);
        let ys = cy.saturating_sub(1)..=(cy + 1).min(self.gh - 1);
        ys.flat_map(move |yy| xs.clone().map(move |xx| (xx, yy)))
            .flat_map(move |(xx, yy)| self.cells[yy * self.gw + xx].iter())
    }
}

/// The smallest distance-transform value on the straight segment between two
/// centres, sampled every half pixel: 0 when the segment leaves the phase.
pub fn neck_between(d: &[f32], w: usize, h: usize, a: Centre, b: Centre) -> f64 {
    let len = (b.x - a.x).hypot(b.y - a.y);
    let steps = (2.0 * len).ceil().max(1.0) as usize;
    let mut min = f64::INFINITY;
    for s in 0..=steps {
        let t = s as f64 / steps as f64;
        let x = (a.x + t * (b.x - a.x)).round();
        let y = (a.y + t * (b.y - a.y)).round();
        if x < 0.0 || y < 0.0 || x >= w as f64 || y >= h as f64 {
            return 0.0;
        }
        min = min.min(d[y as usize * w + x as usize] as f64);
    }
    min
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn distance_of_a_disc_and_its_centre() {
        // A disc of radius 10 px: its centre is 10 px (+-1 for the pixel
        // grid) from the outside, a fact of geometry.
        let (w, h) = (41, 41);
        let phase: Vec<bool> = (0..w * h)
            .map(|i| {
                let (x, y) = ((i % w) as f64 - 20.0, (i / w) as f64 - 20.0);
                x.hypot(y) <= 10.0
            })
            .collect();
        let d = distance(&phase, w, h).unwrap();
        let c = maxima(&d, w, h, 1.5);
        assert_eq!(c.len(), 1, "{c:?}");
        assert!((c[0].x - 20.0).abs() < 0.5 && (c[0].y - 20.0).abs() < 0.5);
        assert!((c[0].r - 10.5).abs() <= 1.0, "{}", c[0].r);
    }

    /// The transform as `imageproc` computes it on the image padded by one
    /// pixel of the other phase: the reference the row-by-row transform
    /// must reproduce bit for bit.
    fn distance_by_imageproc(phase: &[bool], w: usize, h: usize) -> Vec<f32> {
        use image::{GrayImage, Luma};
        let other = GrayImage::from_fn(w as u32 + 2, h as u32 + 2, |x, y| {
            let (x, y) = (x as usize, y as usize);
            let inside = x >= 1 && y >= 1 && x <= w && y <= h && phase[(y - 1) * w + (x - 1)];
            Luma([if inside { 0 } else { 255 }])
        });
        let d2 = imageproc::distance_transform::euclidean_squared_distance_transform(&other);
        let mut out = vec![0f32; w * h];
        for y in 0..h {
            for x in 0..w {
                out[y * w + x] = d2.get_pixel((x + 1) as u32, (y + 1) as u32)[0].sqrt() as f32;
            }
        }
        out
    }

    #[test]
    fn row_by_row_transform_matches_imageproc() {
        for (w, h) in [(1, 1), (1, 37), (41, 1), (37, 23), (90, 64), (200, 7)] {
            for density in [2u64, 6, 9, 12] {
                let phase: Vec<bool> = (0..w * h)
                    .map(|i| (i as u64 * 2654435761 + 97) % 13 < density)
                    .collect();
                let ours = distance(&phase, w, h).unwrap();
                let theirs = distance_by_imageproc(&phase, w, h);
                let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                assert_eq!(bits(&ours), bits(&theirs), "{w}x{h} density {density}");
            }
            // Everything of the phase: only the border bounds the distance.
            let all = vec![true; w * h];
            assert_eq!(
                distance(&all, w, h).unwrap(),
                distance_by_imageproc(&all, w, h)
            );
        }
    }

    #[test]
    fn two_discs_joined_by_a_thin_neck() {
        let (w, h) = (80, 40);
        let phase: Vec<bool> = (0..w * h)
            .map(|i| {
                let (x, y) = ((i % w) as f64, (i / w) as f64);
                (x - 20.0).hypot(y - 20.0) <= 10.0
                    || (x - 58.0).hypot(y - 20.0) <= 10.0
                    || ((y - 20.0).abs() <= 1.0 && (20.0..=58.0).contains(&x))
            })
            .collect();
        let d = distance(&phase, w, h).unwrap();
        let c = maxima(&d, w, h, 1.5);
        let big: Vec<_> = c.iter().filter(|c| c.r > 5.0).collect();
        assert_eq!(big.len(), 2, "{c:?}");
        let neck = neck_between(&d, w, h, *big[0], *big[1]);
        assert!(neck <= 2.5, "{neck}");
    }
}
