//! What a full verification adds for float weights: their prefix sums derived again from the
//! leaf weights and compared bit for bit.
//!
//! Float prefix sums are rounded, so unlike integer ones they cannot be checked level by
//! level from the two children's sums. They are derivable all the same: the leaf level's
//! blocks hold one position each, so its stored prefix sums are the leaf weights themselves;
//! carrying each weight up through the levels in the order the cascade bits give, and summing
//! every block with the build's own routine ([`neumaier_prefix_sums`]), gives exactly the sums
//! a build writes.

use rayon::prelude::*;

use super::error::FormatError;
use crate::alloc;
use crate::bits::RankBits;
use crate::build::neumaier_prefix_sums;
use crate::replay::{replay_range, REPLAY_CHUNK};
use crate::slab::Slab;

/// Every level's float prefix sums (`levels[l - 1]` for level `l`, the leaves last) are the
/// ones the build makes from the leaf weights, and the leaf weights are finite, as every
/// build's are. The cascade bits must have been checked (balanced) first.
pub(super) fn check_float_prefix_sums(
    bits: &[RankBits],
    levels: &[Slab<f64>],
) -> Result<(), FormatError> {
    let height = bits.len();
    let Some(leaves) = levels.last() else {
        return Ok(());
    };
    if leaves.iter().any(|w| !w.is_finite()) {
        return Err(FormatError::Corrupt(
            "float leaf weights include a NaN or an infinity, which no build writes".into(),
        ));
    }
    // Each level's weights in its own order, from the leaves up: two buffers, swapped.
    let mut below: Vec<f64> = leaves.to_vec();
    let mut here = alloc::filled(below.len(), 0.0f64);
    for level in (1..height).rev() {
        let block = 1usize << (height - level);
        carry_up(&bits[level], block, &below, &mut here);
        if !sums_match(&here, &levels[level - 1], block) {
            return Err(FormatError::Corrupt(format!(
                "float prefix sums of level {level} are not those of the weights below them"
            )));
        }
        std::mem::swap(&mut below, &mut here);
    }
    Ok(())
}

/// The weights of a level in its order (`here`) from those of the level below (`below`):
/// each position takes the weight the merge that built the level took from below.
fn carry_up(bits: &RankBits, block: usize, below: &[f64], here: &mut [f64]) {
    here.par_chunks_mut(REPLAY_CHUNK)
        .enumerate()
        .for_each(|(chunk, out)| {
            let start = chunk * REPLAY_CHUNK;
            replay_range(bits, block, start, start + out.len(), |p, from, _, _| {
                out[p - start] = below[from];
                true
            });
        });
}

/// Whether the stored prefix sums of every block equal, bit for bit, the ones the build's
/// routine gives for `weights`; NaN equals any NaN, since Rust leaves a NaN result's payload
/// unspecified.
fn sums_match(weights: &[f64], stored: &[f64], block: usize) -> bool {
    weights
        .par_chunks(block)
        .zip(stored.par_chunks(block))
        .all(|(weights, stored)| {
            let mut stored = stored.iter();
            let mut same = true;
            neumaier_prefix_sums(weights.iter().copied(), |s| {
                let kept = stored.next().copied().unwrap_or(f64::NAN);
                same &= s.to_bits() == kept.to_bits() || (s.is_nan() && kept.is_nan());
            });
            same
        })
}
