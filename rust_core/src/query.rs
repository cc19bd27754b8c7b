//! Answering one box: bounds to ranks, ranks to canonical runs, runs to answers.
//!
//! A box's x-rank interval `[xl, xr)` is split into O(log n) canonical nodes by the two
//! root-to-leaf paths towards `xl` and `xr`. Its y-rank interval is carried down those paths
//! by the cascade bits, two rank lookups a level, so that at every canonical node the matching
//! points are one contiguous run of that level's array: counting adds run lengths, summing
//! subtracts two prefix sums, and reporting copies the run.

use crate::error::Error;
use crate::keyed::rank_in_run;
use crate::keys::{Bound, Inclusive};
use crate::probe::{read_of, read_one, Part, Probe};
use crate::search::ranks_together_probed;
use crate::tree::{Group, LevelWeights, RangeTree};

/// A box in rank space: half-open x-rank and y-rank intervals.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct RankBox {
    pub x: (usize, usize),
    pub y: (usize, usize),
}

impl RankBox {
    pub fn is_empty(&self) -> bool {
        self.x.0 >= self.x.1 || self.y.0 >= self.y.1
    }
}

/// The four bounds of one box, in the caller's units.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BoxBounds {
    pub x_lo: Bound,
    pub x_hi: Bound,
    pub y_lo: Bound,
    pub y_hi: Bound,
}

/// The matches under one canonical node: positions `start..end` of level `level`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Run {
    pub level: usize,
    pub start: usize,
    pub end: usize,
}

/// A box's weight sum, in the weights' own type.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum WeightSum {
    F64(f64),
    I64(i64),
}

impl RangeTree {
    /// The box in rank space; NaN bounds are refused.
    #[inline]
    pub fn rank_box(&self, b: &BoxBounds, inclusive: Inclusive) -> Result<RankBox, Error> {
        self.check_bounds(b)?;
        Ok(self.rank_box_unchecked(b, inclusive))
    }

    /// Refuse NaN bounds, and a box without a key on a keyed tree (every caller of this
    /// check searches the global x index, which a keyed tree does not have).
    #[inline]
    pub(crate) fn check_bounds(&self, b: &BoxBounds) -> Result<(), Error> {
        if self.key_runs.is_some() {
            return Err(Error::KeysRequired);
        }
        self.check_nan(b)
    }

    /// Refuse NaN bounds.
    #[inline]
    fn check_nan(&self, b: &BoxBounds) -> Result<(), Error> {
        for (what, bound) in [
            ("x_lo", b.x_lo),
            ("x_hi", b.x_hi),
            ("y_lo", b.y_lo),
            ("y_hi", b.y_hi),
        ] {
            if bound.is_nan() {
                return Err(Error::NotANumber {
                    what: what.to_string(),
                    position: 0,
                });
            }
        }
        Ok(())
    }

    /// The box in rank space, for bounds already known not to be NaN. Its four root
    /// searches take each level together, so a single box has their cache misses in flight
    /// at once rather than one search after another.
    #[inline]
    pub(crate) fn rank_box_unchecked(&self, b: &BoxBounds, inclusive: Inclusive) -> RankBox {
        self.rank_box_probed(b, inclusive, &mut ())
    }

    /// [`Self::rank_box_unchecked`], telling `probe` every line the searches read.
    #[inline]
    pub(crate) fn rank_box_probed(
        &self,
        b: &BoxBounds,
        inclusive: Inclusive,
        probe: &mut impl Probe,
    ) -> RankBox {
        let (xa, xb) = self.x.interval_cuts(b.x_lo, b.x_hi, inclusive);
        let (ya, yb) = self.y.interval_cuts(b.y_lo, b.y_hi, inclusive);
        let searches = [
            self.x.search_of(xa),
            self.x.search_of(xb),
            self.y.search_of(ya),
            self.y.search_of(yb),
        ];
        let r = ranks_together_probed(&searches, probe);
        let (x0, y0) = (self.x.fix_all(xa, r[0]), self.y.fix_all(ya, r[2]));
        RankBox {
            x: (x0, self.x.fix_all(xb, r[1]).max(x0)),
            y: (y0, self.y.fix_all(yb, r[3]).max(y0)),
        }
    }

