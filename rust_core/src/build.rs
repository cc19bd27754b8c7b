//! The build side: two presorts, then one linear pass per level, top down.
//!
//! Level `height` (the leaves) holds the points in x-rank order. Level `l` splits x-rank space
//! into blocks of `2^(height - l)` ranks; a block's points sit at the block's own x-rank
//! positions, in y-rank order. Level `l` is the merge of its blocks' two children on level
//! `l + 1`, and one bit per element records which child each element is in: the
//! fractional-cascading bits that let a query follow a y-rank interval from a node to its
//! children with two rank lookups.
//!
//! The levels are made from the root down rather than merged from the leaves up: the root is
//! every point in y-rank order, an element's bit on level `l` is bit `height - 1 - l` of its
//! x-rank, and level `l + 1` is each block of level `l` stably partitioned by that bit (zeros
//! to the left half, ones to the right). The result is the same array a merge gives, but the
//! pass compares nothing: where each element goes is picked without a branch, which a merge of
//! random keys cannot do (half its comparisons mispredict).

use rayon::prelude::*;

use crate::alloc;
use crate::bits::{RankBits, RankBitsWriter};
use crate::error::{Axis, Error};
use crate::keyed::{KeyColumn, KeyRuns};
use crate::keys::{Column, SortedAxis};
use crate::presort::{sort_rows_by_code_and_key, sort_rows_by_key};
use crate::slab::Slab;
use crate::tree::{BuildStats, Layout, LevelWeights, Parts, RangeTree};

/// The most rows a tree holds: row ids are `u32`, and `u32::MAX` itself is kept free.
pub const MAX_ROWS: usize = u32::MAX as usize;

/// Positions one task of a level pass handles: a power of two, so that blocks smaller than
/// it tile it exactly. Small in tests, so that small trees take the path that splits one
/// block over several tasks.
const PASS_CHUNK: usize = if cfg!(test) { 64 } else { 1 << 16 };

/// Weights as the caller hands them over.
#[derive(Clone, Copy, Debug)]
pub enum WeightColumn<'a> {
    F64(&'a [f64]),
    I64(&'a [i64]),
}

impl WeightColumn<'_> {
    fn len(&self) -> usize {
        match self {
            WeightColumn::F64(w) => w.len(),
            WeightColumn::I64(w) => w.len(),
        }
    }

    fn validate(&self) -> Result<(), Error> {
        if let WeightColumn::F64(w) = self {
            if let Some(position) = w.iter().position(|v| v.is_nan()) {
                return Err(Error::NotANumber {
                    what: "weights".into(),
                    position,
                });
            }
            if let Some(position) = w.iter().position(|v| v.is_infinite()) {
                return Err(Error::NonFiniteWeight { position });
            }
        }
        Ok(())
    }

    fn bits_of(&self, row: usize) -> u64 {
        match self {
            WeightColumn::F64(w) => w[row].to_bits(),
            WeightColumn::I64(w) => w[row] as u64,
        }
    }
}

/// Number of levels below the root: the smallest `h` with `n < 2^h`, so that every x-rank
/// in `0..=n` names a leaf-to-root path.
pub fn height_for(n: usize) -> usize {
    (usize::BITS - n.leading_zeros()) as usize
}

/// Check the inputs and build a tree.
pub fn build(
    x: Column<'_>,
    y: Column<'_>,
    weights: Option<WeightColumn<'_>>,
    layout: Layout,
) -> Result<RangeTree, Error> {
    build_keyed(x, y, weights, None, layout)
}

