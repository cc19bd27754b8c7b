//! The build side: two presorts, then one linear merge pass per level, bottom up.
//!
//! Level `height` (the leaves) holds the points in x-rank order. Level `l` splits x-rank space
//! into blocks of `2^(height - l)` ranks; a block's points sit at the block's own x-rank
//! positions, in y-rank order. Level `l` is made from level `l + 1` by merging each block's two
//! children, and the merge records in one bit per element which child it came from: the
//! fractional-cascading bits that let a query follow a y-rank interval from a node to its
//! children with two rank lookups.

use rayon::prelude::*;

use crate::alloc;
use crate::bits::{Line, RankBits, RankBitsWriter, BITS_PER_LINE};
use crate::error::{Axis, Error};
use crate::keys::{Column, SortedAxis};
use crate::presort::sort_rows_by_key;
use crate::slab::Slab;
use crate::tree::{BuildStats, Layout, LevelWeights, RangeTree};

/// The most rows a tree holds: row ids are `u32`, and `u32::MAX` itself is kept free.
pub const MAX_ROWS: usize = u32::MAX as usize;

/// Output positions one merge task produces; a multiple of a bit line so that tasks never
/// share a line.
const MERGE_CHUNK: usize = BITS_PER_LINE * 256;

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
    let x_keys = x.keys(Axis::X)?;
    let y_keys = y.keys(Axis::Y)?;
    let mut stats = BuildStats::default();

    let ((order_x, x_sorted), (order_y, y_sorted)) =
        rayon::join(|| sort_rows_by_key(&x_keys), || sort_rows_by_key(&y_keys));
    drop((x_keys, y_keys));
    stats.presorts = 2;

    let mut y_rank = alloc::filled(n, 0u32);
    for (rank, &row) in order_y.iter().enumerate() {
        y_rank[row as usize] = rank as u32;
    }
    drop(order_y);

    let height = height_for(n);
    let leaf_key = |row: u32| ((y_rank[row as usize] as u64) << 32) | row as u64;
    let mut levels = LevelsOut::new(layout, weights.as_ref(), height);
    let bits = match weights {
        None => {
            let leaves: Vec<u64> = alloc::collect(order_x.par_iter().map(|&row| leaf_key(row)));
            merge_all_levels(leaves, height, &mut stats, |level, items| {
                levels.keep(level, items)
            })
        }
        Some(w) => {
            let leaves: Vec<Weighted> = alloc::collect(order_x.par_iter().map(|&row| Weighted {
                key: leaf_key(row),
                weight: w.bits_of(row as usize),
            }));
            merge_all_levels(leaves, height, &mut stats, |level, items| {
                levels.keep(level, items)
            })
        }
    };
    drop(y_rank);

    Ok(RangeTree::from_parts(
        n,
        height,
        layout,
        SortedAxis::new(x.domain(), x_sorted),
        SortedAxis::new(y.domain(), y_sorted),
        bits,
        levels.rows,
        order_x.into(),
        levels.weights,
        stats,
    ))
}

