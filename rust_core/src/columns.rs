//! A tree's points given back, row by row: the columns it was built from.
//!
//! A tree keeps its coordinates sorted (the x keys in x-rank order, the y keys in y-rank
//! order) and the leaf rows say which row holds each x-rank, so x, the weights (the leaf
//! level's prefix sums are the weights themselves: its blocks hold one position each) and
//! the key codes (runs of x-ranks) come back with one scatter each. A row's y-rank is not
//! stored anywhere: it is found by replaying every level's merge from the leaves up, which
//! carries each x-rank to its position on the root, where positions are y-ranks. That is one
//! linear pass a level, as in the build, and comparing nothing.
//!
//! A tree rebuilt from these columns answers every query as the tree they came from: a
//! growing tree merges its segments this way, and takes over a static tree without having
//! kept the points it was built from.

use rayon::prelude::*;

use crate::alloc;
use crate::error::Error;
use crate::keys::{value_of_key, Bound, Domain, SortedAxis};
use crate::replay::{replay_range, REPLAY_CHUNK};
use crate::tree::{Group, LevelWeights, RangeTree};

/// One coordinate column in its domain's type.
#[derive(Clone, Debug, PartialEq)]
pub enum Values {
    F64(Vec<f64>),
    I64(Vec<i64>),
}

/// A tree's points in row order: `x[r]`, `y[r]`, `weights[r]` and `keys[r]` are row `r`'s.
#[derive(Clone, Debug, PartialEq)]
pub struct Columns {
    pub x: Values,
    pub y: Values,
    /// As built: float weights, or integer weights (int128 sums hold int64 weights).
    pub weights: Option<Values>,
    /// A keyed tree's key code of every row.
    pub keys: Option<Vec<u32>>,
}

impl RangeTree {
    /// The points of the tree in row order (a loaded tree's every part checked first).
    pub fn columns(&self) -> Result<Columns, Error> {
        self.ensure(Group::Rows)?;
        self.ensure(Group::Weights)?;
        let rows: &[u32] = &self.leaf_rows;
        let x = scatter_axis(&self.x, rows, |rank| rank);
        let y_rank_of_x_rank = self.y_ranks();
        let y = scatter_axis(&self.y, rows, |rank| y_rank_of_x_rank[rank] as usize);
        let weights = self.weights.as_ref().map(|w| leaf_weights(w, rows));
        let keys = self.key_runs.as_ref().map(|runs| {
            let mut codes = alloc::filled(self.n, 0u32);
            for (code, w) in runs.starts().windows(2).enumerate() {
                for &row in &rows[w[0] as usize..w[1] as usize] {
                    codes[row as usize] = code as u32;
                }
            }
            codes
        });
        Ok(Columns {
            x,
            y,
            weights,
            keys,
        })
    }

    /// The y-rank of the point at every x-rank: each level's merge replayed from the leaves
    /// (where position is x-rank) up to the root (where position is y-rank).
    pub(crate) fn y_ranks(&self) -> Vec<u32> {
        let n = self.n;
        let h = self.height;
        // below[p]: the x-rank of the element at position p of the level below.
        let mut below: Vec<u32> = alloc::collect((0..n as u32).into_par_iter());
        let mut here = alloc::filled(n, 0u32);
        for level in (0..h).rev() {
            let block = 1usize << (h - level);
            let bits = &self.bits[level];
            here.par_chunks_mut(REPLAY_CHUNK)
                .enumerate()
                .for_each(|(chunk, out)| {
                    let start = chunk * REPLAY_CHUNK;
                    replay_range(bits, block, start, start + out.len(), |p, from, _, _| {
                        out[p - start] = below[from];
                        true
                    });
                });
            std::mem::swap(&mut below, &mut here);
        }
        // below is now the root: below[y_rank] = x_rank. Invert it.
        let mut y_rank = alloc::filled(n, 0u32);
        for (yr, &xr) in below.iter().enumerate() {
            y_rank[xr as usize] = yr as u32;
        }
        y_rank
    }
}