    /// The box in rank space, of key code `key` in a keyed tree (a code the tree does not
    /// hold gives an empty box); NaN bounds are refused, and so is a key for an unkeyed tree
    /// or none for a keyed one.
    #[inline]
    pub fn rank_box_by(
        &self,
        b: &BoxBounds,
        key: Option<i64>,
        inclusive: Inclusive,
    ) -> Result<RankBox, Error> {
        self.check_nan(b)?;
        match (&self.key_runs, key) {
            (None, None) => Ok(self.rank_box_unchecked(b, inclusive)),
            (Some(runs), Some(code)) => Ok(self.keyed_rank_box(b, runs.run(code), inclusive)),
            (Some(_), None) => Err(Error::KeysRequired),
            (None, Some(_)) => Err(Error::NotKeyed),
        }
    }

    /// A keyed box in rank space: its x bounds searched inside the key's run of x-ranks.
    #[inline]
    fn keyed_rank_box(&self, b: &BoxBounds, run: (usize, usize), inclusive: Inclusive) -> RankBox {
        let (xa, xb) = self.x.interval_cuts(b.x_lo, b.x_hi, inclusive);
        let (ya, yb) = self.y.interval_cuts(b.y_lo, b.y_hi, inclusive);
        let mut yr = [0usize; 2];
        self.y.ranks_of_cuts(&[ya, yb], &mut yr);
        let x0 = rank_in_run(&self.x.keys, run, xa);
        RankBox {
            x: (x0, rank_in_run(&self.x.keys, run, xb).max(x0)),
            y: (yr[0], yr[1].max(yr[0])),
        }
    }

    /// Number of points in the box.
    pub fn count(&self, b: &BoxBounds, inclusive: Inclusive) -> Result<usize, Error> {
        self.count_by(b, None, inclusive)
    }

    /// Number of points of key code `key` (keyed trees; `None` otherwise) in the box.
    pub fn count_by(
        &self,
        b: &BoxBounds,
        key: Option<i64>,
        inclusive: Inclusive,
    ) -> Result<usize, Error> {
        Ok(self.count_ranks(self.rank_box_by(b, key, inclusive)?))
    }

    /// Row ids of the points in the box, appended to `out`.
    pub fn report(
        &self,
        b: &BoxBounds,
        inclusive: Inclusive,
        out: &mut Vec<u32>,
    ) -> Result<(), Error> {
        self.report_by(b, None, inclusive, out)
    }

    /// Row ids of the points of key code `key` in the box, appended to `out`.
    pub fn report_by(
        &self,
        b: &BoxBounds,
        key: Option<i64>,
        inclusive: Inclusive,
        out: &mut Vec<u32>,
    ) -> Result<(), Error> {
        self.ensure(Group::Rows)?;
        let r = self.rank_box_by(b, key, inclusive)?;
        self.for_each_run(r, |run| {
            self.push_run_rows(run, &mut |rows| out.extend_from_slice(rows))
        });
        Ok(())
    }

    /// Sum of the weights of the points in the box.
    pub fn sum(&self, b: &BoxBounds, inclusive: Inclusive) -> Result<WeightSum, Error> {
        self.sum_by(b, None, inclusive)
    }

    /// Sum of the weights of the points of key code `key` in the box.
    pub fn sum_by(
        &self,
        b: &BoxBounds,
        key: Option<i64>,
        inclusive: Inclusive,
    ) -> Result<WeightSum, Error> {
        if self.weights.is_none() {
            return Err(Error::NoWeights);
        }
        self.ensure(Group::Weights)?;
        let r = self.rank_box_by(b, key, inclusive)?;
        self.sum_ranks(r).ok_or(Error::SumOverflow { box_index: 0 })
    }

    /// Number of points in a rank-space box: the points below its right x bound minus those
    /// below its left one, in its y-interval, both descents taken together down the 16-way
    /// count cascade.
    #[inline]
    pub fn count_ranks(&self, r: RankBox) -> usize {
        self.count_ranks_probed(r, &mut ())
    }

