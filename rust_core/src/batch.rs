//! Batches of boxes, answered on all cores.
//!
//! Bounds come as four columns of equal length. Counts and sums are written straight into
//! the caller's output; reports are sized exactly by a count pass first, then filled in
//! parallel, each box writing its own slice.

use rayon::prelude::*;

use crate::error::Error;
use crate::keyed::ranks_in_runs;
use crate::keys::{Bound, Column, Cut, Inclusive};
use crate::query::{prefetch_run_sum, run_sum, BoxBounds, RankBox, Run, RunWalk};
use crate::rowsort::RowSort;
use crate::slab::Slab;
use crate::tree::{Group, LevelWeights, RangeTree};

/// Boxes handed to one parallel task.
pub(crate) const TASK_BOXES: usize = 2048;

/// Boxes whose descents are carried through the levels together.
pub(crate) const GROUP_BOXES: usize = 16;

/// One bound column of a batch: the same two number types as a coordinate column.
pub type BoundColumn<'a> = Column<'a>;

impl Column<'_> {
    #[inline(always)]
    fn bound(&self, i: usize) -> Bound {
        match self {
            Column::F64(v) => Bound::F64(v[i]),
            Column::I64(v) => Bound::I64(v[i]),
        }
    }
}

/// A batch of boxes as four bound columns.
#[derive(Clone, Copy, Debug)]
pub struct Boxes<'a> {
    pub x_lo: BoundColumn<'a>,
    pub x_hi: BoundColumn<'a>,
    pub y_lo: BoundColumn<'a>,
    pub y_hi: BoundColumn<'a>,
}

impl Boxes<'_> {
    /// The number of boxes, after checking the columns agree and hold no NaN.
    pub fn validate(&self) -> Result<usize, Error> {
        let q = self.x_lo.len();
        let columns = [
            ("x_lo", self.x_lo),
            ("x_hi", self.x_hi),
            ("y_lo", self.y_lo),
            ("y_hi", self.y_hi),
        ];
        if columns.iter().any(|(_, c)| c.len() != q) {
            return Err(Error::BoundLengths);
        }
        for (what, column) in columns {
            if let Some(position) = column.first_nan() {
                return Err(Error::NotANumber {
                    what: what.to_string(),
                    position,
                });
            }
        }
        Ok(q)
    }

    #[inline(always)]
    fn get(&self, i: usize) -> BoxBounds {
        BoxBounds {
            x_lo: self.x_lo.bound(i),
            x_hi: self.x_hi.bound(i),
            y_lo: self.y_lo.bound(i),
            y_hi: self.y_hi.bound(i),
        }
    }
}

/// Interleave the bits of two ranks (below 2^32) into a Z-order key.
fn z_order(a: u64, b: u64) -> u64 {
    fn spread(v: u64) -> u64 {
        let mut v = v & 0xFFFF_FFFF;
        v = (v | (v << 16)) & 0x0000_FFFF_0000_FFFF;
        v = (v | (v << 8)) & 0x00FF_00FF_00FF_00FF;
        v = (v | (v << 4)) & 0x0F0F_0F0F_0F0F_0F0F;
        v = (v | (v << 2)) & 0x3333_3333_3333_3333;
        (v | (v << 1)) & 0x5555_5555_5555_5555
    }
    (spread(a) << 1) | spread(b)
}

/// Weight sums of a batch, in the weights' own type.
#[derive(Clone, Debug, PartialEq)]
pub enum SumColumn {
    F64(Vec<f64>),
    I64(Vec<i64>),
}

/// A batch report in CSR form: box `i` matched `rows[offsets[i]..offsets[i + 1]]`.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Report {
    pub offsets: Vec<i64>,
    pub rows: Vec<i64>,
}