/// Check the inputs and build a tree; with `keys`, a keyed tree whose boxes each ask the
/// points of one key code (`keyed.rs`).
pub fn build_keyed(
    x: Column<'_>,
    y: Column<'_>,
    weights: Option<WeightColumn<'_>>,
    keys: Option<KeyColumn<'_>>,
    layout: Layout,
) -> Result<RangeTree, Error> {
    let n = x.len();
    if y.len() != n {
        return Err(Error::LengthMismatch {
            what: "y",
            expected: n,
            got: y.len(),
        });
    }
    if let Some(w) = &weights {
        if w.len() != n {
            return Err(Error::LengthMismatch {
                what: "weights",
                expected: n,
                got: w.len(),
            });
        }
        w.validate()?;
    }
    if n > MAX_ROWS {
        return Err(Error::TooManyRows {
            rows: n,
            max: MAX_ROWS,
        });
    }
    if let Some(k) = &keys {
        k.validate(n)?;
    }
    let x_keys = x.keys(Axis::X)?;
    let y_keys = y.keys(Axis::Y)?;
    let mut stats = BuildStats::default();

    // A keyed x presort orders by (key code, x) in its one sort (`presort.rs`).
    let sort_x = || match &keys {
        None => (sort_rows_by_key(&x_keys), None),
        Some(k) => {
            let (order, sorted, starts) = sort_rows_by_code_and_key(&x_keys, k.codes, k.count);
            ((order, sorted), Some(KeyRuns::from_starts(starts)))
        }
    };
    let (((order_x, x_sorted), key_runs), (order_y, y_sorted)) =
        rayon::join(sort_x, || sort_rows_by_key(&y_keys));
    drop((x_keys, y_keys));
    stats.presorts = 2;

    let mut x_rank = alloc::filled(n, 0u32);
    for (rank, &row) in order_x.iter().enumerate() {
        x_rank[row as usize] = rank as u32;
    }

    let height = height_for(n);
    let root_key = |row: u32| ((x_rank[row as usize] as u64) << 32) | row as u64;
    let mut levels = LevelsOut::new(weights.as_ref(), height);
    let keep_rows = layout == Layout::Fast;
    let (bits, level_rows) = match weights {
        None => {
            let root: Vec<u64> = alloc::collect(order_y.par_iter().map(|&row| root_key(row)));
            split_all_levels(root, height, &mut stats, keep_rows, |level, items| {
                levels.keep(level, items)
            })
        }
        Some(w) => {
            let root: Vec<Weighted> = alloc::collect(order_y.par_iter().map(|&row| Weighted {
                key: root_key(row),
                weight: w.bits_of(row as usize),
            }));
            split_all_levels(root, height, &mut stats, keep_rows, |level, items| {
                levels.keep(level, items)
            })
        }
    };
    drop((x_rank, order_y));

    Ok(RangeTree::from_parts(Parts {
        n,
        height,
        layout,
        x: match key_runs {
            None => SortedAxis::new(x.domain(), x_sorted),
            Some(_) => SortedAxis::unsearched(x.domain(), x_sorted),
        },
        y: SortedAxis::new(y.domain(), y_sorted),
        bits,
        level_rows,
        leaf_rows: order_x.into(),
        weights: levels.weights,
        key_runs,
        stats,
    }))
}

/// An element of a level: its key `(x_rank << 32) | row`, and what rides along.
pub(crate) trait Item: Copy + Send + Sync + Default {
    fn key(&self) -> u64;
    fn row(&self) -> u32 {
        self.key() as u32
    }
    /// Bit `bit` of the element's x-rank.
    #[inline(always)]
    fn x_rank_bit(&self, bit: usize) -> bool {
        (self.key() >> (32 + bit)) & 1 == 1
    }
    fn weight_bits(&self) -> u64 {
        0
    }
}

impl Item for u64 {
    #[inline(always)]
    fn key(&self) -> u64 {
        *self
    }
}

#[derive(Clone, Copy, Default)]
struct Weighted {
    key: u64,
    weight: u64,
}

impl Item for Weighted {
    #[inline(always)]
    fn key(&self) -> u64 {
        self.key
    }
    fn weight_bits(&self) -> u64 {
        self.weight
    }
}

/// What the build keeps of each level's weights.
struct LevelsOut {
    height: usize,
    weight_kind: Option<WeightKind>,
    weights: Option<LevelWeights>,
}

#[derive(Clone, Copy)]
enum WeightKind {
    F64,
    I64,
    I128,
}

