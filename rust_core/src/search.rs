//! The root searches: a static B-tree of cache lines over an axis's sorted keys.
//!
//! Every query bound becomes a rank (how many keys lie below it) before the tree is touched,
//! four searches a box. A binary search over 10^7 keys misses the cache at almost every
//! step. Here the first key of every cache line of the keys is copied into an index level,
//! the first entry of every line of that level into the next, and so on until one line is
//! left: a search reads one line per level, counting the entries below the bound (no
//! branches to mispredict), and that count names the line to read on the level below. The
//! upper levels are a few kilobytes and stay in the core's own cache; at 10^7 keys the index
//! is 1/7 of the keys' size, and a search ends in exactly one line of the keys themselves.
//!
//! Lines are those of memory, not of indices: the keys of a built tree need not start on a
//! 64-byte boundary, so the keys before the first that does are treated as a partial first
//! line. The index is derived from the keys whenever an axis is made (built or loaded) and
//! never stored in a file.

/// Keys in one 64-byte line.
const PER_LINE: usize = 8;

/// One cache line of index entries.
#[repr(C, align(64))]
#[derive(Clone, Copy, Debug)]
struct Node([u64; PER_LINE]);

/// Entries past the end of a level: above every bound, so never counted.
const PAST_END: u64 = u64::MAX;

impl Node {
    /// Entries below `t`.
    #[inline(always)]
    fn count_below(&self, t: u64) -> usize {
        self.0.iter().map(|&k| (k < t) as usize).sum()
    }
}

/// The index over one axis's keys.
#[derive(Clone, Debug, Default)]
pub(crate) struct LineSearch {
    /// Keys before the first one that starts a cache line: the first line of keys is
    /// `PER_LINE - pad` keys long, and a line `l` of keys starts at key `PER_LINE * l - pad`.
    pad: usize,
    /// `levels[0][l]` is the first key of line `l` of the keys (0 for the partial first
    /// line, which is below or equal to every bound); `levels[k][l]` is the first entry of
    /// line `l` of level `k - 1`. The last level is one line.
    levels: Vec<Vec<Node>>,
    /// Number of keys.
    n: usize,
}

/// Entries of level 0 for `n` keys: one per line of keys, for any alignment (the keys
/// then span at most `n + PER_LINE - 1` line positions).
fn first_level_len(n: usize) -> usize {
    (n + 2 * PER_LINE - 2) / PER_LINE
}

/// Index bytes for `n` keys, whatever the keys' alignment.
pub(crate) fn nbytes_for(n: usize) -> usize {
    if n == 0 {
        return 0;
    }
    let mut len = first_level_len(n);
    let mut lines = 0;
    loop {
        let level_lines = len.div_ceil(PER_LINE);
        lines += level_lines;
        if level_lines == 1 {
            return lines * 64;
        }
        len = level_lines;
    }
}

impl LineSearch {
    /// The index over `keys`, which must be sorted.
    pub(crate) fn new(keys: &[u64]) -> Self {
        let n = keys.len();
        if n == 0 {
            return LineSearch::default();
        }
        let misalignment = (keys.as_ptr() as usize % 64) / 8;
        let pad = (PER_LINE - misalignment) % PER_LINE;
        let first: Vec<u64> = (0..first_level_len(n))
            .map(|l| match (PER_LINE * l).checked_sub(pad) {
                None => 0,
                Some(i) => keys.get(i).copied().unwrap_or(PAST_END),
            })
            .collect();
        let mut levels = vec![to_nodes(&first)];
        while levels.last().is_some_and(|l| l.len() > 1) {
            let below = levels.last().expect("levels is not empty");
            let firsts: Vec<u64> = below.iter().map(|node| node.0[0]).collect();
            levels.push(to_nodes(&firsts));
        }
        LineSearch { pad, levels, n }
    }

    pub(crate) fn nbytes(&self) -> usize {
        self.levels.iter().map(|l| l.len() * 64).sum()
    }

    /// The number of `keys` below `t`; `keys` are those the index was made from.
    #[inline]
    pub(crate) fn rank(&self, keys: &[u64], t: u64) -> usize {
        let mut line = 0;
        for level in self.levels.iter().rev() {
            line = (PER_LINE * line + level[line].count_below(t)).saturating_sub(1);
        }
        self.finish(keys, line, t)
    }