impl Report {
    /// Sort each box's rows ascending, the boxes on all cores.
    ///
    /// A report's rows come in the order the walk finds them (run by run, in y order within
    /// a run); callers that promise rows in increasing order per box sort them here, where
    /// each box is a short independent sort, rather than in one global two-key sort. Rows
    /// that are row ids (below 2^32) go through [`RowSort`]; a box holding anything else is
    /// sorted by comparison. [`RangeTree::report_batch_ordered`] sorts as it fills instead,
    /// while a box's rows are still in cache.
    pub fn sort_each_box(&mut self) {
        let mut slices = Vec::with_capacity(self.offsets.len().saturating_sub(1));
        let mut rest = self.rows.as_mut_slice();
        for pair in self.offsets.windows(2) {
            let (head, tail) = rest.split_at_mut((pair[1] - pair[0]) as usize);
            slices.push(head);
            rest = tail;
        }
        slices.into_par_iter().with_min_len(8).for_each_init(
            BoxSorter::default,
            |sorter, box_rows| {
                if !sorter.sort_i64(box_rows) {
                    box_rows.sort_unstable();
                }
            },
        );
    }
}

/// One worker's buffers for ordered reports: a box's ids as u32 (half the bytes of the
/// output's i64 through every pass) and the sorter's own.
#[derive(Default)]
struct BoxSorter {
    ids: Vec<u32>,
    sort: RowSort,
}

impl BoxSorter {
    /// The first `k` slots of the id buffer, grown if need be (not cleared: every slot is
    /// written before it is read).
    fn ids(&mut self, k: usize) -> &mut [u32] {
        if self.ids.len() < k {
            self.ids.resize(k, 0);
        }
        &mut self.ids[..k]
    }

    /// Sort the ids in `ids(k)` and write them to `out` as i64.
    fn sort_into(&mut self, out: &mut [i64]) {
        let ids = &mut self.ids[..out.len()];
        self.sort.sort(ids);
        for (slot, &id) in out.iter_mut().zip(ids.iter()) {
            *slot = id as i64;
        }
    }

    /// Sort `rows` if they all fit in u32; false, untouched, if one does not.
    fn sort_i64(&mut self, rows: &mut [i64]) -> bool {
        let ids = self.ids(rows.len());
        for (id, &row) in ids.iter_mut().zip(rows.iter()) {
            match u32::try_from(row) {
                Ok(v) => *id = v,
                Err(_) => return false,
            }
        }
        self.sort_into(rows);
        true
    }
}

impl RangeTree {
    /// Count every box into `out` (one slot per box).
    pub fn count_batch(
        &self,
        boxes: &Boxes<'_>,
        inclusive: Inclusive,
        out: &mut [i64],
    ) -> Result<(), Error> {
        self.count_batch_by(boxes, None, inclusive, out)
    }

    /// Count every box into `out`; in a keyed tree box `i` counts the points of key code
    /// `keys[i]` only (a code the tree does not hold counts 0).
    pub fn count_batch_by(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        inclusive: Inclusive,
        out: &mut [i64],
    ) -> Result<(), Error> {
        let q = boxes.validate()?;
        self.check_keys(q, keys)?;
        assert_eq!(out.len(), q, "one output slot per box");
        let order = self.z_order_of(boxes, keys, q);
        let mut sorted_counts = vec![0i64; q];
        sorted_counts
            .par_chunks_mut(TASK_BOXES)
            .zip(order.par_chunks(TASK_BOXES))
            .for_each(|(counts, order)| {
                for (counts, order) in counts
                    .chunks_mut(GROUP_BOXES)
                    .zip(order.chunks(GROUP_BOXES))
                {
                    let indices = order.iter().map(|&(_, i)| i);
                    let group = self.rank_boxes_at(boxes, keys, indices, inclusive);
                    self.count_group(&group[..order.len()], counts);
                }
            });
        for (&(_, i), &count) in order.iter().zip(&sorted_counts) {
            out[i as usize] = count;
        }
        Ok(())
    }

