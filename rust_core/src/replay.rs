//! Replaying the merge that built a level, from its cascade bits alone.
//!
//! Level `l` was made by merging each block's two children on level `l + 1`; its bits say,
//! for every position, which child the element came from. Reading the bits in order and
//! counting ones gives, for every position `p`, the position `from` on level `l + 1` that the
//! merge took it from. The loader replays merges to check that level rows and prefix sums
//! follow the bits; the 16-way count cascade (`wide.rs`) replays them to work out every
//! element's x-rank digits without storing x-ranks anywhere.

use rayon::prelude::*;

use crate::bits::{Line, RankBits, BITS_PER_LINE};

/// Positions replayed by one parallel task: a multiple of 64.
pub(crate) const REPLAY_CHUNK: usize = 1 << 16;

/// Replay positions `[start, end)` of one level whose blocks hold `block` positions, calling
/// `visit(p, from, right, starts)` for each: where the merge took position `p` from on the
/// level below, whether from the right child, and whether `p` starts a block. Returns false
/// as soon as a word of 64 positions had a `visit` that returned false.
///
/// The bits must be balanced (every block sends exactly its right half's size right, as a
/// merge does, and as the loader checks first), which keeps every `from` inside its child.
///
/// This reads every element of a level, so it is one tight loop: the two streams a block
/// merges are read in order, and which one an element comes from is picked without a branch
/// (the bits are random, so a branch would miss half the time).
#[inline]
pub(crate) fn replay_range(
    bits: &RankBits,
    block: usize,
    start: usize,
    end: usize,
    mut visit: impl FnMut(usize, usize, bool, bool) -> bool,
) -> bool {
    let half = block / 2;
    // A line is its count of earlier ones, then seven words of bits; a line holds a multiple
    // of 64 positions, so every word starts at a multiple of 64.
    let words: &[u64] = bytemuck::cast_slice(bits.lines());
    let words_per_line = std::mem::size_of::<Line>() / 8;
    // Blocks of 64 or more start on a word: one test a word, not one an element.
    let wide = block >= 64;
    let (mut block_start, mut ones) = state_at(bits, block, start);
    let mut ok = true;
    let mut first = start;
    while first < end {
        let (line, offset) = (first / BITS_PER_LINE, first % BITS_PER_LINE);
        let word = words[line * words_per_line + 1 + offset / 64];
        let mut word_starts_block = false;
        if wide && first & (block - 1) == 0 {
            (block_start, ones, word_starts_block) = (first, 0, true);
        }
        for p in first..(first + 64).min(end) {
            let mut starts = word_starts_block && p == first;
            if !wide && p & (block - 1) == 0 {
                (block_start, ones, starts) = (p, 0, true);
            }
            let right = ((word >> (p - first)) & 1) as usize;
            // Left: the next of the left child, at p - ones. Right: the next of the right
            // child, at block_start + half + ones.
            let from_left = p - ones;
            let from_right = block_start + half + ones;
            let from = from_left ^ ((from_left ^ from_right) & right.wrapping_neg());
            ones += right;
            ok &= visit(p, from, right == 1, starts);
        }
        if !ok {
            return false;
        }
        first = (first + 64).min(end);
    }
    true
}

/// The block that holds `start`, and the ones of that block before `start`: earlier blocks
/// are full and each sends half its size right.
#[inline]
pub(crate) fn state_at(bits: &RankBits, block: usize, start: usize) -> (usize, usize) {
    let block_start = start & !(block - 1);
    (block_start, bits.rank1(start) - block_start / 2)
}

/// [`replay_range`] over a whole level in parallel chunks, each checked by the closure that
/// `chunk_check(start, block_start, ones)` makes for the chunk starting at `start` (given its
/// block's start and that block's ones before `start`). True if every check passed.
pub(crate) fn walk_merge<C, F>(bits: &RankBits, block: usize, chunk_check: C) -> bool
where
    C: Fn(usize, usize, usize) -> F + Sync,
    F: FnMut(usize, usize, bool, bool) -> bool,
{
    let n = bits.len_bits();
    (0..n.div_ceil(REPLAY_CHUNK)).into_par_iter().all(|chunk| {
        let start = chunk * REPLAY_CHUNK;
        let end = (start + REPLAY_CHUNK).min(n);
        let (block_start, ones) = state_at(bits, block, start);
        replay_range(
            bits,
            block,
            start,
            end,
            chunk_check(start, block_start, ones),
        )
    })
}
