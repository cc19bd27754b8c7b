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
//! line. A build derives the index from the keys; an index file stores it (for keys that
//! start on a line, as a file's sections do), and a load checks it against the keys in one
//! strided pass without making a copy.

use rayon::prelude::*;

use crate::probe::{read_of, read_one, Part, Probe};
use crate::slab::Slab;

/// Keys in one 64-byte line.
const PER_LINE: usize = 8;

/// One cache line of index entries.
#[repr(C, align(64))]
#[derive(Clone, Copy, Debug, PartialEq, Eq, bytemuck::Pod, bytemuck::Zeroable)]
pub(crate) struct Node([u64; PER_LINE]);

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
    /// Key slots of the first cache line of the keys that come before the first key (the
    /// keys' misalignment, in keys): the first line of keys is `PER_LINE - pad` keys long,
    /// and line `l` of keys starts at key `PER_LINE * l - pad`, so that every later line of
    /// keys is one line of memory.
    pad: usize,
    /// `levels[0][l]` is the first key of line `l` of the keys (0 for the partial first
    /// line, which is below or equal to every bound); `levels[k][l]` is the first entry of
    /// line `l` of level `k - 1`. The last level is one line.
    levels: Vec<Slab<Node>>,
}

/// Entries of level 0 for `n` keys: one per line of keys, for any alignment (the keys
/// then span at most `n + PER_LINE - 1` line positions).
fn first_level_len(n: usize) -> usize {
    (n + 2 * PER_LINE - 2) / PER_LINE
}

/// Index bytes for `n` keys, whatever the keys' alignment.
pub(crate) fn nbytes_for(n: usize) -> usize {
    level_lines(n).iter().sum::<usize>() * 64
}

/// Lines of each level of the index over `n` keys, whatever the keys' alignment: none for
/// no keys.
pub(crate) fn level_lines(n: usize) -> Vec<usize> {
    let mut out = Vec::new();
    if n == 0 {
        return out;
    }
    let mut len = first_level_len(n);
    loop {
        let lines = len.div_ceil(PER_LINE);
        out.push(lines);
        if lines == 1 {
            return out;
        }
        len = lines;
    }
}

impl LineSearch {
    /// The index over `keys`, which must be sorted.
    pub(crate) fn new(keys: &[u64]) -> Self {
        Self::with_pad(keys, pad_of(keys))
    }

    /// The index over `keys` as if they started `pad` keys before a line: what a file stores
    /// (`pad` 0) whatever the alignment of a built tree's keys.
    pub(crate) fn with_pad(keys: &[u64], pad: usize) -> Self {
        if keys.is_empty() {
            return LineSearch::default();
        }
        let first: Vec<u64> = crate::alloc::collect(
            (0..first_level_len(keys.len()))
                .into_par_iter()
                .map(|l| first_entry(keys, pad, l)),
        );
        let mut levels: Vec<Slab<Node>> = vec![to_nodes(&first).into()];
        while levels.last().is_some_and(|l| l.len() > 1) {
            let below = levels.last().expect("levels is not empty");
            let firsts: Vec<u64> = below.iter().map(|node| node.0[0]).collect();
            levels.push(to_nodes(&firsts).into());
        }
        LineSearch { pad, levels }
    }

    /// An index read from a file, for `keys` that must start on a line; `None` unless every
    /// entry is the one [`LineSearch::new`] would make. The check reads every line of the
    /// keys once and allocates nothing, so the index is used where it lies.
    pub(crate) fn from_file(keys: &[u64], levels: Vec<Slab<Node>>) -> Option<Self> {
        if pad_of(keys) != 0 {
            return None;
        }
        let lens: Vec<usize> = levels.iter().map(|l| l.len()).collect();
        if lens != level_lines(keys.len()) {
            return None;
        }
        let first_ok = levels.first().is_none_or(|level| {
            level.par_iter().enumerate().all(|(line, node)| {
                (0..PER_LINE).all(|j| node.0[j] == first_entry(keys, 0, PER_LINE * line + j))
            })
        });
        let upper_ok = levels.windows(2).all(|pair| {
            let (below, level) = (&pair[0], &pair[1]);
            level.iter().enumerate().all(|(line, node)| {
                (0..PER_LINE).all(|j| {
                    let expected = below.get(PER_LINE * line + j).map_or(PAST_END, |n| n.0[0]);
                    node.0[j] == expected
                })
            })
        });
        (first_ok && upper_ok).then_some(LineSearch { pad: 0, levels })
    }