    /// The boxes `(key, index)` in the order to answer them. Boxes near each other read the
    /// same cache lines, in the root searches and on the upper levels: answering them in
    /// Z-order of their lower corners (within each key, whose run of x keys they then share)
    /// lets those lines serve many boxes before they are evicted.
    pub(crate) fn z_order_of(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        q: usize,
    ) -> Vec<(u64, u32)> {
        let code_bits = self.key_runs.as_ref().map_or(0, |runs| {
            // Codes (and -1, and codes past the tree's, which are all empty boxes) in the
            // top bits; the Z-order key's top bits below them.
            u64::BITS - (runs.len() as u64 + 1).leading_zeros()
        });
        let mut order: Vec<(u64, u32)> = (0..q)
            .into_par_iter()
            .map(|i| {
                let b = boxes.get(i);
                let z = z_order(b.x_lo.order_key() >> 32, b.y_lo.order_key() >> 32);
                let key = match keys {
                    None => z,
                    Some(k) => {
                        let code = u64::try_from(k[i]).map_or(0, |c| c.saturating_add(1));
                        let code = code.min((1u64 << code_bits) - 1);
                        (code << (64 - code_bits)) | (z >> code_bits)
                    }
                };
                (key, i as u32)
            })
            .collect();
        order.par_sort_unstable();
        order
    }

    /// A key column agrees with the tree (one for a keyed tree, none for another) and with
    /// the number of boxes.
    pub(crate) fn check_keys(&self, q: usize, keys: Option<&[i64]>) -> Result<(), Error> {
        match (&self.key_runs, keys) {
            (None, None) => Ok(()),
            (Some(_), Some(k)) if k.len() == q => Ok(()),
            (Some(_), Some(k)) => Err(Error::KeyLengths {
                expected: q,
                got: k.len(),
            }),
            (Some(_), None) => Err(Error::KeysRequired),
            (None, Some(_)) => Err(Error::NotKeyed),
        }
    }

    /// Every box in rank space, root searches taken a group at a time.
    pub(crate) fn rank_all(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        q: usize,
        inclusive: Inclusive,
    ) -> Vec<RankBox> {
        let mut out = crate::alloc::filled(q, RankBox::default());
        out.par_chunks_mut(TASK_BOXES)
            .enumerate()
            .for_each(|(task, out)| {
                let first = task * TASK_BOXES;
                for (group, out) in out.chunks_mut(GROUP_BOXES).enumerate() {
                    let start = (first + group * GROUP_BOXES) as u32;
                    let indices = start..start + out.len() as u32;
                    let ranks = self.rank_boxes_at(boxes, keys, indices, inclusive);
                    out.copy_from_slice(&ranks[..out.len()]);
                }
            });
        out
    }

    /// Rank boxes of up to [`GROUP_BOXES`] boxes named by index, their root searches taken
    /// together; in a keyed tree (which `keys` then is for) the x searches are taken
    /// together inside each box's key run.
    pub(crate) fn rank_boxes_at(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        indices: impl Iterator<Item = u32>,
        inclusive: Inclusive,
    ) -> [RankBox; GROUP_BOXES] {
        const C: usize = 2 * GROUP_BOXES;
        let mut x_cuts = [Cut::Below(0); C];
        let mut y_cuts = [Cut::Below(0); C];
        let mut runs = [(0usize, 0usize); C];
        let mut len = 0;
        for (i, index) in indices.take(GROUP_BOXES).enumerate() {
            len = i + 1;
            let b = boxes.get(index as usize);
            (x_cuts[2 * i], x_cuts[2 * i + 1]) = self.x.interval_cuts(b.x_lo, b.x_hi, inclusive);
            (y_cuts[2 * i], y_cuts[2 * i + 1]) = self.y.interval_cuts(b.y_lo, b.y_hi, inclusive);
            if let (Some(key_runs), Some(keys)) = (&self.key_runs, keys) {
                let run = key_runs.run(keys[index as usize]);
                (runs[2 * i], runs[2 * i + 1]) = (run, run);
            }
        }
        let (mut xr, mut yr) = ([0usize; C], [0usize; C]);
        if self.key_runs.is_some() {
            ranks_in_runs(&self.x.keys, &runs, &x_cuts, &mut xr);
        } else {
            self.x.ranks_of_cuts(&x_cuts, &mut xr);
        }
        self.y.ranks_of_cuts(&y_cuts, &mut yr);
        let mut out = [RankBox::default(); GROUP_BOXES];
        for (i, r) in out.iter_mut().take(len).enumerate() {
            *r = RankBox {
                x: (xr[2 * i], xr[2 * i + 1].max(xr[2 * i])),
                y: (yr[2 * i], yr[2 * i + 1].max(yr[2 * i])),
            };
        }
        out
    }

