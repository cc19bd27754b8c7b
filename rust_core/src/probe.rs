//! An instrumented walk: what one count or report reads, recorded by the reads themselves.
//!
//! The query code takes a [`Probe`] at every place it reads the tree's memory: each line of a
//! root search index, each line of an axis's sorted keys, each cascade bit line, each line of
//! the count cascade, each slice of row ids. The queries themselves pass `()`, a probe that
//! records nothing and that the compiler removes. A diagnostic call ([`RangeTree::probe_count`], [`RangeTree::probe_report`]) passes a
//! [`Tally`], which keeps the address and length of every read and the level of every node
//! visited. Tests of the algorithm's operation counts read those, so what they bound is what
//! the query code touched, not a counter the build or the walk sets for itself.

use crate::error::Error;
use crate::keys::Inclusive;
use crate::query::BoxBounds;
use crate::tree::{Group, RangeTree};

/// The parts of a tree a query reads.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Part {
    /// A line of a root search index (`search.rs`).
    SearchIndex,
    /// The sorted keys of an axis, where a root search ends.
    Keys,
    /// Binary cascade bits (`bits.rs`).
    CascadeBits,
    /// A line of the 16-way count cascade (`wide.rs`).
    CountLines,
    /// A superblock entry of the count cascade.
    CountSupers,
    /// Row ids of a level above the leaves (fast layout).
    LevelRows,
    /// Row ids of the leaves.
    LeafRows,
}

impl Part {
    pub fn name(self) -> &'static str {
        match self {
            Part::SearchIndex => "search index",
            Part::Keys => "keys",
            Part::CascadeBits => "cascade bits",
            Part::CountLines => "count lines",
            Part::CountSupers => "count superblocks",
            Part::LevelRows => "level rows",
            Part::LeafRows => "leaf rows",
        }
    }
}

/// What the query code tells a probe.
pub(crate) trait Probe {
    /// `bytes` bytes of `part` were read, starting at `at`.
    fn read(&mut self, part: Part, at: *const u8, bytes: usize);
    /// A node of level `level` had its cascade (bits or digits) read.
    fn node(&mut self, level: usize);
    /// A canonical node: the box's points under it are one run of level `level`.
    fn canonical(&mut self, level: usize);
}

/// Records nothing.
impl Probe for () {
    #[inline(always)]
    fn read(&mut self, _: Part, _: *const u8, _: usize) {}
    #[inline(always)]
    fn node(&mut self, _: usize) {}
    #[inline(always)]
    fn canonical(&mut self, _: usize) {}
}

/// A read of `bytes` bytes of one part, at address `at`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Read {
    pub part: Part,
    pub at: usize,
    pub bytes: usize,
}

impl Read {
    /// The 64-byte lines of memory the read touches (first, last), by address.
    pub fn lines(&self) -> (usize, usize) {
        (self.at / 64, (self.at + self.bytes.max(1) - 1) / 64)
    }
}

/// Everything one query read, in order, and the nodes it visited.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Tally {
    pub reads: Vec<Read>,
    /// Nodes visited on each level (index = level).
    pub nodes: Vec<usize>,
    /// Canonical nodes on each level.
    pub canonical: Vec<usize>,
}

fn bump(per_level: &mut Vec<usize>, level: usize) {
    if per_level.len() <= level {
        per_level.resize(level + 1, 0);
    }
    per_level[level] += 1;
}

impl Probe for Tally {
    fn read(&mut self, part: Part, at: *const u8, bytes: usize) {
        self.reads.push(Read {
            part,
            at: at as usize,
            bytes,
        });
    }
    fn node(&mut self, level: usize) {
        bump(&mut self.nodes, level);
    }
    fn canonical(&mut self, level: usize) {
        bump(&mut self.canonical, level);
    }
}

/// A read of `slice`, for a probe.
#[inline(always)]
pub(crate) fn read_of<T>(probe: &mut impl Probe, part: Part, slice: &[T]) {
    probe.read(
        part,
        slice.as_ptr() as *const u8,
        std::mem::size_of_val(slice),
    );
}

/// A read of one value, for a probe.
#[inline(always)]
pub(crate) fn read_one<T>(probe: &mut impl Probe, part: Part, value: &T) {
    probe.read(
        part,
        value as *const T as *const u8,
        std::mem::size_of::<T>(),
    );
}

impl RangeTree {
    /// The count of one box, as [`RangeTree::count`] finds it, with everything it read.
    pub fn probe_count(
        &self,
        b: &BoxBounds,
        inclusive: Inclusive,
    ) -> Result<(usize, Tally), Error> {
        let mut tally = Tally::default();
        self.check_bounds(b)?;
        let r = self.rank_box_probed(b, inclusive, &mut tally);
        let count = self.count_ranks_probed(r, &mut tally);
        Ok((count, tally))
    }

    /// The rows of one box, as [`RangeTree::report`] finds them, with what the root searches
    /// and the walk to the canonical nodes read, and apart from that what collecting the
    /// rows under those nodes read (in the compact layout, a walk down to the leaves).
    pub fn probe_report(
        &self,
        b: &BoxBounds,
        inclusive: Inclusive,
    ) -> Result<(Vec<u32>, Tally, Tally), Error> {
        let (mut walk, mut collect) = (Tally::default(), Tally::default());
        self.ensure(Group::Rows)?;
        self.check_bounds(b)?;
        let r = self.rank_box_probed(b, inclusive, &mut walk);
        let mut runs = Vec::new();
        self.for_each_run_probed(r, |run| runs.push(run), &mut walk);
        let mut rows = Vec::new();
        for run in runs {
            self.push_run_rows_probed(run, &mut |s| rows.extend_from_slice(s), &mut collect);
        }
        Ok((rows, walk, collect))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{build, Bound, Column, Layout};

    fn tree(n: usize, layout: Layout) -> RangeTree {
        let x: Vec<i64> = (0..n as i64).map(|i| (i * 7_919) % 1_009).collect();
        let y: Vec<i64> = (0..n as i64).map(|i| (i * 104_729) % 997).collect();
        build(Column::I64(&x), Column::I64(&y), None, layout).unwrap()
    }

    fn boxed(a: i64, b: i64, c: i64, d: i64) -> BoxBounds {
        BoxBounds {
            x_lo: Bound::I64(a),
            x_hi: Bound::I64(b),
            y_lo: Bound::I64(c),
            y_hi: Bound::I64(d),
        }
    }

    #[test]
    fn a_probed_query_answers_as_the_query_does() {
        for layout in [Layout::Fast, Layout::Compact] {
            let t = tree(5_000, layout);
            for (a, b, c, d) in [(0, 1_008, 0, 996), (100, 900, 50, 60), (7, 7, 0, 996)] {
                let bx = boxed(a, b, c, d);
                let (count, tally) = t.probe_count(&bx, Inclusive::Both).unwrap();
                assert_eq!(count, t.count(&bx, Inclusive::Both).unwrap());
                assert!(!tally.reads.is_empty());
                let (mut rows, _, _) = t.probe_report(&bx, Inclusive::Both).unwrap();
                let mut expected = Vec::new();
                t.report(&bx, Inclusive::Both, &mut expected).unwrap();
                rows.sort_unstable();
                expected.sort_unstable();
                assert_eq!(rows, expected);
            }
        }
    }

    #[test]
    fn reads_name_the_lines_they_touch() {
        let r = Read {
            part: Part::Keys,
            at: 64 * 10 + 8,
            bytes: 64,
        };
        assert_eq!(r.lines(), (10, 11));
        let r = Read { at: 64 * 10, ..r };
        assert_eq!(r.lines(), (10, 10));
    }
}
