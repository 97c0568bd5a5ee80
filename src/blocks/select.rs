//! Order statistics of f32 values by radix selection: exact ranks and
//! medians in two passes over the values, without sorting a copy (the
//! bucket step of radix sort, used for selection; D. E. Knuth, The Art of
//! Computer Programming vol. 3, 5.2.5 and 5.3.3, from memory).

/// Key of an f32 whose unsigned order is `f32::total_cmp`'s order.
#[inline]
pub fn total_order_key(v: f32) -> u32 {
    let b = v.to_bits();
    // Negative values: all bits flipped; positive: sign bit set.
    if b >> 31 == 1 {
        !b
    } else {
        b | 0x8000_0000
    }
}

/// The values of ranks `ranks` (0-based, in `f32::total_cmp` order, each
/// below `n`) among the `n` values `values()` yields, by radix selection: a
/// histogram of the keys' top 16 bits finds the bucket holding each rank,
/// and only those buckets' values are selected among. Exact: the values a
/// selection over all of them returns (equal in total order means equal
/// bits), in two passes over the values instead of partitioning a copy.
pub fn select_ranks<const K: usize, I: Iterator<Item = f32>>(
    values: impl Fn() -> I,
    n: usize,
    ranks: [usize; K],
) -> [f32; K] {
    // 64-bit counts: a bucket may hold more than 2^32 values only in an image
    // past 4 gigapixels, but a wrapped count would give a wrong rank silently.
    let mut hist = vec![0u64; 1 << 16];
    for v in values() {
        hist[(total_order_key(v) >> 16) as usize] += 1;
    }
    // Bucket holding each rank, and the count below it.
    let where_ = ranks.map(|r| {
        debug_assert!(r < n);
        let mut below = 0usize;
        for (b, &c) in hist.iter().enumerate() {
            if below + c as usize > r {
                return (b, below);
            }
            below += c as usize;
        }
        (hist.len() - 1, below)
    });
    // One pass collects the members of every bucket needed.
    let mut members: [Vec<f32>; K] = std::array::from_fn(|_| Vec::new());
    for v in values() {
        let b = (total_order_key(v) >> 16) as usize;
        for (k, &(bk, _)) in where_.iter().enumerate() {
            if bk == b {
                members[k].push(v);
                break;
            }
        }
    }
    std::array::from_fn(|k| {
        // Ranks in a shared bucket read the first list that holds it.
        let (b, below) = where_[k];
        let first = where_.iter().position(|&(bk, _)| bk == b).unwrap_or(k);
        let mut m = members[first].clone();
        *m.select_nth_unstable_by(ranks[k] - below, |a, b| a.total_cmp(b))
            .1
    })
}

/// The median of `v` as [`crate::stats::median_in_place`] gives it (the
/// middle value, or the mean of the two middle ones), by radix selection
/// ([`select_ranks`]), without reordering `v`. `None` for an empty slice. For
/// finite values the same number, bit for bit (the lower middle value of
/// an even count is the largest of the lower half either way).
pub fn median_by_selection(v: &[f32]) -> Option<f64> {
    let n = v.len();
    if n == 0 {
        return None;
    }
    let mid = n / 2;
    Some(if n % 2 == 1 {
        select_ranks(|| v.iter().copied(), n, [mid])[0] as f64
    } else {
        let [lower, upper] = select_ranks(|| v.iter().copied(), n, [mid - 1, mid]);
        0.5 * (lower as f64 + upper as f64)
    })
}