    /// Count up to [`GROUP_BOXES`] rank boxes together.
    ///
    /// A box's count is `below(xr) - below(xl)`, where `below(X)` counts the points with
    /// x-rank under `X` in the y-rank interval: one root-to-leaf descent each, down the
    /// 16-way count cascade. All the group's descents take each step together, so the misses
    /// of 2 * GROUP_BOXES descents overlap instead of following each other.
    fn count_group(&self, ranks: &[RankBox], out: &mut [i64]) {
        const D: usize = 2 * GROUP_BOXES;
        let (mut target, mut a, mut b) = ([0usize; D], [0usize; D], [0usize; D]);
        for (i, r) in ranks.iter().enumerate() {
            let (ya, yb) = if r.is_empty() { (0, 0) } else { r.y };
            for (d, x) in [(2 * i, r.x.1), (2 * i + 1, r.x.0.min(r.x.1))] {
                target[d] = x;
                a[d] = ya;
                b[d] = yb;
            }
        }
        let below = self.wide.below_many(&target, a, b);
        for (i, slot) in out.iter_mut().enumerate() {
            // Saturating, as in `count_ranks`.
            *slot = below[2 * i].saturating_sub(below[2 * i + 1]) as i64;
        }
    }

    /// Sum every box's weights.
    pub fn sum_batch(&self, boxes: &Boxes<'_>, inclusive: Inclusive) -> Result<SumColumn, Error> {
        self.sum_batch_by(boxes, None, inclusive)
    }

    /// Sum every box's weights; in a keyed tree, of the points of key code `keys[i]` only.
    pub fn sum_batch_by(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        inclusive: Inclusive,
    ) -> Result<SumColumn, Error> {
        let q = boxes.validate()?;
        self.check_keys(q, keys)?;
        let weights = self.weights.as_ref().ok_or(Error::NoWeights)?;
        self.ensure(Group::Weights)?;
        let ranks = self.rank_all(boxes, keys, q, inclusive);
        let groups = ranks
            .par_chunks(GROUP_BOXES)
            .with_min_len(TASK_BOXES / GROUP_BOXES);
        Ok(match weights {
            LevelWeights::F64(levels) => SumColumn::F64(
                groups
                    .flat_map_iter(|group| self.sum_group(group, levels, 0.0f64))
                    .collect(),
            ),
            // The absolute weights add up to less than 2^63, so no i64 sum can overflow.
            LevelWeights::I64(levels) => SumColumn::I64(
                groups
                    .flat_map_iter(|group| self.sum_group(group, levels, 0i64))
                    .collect(),
            ),
            LevelWeights::I128(levels) => {
                let sums: Vec<i128> = groups
                    .flat_map_iter(|group| self.sum_group(group, levels, 0i128))
                    .collect();
                if let Some(box_index) = sums.iter().position(|&s| i64::try_from(s).is_err()) {
                    return Err(Error::SumOverflow { box_index });
                }
                SumColumn::I64(sums.into_iter().map(|s| s as i64).collect())
            }
        })
    }

