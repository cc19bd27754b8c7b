//! The two presorts: rows ordered by (key, row) on each axis, keyed x by (code, key, row).
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
//! A keyed tree's x presort (`sort_rows_by_code_and_key`) puts the key code in the top bits
//! of the same 32-bit prefix, above the top bits of x's span that still fit, and restores
//! the dropped x bits by the same fix-up inside each code's run; beside many codes more than
//! 32 bits can be dropped, and those runs are sorted by comparison of `(key, row)`.
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
    let (order, sorted, _) = sort_rows(keys, None);
    (order, sorted)
}

/// Rows ordered by `(code, key, row)`, the keys in that order, and where each code's rows
/// start (`count + 1` offsets, the last `n`): the x presort of a keyed tree (`keyed.rs`).
///
/// The code rides in the top bits of the sorted prefix, above as many of the key's top
/// bits as still fit in 32, so the one radix sort gives the keyed order; the key bits this
/// drops are restored by the same fix-up of runs of equal prefix as for unkeyed columns,
/// inside each code's run. Every code must be below `count` (`KeyColumn::validate`).
pub fn sort_rows_by_code_and_key(
    keys: &[u64],
    codes: &[u32],
    count: usize,
) -> (Vec<u32>, Vec<u64>, Vec<u32>) {
    assert_eq!(keys.len(), codes.len(), "one code a key");
    let (order, sorted, starts) = sort_rows(keys, Some((codes, count)));
    (order, sorted, starts.unwrap_or_else(|| vec![0; count + 1]))
}

/// The presort of `keys`, by code first where `codes` (with their count) are given.
fn sort_rows(keys: &[u64], codes: Option<(&[u32], usize)>) -> Sorted {
    let Some((min, max)) = extremes(keys) else {
        return (Vec::new(), Vec::new(), None);
    };
    let prefix = Prefix::new(min, max, codes.map(|(_, count)| count));
    let mut packed: Vec<u64> = match codes {
        None => alloc::collect(
            keys.par_iter()
                .enumerate()
                .map(|(row, &k)| (prefix.of(k) << 32) | row as u64),
        ),
        Some((codes, _)) => alloc::collect(
            keys.par_iter()
                .zip(codes.par_iter())
                .enumerate()
                .map(|(row, (&k, &code))| (prefix.with_code(code, k) << 32) | row as u64),
        ),
    };
    // The radix sort's second buffer is freed before the row order and the sorted keys are
    // made, so that no more than two arrays of n values live at once.
    radix_sort_by_prefix(&mut packed);
    let starts = codes.map(|(_, count)| code_starts(&packed, &prefix, count));
    let mut order: Vec<u32> = alloc::collect(packed.par_iter().map(|&p| p as u32));
    drop(packed);
    let mut sorted: Vec<u64> = alloc::collect(order.par_iter().map(|&row| keys[row as usize]));
    if prefix.shift > 0 {
        match &starts {
            None => sort_runs_of_equal_prefix(&mut order, &mut sorted, &prefix),
            Some(starts) => for_each_code_run(&mut order, &mut sorted, starts, |order, sorted| {
                sort_runs_of_equal_prefix(order, sorted, &prefix)
            }),
        }
    }
    (order, sorted, starts)
}

/// A presort's row order, its sorted keys and, by code, where each code's rows start.
type Sorted = (Vec<u32>, Vec<u64>, Option<Vec<u32>>);

/// Bits needed to write `v` (0 for 0).
fn bits_for(v: u64) -> u32 {
    u64::BITS - v.leading_zeros()
}

/// How a key becomes its (at most 32-bit) sort prefix: `(key - min) >> shift`, below the
/// code where there is one, in the low `key_bits` bits.
struct Prefix {
    min: u64,
    key_bits: u32,
    shift: u32,
}

