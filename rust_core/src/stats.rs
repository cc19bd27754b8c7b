//! The read side of spread statistics: the k-th smallest value of either axis among a box's
//! points, and the rows of a box's k extreme points.
//!
//! **x.** The root holds the points in y-rank order and every level splits x-rank space by
//! one more x-rank bit, so the tree's levels are a wavelet tree over the x-ranks in y order.
//! The k-th smallest x of the box `[xl, xr) × [ya, yb)` is the `(c + k)`-th smallest x-rank
//! of root positions `ya..yb`, where `c` is the count of points there with x-rank below
//! `xl`: one descent from the root, choosing at each node the child whose points pass the
//! rank. The descent goes down the 16-way count cascade (`wide.rs`), four levels a step,
//! reading the same two lines a step that a count's descent reads. With the two descents
//! that give the box's count and `c`, a k-th x costs about 1.5 counts.
//!
//! **y.** Two ways were measured, side by side in one run on the project's 2-core machine
//! (shared with other work; `measure_y_statistics`, release build, n = 2·10^6 points,
//! 2·10^4 boxes of one hundredth of each side, one thread; boxes per second):
//!
//! | query | boxes/s | vs count |
//! |---|---|---|
//! | count | 2.07 M | 1 |
//! | k-th x | 1.42 M | 0.68 |
//! | k-th y, transposed cascade | 1.07 M | 0.52 |
//! | k-th y, search over y ranks with counts (its root searches not timed) | 0.34 M | 0.16 |
//!
//! A search over y ranks needs no new structure but costs a count per halving of the
//! box's y-rank interval, O(log^2 n); the transposed cascade (the same levels with the
//! axes swapped: root in x-rank order, levels split by y-rank bits, `transpose.rs`) makes a
//! k-th y the mirror image of a k-th x, O(log n), for 0.25 bytes a point a level more: 3.2
//! times the search's rate here (3.0 to 3.2 in three later runs of the same test, under heavy
//! load from other work, which cut every rate to a third), and the gap grows with log n. The transposed cascade is
//! taken. It is derived from the cascade bits on the first y statistic a tree is asked
//! (about 0.2 s at that size, one thread), so trees that never ask one pay nothing in
//! memory or build time; index files do not store it, and a loaded tree derives the same
//! cascade a built one does.
//!
//! **Extreme rows.** The k smallest (or largest) of an axis in a box are the box's points
//! strictly below (above) the k-th value, one report of a narrower box, and as many of the
//! points tied with the k-th value as are still needed, taken by row: O(log n + k + t) for
//! t points of the box tied with the k-th value (t = 1 when values are distinct).

use rayon::prelude::*;

use crate::batch::{Boxes, Report, GROUP_BOXES, TASK_BOXES};
use crate::error::{Axis, Error};
use crate::keys::{value_of_key, Domain, Inclusive};
use crate::query::RankBox;
use crate::tree::{Group, RangeTree};
use crate::wide::WideCascade;

/// Values of one axis, in its own number type.
#[derive(Clone, Debug, PartialEq)]
pub enum StatValues {
    F64(Vec<f64>),
    I64(Vec<i64>),
}

/// Order statistics of a batch: `values[i]` holds where `found[i]` does; elsewhere (the
/// box holds fewer points than the rank asks) it is zero.
#[derive(Clone, Debug, PartialEq)]
pub struct OrderStats {
    pub values: StatValues,
    pub found: Vec<bool>,
}

/// A batch counted for statistics of one axis ([`RangeTree::count_for_stats`]): each box in
/// rank space with its count and the points of its root interval below it, in the order the
/// boxes are answered.
#[derive(Clone, Debug)]
pub struct CountedBoxes {
    axis: Axis,
    n: usize,
    order: Vec<u32>,
    ranks: Vec<RankBox>,
    count: Vec<usize>,
    before: Vec<usize>,
}

impl CountedBoxes {
    /// Every box's number of points, in the boxes' own order.
    pub fn counts(&self) -> Vec<i64> {
        let mut out = vec![0i64; self.order.len()];
        for (&i, &c) in self.order.iter().zip(&self.count) {
            out[i as usize] = c as i64;
        }
        out
    }
}

/// One axis's view of the tree: the cascade whose levels split that axis's ranks, and which
/// interval of a rank box is the cascade's root interval and which the one it splits.
#[derive(Clone, Copy)]
struct Lens<'a> {
    cascade: &'a WideCascade,
    axis: Axis,
    keys: &'a [u64],
    domain: Domain,
}

