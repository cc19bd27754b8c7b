//! Batches of boxes, answered on all cores.
//!
//! Bounds come as four columns of equal length. Counts and sums are written straight into
//! the caller's output; reports are sized exactly by a count pass first, then filled in
//! parallel, each box writing its own slice.

use rayon::prelude::*;

use crate::error::Error;
use crate::keys::{Bound, Inclusive};
use crate::query::{BoxBounds, RankBox, WeightSum};
use crate::tree::{LevelWeights, RangeTree};

/// Boxes handed to one parallel task.
const TASK_BOXES: usize = 2048;

/// One bound column of a batch.
#[derive(Clone, Copy, Debug)]
pub enum BoundColumn<'a> {
    F64(&'a [f64]),
    I64(&'a [i64]),
}

impl BoundColumn<'_> {
    pub fn len(&self) -> usize {
        match self {
            BoundColumn::F64(v) => v.len(),
            BoundColumn::I64(v) => v.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    #[inline(always)]
    fn get(&self, i: usize) -> Bound {
        match self {
            BoundColumn::F64(v) => Bound::F64(v[i]),
            BoundColumn::I64(v) => Bound::I64(v[i]),
        }
    }

    fn first_nan(&self) -> Option<usize> {
        match self {
            BoundColumn::F64(v) => v.iter().position(|b| b.is_nan()),
            BoundColumn::I64(_) => None,
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
            x_lo: self.x_lo.get(i),
            x_hi: self.x_hi.get(i),
            y_lo: self.y_lo.get(i),
            y_hi: self.y_hi.get(i),
        }
    }
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

impl RangeTree {
    /// Count every box into `out` (one slot per box).
    pub fn count_batch(
        &self,
        boxes: &Boxes<'_>,
        inclusive: Inclusive,
        out: &mut [i64],
    ) -> Result<(), Error> {
        let q = boxes.validate()?;
        assert_eq!(out.len(), q, "one output slot per box");
        out.par_chunks_mut(TASK_BOXES)
            .enumerate()
            .for_each(|(task, out)| {
                let first = task * TASK_BOXES;
                for (i, slot) in out.iter_mut().enumerate() {
                    let r = self.rank_box_unchecked(&boxes.get(first + i), inclusive);
                    *slot = self.count_ranks(r) as i64;
                }
            });
        Ok(())
    }

    /// Sum every box's weights.
    pub fn sum_batch(&self, boxes: &Boxes<'_>, inclusive: Inclusive) -> Result<SumColumn, Error> {
        let q = boxes.validate()?;
        let weights = self.weights.as_ref().ok_or(Error::NoWeights)?;
        let sums: Vec<Option<WeightSum>> = (0..q)
            .into_par_iter()
            .with_min_len(TASK_BOXES)
            .map(|i| self.sum_ranks(self.rank_box_unchecked(&boxes.get(i), inclusive)))
            .collect();
        if let Some(box_index) = sums.iter().position(Option::is_none) {
            return Err(Error::SumOverflow { box_index });
        }
        Ok(match weights {
            LevelWeights::F64(_) => SumColumn::F64(
                sums.into_iter()
                    .map(|s| match s {
                        Some(WeightSum::F64(v)) => v,
                        _ => unreachable!("float weights give float sums"),
                    })
                    .collect(),
            ),
            LevelWeights::I64(_) | LevelWeights::I128(_) => SumColumn::I64(
                sums.into_iter()
                    .map(|s| match s {
                        Some(WeightSum::I64(v)) => v,
                        _ => unreachable!("integer weights give integer sums"),
                    })
                    .collect(),
            ),
        })
    }

    /// Every box's matching row ids, box by box.
    pub fn report_batch(&self, boxes: &Boxes<'_>, inclusive: Inclusive) -> Result<Report, Error> {
        let q = boxes.validate()?;
        let ranked: Vec<(RankBox, usize)> = (0..q)
            .into_par_iter()
            .with_min_len(TASK_BOXES)
            .map(|i| {
                let r = self.rank_box_unchecked(&boxes.get(i), inclusive);
                (r, self.count_ranks(r))
            })
            .collect();
        let mut offsets = Vec::with_capacity(q + 1);
        let mut total = 0usize;
        offsets.push(0i64);
        for &(_, k) in &ranked {
            total += k;
            offsets.push(total as i64);
        }
        let mut rows = vec![0i64; total];
        let mut slices = Vec::with_capacity(q);
        let mut rest = rows.as_mut_slice();
        for &(_, k) in &ranked {
            let (head, tail) = rest.split_at_mut(k);
            slices.push(head);
            rest = tail;
        }
        slices
            .into_par_iter()
            .zip(ranked.par_iter())
            .with_min_len(TASK_BOXES / 8)
            .for_each(|(out, &(r, _))| self.fill_rows(r, out));
        Ok(Report { offsets, rows })
    }

    /// Write a box's row ids into `out`, which is exactly as long as its count.
    fn fill_rows(&self, r: RankBox, out: &mut [i64]) {
        let mut at = 0;
        self.for_each_run(r, |run| {
            self.push_run_rows(run, &mut |rows: &[u32]| {
                for (slot, &row) in out[at..at + rows.len()].iter_mut().zip(rows) {
                    *slot = row as i64;
                }
                at += rows.len();
            })
        });
        debug_assert_eq!(at, out.len());
    }
}
