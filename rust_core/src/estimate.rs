//! How much memory a tree will take, known before anything is allocated.
//!
//! ```
//! use boxwood_core::{estimate, Layout, WeightKind};
//!
//! let e = estimate(10_000_000, Layout::Compact, None);
//! assert!(e.index_bytes < e.peak_build_bytes);
//! let weighted = estimate(10_000_000, Layout::Compact, Some(WeightKind::F64));
//! assert!(weighted.index_bytes > e.index_bytes);
//! ```

use crate::bits::{lines_for, Line};
use crate::build::height_for;
use crate::tree::Layout;

/// How the weights' per-level prefix sums are stored.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum WeightKind {
    F64,
    /// Integer weights whose absolute values add up to less than 2^63.
    I64,
    /// Integer weights beyond that, summed exactly in 128 bits.
    I128,
}

impl WeightKind {
    fn bytes(self) -> usize {
        match self {
            WeightKind::F64 | WeightKind::I64 => 8,
            WeightKind::I128 => 16,
        }
    }
}

/// Bytes a tree of `n` rows holds once built, and the most the build holds at once.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Estimate {
    /// Exactly what [`crate::RangeTree::nbytes`] will report.
    pub index_bytes: usize,
    /// The build's own peak (the caller's input columns come on top): an upper bound on how
    /// much the process's resident memory grows, including [`THREADS_FIXED_BYTES`] and
    /// [`THREAD_BYTES`] for each thread of the pool that runs the build.
    pub peak_build_bytes: usize,
    /// What the first y statistic adds to the tree (`stats.rs`): the transposed count
    /// cascade, which then shows in `nbytes` too; its derivation holds about 16 bytes a point
    /// more while it runs.
    pub y_statistics_bytes: usize,
}

/// What a build costs besides its arrays, whatever `n`: the worker threads' first use of
/// their stacks and allocator arenas, library pages touched for the first time. Measured at
/// below 1 MiB on 2 cores (`tests/test_memory.py`); 4 MiB leaves room for other allocators.
pub const THREADS_FIXED_BYTES: usize = 4 << 20;
/// The same, for each thread of the pool: its stack and arena as first touched.
pub const THREAD_BYTES: usize = 64 << 10;

/// The memory a tree of `n` rows takes, computed from the same sizes the build allocates.
pub fn estimate(n: usize, layout: Layout, weights: Option<WeightKind>) -> Estimate {
    estimate_keyed(n, layout, weights, None)
}

/// [`estimate`] for a tree built with `keys` key codes (`None`: without keys).
pub fn estimate_keyed(
    n: usize,
    layout: Layout,
    weights: Option<WeightKind>,
    keys: Option<usize>,
) -> Estimate {
    let height = height_for(n);
    let sorted_axis = n * 8 + crate::search::nbytes_for(n);
    // A keyed x axis has no root-search index but the key offsets.
    let x_axis = match keys {
        None => sorted_axis,
        Some(k) => n * 8 + crate::keyed::nbytes_for(k),
    };
    let bits = height * lines_for(n) * std::mem::size_of::<Line>();
    let level_rows = match layout {
        Layout::Fast => height.saturating_sub(1) * n * 4,
        Layout::Compact => 0,
    };
    let leaf_rows = n * 4;
    let weight_levels = weights.map_or(0, |w| height * n * w.bytes());
    let count_cascade = crate::wide::WideCascade::nbytes_for(n, height);
    let index_bytes =
        x_axis + sorted_axis + bits + level_rows + leaf_rows + weight_levels + count_cascade;

    // The presorts (`presort.rs`): both axes' u64 keys, and per axis (run side by side) the
    // packed `prefix << 32 | row` values with the radix sort's second buffer of them; then the
    // row order with the sorted keys, and at worst (a run of equal prefixes holding every
    // point) the run's packed values and their radix buffer.
    let presort_peak = 2 * n * 8 + 2 * (2 * n * 8).max(n * 4 + n * 8 + 2 * n * 8);
    // A keyed x presort (`presort::sort_rows_by_code_and_key`) sorts the key code with the
    // x key, in the same buffers; its runs' offsets are made beside its packed values.
    let keyed_peak = keys.map_or(0, |k| presort_peak + crate::keyed::nbytes_for(k));
    // The level passes (`build.rs`): the finished arrays, the x ranks and the y order, and
    // the two level buffers (a u64 key each, plus the weight's bits when there are weights).
    let item = if weights.is_some() { 16 } else { 8 };
    let merge_peak = index_bytes + 2 * n * 4 + 2 * n * item;
    let threads = THREADS_FIXED_BYTES + THREAD_BYTES * rayon::current_num_threads();
    Estimate {
        index_bytes,
        peak_build_bytes: presort_peak.max(keyed_peak).max(merge_peak) + threads,
        y_statistics_bytes: count_cascade,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{build, build_keyed, Column, KeyColumn, WeightColumn};

    #[test]
    fn index_bytes_are_exactly_what_a_built_tree_holds() {
        for n in [0usize, 1, 2, 15, 16, 17, 447, 448, 449, 5000] {
            let x: Vec<f64> = (0..n).map(|i| (i % 97) as f64).collect();
            let y: Vec<i64> = (0..n).map(|i| (i % 13) as i64).collect();
            let small: Vec<i64> = (0..n).map(|i| i as i64).collect();
            let huge: Vec<i64> = vec![i64::MAX / 2; n];
            let cases: [(Option<WeightColumn<'_>>, Option<WeightKind>); 4] = [
                (None, None),
                (Some(WeightColumn::F64(&x)), Some(WeightKind::F64)),
                (Some(WeightColumn::I64(&small)), Some(WeightKind::I64)),
                (Some(WeightColumn::I64(&huge)), Some(WeightKind::I128)),
            ];
            for layout in [Layout::Fast, Layout::Compact] {
                for (w, kind) in cases {
                    if kind == Some(WeightKind::I128) && n < 3 {
                        continue; // two or fewer halves of i64::MAX still fit in i64 sums
                    }
                    let tree = build(Column::F64(&x), Column::I64(&y), w, layout).unwrap();
                    let e = estimate(n, layout, kind);
                    assert_eq!(e.index_bytes, tree.nbytes(), "n={n} {layout:?} {kind:?}");
                    assert!(e.peak_build_bytes >= e.index_bytes);
                    let before = tree.nbytes();
                    tree.transposed().unwrap();
                    assert_eq!(tree.nbytes() - before, e.y_statistics_bytes, "n={n}");
                    // Keyed: seven codes, one of them without points.
                    let codes: Vec<u32> = (0..n).map(|i| (i % 6) as u32).collect();
                    let keys = KeyColumn {
                        codes: &codes,
                        count: 7,
                    };
                    let tree = build_keyed(Column::F64(&x), Column::I64(&y), w, Some(keys), layout)
                        .unwrap();
                    let e = estimate_keyed(n, layout, kind, Some(7));
                    assert_eq!(
                        e.index_bytes,
                        tree.nbytes(),
                        "keyed n={n} {layout:?} {kind:?}"
                    );
                    assert!(e.peak_build_bytes >= e.index_bytes);
                }
            }
        }
    }
}