impl Lens<'_> {
    #[inline(always)]
    fn root(&self, r: &RankBox) -> (usize, usize) {
        match self.axis {
            Axis::X => r.y,
            Axis::Y => r.x,
        }
    }

    #[inline(always)]
    fn split(&self, r: &RankBox) -> (usize, usize) {
        match self.axis {
            Axis::X => r.x,
            Axis::Y => r.y,
        }
    }

    /// `r` with its interval on this axis replaced.
    fn with_split(&self, r: RankBox, split: (usize, usize)) -> RankBox {
        match self.axis {
            Axis::X => RankBox { x: split, ..r },
            Axis::Y => RankBox { y: split, ..r },
        }
    }

    /// For up to [`GROUP_BOXES`] boxes: the points of each, and those of its root interval
    /// below its split interval, both descents of every box taken together.
    fn counts(&self, ranks: &[RankBox]) -> ([usize; GROUP_BOXES], [usize; GROUP_BOXES]) {
        const D: usize = 2 * GROUP_BOXES;
        let (mut target, mut a, mut b) = ([0usize; D], [0usize; D], [0usize; D]);
        for (i, r) in ranks.iter().enumerate() {
            if r.is_empty() {
                continue;
            }
            let ((ra, rb), (sa, sb)) = (self.root(r), self.split(r));
            (target[2 * i], target[2 * i + 1]) = (sb, sa);
            (a[2 * i], a[2 * i + 1]) = (ra, ra);
            (b[2 * i], b[2 * i + 1]) = (rb, rb);
        }
        let below = self.cascade.below_many(&target, a, b);
        let (mut count, mut before) = ([0usize; GROUP_BOXES], [0usize; GROUP_BOXES]);
        for i in 0..ranks.len() {
            // Saturating, as a count is: a damaged file's digits give a wrong answer, not a
            // crash.
            count[i] = below[2 * i].saturating_sub(below[2 * i + 1]);
            before[i] = below[2 * i + 1];
        }
        (count, before)
    }

    /// For up to [`GROUP_BOXES`] boxes with their `counts`: the rank on this axis of the
    /// point `nth[i]`-th smallest (0 for the smallest) in box `i`, where `nth[i]` is below
    /// its count; `None` elsewhere.
    fn kth(
        &self,
        ranks: &[RankBox],
        (count, before): &([usize; GROUP_BOXES], [usize; GROUP_BOXES]),
        nth: impl Fn(usize) -> Option<usize>,
    ) -> [Option<usize>; GROUP_BOXES] {
        let (mut a, mut b, mut k) = ([0; GROUP_BOXES], [0; GROUP_BOXES], [0; GROUP_BOXES]);
        let mut found = [false; GROUP_BOXES];
        for (i, r) in ranks.iter().enumerate() {
            if let Some(j) = nth(i).filter(|&j| j < count[i]) {
                (a[i], b[i]) = self.root(r);
                k[i] = before[i] + j;
                found[i] = true;
            }
        }
        let at = self.cascade.kth_many(a, b, k);
        let last = self.keys.len().saturating_sub(1);
        // `min`: in bounds even for a damaged file's cascade.
        std::array::from_fn(|i| found[i].then(|| at[i].min(last)))
    }
}

