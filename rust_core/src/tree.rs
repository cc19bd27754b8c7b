//! The read side: an immutable tree and what it knows about itself.

use std::path::PathBuf;
use std::sync::{Arc, OnceLock};

use crate::bits::RankBits;
use crate::error::Error;
use crate::file::FormatError;
use crate::keyed::KeyRuns;
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

/// The parts of a loaded tree that are checked before their first use rather than at load,
/// so that a count never reads (or faults in) the pages of the parts it does not need.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Group {
    /// The binary cascade bits: reports, sums and traces walk them.
    CascadeBits,
    /// The row ids (leaf rows, and level rows in the fast layout): reports.
    Rows,
    /// The level prefix sums: sums.
    Weights,
}

impl Group {
    pub const ALL: [Group; 3] = [Group::CascadeBits, Group::Rows, Group::Weights];

    pub fn name(self) -> &'static str {
        match self {
            Group::CascadeBits => "cascade bits",
            Group::Rows => "row ids",
            Group::Weights => "weights",
        }
    }

    /// The groups a group's own check relies on: rows and weights are checked against the
    /// cascade bits.
    fn needs(self) -> Option<Group> {
        match self {
            Group::CascadeBits => None,
            Group::Rows | Group::Weights => Some(Group::CascadeBits),
        }
    }
}

/// The check of one group, made by the loader: its sections' checksums, then its rules.
pub(crate) type GroupCheck = dyn Fn(Group, &RangeTree) -> Result<(), FormatError> + Send + Sync;

/// A loaded tree's checks still to run, each at most once, whichever thread asks first, and
/// the path of the file it was opened from (named by the errors its queries raise).
pub(crate) struct Deferred {
    check: Box<GroupCheck>,
    done: [OnceLock<Result<(), FormatError>>; 3],
    origin: Option<PathBuf>,
}

impl Deferred {
    pub(crate) fn new(check: Box<GroupCheck>, origin: Option<PathBuf>) -> Self {
        Deferred {
            check,
            done: Default::default(),
            origin,
        }
    }
}

impl std::fmt::Debug for Deferred {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Deferred")
            .field("done", &self.done)
            .field("origin", &self.origin)
            .finish()
    }
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
    /// The count path: a 16-way cascade derived from `bits` (and stored in index files).
    pub(crate) wide: WideCascade,
    /// Keyed trees: where each key code's points start in x-rank order.
    pub(crate) key_runs: Option<KeyRuns>,
    /// A loaded tree's groups not yet checked; `None` for a built tree.
    pub(crate) deferred: Option<Arc<Deferred>>,
    /// The y-statistics path: the count cascade of the transposed levels (`transpose.rs`),
    /// derived on the first y statistic.
    pub(crate) transposed: OnceLock<WideCascade>,
}

/// The arrays of a tree, as a build makes them or a file holds them.
pub(crate) struct Parts {
    pub n: usize,
    pub height: usize,
    pub layout: Layout,
    pub x: SortedAxis,
    pub y: SortedAxis,
    pub bits: Vec<RankBits>,
    pub level_rows: Vec<Slab<u32>>,
    pub leaf_rows: Slab<u32>,
    pub weights: Option<LevelWeights>,
    pub key_runs: Option<KeyRuns>,
    pub stats: BuildStats,
}

impl RangeTree {
    /// A built tree: its count cascade derived from its bits, nothing left to check.
    pub(crate) fn from_parts(p: Parts) -> Self {
        let wide = WideCascade::derive(&p.bits, p.n);
        Self::assemble(p, wide, None)
    }

    /// A tree read from a file: its count cascade as stored, the groups in `deferred`
    /// checked before their first use.
    pub(crate) fn from_file(p: Parts, wide: WideCascade, deferred: Deferred) -> Self {
        Self::assemble(p, wide, Some(Arc::new(deferred)))
    }

