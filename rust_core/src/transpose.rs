//! The build side of y statistics: the transposed count cascade.
//!
//! The tree's levels split x-rank space, so the k-th smallest x of a box is one descent
//! (`stats.rs`). The k-th smallest y needs the same levels with the axes swapped: the root
//! in x-rank order, each level splitting y-rank space by one y-rank bit. Only its 16-way
//! count cascade is kept (`wide.rs`, 0.25 bytes a point a level), since a y statistic
//! counts and descends but never reports through it.
//!
//! It is derived from the tree's own cascade bits, so a loaded tree derives it exactly as a
//! built one: replaying the merges from the leaves up gives every root position's x-rank
//! (the root is in y-rank order), inverting that gives every x-rank's y-rank, and the
//! transposed levels are made from it by the build's own level passes.

use rayon::prelude::*;

use crate::alloc;
use crate::build::split_all_levels;
use crate::replay::{replay_range, REPLAY_CHUNK};
use crate::tree::{BuildStats, RangeTree};
use crate::wide::WideCascade;

/// The transposed count cascade of `tree` (whose cascade bits are checked).
pub(crate) fn transposed_cascade(tree: &RangeTree) -> WideCascade {
    let n = tree.n;
    let y_rank_of_x = y_ranks_by_x_rank(tree);
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

/// For every x-rank, the y-rank of its point.
fn y_ranks_by_x_rank(tree: &RangeTree) -> Vec<u32> {
    let (n, h) = (tree.n, tree.height);
    // Level h holds the points in x-rank order; each level up takes every position's x-rank
    // from where its merge took the element from.
    let mut below: Vec<u32> = alloc::collect((0..n as u32).into_par_iter());
    let mut level_x = alloc::filled(n, 0u32);
    for l in (0..h).rev() {
        let block = 1usize << (h - l);
        let bits = &tree.bits[l];
        let from_below = &below;
        level_x
            .par_chunks_mut(REPLAY_CHUNK)
            .enumerate()
            .for_each(|(chunk, out)| {
                let start = chunk * REPLAY_CHUNK;
                let end = start + out.len();
                replay_range(bits, block, start, end, |p, from, _, _| {
                    out[p - start] = from_below[from];
                    true
                });
            });
        std::mem::swap(&mut below, &mut level_x);
    }
    // `below` is now the root: the x-rank of every y-rank.
    let mut y_of_x = level_x;
    for (y, &x) in below.iter().enumerate() {
        y_of_x[x as usize] = y as u32;
    }
    y_of_x
}