impl LevelsOut {
    fn new(weights: Option<&WeightColumn<'_>>, height: usize) -> Self {
        let weight_kind = weights.map(|w| match w {
            WeightColumn::F64(_) => WeightKind::F64,
            WeightColumn::I64(v) => {
                // If the absolute weights add up to less than 2^63, no partial sum can
                // overflow i64; otherwise prefix sums are kept in i128.
                let total: u128 = v.iter().map(|w| w.unsigned_abs() as u128).sum();
                if total < (1u128 << 63) {
                    WeightKind::I64
                } else {
                    WeightKind::I128
                }
            }
        });
        let weights = weight_kind.map(|k| match k {
            WeightKind::F64 => LevelWeights::F64(vec![Slab::default(); height]),
            WeightKind::I64 => LevelWeights::I64(vec![Slab::default(); height]),
            WeightKind::I128 => LevelWeights::I128(vec![Slab::default(); height]),
        });
        LevelsOut {
            height,
            weight_kind,
            weights,
        }
    }

    /// Keep the prefix sums of level `level` (`1..=height`); the root needs none.
    fn keep<T: Item>(&mut self, level: usize, items: &[T]) {
        if level == 0 {
            return;
        }
        let height = self.height;
        let block = 1usize << (height - level);
        if let (Some(kind), Some(out)) = (self.weight_kind, self.weights.as_mut()) {
            match (kind, out) {
                (WeightKind::F64, LevelWeights::F64(levels)) => {
                    levels[level - 1] = block_prefix_f64(items, block).into()
                }
                (WeightKind::I64, LevelWeights::I64(levels)) => {
                    levels[level - 1] = block_prefix_int(items, block, |b| b as i64).into()
                }
                (WeightKind::I128, LevelWeights::I128(levels)) => {
                    levels[level - 1] = block_prefix_int(items, block, |b| b as i64 as i128).into()
                }
                _ => unreachable!("weight storage matches its kind"),
            }
        }
    }
}

/// Inclusive prefix sums restarted at every block, each from [`neumaier_prefix_sums`].
fn block_prefix_f64<T: Item>(items: &[T], block: usize) -> Vec<f64> {
    let mut out = alloc::filled(items.len(), 0.0);
    out.par_chunks_mut(block)
        .zip(items.par_chunks(block))
        .for_each(|(out, items)| {
            let mut out = out.iter_mut();
            let weights = items.iter().map(|it| f64::from_bits(it.weight_bits()));
            neumaier_prefix_sums(weights, |s| {
                if let Some(o) = out.next() {
                    *o = s;
                }
            });
        });
    out
}

/// The inclusive prefix sums of `weights`, in order, handed to `put`: compensated (Neumaier)
/// summation, so each is within one rounding of the exact prefix. The one routine that makes
/// float prefix sums: a full verification of an index file (`file/full.rs`) recomputes them
/// with it and compares bit for bit, which holds only while both use this same sequence of
/// operations.
#[inline]
pub(crate) fn neumaier_prefix_sums(
    weights: impl IntoIterator<Item = f64>,
    mut put: impl FnMut(f64),
) {
    let (mut sum, mut carry) = (0.0f64, 0.0f64);
    for w in weights {
        let t = sum + w;
        carry += if sum.abs() >= w.abs() {
            (sum - t) + w
        } else {
            (w - t) + sum
        };
        sum = t;
        put(sum + carry);
    }
}

/// Inclusive integer prefix sums restarted at every block.
fn block_prefix_int<T: Item, S>(
    items: &[T],
    block: usize,
    widen: impl Fn(u64) -> S + Sync,
) -> Vec<S>
where
    S: Copy + Default + Send + Sync + std::ops::Add<Output = S>,
{
    let mut out = alloc::filled(items.len(), S::default());
    out.par_chunks_mut(block)
        .zip(items.par_chunks(block))
        .for_each(|(out, items)| {
            let mut sum = S::default();
            for (o, it) in out.iter_mut().zip(items) {
                sum = sum + widen(it.weight_bits());
                *o = sum;
            }
        });
    out
}