    /// [`Self::rank`] of every bound in `limits`, the searches taking each level together:
    /// every search prefetches the line it reads next before any of them reads, so their
    /// cache misses overlap.
    #[inline]
    pub(crate) fn ranks<const N: usize>(&self, keys: &[u64], limits: &[u64; N]) -> [usize; N] {
        let mut line = [0usize; N];
        if self.n == 0 {
            return line;
        }
        for (k, level) in self.levels.iter().enumerate().rev() {
            for d in 0..N {
                line[d] =
                    (PER_LINE * line[d] + level[line[d]].count_below(limits[d])).saturating_sub(1);
            }
            for &l in &line {
                match k {
                    0 => self.prefetch_keys(keys, l),
                    _ => crate::prefetch::prefetch_read(
                        &self.levels[k - 1][l] as *const Node as *const u8,
                    ),
                }
            }
        }
        let mut out = [0usize; N];
        for d in 0..N {
            out[d] = self.finish(keys, line[d], limits[d]);
        }
        out
    }

    /// The rank of `t`, given that it falls in line `line` of the keys.
    #[inline(always)]
    fn finish(&self, keys: &[u64], line: usize, t: u64) -> usize {
        if self.n == 0 {
            return 0;
        }
        let start = PER_LINE * line;
        let below: usize = match start.checked_sub(self.pad) {
            Some(first) if first + PER_LINE <= self.n => keys[first..first + PER_LINE]
                .iter()
                .map(|&k| (k < t) as usize)
                .sum(),
            // The partial first or last line: positions before the keys count as 0, as
            // their index entry does; positions past the end are never below a bound.
            _ => (start..start + PER_LINE)
                .map(|v| match v.checked_sub(self.pad) {
                    None => (0 < t) as usize,
                    Some(i) => keys.get(i).is_some_and(|&k| k < t) as usize,
                })
                .sum(),
        };
        (start + below).saturating_sub(self.pad)
    }

    #[inline(always)]
    fn prefetch_keys(&self, keys: &[u64], line: usize) {
        let first = (PER_LINE * line).saturating_sub(self.pad);
        if let Some(k) = keys.get(first) {
            crate::prefetch::prefetch_read(k as *const u64 as *const u8);
        }
    }
}

/// Entries as lines, the last one filled up with [`PAST_END`].
fn to_nodes(entries: &[u64]) -> Vec<Node> {
    entries
        .chunks(PER_LINE)
        .map(|chunk| {
            let mut node = Node([PAST_END; PER_LINE]);
            node.0[..chunk.len()].copy_from_slice(chunk);
            node
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn nbytes_is_known_before_the_index_is_made() {
        for n in [0usize, 1, 7, 8, 9, 63, 64, 65, 511, 512, 513, 100_000] {
            let keys: Vec<u64> = (0..n as u64).collect();
            for start in 0..8 {
                if start <= n {
                    let index = LineSearch::new(&keys[start..]);
                    assert_eq!(index.nbytes(), nbytes_for(n - start), "n = {n}");
                }
            }
        }
    }

    /// Every small length at every alignment, each bound from below the first key to above
    /// the last, against the standard library's `partition_point`.
    #[test]
    fn small_arrays_at_every_alignment() {
        let all: Vec<u64> = (0..80u64).map(|i| 10 + 2 * (i / 3)).collect();
        for start in 0..8 {
            for n in 0..(all.len() - start) {
                let keys = &all[start..start + n];
                let index = LineSearch::new(keys);
                for t in 0..70u64 {
                    let expected = keys.partition_point(|&k| k < t);
                    assert_eq!(index.rank(keys, t), expected, "start {start}, n {n}, t {t}");
                    assert_eq!(index.ranks(keys, &[t])[0], expected);
                }
            }
        }
    }

    proptest! {
        /// Every alignment of the keys (a slice starting 0 to 7 keys into a vector), with
        /// duplicates, against the standard library's `partition_point`.
        #[test]
        fn ranks_match_partition_point(
            mut keys in proptest::collection::vec(
                prop_oneof![0u64..50, Just(0), Just(u64::MAX), any::<u64>()], 0..1500),
            start in 0usize..8,
            bounds in proptest::collection::vec(
                prop_oneof![0u64..60, Just(0), Just(1), Just(u64::MAX), any::<u64>()], 4),
        ) {
            keys.sort_unstable();
            let keys = &keys[start.min(keys.len())..];
            let index = LineSearch::new(keys);
            let limits: [u64; 4] = bounds.try_into().unwrap();
            let batch = index.ranks(keys, &limits);
            for (d, &t) in limits.iter().enumerate() {
                let expected = keys.partition_point(|&k| k < t);
                prop_assert_eq!(index.rank(keys, t), expected);
                prop_assert_eq!(batch[d], expected);
            }
        }
    }
}
