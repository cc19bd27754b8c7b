//! The two presorts: rows ordered by (key, row) on each axis.
//!
//! An LSD radix sort on the 64-bit keys, one byte a pass, skipping every byte that all keys
//! share (common for coordinates in a narrow range). It is stable, so rows that tie on the key
//! keep their ascending row order. The build runs the two axes' sorts on two cores at once.

use rayon::prelude::*;

use crate::alloc;

/// Rows ordered by `(key, row)`, and the keys in that order.
///
/// Ties are broken by row so that the order, and with it every answer, is deterministic.
pub fn sort_rows_by_key(keys: &[u64]) -> (Vec<u32>, Vec<u64>) {
    let mut pairs: Vec<(u64, u32)> =
        alloc::collect(keys.par_iter().enumerate().map(|(row, &k)| (k, row as u32)));
    radix_sort_by_key(&mut pairs);
    let order = alloc::collect(pairs.par_iter().map(|&(_, row)| row));
    let sorted = alloc::collect(pairs.par_iter().map(|&(k, _)| k));
    (order, sorted)
}

/// Bits of the key sorted on in one pass: 2,048 buckets, whose counters and partly written
/// output lines stay in the core's cache, and six passes for 64 bits instead of eight.
const DIGIT_BITS: usize = 11;
const BUCKETS: usize = 1 << DIGIT_BITS;
const PASSES: usize = u64::BITS.div_ceil(DIGIT_BITS as u32) as usize;

/// Stable sort of `(key, row)` pairs by key.
fn radix_sort_by_key(pairs: &mut Vec<(u64, u32)>) {
    let n = pairs.len();
    let digit = |key: u64, pass: usize| ((key >> (DIGIT_BITS * pass)) as usize) & (BUCKETS - 1);
    let mut histograms = vec![[0usize; BUCKETS]; PASSES];
    for &(key, _) in pairs.iter() {
        for (pass, histogram) in histograms.iter_mut().enumerate() {
            histogram[digit(key, pass)] += 1;
        }
    }
    let mut other = alloc::filled(n, (0u64, 0u32));
    for (pass, histogram) in histograms.iter().enumerate() {
        if histogram.contains(&n) {
            continue; // every key has the same digit here: the pass would not move anything
        }
        let mut next = [0usize; BUCKETS];
        let mut start = 0;
        for (slot, &count) in next.iter_mut().zip(histogram.iter()) {
            *slot = start;
            start += count;
        }
        for &(key, row) in pairs.iter() {
            let bucket = digit(key, pass);
            other[next[bucket]] = (key, row);
            next[bucket] += 1;
        }
        std::mem::swap(pairs, &mut other);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #[test]
        fn sorts_by_key_then_row(
            keys in proptest::collection::vec(
                prop_oneof![0u64..20, any::<u64>(), (0u64..4).prop_map(|v| v << 40)],
                0..300,
            )
        ) {
            let (order, sorted) = sort_rows_by_key(&keys);
            let mut expected: Vec<u32> = (0..keys.len() as u32).collect();
            expected.sort_by_key(|&r| (keys[r as usize], r));
            prop_assert_eq!(&order, &expected);
            let expected_keys: Vec<u64> = expected.iter().map(|&r| keys[r as usize]).collect();
            prop_assert_eq!(sorted, expected_keys);
        }
    }
}
