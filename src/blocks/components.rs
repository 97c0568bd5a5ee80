//! Connected components (4-connectivity) of a binary predicate, found on
//! horizontal runs rather than pixel by pixel (run-based labelling with
//! union-find; e.g. L. He et al., "Fast connected-component labeling",
//! Pattern Recognition 42 (2009) 1977-1987, from memory): two runs in
//! neighbouring rows are 4-connected exactly when their column ranges
//! overlap.

/// The runs of a predicate and the component each belongs to.
#[derive(Debug, Default)]
pub struct Runs {
    /// (row, first column, one past the last column), in row-major order.
    pub runs: Vec<(usize, usize, usize)>,
    /// For each run, the index of its component's root run (the smallest
    /// run index of the component: deterministic).
    pub root: Vec<usize>,
}

/// Labels the pixels `(x, y)` of a `w` x `h` grid for which `is(x, y)`.
pub fn label_runs(w: usize, h: usize, is: impl Fn(usize, usize) -> bool) -> Runs {
    let mut runs: Vec<(usize, usize, usize)> = Vec::new();
    let mut parent: Vec<usize> = Vec::new();
    // Index of the first run of the previous row.
    let mut prev_start = 0usize;
    for y in 0..h {
        let row_start = runs.len();
        let mut x = 0;
        while x < w {
            if !is(x, y) {
                x += 1;
                continue;
            }
            let x0 = x;
            while x < w && is(x, y) {
                x += 1;
            }
            runs.push((y, x0, x));
            parent.push(runs.len() - 1);
        }
        // Join with the overlapping runs of the previous row (both lists are
        // ordered by x).
        if y > 0 {
            let mut j = prev_start;
            for i in row_start..runs.len() {
                let (_, a0, a1) = runs[i];
                while j < row_start && runs[j].2 <= a0 {
                    j += 1;
                }
                let mut k = j;
                while k < row_start && runs[k].1 < a1 {
                    union(&mut parent, i, k);
                    k += 1;
                }
            }
        }
        prev_start = row_start;
    }
    let root = (0..runs.len()).map(|i| find(&mut parent, i)).collect();
    Runs { runs, root }
}

fn find(parent: &mut [usize], mut i: usize) -> usize {
    while parent[i] != i {
        parent[i] = parent[parent[i]];
        i = parent[i];
    }
    i
}

fn union(parent: &mut [usize], a: usize, b: usize) {
    let (ra, rb) = (find(parent, a), find(parent, b));
    if ra != rb {
        // The smaller index becomes the root: deterministic.
        let (lo, hi) = (ra.min(rb), ra.max(rb));
        parent[hi] = lo;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn runs_join_only_when_columns_overlap() {
        // Two blocks touching only at a corner are separate under
        // 4-connectivity; a U shape is one component (textbook definition
        // of 4-connectivity, common practice).
        let img = ["##..", "##..", "..##", "#..#", "####"];
        let is = |x: usize, y: usize| img[y].as_bytes()[x] == b'#';
        let r = label_runs(4, 5, is);
        let mut roots: Vec<usize> = r.root.clone();
        roots.sort_unstable();
        roots.dedup();
        assert_eq!(roots.len(), 2);
        // The corner-touching block (rows 0-1) is its own component.
        assert_eq!(r.root[0], r.root[1]);
        assert_ne!(r.root[1], r.root[2]);
        assert!(r.root[2..].iter().all(|&k| k == r.root[2]));
    }
}