/// Make the levels from the root down, handing each level's items to `keep`, and return
/// the bits of levels `0..height` and, when `keep_rows`, the row ids of levels `1..height`
/// (written by the same passes that make the levels, so the fast layout reads no level
/// twice).
pub(crate) fn split_all_levels<T: Item>(
    root: Vec<T>,
    height: usize,
    stats: &mut BuildStats,
    keep_rows: bool,
    mut keep: impl FnMut(usize, &[T]),
) -> (Vec<RankBits>, Vec<Slab<u32>>) {
    let n = root.len();
    let mut src = root;
    let mut dst = alloc::filled(n, T::default());
    let mut bits = Vec::with_capacity(height);
    let mut level_rows = Vec::new();
    for level in 0..height {
        let bit = height - 1 - level;
        let mut level_bits = RankBitsWriter::zeroed(n);
        level_bits.fill(|p| src[p].x_rank_bit(bit));
        let level_bits = level_bits.seal();
        keep(level, &src);
        let mut rows = (keep_rows && level + 1 < height).then(|| alloc::filled(n, 0u32));
        let out = Out {
            items: &mut dst,
            rows: rows.as_deref_mut(),
        };
        split_level(&src, out, &level_bits, 1usize << (height - level), bit);
        level_rows.extend(rows.map(Slab::from));
        bits.push(level_bits);
        stats.merge_passes += 1;
        stats.elements_merged += n as u64;
        std::mem::swap(&mut src, &mut dst);
    }
    keep(height, &src);
    (bits, level_rows)
}

/// Where part of a level pass writes: the items, and in the fast layout their row ids.
struct Out<'a, T> {
    items: &'a mut [T],
    rows: Option<&'a mut [u32]>,
}

impl<'a, T: Item> Out<'a, T> {
    fn split_at(self, mid: usize) -> (Self, Self) {
        let (a, b) = self.items.split_at_mut(mid);
        let (ra, rb) = match self.rows {
            Some(rows) => {
                let (ra, rb) = rows.split_at_mut(mid);
                (Some(ra), Some(rb))
            }
            None => (None, None),
        };
        (Out { items: a, rows: ra }, Out { items: b, rows: rb })
    }

    #[inline(always)]
    fn put(&mut self, at: usize, item: T) {
        self.items[at] = item;
        if let Some(rows) = self.rows.as_deref_mut() {
            rows[at] = item.row();
        }
    }

    fn len(&self) -> usize {
        self.items.len()
    }
}

/// One level: each block of `block` positions of `src`, stably partitioned by x-rank bit
/// `bit` into the same block of `out` (zeros to its left half, ones to its right half).
fn split_level<T: Item>(src: &[T], out: Out<'_, T>, bits: &RankBits, block: usize, bit: usize) {
    let n = src.len();
    let mut rest = out;
    if block <= PASS_CHUNK {
        // Whole blocks a task.
        let mut tasks = Vec::with_capacity(n.div_ceil(PASS_CHUNK));
        for start in (0..n).step_by(PASS_CHUNK) {
            let stop = (start + PASS_CHUNK).min(n);
            let (piece, tail) = rest.split_at(stop - start);
            rest = tail;
            tasks.push((&src[start..stop], piece));
        }
        tasks.into_par_iter().for_each(|(src, mut out)| {
            for start in (0..src.len()).step_by(block) {
                let stop = (start + block).min(src.len());
                let (this, tail) = out.split_at(stop - start);
                out = tail;
                let (left, right) = this.split_at((block / 2).min(stop - start));
                partition(&src[start..stop], left, right, bit);
            }
        });
        return;
    }
    // Blocks larger than a task: each task is a piece of one block, and writes its zeros
    // and its ones to the two runs of the block's halves that follow the earlier pieces'.
    let mut tasks = Vec::with_capacity(n.div_ceil(PASS_CHUNK));
    for s in (0..n).step_by(block) {
        let end = (s + block).min(n);
        let (block_out, tail) = rest.split_at(end - s);
        rest = tail;
        let (mut left, mut right) = block_out.split_at((block / 2).min(end - s));
        for start in (s..end).step_by(PASS_CHUNK) {
            let stop = (start + PASS_CHUNK).min(end);
            let ones = bits.rank1(stop) - bits.rank1(start);
            let (piece_left, l) = left.split_at(stop - start - ones);
            let (piece_right, r) = right.split_at(ones);
            (left, right) = (l, r);
            tasks.push((&src[start..stop], piece_left, piece_right));
        }
    }
    tasks
        .into_par_iter()
        .for_each(|(src, left, right)| partition(src, left, right, bit));
}