impl Prefix {
    /// The prefix of keys from `min` to `max`, beside codes below `count` where there are
    /// codes: the codes take the top bits they need of the 32 (all 32 at `MAX_KEYS`), the
    /// key the rest, and the key's low bits that would take its span past those are dropped.
    fn new(min: u64, max: u64, count: Option<usize>) -> Self {
        let code_bits = count.map_or(0, |c| bits_for(c.saturating_sub(1) as u64));
        debug_assert!(code_bits <= 32, "codes are u32");
        let key_bits = 32 - code_bits;
        Prefix {
            min,
            key_bits,
            shift: bits_for(max - min).saturating_sub(key_bits),
        }
    }

    /// The prefix of `key` (order-preserving: `a < b` gives `of(a) <= of(b)`).
    fn of(&self, key: u64) -> u64 {
        (key - self.min).checked_shr(self.shift).unwrap_or(0)
    }

    /// The bits the prefix drops, all that can differ between keys of one prefix.
    fn dropped(&self, key: u64) -> u64 {
        (key - self.min) & 1u64.checked_shl(self.shift).map_or(u64::MAX, |b| b - 1)
    }

    /// The key back from its prefix and dropped bits.
    fn key_of(&self, prefix: u64, dropped: u64) -> u64 {
        self.min + (prefix.checked_shl(self.shift).unwrap_or(0) | dropped)
    }

    /// The code above the key's prefix (below 2^32 whatever `key_bits`).
    fn with_code(&self, code: u32, key: u64) -> u64 {
        ((code as u64) << self.key_bits) | self.of(key)
    }

    /// The code of a packed `with_code(..) << 32 | row` value.
    fn code_of(&self, packed: u64) -> usize {
        ((packed >> 32) >> self.key_bits) as usize
    }
}

/// Where each of `count` codes starts in the sorted packed values (`count + 1` offsets):
/// one pass counting the codes, read off the prefixes' top bits.
fn code_starts(packed: &[u64], prefix: &Prefix, count: usize) -> Vec<u32> {
    let mut starts = vec![0u32; count + 1];
    for &p in packed {
        starts[prefix.code_of(p) + 1] += 1;
    }
    for k in 0..count {
        starts[k + 1] += starts[k];
    }
    starts
}