/// Row `rows[rank]` takes the axis value of sorted position `position(rank)`.
fn scatter_axis(axis: &SortedAxis, rows: &[u32], position: impl Fn(usize) -> usize) -> Values {
    let keys: &[u64] = &axis.keys;
    match axis.domain {
        Domain::F64 => {
            let mut out = alloc::filled(rows.len(), 0.0f64);
            for (rank, &row) in rows.iter().enumerate() {
                if let Bound::F64(v) = value_of_key(Domain::F64, keys[position(rank)]) {
                    out[row as usize] = v;
                }
            }
            Values::F64(out)
        }
        Domain::I64 => {
            let mut out = alloc::filled(rows.len(), 0i64);
            for (rank, &row) in rows.iter().enumerate() {
                if let Bound::I64(v) = value_of_key(Domain::I64, keys[position(rank)]) {
                    out[row as usize] = v;
                }
            }
            Values::I64(out)
        }
    }
}

/// The weights in row order: the leaf level's prefix sums (blocks of one position).
fn leaf_weights(w: &LevelWeights, rows: &[u32]) -> Values {
    fn scatter<S: Copy, T: Copy + Default + Send + Sync>(
        leaves: &[S],
        rows: &[u32],
        f: impl Fn(S) -> T,
    ) -> Vec<T> {
        let mut out = alloc::filled(rows.len(), T::default());
        for (&s, &row) in leaves.iter().zip(rows) {
            out[row as usize] = f(s);
        }
        out
    }
    let empty = || Values::I64(Vec::new());
    match w {
        LevelWeights::F64(levels) => levels.last().map_or(Values::F64(Vec::new()), |l| {
            Values::F64(scatter(l, rows, |v| v))
        }),
        LevelWeights::I64(levels) => levels
            .last()
            .map_or_else(empty, |l| Values::I64(scatter(l, rows, |v| v))),
        // Every weight was an i64 (the sums alone needed more room), so the cast is exact.
        LevelWeights::I128(levels) => levels
            .last()
            .map_or_else(empty, |l| Values::I64(scatter(l, rows, |v| v as i64))),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::build::{build, build_keyed, WeightColumn};
    use crate::keyed::KeyColumn;
    use crate::keys::Column;
    use crate::test_rng::XorShift;
    use crate::tree::Layout;

    #[test]
    fn columns_come_back_in_row_order_for_both_layouts() {
        let mut rng = XorShift::new(7);
        for n in [0usize, 1, 2, 3, 63, 64, 65, 1000, 5000] {
            let x: Vec<f64> = (0..n).map(|_| (rng.next_u64() % 50) as f64 - 7.5).collect();
            let y: Vec<i64> = (0..n).map(|_| (rng.next_u64() % 40) as i64 - 3).collect();
            let w: Vec<i64> = (0..n).map(|_| (rng.next_u64() % 1000) as i64).collect();
            for layout in [Layout::Fast, Layout::Compact] {
                let tree = build(
                    Column::F64(&x),
                    Column::I64(&y),
                    Some(WeightColumn::I64(&w)),
                    layout,
                )
                .unwrap();
                let c = tree.columns().unwrap();
                assert_eq!(c.x, Values::F64(x.clone()), "n={n}");
                assert_eq!(c.y, Values::I64(y.clone()), "n={n}");
                assert_eq!(c.weights, Some(Values::I64(w.clone())), "n={n}");
                assert_eq!(c.keys, None);
            }
        }
    }

    #[test]
    fn keyed_trees_give_back_their_codes_and_float_weights_exactly() {
        let mut rng = XorShift::new(11);
        let n = 3000;
        let x: Vec<i64> = (0..n).map(|_| (rng.next_u64() % 100) as i64).collect();
        let y: Vec<f64> = (0..n)
            .map(|_| (rng.next_u64() % 100) as f64 / 7.0)
            .collect();
        let w: Vec<f64> = (0..n)
            .map(|_| (rng.next_u64() % 1000) as f64 / 3.0)
            .collect();
        let codes: Vec<u32> = (0..n).map(|_| (rng.next_u64() % 5) as u32).collect();
        let tree = build_keyed(
            Column::I64(&x),
            Column::F64(&y),
            Some(WeightColumn::F64(&w)),
            Some(KeyColumn {
                codes: &codes,
                count: 6,
            }),
            Layout::Compact,
        )
        .unwrap();
        let c = tree.columns().unwrap();
        assert_eq!(c.x, Values::I64(x));
        assert_eq!(c.y, Values::F64(y));
        assert_eq!(c.weights, Some(Values::F64(w)));
        assert_eq!(c.keys, Some(codes));
    }
}