/// An element being merged: its sort key `(y_rank << 32) | row`, and what rides along.
trait Item: Copy + Send + Sync + Default {
    fn key(&self) -> u64;
    fn row(&self) -> u32 {
        self.key() as u32
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

/// What the build keeps of each level besides its bits.
struct LevelsOut {
    layout: Layout,
    height: usize,
    weight_kind: Option<WeightKind>,
    /// Row ids of levels `1..height` (fast layout only), indexed by `level - 1`.
    rows: Vec<Slab<u32>>,
    weights: Option<LevelWeights>,
}

#[derive(Clone, Copy)]
enum WeightKind {
    F64,
    I64,
    I128,
}

impl LevelsOut {
    fn new(layout: Layout, weights: Option<&WeightColumn<'_>>, height: usize) -> Self {
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
        let rows = match layout {
            Layout::Fast => vec![Slab::default(); height.saturating_sub(1)],
            Layout::Compact => Vec::new(),
        };
        LevelsOut {
            layout,
            height,
            weight_kind,
            rows,
            weights,
        }
    }

    /// Keep what queries need of level `level` (`1..=height`); the root needs nothing.
    fn keep<T: Item>(&mut self, level: usize, items: &[T]) {
        if level == 0 {
            return;
        }
        let height = self.height;
        if self.layout == Layout::Fast && level < height {
            self.rows[level - 1] = alloc::collect(items.par_iter().map(|it| it.row())).into();
        }
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

/// Inclusive prefix sums restarted at every block, with compensated (Neumaier) summation so
/// each stored prefix is within one rounding of the exact one.
fn block_prefix_f64<T: Item>(items: &[T], block: usize) -> Vec<f64> {
    let mut out = alloc::filled(items.len(), 0.0);
    out.par_chunks_mut(block)
        .zip(items.par_chunks(block))
        .for_each(|(out, items)| {
            let (mut sum, mut carry) = (0.0f64, 0.0f64);
            for (o, it) in out.iter_mut().zip(items) {
                let w = f64::from_bits(it.weight_bits());
                let t = sum + w;
                carry += if sum.abs() >= w.abs() {
                    (sum - t) + w
                } else {
                    (w - t) + sum
                };
                sum = t;
                *o = sum + carry;
            }
        });
    out
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

/// Merge level by level from the leaves to the root, handing each level's items to `keep`,
/// and return the bits of levels `0..height`.
fn merge_all_levels<T: Item>(
    leaves: Vec<T>,
    height: usize,
    stats: &mut BuildStats,
    mut keep: impl FnMut(usize, &[T]),
) -> Vec<RankBits> {
    let n = leaves.len();
    keep(height, &leaves);
    let mut src = leaves;
    let mut dst = alloc::filled(n, T::default());
    let mut bits = vec![RankBits::default(); height];
    for level in (0..height).rev() {
        let block = 1usize << (height - level);
        let mut level_bits = RankBitsWriter::zeroed(n);
        merge_level(&src, &mut dst, level_bits.lines_mut(), block);
        bits[level] = level_bits.seal();
        stats.merge_passes += 1;
        stats.elements_merged += n as u64;
        keep(level, &dst);
        std::mem::swap(&mut src, &mut dst);
    }
    bits
}

/// One level: every block of `block` positions is the merge of its two halves in `src`.
fn merge_level<T: Item>(src: &[T], dst: &mut [T], lines: &mut [Line], block: usize) {
    let n = src.len();
    dst.par_chunks_mut(MERGE_CHUNK)
        .zip(lines.par_chunks_mut(MERGE_CHUNK / BITS_PER_LINE))
        .enumerate()
        .for_each(|(chunk, (out, lines))| {
            let p0 = chunk * MERGE_CHUNK;
            let p1 = p0 + out.len();
            let mut s = p0 / block * block;
            while s < p1 {
                let mid = (s + block / 2).min(n);
                let end = (s + block).min(n);
                let (left, right) = (&src[s..mid], &src[mid..end]);
                let k0 = p0.max(s) - s;
                let k1 = p1.min(end) - s;
                let out_start = s + k0 - p0;
                merge_piece(
                    left,
                    right,
                    k0,
                    k1,
                    &mut out[out_start..out_start + (k1 - k0)],
                    |k| {
                        let p = s + k - p0;
                        lines[p / BITS_PER_LINE].set(p % BITS_PER_LINE);
                    },
                );
                s += block;
            }
        });
}

/// Outputs `k0..k1` of the merge of `left` and `right`, calling `from_right(k)` for each
/// output `k` taken from `right`. Keys are distinct, so the merge is unambiguous.
fn merge_piece<T: Item>(
    left: &[T],
    right: &[T],
    k0: usize,
    k1: usize,
    out: &mut [T],
    mut from_right: impl FnMut(usize),
) {
    let mut i = merge_split(left, right, k0);
    let mut j = k0 - i;
    for (k, slot) in (k0..k1).zip(out.iter_mut()) {
        let take_right = i == left.len() || (j < right.len() && right[j].key() < left[i].key());
        if take_right {
            *slot = right[j];
            j += 1;
            from_right(k);
        } else {
            *slot = left[i];
            i += 1;
        }
    }
}

/// How many of the first `k` merged outputs come from `left` (the merge-path split).
fn merge_split<T: Item>(left: &[T], right: &[T], k: usize) -> usize {
    let mut lo = k.saturating_sub(right.len());
    let mut hi = k.min(left.len());
    while lo < hi {
        let mid = (lo + hi) / 2;
        if right[k - mid - 1].key() > left[mid].key() {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    lo
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
        #[test]
        fn merge_pieces_stitch_into_the_full_merge(
            mut a in proptest::collection::btree_set(0u64..10_000, 0..200),
            cut in 0usize..400,
        ) {
            let b: Vec<u64> = a.iter().filter(|v| *v % 3 == 0).copied().collect();
            a.retain(|v| v % 3 != 0);
            let a: Vec<u64> = a.into_iter().collect();
            let total = a.len() + b.len();
            let cut = cut.min(total);
            let mut out = vec![0u64; total];
            let (first, second) = out.split_at_mut(cut);
            let mut rights = Vec::new();
            merge_piece(&a, &b, 0, cut, first, |k| rights.push(k));
            merge_piece(&a, &b, cut, total, second, |k| rights.push(k));
            let mut expected: Vec<u64> = a.iter().chain(&b).copied().collect();
            expected.sort();
            prop_assert_eq!(&out, &expected);
            let expected_rights: Vec<usize> =
                (0..total).filter(|&k| expected[k] % 3 == 0).collect();
            prop_assert_eq!(rights, expected_rights);
        }
    }
}