    /// [`Self::count_ranks`], telling `probe` what the descents visit and read.
    #[inline]
    pub(crate) fn count_ranks_probed(&self, r: RankBox, probe: &mut impl Probe) -> usize {
        debug_assert!(
            r.x.1 <= self.n && r.y.1 <= self.n,
            "a rank box within 0..=n"
        );
        if r.is_empty() {
            return 0;
        }
        let [right, left] =
            self.wide
                .below_many_probed(&[r.x.1, r.x.0], [r.y.0; 2], [r.y.1; 2], probe);
        // Never below zero for a built or fully verified cascade; saturating, so that a file's
        // cascade whose digits are not the bits' (checked only by a full verification) gives
        // a wrong count rather than an overflow.
        right.saturating_sub(left)
    }

    /// Weight sum over a rank-space box; `None` if the tree has no weights or an integer
    /// sum overflows i64.
    pub(crate) fn sum_ranks(&self, r: RankBox) -> Option<WeightSum> {
        let h = self.height;
        match self.weights.as_ref()? {
            LevelWeights::F64(levels) => {
                let mut sum = 0.0;
                self.for_each_run(r, |run| sum += run_sum(&levels[run.level - 1], h, run));
                Some(WeightSum::F64(sum))
            }
            LevelWeights::I64(levels) => {
                let mut sum = 0i64;
                // The absolute weights add up to less than 2^63, so this cannot overflow.
                self.for_each_run(r, |run| sum += run_sum(&levels[run.level - 1], h, run));
                Some(WeightSum::I64(sum))
            }
            LevelWeights::I128(levels) => {
                let mut sum = 0i128;
                self.for_each_run(r, |run| sum += run_sum(&levels[run.level - 1], h, run));
                i64::try_from(sum).ok().map(WeightSum::I64)
            }
        }
    }

    /// Split a rank-space box into canonical runs, calling `visit` on each non-empty one.
    #[inline]
    pub(crate) fn for_each_run(&self, r: RankBox, visit: impl FnMut(Run)) {
        self.for_each_run_probed(r, visit, &mut ())
    }

    /// [`Self::for_each_run`], telling `probe` every node visited and line read.
    #[inline]
    pub(crate) fn for_each_run_probed(
        &self,
        r: RankBox,
        mut visit: impl FnMut(Run),
        probe: &mut impl Probe,
    ) {
        let mut walk = RunWalk::new(r);
        while walk.step(self, &mut visit, probe) {}
    }

    /// Ones of level `level` within `[s, s + a)` and `[s, s + b)`, where `s` starts a block:
    /// a visit of that node, two bit lines read.
    #[inline(always)]
    pub(crate) fn child_ranks(
        &self,
        level: usize,
        s: usize,
        a: usize,
        b: usize,
        probe: &mut impl Probe,
    ) -> (usize, usize) {
        let bits = &self.bits[level];
        probe.node(level);
        read_one(probe, Part::CascadeBits, bits.line_at(s + a));
        read_one(probe, Part::CascadeBits, bits.line_at(s + b));
        // Every block before `s` is full and sends exactly half its points right.
        let before = s / 2;
        (bits.rank1(s + a) - before, bits.rank1(s + b) - before)
    }

    /// One level of the path towards `xl` below the split: every right child it passes is
    /// inside the box, and so is the leaf `xl` itself. False once the path is done.
    #[inline(always)]
    fn left_step(
        &self,
        level: &mut usize,
        (s, a, b): &mut (usize, usize, usize),
        xl: usize,
        visit: &mut impl FnMut(Run),
        probe: &mut impl Probe,
    ) -> bool {
        let h = self.height;
        if *a >= *b {
            return false;
        }
        if *level == h {
            probe.canonical(h);
            visit(Run {
                level: h,
                start: *s + *a,
                end: *s + *b,
            });
            return false;
        }
        let half = 1usize << (h - 1 - *level);
        let (ra, rb) = self.child_ranks(*level, *s, *a, *b, probe);
        if xl & half == 0 {
            if ra < rb {
                probe.canonical(*level + 1);
                visit(Run {
                    level: *level + 1,
                    start: *s + half + ra,
                    end: *s + half + rb,
                });
            }
            *a -= ra;
            *b -= rb;
        } else {
            *s += half;
            *a = ra;
            *b = rb;
        }
        *level += 1;
        true
    }

