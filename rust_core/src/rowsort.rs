//! Sorting one box's row ids: digit passes for long boxes, a comparison sort for short ones.
//!
//! A box's row ids are below 2^32 and spread over `[0, n)`, so once the smallest is
//! subtracted their keys have at most bit-length(n) bits: two or three least-significant-
//! digit passes, each reading every id once and writing it once, where a comparison sort
//! moves each id about log2(k) times and mispredicts about half its branches.

/// Boxes with fewer ids than this are sorted by comparison: below it the fixed costs of the
/// digit passes (a counter array to clear, count and prefix-sum per pass) outweigh what they
/// save. Measured with `cargo bench -p boxwood-core -- row_sort` and the two timed in turn
/// (ids spread over 10^7): even at about 128 ids, three digit passes 1.3x the comparison sort's
/// rate at 192, 2.5x at 3,000 and 4x at 20,000.
pub const RADIX_FROM: usize = 192;

/// The widest digit: 2^12 four-byte counters per pass stay in the L1/L2 caches, and a scatter
/// into 2^12 places still mostly hits lines already in cache.
const MAX_DIGIT_BITS: u32 = 12;

/// A reusable sorter of row ids: its second buffer and counters outlive one sort, so a
/// worker sorting box after box allocates them once.
#[derive(Debug, Default)]
pub struct RowSort {
    other: Vec<u32>,
    counts: Vec<u32>,
}

/// How a sort splits the keys' bits into digits.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct DigitPlan {
    passes: u32,
    bits: u32,
}

impl DigitPlan {
    /// The plan for `k` keys of `key_bits` bits (1 to 32) that does the least work, work
    /// being a pass over the keys plus a pass over the counters for each digit, a key
    /// costing three counters (moving a key reads and writes it at a scattered place). For
    /// 24-bit keys that gives three 8-bit digits up to about 2,500 keys and two 12-bit ones
    /// above, where the two timed in turn cross.
    fn for_keys(key_bits: u32, k: usize) -> Self {
        // More passes than one above the fewest never pay at the sizes sorted this way, and
        // this keeps a plan to at most 4 passes.
        let fewest = key_bits.div_ceil(MAX_DIGIT_BITS);
        (fewest..=key_bits.min(fewest + 1))
            .map(|passes| DigitPlan {
                passes,
                bits: key_bits.div_ceil(passes),
            })
            .min_by_key(|p| p.passes as usize * (3 * k + (1usize << p.bits)))
            .expect("at least one pass")
    }

    fn buckets(&self) -> usize {
        1 << self.bits
    }
}

impl RowSort {
    /// Sort `rows` ascending; the same result as `rows.sort_unstable()`.
    pub fn sort(&mut self, rows: &mut [u32]) {
        // Counters are u32: a longer slice (never a box's rows, which are at most 2^32 - 1)
        // goes to the comparison sort.
        if rows.len() < RADIX_FROM || rows.len() > u32::MAX as usize {
            rows.sort_unstable();
            return;
        }
        let (min, max) = rows
            .iter()
            .fold((u32::MAX, 0), |(lo, hi), &v| (lo.min(v), hi.max(v)));
        let key_bits = u32::BITS - (max - min).leading_zeros();
        if key_bits == 0 {
            return; // all equal
        }
        let plan = DigitPlan::for_keys(key_bits, rows.len());
        self.count_digits(rows, min, plan);
        self.scatter_passes(rows, min, plan);
    }

    /// Every pass's digit counts, in one read of the keys.
    fn count_digits(&mut self, rows: &[u32], min: u32, plan: DigitPlan) {
        self.counts.clear();
        self.counts.resize(plan.passes as usize * plan.buckets(), 0);
        let counts = &mut self.counts[..];
        // The pass loop unrolled: per key it costs as much as the counting itself.
        match plan.passes {
            1 => count_passes::<1>(rows, min, plan.bits, counts),
            2 => count_passes::<2>(rows, min, plan.bits, counts),
            3 => count_passes::<3>(rows, min, plan.bits, counts),
            _ => count_passes::<4>(rows, min, plan.bits, counts),
        }
    }

    /// The digit passes, lowest digit first, between `rows` and the second buffer; the sorted
    /// ids end in `rows`.
    fn scatter_passes(&mut self, rows: &mut [u32], min: u32, plan: DigitPlan) {
        let k = rows.len();
        if self.other.len() < k {
            self.other.resize(k, 0);
        }
        let other = &mut self.other[..k];
        let mut in_other = false;
        for (pass, counts) in self.counts.chunks_exact_mut(plan.buckets()).enumerate() {
            if counts.contains(&(k as u32)) {
                continue; // one digit value for every key: the pass would move nothing
            }
            let mut start = 0;
            for slot in counts.iter_mut() {
                (*slot, start) = (start, start + *slot);
            }
            let digit = Digit {
                min,
                shift: pass as u32 * plan.bits,
                mask: plan.buckets() as u32 - 1,
            };
            if in_other {
                digit.scatter(other, rows, counts);
            } else {
                digit.scatter(rows, other, counts);
            }
            in_other = !in_other;
        }
        if in_other {
            rows.copy_from_slice(other);
        }
    }
}

/// Count the `P` digits of `bits` bits of every key `v - min` into `counts`, one run of
/// `2^bits` counters a digit.
#[inline(always)]
fn count_passes<const P: usize>(rows: &[u32], min: u32, bits: u32, counts: &mut [u32]) {
    let buckets = 1usize << bits;
    let mask = buckets as u32 - 1;
    let mut per_pass: [&mut [u32]; P] = std::array::from_fn(|_| &mut [][..]);
    let mut rest = counts;
    for slot in per_pass.iter_mut() {
        let (head, tail) = std::mem::take(&mut rest).split_at_mut(buckets);
        *slot = head;
        rest = tail;
    }
    for &v in rows {
        let key = v - min;
        for (pass, run) in per_pass.iter_mut().enumerate() {
            run[((key >> (pass as u32 * bits)) & mask) as usize] += 1;
        }
    }
}