    /// Sum up to [`GROUP_BOXES`] rank boxes together: each box's walk over its canonical
    /// runs goes down a level in turn with the others', prefetching the bit lines of its next
    /// level and the two prefix sums of each run it finds, and adds a run only on its next
    /// turn, so the misses of the whole group overlap. Each box adds the same runs in the
    /// same order as [`RangeTree::sum_ranks`], so the sums are the same to the last bit.
    fn sum_group<S>(
        &self,
        ranks: &[RankBox],
        levels: &[Slab<S>],
        zero: S,
    ) -> impl Iterator<Item = S>
    where
        S: Copy + Default + std::ops::Add<Output = S> + std::ops::Sub<Output = S>,
    {
        let h = self.height;
        let mut walks = [RunWalk::new(RankBox::default()); GROUP_BOXES];
        for (walk, &r) in walks.iter_mut().zip(ranks) {
            *walk = RunWalk::new(r);
        }
        let mut sums = [zero; GROUP_BOXES];
        // Runs found on a walk's last turn (at most one a path), to add on its next.
        let mut pending = [[None::<Run>; 2]; GROUP_BOXES];
        let mut busy = true;
        while busy {
            busy = false;
            for ((walk, sum), waiting) in walks.iter_mut().zip(&mut sums).zip(&mut pending) {
                for run in waiting.iter_mut().filter_map(Option::take) {
                    *sum = *sum + run_sum(&levels[run.level - 1], h, run);
                }
                let mut found = 0;
                let mut hold = |run: Run| {
                    prefetch_run_sum(&levels[run.level - 1], h, run);
                    waiting[found] = Some(run);
                    found += 1;
                };
                // A walk finds runs only on a turn that returns true, so a busy round always
                // follows one that found runs, and they are added then.
                if walk.step(self, &mut hold, &mut ()) {
                    walk.prefetch(self);
                    busy = true;
                }
            }
        }
        sums.into_iter().take(ranks.len())
    }

    /// Every box's matching row ids, box by box, each box's in the order its walk finds them.
    pub fn report_batch(&self, boxes: &Boxes<'_>, inclusive: Inclusive) -> Result<Report, Error> {
        self.report_batch_by(boxes, None, inclusive, false)
    }

    /// Every box's matching row ids, box by box, each box's ascending: the rows of
    /// [`RangeTree::report_batch`] with [`Report::sort_each_box`] applied, but each box sorted
    /// as it is filled, while its rows are still in cache, and as u32.
    pub fn report_batch_ordered(
        &self,
        boxes: &Boxes<'_>,
        inclusive: Inclusive,
    ) -> Result<Report, Error> {
        self.report_batch_by(boxes, None, inclusive, true)
    }

    /// Every box's matching row ids; in a keyed tree, of the points of key code `keys[i]`;
    /// with `ordered`, each box's rows ascending, as [`RangeTree::report_batch_ordered`]
    /// sorts them.
    pub fn report_batch_by(
        &self,
        boxes: &Boxes<'_>,
        keys: Option<&[i64]>,
        inclusive: Inclusive,
        ordered: bool,
    ) -> Result<Report, Error> {
        let q = boxes.validate()?;
        self.check_keys(q, keys)?;
        self.ensure(Group::Rows)?;
        let ranked: Vec<(RankBox, usize)> = self
            .rank_all(boxes, keys, q, inclusive)
            .into_par_iter()
            .with_min_len(TASK_BOXES)
            .map(|r| (r, self.count_ranks(r)))
            .collect();
        let mut offsets = Vec::with_capacity(q + 1);
        let mut total = 0usize;
        offsets.push(0i64);
        for &(_, k) in &ranked {
            total += k;
            offsets.push(total as i64);
        }
        // Fresh memory costs a page fault per 4 KiB on first touch; huge pages make the
        // output cheap to fill at memory speed.
        let mut rows = crate::alloc::filled(total, 0i64);
        let mut slices = Vec::with_capacity(q);
        let mut rest = rows.as_mut_slice();
        for &(_, k) in &ranked {
            let (head, tail) = rest.split_at_mut(k);
            slices.push(head);
            rest = tail;
        }
        let filled = slices
            .into_par_iter()
            .zip(ranked.par_iter())
            // Boxes differ wildly in size: small tasks let the pool balance them.
            .with_min_len(8)
            .map_init(BoxSorter::default, |sorter, (out, &(r, _))| {
                if !ordered {
                    return self.fill_rows(r, out);
                }
                let ok = self.fill_rows(r, sorter.ids(out.len()));
                if ok {
                    sorter.sort_into(out);
                }
                ok
            })
            .all(|ok| ok);
        if !filled {
            return Err(self.file_error(crate::file::FormatError::Corrupt(
                "its count cascade disagrees with its cascade bits (a full verification \
                 of the file says where)"
                    .into(),
            )));
        }
        Ok(Report { offsets, rows })
    }