    /// The index's lines, level by level, for writing to a file.
    pub(crate) fn levels(&self) -> impl Iterator<Item = &[Node]> {
        self.levels.iter().map(|l| &l[..])
    }

    /// Key slots before the first key in its line: 0 for what a file stores.
    pub(crate) fn pad(&self) -> usize {
        self.pad
    }

    pub(crate) fn nbytes(&self) -> usize {
        self.levels.iter().map(|l| l.len() * 64).sum()
    }

    /// The number of `keys` below `t`, one search on its own; `keys` are those the index
    /// was made from.
    #[cfg(test)]
    pub(crate) fn rank(&self, keys: &[u64], t: u64) -> usize {
        let mut line = 0;
        for level in self.levels.iter().rev() {
            line = (PER_LINE * line + level[line].count_below(t)).saturating_sub(1);
        }
        self.finish(keys, line, t, &mut ())
    }

    /// The rank of `t`, given that it falls in line `line` of the keys.
    #[inline(always)]
    fn finish(&self, keys: &[u64], line: usize, t: u64, probe: &mut impl Probe) -> usize {
        if keys.is_empty() {
            return 0;
        }
        let start = PER_LINE * line;
        let below: usize = match start.checked_sub(self.pad) {
            Some(first) if first + PER_LINE <= keys.len() => {
                let keys = &keys[first..first + PER_LINE];
                read_of(probe, Part::Keys, keys);
                keys.iter().map(|&k| (k < t) as usize).sum()
            }
            // The partial first or last line: positions before the keys count as 0, as
            // their index entry does; positions past the end are never below a bound.
            _ => {
                let first = start.saturating_sub(self.pad).min(keys.len());
                let end = (start + PER_LINE).saturating_sub(self.pad).min(keys.len());
                read_of(probe, Part::Keys, &keys[first..end]);
                (start..start + PER_LINE)
                    .map(|v| match v.checked_sub(self.pad) {
                        None => (0 < t) as usize,
                        Some(i) => keys.get(i).is_some_and(|&k| k < t) as usize,
                    })
                    .sum()
            }
        };
        (start + below).saturating_sub(self.pad)
    }

    /// Start loading line `line` of level `level` (`None`: of the keys).
    #[inline(always)]
    fn prefetch(&self, keys: &[u64], level: Option<usize>, line: usize) {
        match level {
            Some(k) => {
                crate::prefetch::prefetch_read(&self.levels[k][line] as *const Node as *const u8)
            }
            None => self.prefetch_keys(keys, line),
        }
    }

    #[inline(always)]
    fn prefetch_keys(&self, keys: &[u64], line: usize) {
        let first = (PER_LINE * line).saturating_sub(self.pad);
        if let Some(k) = keys.get(first) {
            crate::prefetch::prefetch_read(k as *const u64 as *const u8);
        }
    }
}

/// One search of [`ranks_together`]: an index, the keys it was made from, and a bound.
pub(crate) type Search<'a> = (&'a LineSearch, &'a [u64], u64);