    /// One level of the path towards `xr` below the split: every left child it passes is
    /// inside the box; the leaf `xr` itself is not. False once the path is done.
    #[inline(always)]
    fn right_step(
        &self,
        level: &mut usize,
        (s, a, b): &mut (usize, usize, usize),
        xr: usize,
        visit: &mut impl FnMut(Run),
        probe: &mut impl Probe,
    ) -> bool {
        let h = self.height;
        if *a >= *b || *level >= h {
            return false;
        }
        let half = 1usize << (h - 1 - *level);
        let (ra, rb) = self.child_ranks(*level, *s, *a, *b, probe);
        let (za, zb) = (*a - ra, *b - rb);
        if xr & half != 0 {
            if za < zb {
                probe.canonical(*level + 1);
                visit(Run {
                    level: *level + 1,
                    start: *s + za,
                    end: *s + zb,
                });
            }
            *s += half;
            *a = ra;
            *b = rb;
        } else {
            *a = za;
            *b = zb;
        }
        *level += 1;
        true
    }

    /// Hand the row ids of one run to `sink`, in one or more slices.
    #[inline]
    pub(crate) fn push_run_rows(&self, run: Run, sink: &mut impl FnMut(&[u32])) {
        self.push_run_rows_probed(run, sink, &mut ())
    }

    /// [`Self::push_run_rows`], telling `probe` every node visited and everything read.
    #[inline]
    pub(crate) fn push_run_rows_probed(
        &self,
        run: Run,
        sink: &mut impl FnMut(&[u32]),
        probe: &mut impl Probe,
    ) {
        match self.layout {
            crate::tree::Layout::Fast => {
                let rows = &self.rows_at(run.level)[run.start..run.end];
                let part = if run.level == self.height {
                    Part::LeafRows
                } else {
                    Part::LevelRows
                };
                read_of(probe, part, rows);
                sink(rows)
            }
            crate::tree::Layout::Compact => self.expand_run(run, sink, probe),
        }
    }

    /// Compact layout: follow a run down to the leaves, where positions are x-ranks and the
    /// row ids are stored once. A run that covers a whole block is a contiguous x-rank range,
    /// so it is copied at once. From a level where a step of the count cascade starts, a run
    /// goes four levels down at once, split into its up to 16 child runs by one line at each
    /// end; elsewhere (at most three levels above the next step) it splits in two by the
    /// cascade bits.
    fn expand_run(&self, run: Run, sink: &mut impl FnMut(&[u32]), probe: &mut impl Probe) {
        let h = self.height;
        let block = 1usize << (h - run.level);
        let s = run.start & !(block - 1);
        // Depth-first, so along the path being followed each split leaves its other children
        // pending: at most 1 for each of the (at most 3) two-way levels above the first step,
        // and at most 15 for each step, of which a height of at most 32 has at most 9.
        let mut stack = [(0usize, 0usize, 0usize, 0usize); 160];
        stack[0] = (run.level, s, run.start - s, run.end - s);
        let mut top = 1;
        while top > 0 {
            top -= 1;
            let (level, s, a, b) = stack[top];
            let size = (1usize << (h - level)).min(self.n - s);
            if level == h || (a == 0 && b == size) {
                let rows = &self.leaf_rows[s + a..s + b];
                read_of(probe, Part::LeafRows, rows);
                sink(rows);
                continue;
            }
            let wide = self.wide.split_run(
                level,
                s,
                a,
                b,
                |child| {
                    stack[top] = child;
                    top += 1;
                },
                probe,
            );
            if wide.is_some() {
                continue;
            }
            let half = 1usize << (h - 1 - level);
            let (ra, rb) = self.child_ranks(level, s, a, b, probe);
            if ra < rb {
                stack[top] = (level + 1, s + half, ra, rb);
                top += 1;
            }
            if a - ra < b - rb {
                stack[top] = (level + 1, s, a - ra, b - rb);
                top += 1;
            }
        }
    }
}

/// One box's walk over its canonical runs, a level at a time, so that a batch can take many
/// boxes' walks in turn and keep their cache misses in flight together.
///
/// While both x bounds take the same child there is one path; once they part, the path
/// towards `xl` (whose right children lie inside the box) and the path towards `xr` (whose
/// left children do) go down a level each in turn.
#[derive(Clone, Copy, Debug)]
pub(crate) struct RunWalk {
    xl: usize,
    xr: usize,
    state: WalkState,
}