    fn assemble(p: Parts, wide: WideCascade, deferred: Option<Arc<Deferred>>) -> Self {
        RangeTree {
            n: p.n,
            height: p.height,
            layout: p.layout,
            x: p.x,
            y: p.y,
            bits: p.bits,
            level_rows: p.level_rows,
            leaf_rows: p.leaf_rows,
            weights: p.weights,
            key_runs: p.key_runs,
            stats: p.stats,
            wide,
            deferred,
            transposed: OnceLock::new(),
        }
    }

    /// The transposed count cascade, derived (from the checked cascade bits) on first use.
    pub(crate) fn transposed(&self) -> Result<&WideCascade, Error> {
        if let Some(t) = self.transposed.get() {
            return Ok(t);
        }
        self.ensure(Group::CascadeBits)?;
        Ok(self
            .transposed
            .get_or_init(|| crate::transpose::transposed_cascade(self)))
    }

    /// Check `group` (and what its check relies on) if a loaded tree has not yet, and say
    /// whether it holds. Every query that reads a group calls this first; after the first
    /// call it is one atomic load.
    pub fn ensure(&self, group: Group) -> Result<(), Error> {
        let Some(deferred) = &self.deferred else {
            return Ok(());
        };
        if let Some(first) = group.needs() {
            self.ensure(first)?;
        }
        deferred.done[group as usize]
            .get_or_init(|| (deferred.check)(group, self))
            .clone()
            .map_err(|e| self.file_error(e))
    }

    /// A query's error for a damaged part of the file the tree was loaded from: it names the
    /// file's path when the tree was opened from one.
    pub(crate) fn file_error(&self, error: FormatError) -> Error {
        let file = self.deferred.as_ref().and_then(|d| d.origin.clone());
        Error::IndexFile { error, file }
    }

    /// Check every group not yet checked: before a tree is written out again, or when a
    /// caller wants the whole file checked at once.
    pub fn ensure_all(&self) -> Result<(), Error> {
        Group::ALL.iter().try_for_each(|&g| self.ensure(g))
    }

    /// Whether `group` has been checked and holds (always, for a built tree). The count path
    /// (keys, root-search indexes, count cascade) is checked at load, so it is not a group.
    pub fn is_verified(&self, group: Group) -> bool {
        self.deferred
            .as_ref()
            .is_none_or(|d| matches!(d.done[group as usize].get(), Some(Ok(()))))
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
        match &self.key_runs {
            None => self.x.extremes(),
            // A keyed tree's x keys ascend within each key's run only, not as a whole.
            Some(runs) => self.x.extremes_of_runs(runs.starts()),
        }
    }

    /// The smallest and largest y, or `None` for an empty tree.
    pub fn y_extremes(&self) -> Option<(Bound, Bound)> {
        self.y.extremes()
    }

    /// A keyed tree's key runs (`None` for a tree built without keys).
    pub fn key_runs(&self) -> Option<&KeyRuns> {
        self.key_runs.as_ref()
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
    /// fast layout, level prefix sums when there are weights, and the transposed count
    /// cascade once a y statistic has derived it). A keyed tree's key offsets count with the
    /// sorted axes.
    pub fn nbytes_by_part(&self) -> [(&'static str, usize); 7] {
        let bits = self.bits.iter().map(RankBits::nbytes).sum();
        let level_rows = self.level_rows.iter().map(|r| r.len() * 4).sum();
        [
            (
                "sorted axes",
                self.x.nbytes()
                    + self.y.nbytes()
                    + self.key_runs.as_ref().map_or(0, KeyRuns::nbytes),
            ),
            ("leaf rows", self.leaf_rows.len() * 4),
            ("cascade bits", bits),
            ("count cascade", self.wide.nbytes()),
            ("level rows", level_rows),
            (
                "level weights",
                self.weights.as_ref().map_or(0, LevelWeights::nbytes),
            ),
            (
                "transposed cascade",
                self.transposed.get().map_or(0, WideCascade::nbytes),
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
