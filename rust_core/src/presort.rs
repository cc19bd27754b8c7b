//! The two presorts: rows ordered by (key, row) on each axis.
//!
//! Sorting 16-byte `(key, row)` pairs moves 64-bit keys through every radix pass, and on these
//! machines the passes are bound by memory traffic. So each key is first cut down to the 32
//! bits that matter for this column: `(key - min) >> shift`, the top 32 significant bits of the
//! column's span, which preserves order (`a < b` gives `prefix(a) <= prefix(b)`). Rows are
//! sorted by that prefix as one `u64` each (`prefix << 32 | row`), three LSD passes of 11 bits;
//! the passes are stable, so equal prefixes keep their rows ascending. Keys whose span fits in
//! 32 bits (integer columns with a span under 2^32) are then sorted exactly. Otherwise a run of
//! equal prefixes can still hold different keys in row order; one scan finds those runs, and
//! each is sorted by the bits the prefix dropped (at most 32 of them, since the prefix keeps the
//! top 32 of the span) packed with the row: the same kind of 8-byte sort, so even one run of all
//! the points (one far outlier makes every other key share a prefix) costs time and memory in
//! proportion to its length. For continuous data such runs are short.
//! The build runs the two axes' sorts on two cores at once.

use rayon::prelude::*;

use crate::alloc;

/// Bits of the prefix sorted on in one pass: 2,048 buckets, whose counters and partly
/// written output lines stay in the core's cache.
const DIGIT_BITS: usize = 11;
const BUCKETS: usize = 1 << DIGIT_BITS;
/// Passes over the 32 prefix bits.
const PASSES: usize = 32usize.div_ceil(DIGIT_BITS);

/// Rows ordered by `(key, row)`, and the keys in that order.
///
/// Ties are broken by row so that the order, and with it every answer, is deterministic.
pub fn sort_rows_by_key(keys: &[u64]) -> (Vec<u32>, Vec<u64>) {
    let Some((min, max)) = extremes(keys) else {
        return (Vec::new(), Vec::new());
    };
    // Drop the low bits that would take the span past 32 bits.
    let shift = (u64::BITS - (max - min).leading_zeros()).saturating_sub(32);
    let mut packed: Vec<u64> = alloc::collect(
        keys.par_iter()
            .enumerate()
            .map(|(row, &k)| (((k - min) >> shift) << 32) | row as u64),
    );
    // The radix sort's second buffer is freed before the row order and the sorted keys are
    // made, so that no more than two arrays of n values live at once.
    radix_sort_by_prefix(&mut packed);
    let mut order: Vec<u32> = alloc::collect(packed.par_iter().map(|&p| p as u32));
    drop(packed);
    let mut sorted: Vec<u64> = alloc::collect(order.par_iter().map(|&row| keys[row as usize]));
    if shift > 0 {
        sort_runs_of_equal_prefix(&mut order, &mut sorted, min, shift);
    }
    (order, sorted)
}

/// The smallest and largest key, or `None` for no keys.
fn extremes(keys: &[u64]) -> Option<(u64, u64)> {
    keys.par_iter()
        .map(|&k| (k, k))
        .reduce_with(|a, b| (a.0.min(b.0), a.1.max(b.1)))
}

/// Stable sort of `prefix << 32 | row` values by their top 32 bits.
fn radix_sort_by_prefix(packed: &mut Vec<u64>) {
    let n = packed.len();
    let digit = |v: u64, pass: usize| ((v >> (32 + DIGIT_BITS * pass)) as usize) & (BUCKETS - 1);
    let mut histograms = vec![[0usize; BUCKETS]; PASSES];
    for &v in packed.iter() {
        for (pass, histogram) in histograms.iter_mut().enumerate() {
            histogram[digit(v, pass)] += 1;
        }
    }
    let mut other = alloc::filled(n, 0u64);
    for (pass, histogram) in histograms.iter().enumerate() {
        if histogram.contains(&n) {
            continue; // every value has the same digit here: the pass would not move anything
        }
        let mut next = [0usize; BUCKETS];
        let mut start = 0;
        for (slot, &count) in next.iter_mut().zip(histogram.iter()) {
            *slot = start;
            start += count;
        }
        for &v in packed.iter() {
            let bucket = digit(v, pass);
            other[next[bucket]] = v;
            next[bucket] += 1;
        }
        std::mem::swap(packed, &mut other);
    }
}

/// Where keys are out of order (only ever within a run of equal prefixes, since the prefix
/// preserves order), sort that run by the key bits the prefix dropped, which are all that
/// differ within it. Rows ride in the low half of each packed value, so equal keys keep their
/// rows ascending.
fn sort_runs_of_equal_prefix(order: &mut [u32], sorted: &mut [u64], min: u64, shift: u32) {
    let n = sorted.len();
    let prefix = |k: u64| (k - min) >> shift;
    let dropped = |k: u64| (k - min) & ((1u64 << shift) - 1);
    let mut i = 1;
    while i < n {
        if sorted[i] >= sorted[i - 1] {
            i += 1;
            continue;
        }
        let p = prefix(sorted[i]);
        let mut start = i - 1;
        while start > 0 && prefix(sorted[start - 1]) == p {
            start -= 1;
        }
        let mut end = i + 1;
        while end < n && prefix(sorted[end]) == p {
            end += 1;
        }
        let mut run: Vec<u64> = (start..end)
            .map(|j| (dropped(sorted[j]) << 32) | order[j] as u64)
            .collect();
        if run.len() > SMALL_RUN {
            radix_sort_by_prefix(&mut run);
        } else {
            run.sort_unstable();
        }
        for (j, packed) in (start..end).zip(run) {
            sorted[j] = min + ((p << shift) | (packed >> 32));
            order[j] = packed as u32;
        }
        i = end;
    }
}

/// Runs up to this long are sorted by comparison; longer ones by radix passes.
const SMALL_RUN: usize = 256;

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn check(keys: &[u64]) {
        let (order, sorted) = sort_rows_by_key(keys);
        let mut expected: Vec<u32> = (0..keys.len() as u32).collect();
        expected.sort_by_key(|&r| (keys[r as usize], r));
        assert_eq!(order, expected);
        let expected_keys: Vec<u64> = expected.iter().map(|&r| keys[r as usize]).collect();
        assert_eq!(sorted, expected_keys);
    }

    #[test]
    fn one_outlier_makes_every_other_key_share_a_prefix() {
        // The span is set by u64::MAX; all the small keys fall into prefix 0, in row order,
        // and the fix-up sorts them: one long run (radix) and, with fewer keys, a short one.
        for len in [5000u64, 100] {
            let mut keys: Vec<u64> = (0..len)
                .map(|i| (i * 7919) % 1000 + ((i % 7) << 20))
                .collect();
            keys.push(u64::MAX);
            keys.push(0);
            check(&keys);
        }
    }

    proptest! {
        #[test]
        fn sorts_by_key_then_row(
            keys in proptest::collection::vec(
                prop_oneof![
                    0u64..20,
                    any::<u64>(),
                    (0u64..4).prop_map(|v| v << 40),
                    (0u64..1000).prop_map(|v| (1 << 50) + v),
                ],
                0..300,
            )
        ) {
            check(&keys);
        }
    }
}