/// Stable partition of `src` by x-rank bit `bit`: zeros into `left`, ones into `right`, which
/// are exactly as long as the zeros and the ones.
#[inline]
fn partition<'a, T: Item>(src: &[T], mut left: Out<'a, T>, mut right: Out<'a, T>, bit: usize) {
    let (mut l, mut r) = (0, 0);
    for &item in src {
        // The side is picked as data (a conditional move), not by a branch: the bits of
        // random points would make a branch mispredict half the time.
        let one = item.x_rank_bit(bit);
        let (side, at) = if one { (&mut right, r) } else { (&mut left, l) };
        side.put(at, item);
        r += one as usize;
        l += !one as usize;
    }
    debug_assert_eq!((l, r), (left.len(), right.len()));
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn height_covers_every_x_rank() {
        assert_eq!(height_for(0), 0);
        assert_eq!(height_for(1), 1);
        assert_eq!(height_for(2), 2);
        assert_eq!(height_for(3), 2);
        assert_eq!(height_for(4), 3);
        for n in 1..5000usize {
            let h = height_for(n);
            assert!(n < 1 << h && (h == 1 || n >= 1 << (h - 1)));
        }
    }

    proptest! {
        /// Every level is, block by block, the merge of its two children by y-rank (the
        /// definition of the layout), and its bits say which child each element is in.
        #[test]
        fn levels_are_merges_of_their_children(
            ys in proptest::collection::vec(0u32..50, 0..1200),
        ) {
            let n = ys.len();
            let height = height_for(n);
            // Rows in y order (ties by row) carry x-rank = row.
            let mut order: Vec<u32> = (0..n as u32).collect();
            order.sort_by_key(|&r| (ys[r as usize], r));
            let root: Vec<u64> = order.iter().map(|&r| ((r as u64) << 32) | r as u64).collect();
            let mut levels = Vec::new();
            let mut stats = BuildStats::default();
            let (bits, rows) = split_all_levels(root, height, &mut stats, true, |_, items: &[u64]| {
                levels.push(items.to_vec())
            });
            prop_assert_eq!(levels.len(), height + 1);
            prop_assert_eq!(stats.merge_passes, height);
            let y_rank_key = |k: u64| {
                let row = k as u32;
                (ys[row as usize], row)
            };
            for level in 0..height {
                let block = 1usize << (height - level);
                for s in (0..n).step_by(block) {
                    let end = (s + block).min(n);
                    let mid = (s + block / 2).min(end);
                    let mut merged = levels[level + 1][s..end].to_vec();
                    merged.sort_by_key(|&k| y_rank_key(k));
                    prop_assert_eq!(&levels[level][s..end], &merged[..]);
                    for p in s..end {
                        let from_right = levels[level + 1][mid..end].contains(&levels[level][p]);
                        prop_assert_eq!(bits[level].get(p), from_right);
                    }
                }
            }
            // Row ids kept by the passes are those of levels 1 to height - 1.
            prop_assert_eq!(rows.len(), height.saturating_sub(1));
            for (level, rows) in rows.iter().enumerate() {
                let expected: Vec<u32> = levels[level + 1].iter().map(|&k| k as u32).collect();
                prop_assert_eq!(&rows[..], &expected[..]);
            }
            // The leaves are in x-rank order.
            let leaves: Vec<u64> = (0..n as u64).map(|r| (r << 32) | r).collect();
            prop_assert_eq!(&levels[height], &leaves);
        }
    }
}