/// Call `fix` on each code's run of `order` and `sorted` (`starts` as from [`code_starts`]).
fn for_each_code_run(
    mut order: &mut [u32],
    mut sorted: &mut [u64],
    starts: &[u32],
    mut fix: impl FnMut(&mut [u32], &mut [u64]),
) {
    for run in starts.windows(2) {
        let len = (run[1] - run[0]) as usize;
        let (run_order, rest_order) = std::mem::take(&mut order).split_at_mut(len);
        let (run_sorted, rest_sorted) = std::mem::take(&mut sorted).split_at_mut(len);
        if len > 1 {
            fix(run_order, run_sorted);
        }
        (order, sorted) = (rest_order, rest_sorted);
    }
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
/// rows ascending. Beside a key code more than 32 bits can be dropped: such runs are sorted
/// by comparison of `(key, row)`.
fn sort_runs_of_equal_prefix(order: &mut [u32], sorted: &mut [u64], prefix: &Prefix) {
    let n = sorted.len();
    let mut i = 1;
    while i < n {
        if sorted[i] >= sorted[i - 1] {
            i += 1;
            continue;
        }
        let p = prefix.of(sorted[i]);
        let mut start = i - 1;
        while start > 0 && prefix.of(sorted[start - 1]) == p {
            start -= 1;
        }
        let mut end = i + 1;
        while end < n && prefix.of(sorted[end]) == p {
            end += 1;
        }
        if prefix.shift > 32 {
            let mut run: Vec<(u64, u32)> = (start..end).map(|j| (sorted[j], order[j])).collect();
            run.sort_unstable();
            for (j, (key, row)) in (start..end).zip(run) {
                sorted[j] = key;
                order[j] = row;
            }
        } else {
            let mut run: Vec<u64> = (start..end)
                .map(|j| (prefix.dropped(sorted[j]) << 32) | order[j] as u64)
                .collect();
            if run.len() > SMALL_RUN {
                radix_sort_by_prefix(&mut run);
            } else {
                run.sort_unstable();
            }
            for (j, packed) in (start..end).zip(run) {
                sorted[j] = prefix.key_of(p, packed >> 32);
                order[j] = packed as u32;
            }
        }
        i = end;
    }
}

/// Runs up to this long are sorted by comparison; longer ones by radix passes.
const SMALL_RUN: usize = 256;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::error::Axis;
    use crate::keys::Column;
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

    fn check_keyed(keys: &[u64], codes: &[u32], count: usize) {
        let (order, sorted, starts) = sort_rows_by_code_and_key(keys, codes, count);
        let mut expected: Vec<u32> = (0..keys.len() as u32).collect();
        expected.sort_by_key(|&r| (codes[r as usize], keys[r as usize], r));
        assert_eq!(order, expected);
        let expected_keys: Vec<u64> = expected.iter().map(|&r| keys[r as usize]).collect();
        assert_eq!(sorted, expected_keys);
        assert_eq!(starts.len(), count + 1);
        for k in 0..count {
            let points = codes.iter().filter(|&&c| c as usize == k).count() as u32;
            assert_eq!(starts[k + 1] - starts[k], points, "code {k}");
        }
        assert_eq!(starts[count] as usize, keys.len());
    }

    #[test]
    fn codes_take_the_top_bits_and_dropped_key_bits_are_restored() {
        // 2^20 codes leave 12 bits of the key beside them: full-width keys drop 52 bits
        // (the comparison fix-up), keys of a 40-bit span drop 28 (the packed fix-up, with
        // runs longer than SMALL_RUN when only two codes are drawn).
        let mut rng = crate::test_rng::XorShift::new(7);
        for (count, drawn, span_bits) in [(1 << 20, 50, 64), (1 << 20, 2, 40), (1, 1, 64)] {
            let keys: Vec<u64> = (0..3000)
                .map(|_| rng.below(u64::MAX) >> (64 - span_bits))
                .collect();
            let codes: Vec<u32> = (0..3000).map(|_| rng.below(drawn) as u32).collect();
            check_keyed(&keys, &codes, count);
        }
        check_keyed(&[], &[], 3);
        check_keyed(&[9, 9, 1], &[1, 0, 1], 4);
    }

    /// The unkeyed presort's order cut by code, each code's rows kept in that order: what
    /// the keyed presort must give (a stable partition of the `(x, row)` order by code is
    /// `(code, x, row)` order).
    fn unkeyed_order_split_by_code(keys: &[u64], codes: &[u32], count: usize) -> Vec<u32> {
        let (order, _) = sort_rows_by_key(keys);
        (0..count as u32)
            .flat_map(|k| {
                order
                    .iter()
                    .copied()
                    .filter(move |&r| codes[r as usize] == k)
            })
            .collect()
    }

    fn check_keyed_against_unkeyed(column: Column<'_>, codes: &[u32], count: usize) {
        let keys = column.keys(Axis::X).unwrap();
        check_keyed(&keys, codes, count);
        let (order, _, _) = sort_rows_by_code_and_key(&keys, codes, count);
        assert_eq!(order, unkeyed_order_split_by_code(&keys, codes, count));
    }

    /// Floats of both signs, both zeros, infinities, subnormals, far outliers and close
    /// neighbours: spans that drop more than 32 key bits beside a code, with ties to restore.
    fn awkward_f64() -> impl Strategy<Value = f64> {
        prop_oneof![
            -50.0f64..50.0,
            (-3i32..3).prop_map(f64::from),
            // Neighbours a few ulps apart share every prefix bit kept beside a code.
            (0u32..8).prop_map(|i| -1.0 - f64::from(i) * f64::EPSILON),
            (0u32..8).prop_map(|i| 1.0 + f64::from(i) * f64::EPSILON),
            Just(-0.0),
            Just(0.0),
            Just(f64::INFINITY),
            Just(f64::NEG_INFINITY),
            Just(f64::MIN_POSITIVE / 4.0),
            Just(-1e300),
            Just(f64::MAX),
        ]
    }

    /// Integers of both signs, the extremes, and nanosecond times (2026 and around 1970).
    fn awkward_i64() -> impl Strategy<Value = i64> {
        prop_oneof![
            -20i64..20,
            Just(i64::MIN),
            Just(i64::MAX),
            (0i64..1_000_000).prop_map(|s| 1_796_000_000_000_000_000 + s * 1_000_003),
            (-1000i64..1000).prop_map(|s| s * 86_400_000_000_000),
        ]
    }

    #[test]
    fn codes_up_to_the_most_a_tree_holds_fit_the_prefix() {
        // MAX_KEYS codes take all 32 bits and leave none to the key; 2^31 codes take 31. The
        // packed values of the largest codes still sort by code and give their codes back
        // (the runs' offsets of that many codes are too big to make here).
        let top = (crate::keyed::MAX_KEYS - 1) as u32;
        for (count, codes) in [
            (crate::keyed::MAX_KEYS, [top, 0, 1 << 31, top - 1, 1, top]),
            (
                1usize << 31,
                [(1 << 31) - 1, 0, 5, 1 << 30, 1, (1 << 31) - 1],
            ),
        ] {
            let prefix = Prefix::new(3, u64::MAX, Some(count));
            assert_eq!(prefix.key_bits, 32 - bits_for(count as u64 - 1));
            let keys = [u64::MAX, 3, 1 << 40, 7, u64::MAX - 1, 3];
            let mut packed: Vec<u64> = codes
                .iter()
                .zip(keys)
                .enumerate()
                .map(|(row, (&code, key))| (prefix.with_code(code, key) << 32) | row as u64)
                .collect();
            radix_sort_by_prefix(&mut packed);
            let got: Vec<(usize, u32)> = packed
                .iter()
                .map(|&p| (prefix.code_of(p), p as u32))
                .collect();
            // Reference: the rows sorted by (code, key prefix, row) with a comparison sort.
            let mut expected: Vec<(usize, u64, u32)> = (0..codes.len())
                .map(|r| (codes[r] as usize, prefix.of(keys[r]), r as u32))
                .collect();
            expected.sort_unstable();
            let expected: Vec<(usize, u32)> =
                expected.into_iter().map(|(c, _, r)| (c, r)).collect();
            assert_eq!(got, expected);
        }
    }

    proptest! {
        #[test]
        fn keyed_f64_order_is_the_unkeyed_order_split_by_code(
            rows in proptest::collection::vec((awkward_f64(), 0u32..12), 0..500),
            extra_codes in 0usize..3,
        ) {
            let (x, codes): (Vec<f64>, Vec<u32>) = rows.into_iter().unzip();
            let count = codes.iter().max().map_or(0, |&c| c as usize + 1) + extra_codes;
            check_keyed_against_unkeyed(Column::F64(&x), &codes, count);
        }

        #[test]
        fn keyed_i64_order_is_the_unkeyed_order_split_by_code(
            rows in proptest::collection::vec((awkward_i64(), 0u32..3000), 0..500),
        ) {
            // Up to 3000 codes leave 20 bits of the key: nanosecond times drop 30 to 44.
            let (x, codes): (Vec<i64>, Vec<u32>) = rows.into_iter().unzip();
            check_keyed_against_unkeyed(Column::I64(&x), &codes, 3000);
        }

        #[test]
        fn sorts_by_code_then_key_then_row(
            keys_and_codes in proptest::collection::vec(
                (
                    prop_oneof![0u64..20, any::<u64>(), (0u64..4).prop_map(|v| v << 40)],
                    0u32..40,
                ),
                0..400,
            ),
            extra_codes in 0usize..5,
        ) {
            let (keys, codes): (Vec<u64>, Vec<u32>) = keys_and_codes.into_iter().unzip();
            let count = codes.iter().max().map_or(0, |&c| c as usize + 1) + extra_codes;
            check_keyed(&keys, &codes, count);
        }

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