impl RangeTree {
    /// The view of `axis`: for y, the transposed cascade, derived on first use.
    fn lens(&self, axis: Axis) -> Result<Lens<'_>, Error> {
        let (cascade, sorted) = match axis {
            Axis::X => (&self.wide, &self.x),
            Axis::Y => (self.transposed()?, &self.y),
        };
        Ok(Lens {
            cascade,
            axis,
            keys: &sorted.keys,
            domain: sorted.domain,
        })
    }

    /// Order statistics of every box on `axis`: for box `i` and `j < per_box`, the value of
    /// rank `ranks[i * per_box + j]` among the box's points, 0 for the smallest and -1 for
    /// the largest (negative ranks count from the top). Ties are values like any other: the
    /// ranks are those of the box's values sorted. In a keyed tree box `i` is of the points
    /// of key code `keys[i]`.
    #[allow(clippy::too_many_arguments)]
    pub fn kth_batch_by(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        inclusive: Inclusive,
        axis: Axis,
        ranks: &[i64],
        per_box: usize,
    ) -> Result<OrderStats, Error> {
        let counted = self.count_for_stats(boxes, keys, inclusive, axis)?;
        self.kth_of_counted(&counted, ranks, per_box)
    }

    /// Count a batch for statistics of `axis`, keeping what the statistics' descents start
    /// from, so that the ranks asked next may depend on the counts (a quantile's do) without
    /// searching and counting again.
    pub fn count_for_stats(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        inclusive: Inclusive,
        axis: Axis,
    ) -> Result<CountedBoxes, Error> {
        let q = boxes.validate()?;
        self.check_keys(q, keys)?;
        let lens = self.lens(axis)?;
        // Answered in the order counts are (near boxes together, for the cache); answers go
        // back to the boxes' own order at the end.
        let order = self.z_order_of(boxes, keys, q);
        let mut ranks = vec![RankBox::default(); q];
        let mut count = vec![0usize; q];
        let mut before = vec![0usize; q];
        ranks
            .par_chunks_mut(TASK_BOXES)
            .zip(count.par_chunks_mut(TASK_BOXES))
            .zip(before.par_chunks_mut(TASK_BOXES))
            .zip(order.par_chunks(TASK_BOXES))
            .for_each(|(((ranks, count), before), order)| {
                for (g, group_order) in order.chunks(GROUP_BOXES).enumerate() {
                    let (first, len) = (g * GROUP_BOXES, group_order.len());
                    let indices = group_order.iter().map(|&(_, i)| i);
                    let group = self.rank_boxes_at(boxes, keys, indices, inclusive);
                    let (c, b) = lens.counts(&group[..len]);
                    ranks[first..first + len].copy_from_slice(&group[..len]);
                    count[first..first + len].copy_from_slice(&c[..len]);
                    before[first..first + len].copy_from_slice(&b[..len]);
                }
            });
        Ok(CountedBoxes {
            axis,
            n: self.n,
            order: order.into_iter().map(|(_, i)| i).collect(),
            ranks,
            count,
            before,
        })
    }

    /// [`Self::kth_batch_by`] of boxes counted by [`Self::count_for_stats`] (of this tree).
    pub fn kth_of_counted(
        &self,
        counted: &CountedBoxes,
        ranks: &[i64],
        per_box: usize,
    ) -> Result<OrderStats, Error> {
        let c = counted;
        let q = c.order.len();
        assert_eq!(c.n, self.n, "boxes counted on this tree");
        assert_eq!(ranks.len(), q * per_box, "per_box ranks for every box");
        let lens = self.lens(c.axis)?;
        let mut sorted_at = vec![0usize; q * per_box];
        let mut sorted_found = vec![false; q * per_box];
        if per_box > 0 {
            sorted_at
                .par_chunks_mut(TASK_BOXES * per_box)
                .zip(sorted_found.par_chunks_mut(TASK_BOXES * per_box))
                .enumerate()
                .for_each(|(task, (at, found))| {
                    let task_first = task * TASK_BOXES;
                    let task_len = at.len() / per_box;
                    for g in (0..task_len).step_by(GROUP_BOXES) {
                        let (first, len) = (task_first + g, GROUP_BOXES.min(task_len - g));
                        let group = &c.ranks[first..first + len];
                        let mut counts = ([0usize; GROUP_BOXES], [0usize; GROUP_BOXES]);
                        counts.0[..len].copy_from_slice(&c.count[first..first + len]);
                        counts.1[..len].copy_from_slice(&c.before[first..first + len]);
                        for j in 0..per_box {
                            let nth = |i: usize| {
                                let r = ranks[c.order[first + i] as usize * per_box + j];
                                if r >= 0 {
                                    Some(r as usize)
                                } else {
                                    counts.0[i].checked_sub(r.unsigned_abs() as usize)
                                }
                            };
                            for (i, got) in lens.kth(group, &counts, nth)[..len].iter().enumerate()
                            {
                                let slot = (g + i) * per_box + j;
                                (at[slot], found[slot]) = (got.unwrap_or(0), got.is_some());
                            }
                        }
                    }
                });
        }
        let mut at = vec![0usize; q * per_box];
        let mut found = vec![false; q * per_box];
        for (sorted, &i) in c.order.iter().enumerate() {
            let (from, to) = (sorted * per_box, i as usize * per_box);
            at[to..to + per_box].copy_from_slice(&sorted_at[from..from + per_box]);
            found[to..to + per_box].copy_from_slice(&sorted_found[from..from + per_box]);
        }
        let key = |(&rank, &ok): (&usize, &bool)| if ok { lens.keys[rank] } else { 0 };
        let values = match lens.domain {
            Domain::F64 => StatValues::F64(
                at.par_iter()
                    .zip(&found)
                    .map(|p| match value_of_key(Domain::F64, key(p)) {
                        crate::keys::Bound::F64(v) if *p.1 => v,
                        _ => 0.0,
                    })
                    .collect(),
            ),
            Domain::I64 => StatValues::I64(
                at.par_iter()
                    .zip(&found)
                    .map(|p| match value_of_key(Domain::I64, key(p)) {
                        crate::keys::Bound::I64(v) if *p.1 => v,
                        _ => 0,
                    })
                    .collect(),
            ),
        };
        Ok(OrderStats { values, found })
    }

    /// The rows of the `k[i]` points of box `i` with the smallest (or, with `largest`, the
    /// largest) values of `axis`, ascending, as CSR: all of a box's rows when it holds no more
    /// than `k[i]`. Of points tied on the value where the cut falls, those of the lowest rows
    /// are taken, so the answer is the first `k[i]` points when the box's points are sorted
    /// by value (descending for `largest`) and then by row.
    pub fn extreme_rows_batch_by(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        inclusive: Inclusive,
        axis: Axis,
        k: &[u64],
        largest: bool,
    ) -> Result<Report, Error> {
        let q = boxes.validate()?;
        self.check_keys(q, keys)?;
        assert_eq!(k.len(), q, "one k a box");
        self.ensure(Group::Rows)?;
        let lens = self.lens(axis)?;
        let ranks = self.rank_all(boxes, keys, q, inclusive);
        let per_box: Vec<Vec<u32>> = ranks
            .par_iter()
            .zip(k)
            .with_min_len(8)
            .map(|(&r, &k)| {
                self.extreme_rows_of(&lens, r, k.min(usize::MAX as u64) as usize, largest)
            })
            .collect();
        let mut offsets = Vec::with_capacity(q + 1);
        offsets.push(0i64);
        let mut total = 0usize;
        for rows in &per_box {
            total += rows.len();
            offsets.push(total as i64);
        }
        let mut rows = crate::alloc::filled(total, 0i64);
        let mut rest = rows.as_mut_slice();
        let mut slices = Vec::with_capacity(q);
        for box_rows in &per_box {
            let (head, tail) = rest.split_at_mut(box_rows.len());
            slices.push(head);
            rest = tail;
        }
        slices
            .into_par_iter()
            .zip(per_box.par_iter())
            .with_min_len(64)
            .for_each(|(out, rows)| {
                for (slot, &row) in out.iter_mut().zip(rows) {
                    *slot = row as i64;
                }
            });
        Ok(Report { offsets, rows })
    }

    /// One box's [`Self::extreme_rows_batch_by`].
    fn extreme_rows_of(&self, lens: &Lens<'_>, r: RankBox, k: usize, largest: bool) -> Vec<u32> {
        let one = [r];
        let counts = lens.counts(&one);
        let count = counts.0[0];
        let k = k.min(count);
        if k == 0 {
            return Vec::new();
        }
        if k == count {
            let mut rows = self.rows_in(r);
            rows.sort_unstable();
            return rows;
        }
        let nth = if largest { count - k } else { k - 1 };
        let Some(at) = lens.kth(&one, &counts, |_| Some(nth))[0] else {
            return Vec::new();
        };
        let (lo, hi) = lens.split(&r);
        let value = lens.keys[at];
        let run = &lens.keys[lo..hi.max(lo)];
        let tie_lo = lo + run.partition_point(|&v| v < value);
        let tie_hi = lo + run.partition_point(|&v| v <= value);
        let beyond = if largest { (tie_hi, hi) } else { (lo, tie_lo) };
        let mut rows = self.rows_in(lens.with_split(r, beyond));
        let mut tied = self.rows_in(lens.with_split(r, (tie_lo, tie_hi)));
        let need = k.saturating_sub(rows.len());
        if need < tied.len() {
            tied.select_nth_unstable(need);
            tied.truncate(need);
        }
        rows.extend_from_slice(&tied);
        rows.sort_unstable();
        rows
    }

    /// The rows of a rank box, in the order its walk finds them.
    fn rows_in(&self, r: RankBox) -> Vec<u32> {
        let mut rows = Vec::new();
        self.for_each_run(r, |run| {
            self.push_run_rows(run, &mut |part| rows.extend_from_slice(part))
        });
        rows
    }
}

#[cfg(test)]
mod tests;