/// The rank of every search's bound, all searches taking each level together: every search
/// prefetches the line it reads next before any of them reads, so their cache misses overlap.
/// The searches may use different indexes (a box's x and y bounds); an index with fewer
/// levels joins in when the others reach its top.
#[inline]
pub(crate) fn ranks_together<const N: usize>(searches: &[Search<'_>; N]) -> [usize; N] {
    ranks_together_probed(searches, &mut ())
}

/// [`ranks_together`], telling `probe` every line it reads.
#[inline]
pub(crate) fn ranks_together_probed<const N: usize>(
    searches: &[Search<'_>; N],
    probe: &mut impl Probe,
) -> [usize; N] {
    let mut line = [0usize; N];
    let depth = searches.iter().map(|s| s.0.levels.len()).max().unwrap_or(0);
    for k in (0..depth).rev() {
        for (d, &(index, _, t)) in searches.iter().enumerate() {
            if let Some(level) = index.levels.get(k) {
                read_one(probe, Part::SearchIndex, &level[line[d]]);
                line[d] = (PER_LINE * line[d] + level[line[d]].count_below(t)).saturating_sub(1);
            }
        }
        for (d, &(index, keys, _)) in searches.iter().enumerate() {
            if k < index.levels.len() {
                index.prefetch(keys, k.checked_sub(1), line[d]);
            }
        }
    }
    let mut out = [0usize; N];
    for (d, &(index, keys, t)) in searches.iter().enumerate() {
        out[d] = index.finish(keys, line[d], t, probe);
    }
    out
}

/// Key slots of the keys' first 64-byte line of memory before the first key: line `l` of
/// the keys then starts at key `PER_LINE * l - pad`, on a line of memory.
fn pad_of(keys: &[u64]) -> usize {
    (keys.as_ptr() as usize % 64) / 8
}

/// Entry `l` of level 0: the first key of line `l` of the keys (0 before the keys, past the
/// end above every bound).
#[inline]
fn first_entry(keys: &[u64], pad: usize, l: usize) -> u64 {
    match (PER_LINE * l).checked_sub(pad) {
        None => 0,
        Some(i) => keys.get(i).copied().unwrap_or(PAST_END),
    }
}

/// Entries as lines, the last one filled up with [`PAST_END`].
/// The lines live in huge-page-advised memory: a search reads one line of the largest level
/// at a random place, and with 4 KiB pages that would also miss the TLB.
fn to_nodes(entries: &[u64]) -> Vec<Node> {
    crate::alloc::collect(entries.par_chunks(PER_LINE).map(|chunk| {
        let mut node = Node([PAST_END; PER_LINE]);
        node.0[..chunk.len()].copy_from_slice(chunk);
        node
    }))
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

    /// What a file stores (the index for line-aligned keys) is accepted back for keys that
    /// start on a line, and any changed entry, or keys that do not start on a line, refused.
    #[test]
    fn an_index_from_a_file_must_be_the_derived_one() {
        // A `Node` array starts on a line, so its first key does.
        let lines: Vec<Node> = (0..40u64).map(|l| Node([8 * l; PER_LINE])).collect();
        let flat: &[u64] = bytemuck::cast_slice(&lines);
        for n in [0usize, 1, 8, 9, 64, 65, 300] {
            let keys = &flat[..n];
            let stored: Vec<Slab<Node>> = LineSearch::with_pad(keys, 0)
                .levels()
                .map(|l| Slab::from(l.to_vec()))
                .collect();
            let back = LineSearch::from_file(keys, stored.clone()).expect("the derived index");
            assert_eq!(back.nbytes(), nbytes_for(n));
            for t in [0u64, 5, 8, 100, u64::MAX] {
                assert_eq!(back.rank(keys, t), keys.partition_point(|&k| k < t));
            }
            if n > 0 {
                let mut changed: Vec<Vec<Node>> = stored.iter().map(|l| l.to_vec()).collect();
                changed[0][0].0[1] ^= 1;
                let changed = changed.into_iter().map(Slab::from).collect();
                assert!(LineSearch::from_file(keys, changed).is_none());
                assert!(LineSearch::from_file(&flat[1..=n], stored).is_none());
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
                    assert_eq!(ranks_together(&[(&index, keys, t)])[0], expected);
                }
            }
        }
    }

    /// A search ends in one line of memory of the keys, whatever the keys' alignment: the
    /// lines the index names are those of memory.
    #[test]
    fn a_search_reads_one_memory_line_of_the_keys_at_every_alignment() {
        use crate::probe::Tally;
        let all: Vec<u64> = (0..4096u64 + 16).map(|i| 3 * i).collect();
        // The first key of `all` that starts a line of memory.
        let aligned = (PER_LINE - (all.as_ptr() as usize % 64) / 8) % PER_LINE;
        for misalignment in 0..PER_LINE {
            let start = aligned + misalignment;
            let keys = &all[start..start + 4096];
            let index = LineSearch::new(keys);
            for t in (keys[0].saturating_sub(5)..keys[4095] + 5).step_by(7) {
                let mut tally = Tally::default();
                let rank = ranks_together_probed(&[(&index, keys, t)], &mut tally)[0];
                assert_eq!(rank, keys.partition_point(|&k| k < t));
                let key_reads: Vec<_> = tally
                    .reads
                    .iter()
                    .filter(|r| r.part == Part::Keys)
                    .collect();
                assert_eq!(key_reads.len(), 1, "misaligned by {misalignment}, t {t}");
                let (first, last) = key_reads[0].lines();
                assert_eq!(
                    first, last,
                    "misaligned by {misalignment}, t {t}: the read spans two lines"
                );
                let index_reads = tally.reads.iter().filter(|r| r.part == Part::SearchIndex);
                assert_eq!(index_reads.count(), index.levels.len());
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
            let batch = ranks_together(&limits.map(|t| (&index, keys, t)));
            for (d, &t) in limits.iter().enumerate() {
                let expected = keys.partition_point(|&k| k < t);
                prop_assert_eq!(index.rank(keys, t), expected);
                prop_assert_eq!(batch[d], expected);
            }
        }
    }
}