    /// Write a box's row ids into `out`, which is as long as its count; false if the runs
    /// held another number of rows. That happens only for a loaded file whose count cascade
    /// is not the one its bits give (a full verification refuses such a file), and then
    /// nothing is written past `out`.
    fn fill_rows<T: From<u32>>(&self, r: RankBox, out: &mut [T]) -> bool {
        let mut at = 0;
        self.for_each_run(r, |run| {
            self.push_run_rows(run, &mut |rows: &[u32]| {
                let len = out.len();
                for (slot, &row) in out[at.min(len)..].iter_mut().zip(rows) {
                    *slot = T::from(row);
                }
                at += rows.len();
            })
        });
        at == out.len()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::query::WeightSum;
    use crate::{build, Column, Layout, WeightColumn};

    /// Each box's rows come back ascending and as the same set; boxes stay apart (an empty
    /// box between full ones, a box of one row).
    #[test]
    fn sort_each_box_sorts_within_boxes_only() {
        let mut report = Report {
            offsets: vec![0, 3, 3, 4, 8],
            rows: vec![9, 2, 5, 7, 4, 1, 8, 0],
        };
        report.sort_each_box();
        assert_eq!(report.offsets, vec![0, 3, 3, 4, 8]);
        assert_eq!(report.rows, vec![2, 5, 9, 7, 0, 1, 4, 8]);
        let mut empty = Report {
            offsets: vec![0],
            rows: vec![],
        };
        empty.sort_each_box();
        assert!(empty.rows.is_empty());
    }

    /// Ordered reports against a scan of the points (the definition of a box's rows, found
    /// ascending), in both layouts: boxes empty, of a few rows, around the sort's threshold
    /// and of thousands of rows, so both of its methods run; and `sort_each_box` on the
    /// walk-order report gives the same.
    #[test]
    fn ordered_reports_equal_a_scan() {
        let mut rng = crate::test_rng::XorShift::new(7u64);
        let mut unit = || rng.unit();
        let n = 40_000;
        let x: Vec<f64> = (0..n).map(|_| unit()).collect();
        let y: Vec<f64> = (0..n).map(|_| unit()).collect();
        let mut cols: [Vec<f64>; 4] = Default::default();
        for (i, side) in [0.0, 0.01, 0.05, 0.068, 0.07, 0.072, 0.3, 0.6, 1.0]
            .into_iter()
            .cycle()
            .take(60)
            .enumerate()
        {
            let (a, c) = (unit() * (1.0 - side), unit() * (1.0 - side));
            let empty = if i == 0 { -1.0 } else { 1.0 };
            cols[0].push(a);
            cols[1].push(a + empty * side);
            cols[2].push(c);
            cols[3].push(c + side);
        }
        let boxes = Boxes {
            x_lo: Column::F64(&cols[0]),
            x_hi: Column::F64(&cols[1]),
            y_lo: Column::F64(&cols[2]),
            y_hi: Column::F64(&cols[3]),
        };
        let mut sizes = Vec::new();
        for layout in [Layout::Fast, Layout::Compact] {
            let tree = build(Column::F64(&x), Column::F64(&y), None, layout).unwrap();
            let ordered = tree.report_batch_ordered(&boxes, Inclusive::Both).unwrap();
            let mut sorted = tree.report_batch(&boxes, Inclusive::Both).unwrap();
            sorted.sort_each_box();
            assert_eq!(ordered, sorted, "{layout:?}");
            for (i, pair) in ordered.offsets.windows(2).enumerate() {
                let inside = |r: &usize| {
                    (cols[0][i]..=cols[1][i]).contains(&x[*r])
                        && (cols[2][i]..=cols[3][i]).contains(&y[*r])
                };
                let scan: Vec<i64> = (0..n).filter(inside).map(|r| r as i64).collect();
                let rows = &ordered.rows[pair[0] as usize..pair[1] as usize];
                assert_eq!(rows, &scan[..], "box {i}, {layout:?}");
                sizes.push(scan.len());
            }
        }
        let threshold = crate::rowsort::RADIX_FROM;
        assert!(sizes.contains(&0));
        assert!(sizes.iter().any(|&k| k > 0 && k < threshold));
        assert!(sizes.iter().any(|&k| k > 10 * threshold));
    }

    /// `sort_each_box` on rows that are not row ids (negative, or above 2^32) sorts them by
    /// comparison, box by box.
    #[test]
    fn sort_each_box_takes_any_i64() {
        let big = 1i64 << 40;
        let mut rows: Vec<i64> = (0..600).map(|i| (i * 7919) % 600).collect();
        rows.extend((0..300).map(|i| big - i * 3));
        rows.extend((0..300).map(|i| -i));
        let mut report = Report {
            offsets: vec![0, 600, 900, 1200],
            rows: rows.clone(),
        };
        report.sort_each_box();
        for pair in report.offsets.windows(2) {
            let (a, b) = (pair[0] as usize, pair[1] as usize);
            let mut want = rows[a..b].to_vec();
            want.sort_unstable();
            assert_eq!(report.rows[a..b], want[..]);
        }
    }

    /// A batch interleaves its boxes' walks; each box must still add its runs in the order a
    /// one-box sum does. Weights of mixed magnitude make any other order show in the last
    /// bits; 403 boxes leave a partial group, and every tenth box is empty.
    #[test]
    fn batch_sums_equal_one_box_sums_bit_for_bit() {
        let mut rng = crate::test_rng::XorShift::new(99u64);
        let mut unit = || rng.unit();
        let n = 30_000;
        let x: Vec<f64> = (0..n).map(|_| unit()).collect();
        let y: Vec<f64> = (0..n).map(|_| unit()).collect();
        let w: Vec<f64> = (0..n)
            .map(|_| (unit() - 0.5) * 10f64.powi((unit() * 7.0) as i32 - 3))
            .collect();
        let q = 403;
        let mut cols: [Vec<f64>; 4] = Default::default();
        for i in 0..q {
            let (a, c, side) = (unit(), unit(), unit() * 0.3);
            let empty = if i % 10 == 0 { -1.0 } else { 1.0 };
            cols[0].push(a);
            cols[1].push(a + empty * side);
            cols[2].push(c);
            cols[3].push(c + side);
        }
        let boxes = Boxes {
            x_lo: Column::F64(&cols[0]),
            x_hi: Column::F64(&cols[1]),
            y_lo: Column::F64(&cols[2]),
            y_hi: Column::F64(&cols[3]),
        };
        for layout in [Layout::Fast, Layout::Compact] {
            let tree = build(
                Column::F64(&x),
                Column::F64(&y),
                Some(WeightColumn::F64(&w)),
                layout,
            )
            .unwrap();
            let SumColumn::F64(batch) = tree.sum_batch(&boxes, Inclusive::Both).unwrap() else {
                panic!("float weights give float sums");
            };
            for (i, &got) in batch.iter().enumerate() {
                let Ok(WeightSum::F64(one)) = tree.sum(&boxes.get(i), Inclusive::Both) else {
                    panic!("float weights give float sums");
                };
                assert_eq!(got.to_bits(), one.to_bits(), "box {i}, {layout:?}");
            }
        }
    }
}
