//! Points in the plane: a k-d tree (kiddo) and nearest-neighbour
//! distances, and random hard-core point sets for chance tests (random
//! sequential addition; Besag & Diggle 1977 use such simulated sets as the
//! null of a Monte Carlo test), with a small deterministic generator.

use kiddo::{KdTree, SquaredEuclidean};

/// A k-d tree of the points. Positions on the pixel grid repeat along an
/// axis; a tiny offset by index (far below any length that matters) keeps
/// every coordinate distinct, which the tree's buckets need.
pub fn kd_tree(points: &[[f64; 2]]) -> KdTree<f64, 2> {
    let mut tree: KdTree<f64, 2> = KdTree::with_capacity(points.len().max(1));
    for (i, p) in points.iter().enumerate() {
        let e = i as f64 * 1e-9;
        tree.add(&[p[0] + e, p[1] + 2.0 * e], i as u64);
    }
    tree
}

/// Distance from each point to its nearest other point.
pub fn nearest_distances(points: &[[f64; 2]]) -> Vec<f64> {
    let tree = kd_tree(points);
    points
        .iter()
        .map(|p| {
            tree.nearest_n::<SquaredEuclidean>(p, 2)
                .get(1)
                .map_or(f64::INFINITY, |n| n.distance.sqrt())
        })
        .collect()
}

/// `n` points uniformly in a w x h field, none closer than `min_dist` to
/// another (random sequential addition; a point that finds no room after
/// many tries is left out, so a very dense field gets a sparser null).
pub fn random_hard_core(
    n: usize,
    w: f64,
    h: f64,
    min_dist: f64,
    rng: &mut SplitMix,
) -> Vec<[f64; 2]> {
    let cell = min_dist.max(1.0);
    let gw = (w / cell).ceil() as usize + 1;
    let gh = (h / cell).ceil() as usize + 1;
    let mut grid: Vec<Vec<usize>> = vec![Vec::new(); gw * gh];
    let mut pts: Vec<[f64; 2]> = Vec::with_capacity(n);
    let mut tries = 0usize;
    while pts.len() < n && tries < 50 * n {
        tries += 1;
        let p = [rng.unit() * w, rng.unit() * h];
        let (cx, cy) = ((p[0] / cell) as usize, (p[1] / cell) as usize);
        let mut free = true;
        'g: for yy in cy.saturating_sub(1)..=(cy + 1).min(gh - 1) {
            for xx in cx.saturating_sub(1)..=(cx + 1).min(gw - 1) {
                for &k in &grid[yy * gw + xx] {
                    let q: [f64; 2] = pts[k];
                    let (dx, dy) = (q[0] - p[0], q[1] - p[1]);
                    if dx * dx + dy * dy < min_dist * min_dist {
                        free = false;
                        break 'g;
                    }
                }
            }
        }
        if free {
            grid[cy * gw + cx].push(pts.len());
            pts.push(p);
        }
    }
    pts
}

/// A small deterministic generator (SplitMix64: G. L. Steele, D. Lea and
/// C. H. Flood, "Fast splittable pseudorandom number generators", OOPSLA
/// 2014), so that the chance test gives the same answer on every run.
pub struct SplitMix(pub u64);

impl SplitMix {
    fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }
    /// A uniform number in [0, 1).
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
}
