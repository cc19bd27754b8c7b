//! The build side of y statistics: the transposed count cascade.
//!
//! The tree's levels split x-rank space, so the k-th smallest x of a box is one descent
//! (`stats.rs`). The k-th smallest y needs the same levels with the axes swapped: the root
//! in x-rank order, each level splitting y-rank space by one y-rank bit. Only its 16-way
//! count cascade is kept (`wide.rs`, 0.25 bytes a point a level), since a y statistic
//! counts and descends but never reports through it.
//!
//! It is derived from the tree's own cascade bits, so a loaded tree derives it exactly as a
//! built one: every x-rank's y-rank (the merges replayed from the leaves up, `columns.rs`),
//! then the transposed levels made from them by the build's own level passes.

use rayon::prelude::*;

use crate::alloc;
use crate::build::split_all_levels;
use crate::tree::{BuildStats, RangeTree};
use crate::wide::WideCascade;

/// The transposed count cascade of `tree` (whose cascade bits are checked).
pub(crate) fn transposed_cascade(tree: &RangeTree) -> WideCascade {
    let n = tree.n;
    let y_rank_of_x = tree.y_ranks();
    // The root of the transposed levels: the points in x-rank order, keyed by y-rank (what
    // the level passes split by) with the x-rank as the ride-along "row".
    let root: Vec<u64> = alloc::collect(
        y_rank_of_x
            .par_iter()
            .enumerate()
            .map(|(x, &y)| ((y as u64) << 32) | x as u64),
    );
    drop(y_rank_of_x);
    let (bits, _) = split_all_levels(
        root,
        tree.height,
        &mut BuildStats::default(),
        false,
        |_, _| {},
    );
    WideCascade::derive(&bits, n)
}