/// A path's level, and its block start and y-interval `(s, a, b)` on that level.
type PathAt = (usize, (usize, usize, usize));

#[derive(Clone, Copy, Debug)]
enum WalkState {
    Shared(PathAt),
    Split {
        left: Option<PathAt>,
        right: Option<PathAt>,
    },
    Done,
}

impl RunWalk {
    pub(crate) fn new(r: RankBox) -> Self {
        let state = if r.is_empty() {
            WalkState::Done
        } else {
            WalkState::Shared((0, (0, r.y.0, r.y.1)))
        };
        RunWalk {
            xl: r.x.0,
            xr: r.x.1,
            state,
        }
    }

    /// Go down one level (each path, once they have parted), calling `visit` on the runs
    /// found there and telling `probe` what was visited and read. False once the walk is
    /// over.
    #[inline]
    pub(crate) fn step(
        &mut self,
        tree: &RangeTree,
        visit: &mut impl FnMut(Run),
        probe: &mut impl Probe,
    ) -> bool {
        let h = tree.height;
        self.state = match self.state {
            WalkState::Done => return false,
            WalkState::Shared((level, (s, a, b))) => {
                // xl < xr < 2^h, so the bounds part above the leaves.
                debug_assert!(level < h, "x-rank bounds must part above the leaves");
                let half = 1usize << (h - 1 - level);
                let (ra, rb) = tree.child_ranks(level, s, a, b, probe);
                if self.xl & half != self.xr & half {
                    WalkState::Split {
                        left: Some((level + 1, (s, a - ra, b - rb))),
                        right: Some((level + 1, (s + half, ra, rb))),
                    }
                } else {
                    let (s, a, b) = if self.xl & half != 0 {
                        (s + half, ra, rb)
                    } else {
                        (s, a - ra, b - rb)
                    };
                    if a == b {
                        WalkState::Done
                    } else {
                        WalkState::Shared((level + 1, (s, a, b)))
                    }
                }
            }
            WalkState::Split { left, right } => {
                let left = left.and_then(|(mut level, mut path)| {
                    tree.left_step(&mut level, &mut path, self.xl, visit, probe)
                        .then_some((level, path))
                });
                let right = right.and_then(|(mut level, mut path)| {
                    tree.right_step(&mut level, &mut path, self.xr, visit, probe)
                        .then_some((level, path))
                });
                if left.is_none() && right.is_none() {
                    WalkState::Done
                } else {
                    WalkState::Split { left, right }
                }
            }
        };
        true
    }

    /// Start loading the cascade bit lines the next step reads.
    #[inline]
    pub(crate) fn prefetch(&self, tree: &RangeTree) {
        let paths = match self.state {
            WalkState::Done => [None, None],
            WalkState::Shared(path) => [Some(path), None],
            WalkState::Split { left, right } => [left, right],
        };
        for (level, (s, a, b)) in paths.into_iter().flatten() {
            if let Some(bits) = tree.bits.get(level) {
                bits.prefetch(s + a);
                bits.prefetch(s + b);
            }
        }
    }
}

/// Start loading the prefix sums [`run_sum`] will read for `run`.
#[inline(always)]
pub(crate) fn prefetch_run_sum<S>(prefix: &[S], height: usize, run: Run) {
    let block_start = run.start & !((1usize << (height - run.level)) - 1);
    if run.start > block_start {
        crate::prefetch::prefetch_read(&prefix[run.start - 1] as *const S as *const u8);
    }
    crate::prefetch::prefetch_read(&prefix[run.end - 1] as *const S as *const u8);
}

/// Sum of one run from a level's block-restarted inclusive prefix sums.
#[inline(always)]
pub(crate) fn run_sum<S>(prefix: &[S], height: usize, run: Run) -> S
where
    S: Copy + Default + std::ops::Sub<Output = S>,
{
    let block_start = run.start & !((1usize << (height - run.level)) - 1);
    let before = if run.start > block_start {
        prefix[run.start - 1]
    } else {
        S::default()
    };
    prefix[run.end - 1] - before
}