/// One digit of the keys `v - min`.
struct Digit {
    min: u32,
    shift: u32,
    mask: u32,
}

impl Digit {
    /// Move `from` into `to` stably by this digit; `next` holds each digit value's first
    /// place in `to`.
    #[inline(always)]
    fn scatter(&self, from: &[u32], to: &mut [u32], next: &mut [u32]) {
        for &v in from {
            let d = (((v - self.min) >> self.shift) & self.mask) as usize;
            to[next[d] as usize] = v;
            next[d] += 1;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn check(rows: &[u32]) {
        let mut want = rows.to_vec();
        want.sort_unstable();
        let mut got = rows.to_vec();
        RowSort::default().sort(&mut got);
        assert_eq!(got, want, "{} ids", rows.len());
    }

    /// Distinct ids in `[0, n)`, shuffled, as a box reports them (xorshift, fixed seed).
    fn distinct_ids(k: usize, n: u32, seed: u64) -> Vec<u32> {
        let mut rng = crate::test_rng::XorShift::new(seed | 1);
        let mut next = || rng.next_u64();
        let mut all: Vec<u32> = (0..n).collect();
        for i in 0..k {
            let j = i + (next() % (n as u64 - i as u64)) as usize;
            all.swap(i, j);
        }
        all.truncate(k);
        all
    }

    /// The sizes where the method changes hands and the edges of a slice, each ordered
    /// randomly, ascending and descending; the reference is the standard library's sort.
    #[test]
    fn equals_sort_unstable_at_the_threshold_and_edges() {
        // Spread over 10^7 (24-bit keys: three digits below about 2,500 ids, two above) and
        // over 3,000 (12-bit keys: one digit).
        let cases = [
            0,
            1,
            2,
            RADIX_FROM - 1,
            RADIX_FROM,
            RADIX_FROM + 1,
            2_000,
            5_000,
        ]
        .map(|k| (k, 10_000_000))
        .into_iter()
        .chain([(2_999, 3_000), (RADIX_FROM, 3_000)]);
        for (k, n) in cases {
            let shuffled = distinct_ids(k, n, k as u64 + 3);
            let mut ascending = shuffled.clone();
            ascending.sort_unstable();
            let descending: Vec<u32> = ascending.iter().rev().copied().collect();
            for rows in [shuffled, ascending, descending] {
                check(&rows);
            }
        }
    }

    /// Keys that fill all 32 bits, keys that differ only in their top digit (the low passes
    /// are skipped), equal keys, and one sorter reused across sizes (a stale second buffer
    /// or stale counters would show).
    #[test]
    fn wide_narrow_and_reused() {
        let wide: Vec<u32> = (0..3_000u32)
            .map(|i| i.wrapping_mul(2_654_435_761) ^ (i << 31))
            .chain([0, u32::MAX])
            .collect();
        check(&wide);
        let top_only: Vec<u32> = (0..1_000u32).rev().map(|i| i << 20).collect();
        check(&top_only);
        check(&[7; 600]);
        let mut sorter = RowSort::default();
        for (k, seed) in [(9_000, 1), (300, 2), (4_000, 3), (RADIX_FROM, 4)] {
            let mut rows = distinct_ids(k, 1 << 20, seed);
            let mut want = rows.clone();
            want.sort_unstable();
            sorter.sort(&mut rows);
            assert_eq!(rows, want, "{k} ids after reuse");
        }
    }

    /// The plan covers the key's bits and never uses a digit above the widest.
    #[test]
    fn digit_plans_cover_the_key() {
        for key_bits in 1..=32 {
            for k in [RADIX_FROM, 5_000, 20_000, 1 << 24] {
                let plan = DigitPlan::for_keys(key_bits, k);
                assert!(plan.passes * plan.bits >= key_bits, "{key_bits} bits, {k}");
                assert!(plan.bits <= MAX_DIGIT_BITS, "{key_bits} bits, {k}");
                assert!((1..=4).contains(&plan.passes), "{key_bits} bits, {k}");
            }
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(200))]

        /// Random ids of many sizes, around the threshold and beyond, distinct or not.
        #[test]
        fn equals_sort_unstable_on_random_ids(
            rows in proptest::collection::vec(any::<u32>(), 0..3 * RADIX_FROM),
            spread in 1u32..=32,
        ) {
            let narrowed: Vec<u32> = rows
                .iter()
                .map(|&v| if spread == 32 { v } else { v & ((1 << spread) - 1) })
                .collect();
            let mut want = narrowed.clone();
            want.sort_unstable();
            let mut got = narrowed;
            RowSort::default().sort(&mut got);
            prop_assert_eq!(got, want);
        }

        /// Distinct ids, as a report holds them, already ascending or descending.
        #[test]
        fn equals_sort_unstable_on_distinct_ids(
            k in 0usize..4 * RADIX_FROM,
            n_extra in 0u32..50_000,
            seed in any::<u64>(),
            order in 0u8..3,
        ) {
            let mut rows = distinct_ids(k, k as u32 + n_extra, seed);
            match order {
                0 => {}
                1 => rows.sort_unstable(),
                _ => rows.sort_unstable_by(|a, b| b.cmp(a)),
            }
            let mut want = rows.clone();
            want.sort_unstable();
            RowSort::default().sort(&mut rows);
            prop_assert_eq!(rows, want);
        }
    }
}
