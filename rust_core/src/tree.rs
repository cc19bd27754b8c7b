//! The read side: an immutable tree and what it knows about itself.

use crate::bits::RankBits;
use crate::keys::{Bound, Domain, SortedAxis};
use crate::slab::Slab;
use crate::wide::WideCascade;

/// How reported rows are found.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum Layout {
    /// Row ids stored on every level (4 bytes per point per level): a canonical node's rows
    /// are one contiguous copy.
    #[default]
    Fast,
    /// No row ids but the leaves' (the cascade bits and the count cascade, about 3.1 bits per
    /// point per level): a canonical node's rows are found by following its run down to the
    /// leaves.
    Compact,
}

impl Layout {
    pub fn name(self) -> &'static str {
        match self {
            Layout::Fast => "fast",
            Layout::Compact => "compact",
        }
    }
}

/// Per-level inclusive prefix sums of the weights, restarted at every block, for levels
/// `1..=height` (indexed by `level - 1`).
#[derive(Clone, Debug)]
pub enum LevelWeights {
    F64(Vec<Slab<f64>>),
    /// Integer weights whose absolute values add up to less than 2^63: no sum can overflow.
    I64(Vec<Slab<i64>>),
    /// Integer weights too large for that guarantee: sums are exact in i128 and checked.
    I128(Vec<Slab<i128>>),
}

impl LevelWeights {
    fn nbytes(&self) -> usize {
        match self {
            LevelWeights::F64(v) => v.iter().map(|l| l.len() * 8).sum(),
            LevelWeights::I64(v) => v.iter().map(|l| l.len() * 8).sum(),
            LevelWeights::I128(v) => v.iter().map(|l| l.len() * 16).sum(),
        }
    }
}

/// Operation counts of a build, exposed so tests can check the algorithm, not the clock.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct BuildStats {
    /// Full sorts of the point set (one per axis).
    pub presorts: usize,
    /// Linear passes that make the levels, one per level (each a stable partition of every
    /// block: the merge of its children, made from the parent's side).
    pub merge_passes: usize,
    /// Elements written by all those passes together.
    pub elements_merged: u64,
}

/// A static 2-D range tree over points with 32-bit row ids.
///
/// Built by [`crate::build`]; queried through the methods in [`crate::query`] and
/// [`crate::batch`].
#[derive(Clone, Debug)]
pub struct RangeTree {
    pub(crate) n: usize,
    pub(crate) height: usize,
    pub(crate) layout: Layout,
    pub(crate) x: SortedAxis,
    pub(crate) y: SortedAxis,
    /// Cascade bits of levels `0..height`: bit `i` of level `l` says element `i` of that
    /// level lies in the right child of its block.
    pub(crate) bits: Vec<RankBits>,
    /// Fast layout: row ids of levels `1..height`, indexed by `level - 1`.
    pub(crate) level_rows: Vec<Slab<u32>>,
    /// Row ids in x-rank order: the leaf level.
    pub(crate) leaf_rows: Slab<u32>,
    pub(crate) weights: Option<LevelWeights>,
    pub(crate) stats: BuildStats,
    /// The count path: a 16-way cascade derived from `bits`, never stored in a file.
    pub(crate) wide: WideCascade,
}

impl RangeTree {
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn from_parts(
        n: usize,
        height: usize,
        layout: Layout,
        x: SortedAxis,
        y: SortedAxis,
        bits: Vec<RankBits>,
        level_rows: Vec<Slab<u32>>,
        leaf_rows: Slab<u32>,
        weights: Option<LevelWeights>,
        stats: BuildStats,
    ) -> Self {
        let wide = WideCascade::derive(&bits, n);
        RangeTree {
            n,
            height,
            layout,
            x,
            y,
            bits,
            level_rows,
            leaf_rows,
            weights,
            stats,
            wide,
        }
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.n
    }

    pub fn is_empty(&self) -> bool {
        self.n == 0
    }

    /// Levels below the root (the root is level 0, the leaves level `height`).
    pub fn height(&self) -> usize {
        self.height
    }

    pub fn layout(&self) -> Layout {
        self.layout
    }

    pub fn x_domain(&self) -> Domain {
        self.x.domain
    }

    pub fn y_domain(&self) -> Domain {
        self.y.domain
    }

    /// The smallest and largest x, or `None` for an empty tree.
    pub fn x_extremes(&self) -> Option<(Bound, Bound)> {
        self.x.extremes()
    }

    /// The smallest and largest y, or `None` for an empty tree.
    pub fn y_extremes(&self) -> Option<(Bound, Bound)> {
        self.y.extremes()
    }

    pub fn weights(&self) -> Option<&LevelWeights> {
        self.weights.as_ref()
    }

    pub fn build_stats(&self) -> BuildStats {
        self.stats
    }

    /// Bytes held by the tree's arrays.
    pub fn nbytes(&self) -> usize {
        self.nbytes_by_part().iter().map(|&(_, bytes)| bytes).sum()
    }

    /// Bytes held by each part of the tree: first the parts that grow with the number of
    /// points alone (the two sorted axes with their search indexes, the leaf rows), then
    /// those that every level adds to (cascade bits, the count cascade, level rows in the
    /// fast layout, level prefix sums when there are weights).
    pub fn nbytes_by_part(&self) -> [(&'static str, usize); 6] {
        let bits = self.bits.iter().map(RankBits::nbytes).sum();
        let level_rows = self.level_rows.iter().map(|r| r.len() * 4).sum();
        [
            ("sorted axes", self.x.nbytes() + self.y.nbytes()),
            ("leaf rows", self.leaf_rows.len() * 4),
            ("cascade bits", bits),
            ("count cascade", self.wide.nbytes()),
            ("level rows", level_rows),
            (
                "level weights",
                self.weights.as_ref().map_or(0, LevelWeights::nbytes),
            ),
        ]
    }

    /// Row ids of level `level` (`1..=height`), in the fast layout.
    #[inline(always)]
    pub(crate) fn rows_at(&self, level: usize) -> &[u32] {
        if level == self.height {
            &self.leaf_rows
        } else {
            &self.level_rows[level - 1]
        }
    }
}
