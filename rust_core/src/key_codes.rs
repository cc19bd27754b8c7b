//! Key columns as key codes: a column's distinct values in ascending order (its levels), and
//! each row's position among them, the code a keyed tree is built with (`keyed.rs`).
//!
//! This is for keys that are integers to the engine (integers, booleans, datetime ticks, all
//! handed over as `i64`); the codes are the same the caller would get by sorting the distinct
//! values and searching each row's value among them, only made in linear time on every core:
//!
//! * dense keys, whose values span few more integers than there are rows: a table with one
//!   slot a value of the span, marked where a value is present, then numbered in order, then
//!   read at every row;
//! * other keys: each chunk of rows numbers its own distinct values in a hash table of its own
//!   (in the order it first sees them), the chunks' distinct values are sorted together, and
//!   every chunk's numbers are mapped to their positions in that sorted whole.

use std::sync::atomic::{AtomicU32, Ordering};

use rayon::prelude::*;

use crate::alloc;
use crate::error::Error;
use crate::keyed::MAX_KEYS;

/// A key column's levels and its rows' codes: `levels[codes[i]] == values[i]`, `levels`
/// strictly ascending.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct KeyCodes {
    pub levels: Vec<i64>,
    pub codes: Vec<u32>,
}

/// The levels and codes of `values`; more than [`MAX_KEYS`] distinct values are refused.
pub fn code_keys(values: &[i64]) -> Result<KeyCodes, Error> {
    let Some((min, max)) = extremes(values) else {
        return Ok(KeyCodes {
            levels: Vec::new(),
            codes: Vec::new(),
        });
    };
    if is_dense(min, max, values.len()) {
        code_dense(values, min, (max as u64).wrapping_sub(min as u64) as usize)
    } else {
        code_hashed(values)
    }
}

/// Whether `n` values from `min` to `max` are coded through a table of their span.
fn is_dense(min: i64, max: i64, n: usize) -> bool {
    (max as u64).wrapping_sub(min as u64) < dense_span_limit(n)
}

/// Spans (largest less smallest value) below this are coded through a table of the span:
/// its `4 * (span + 1)` bytes stay within twice the codes' own.
fn dense_span_limit(n: usize) -> u64 {
    2 * n as u64 + 4096
}

fn extremes(values: &[i64]) -> Option<(i64, i64)> {
    values
        .par_chunks(1 << 16)
        .map(|c| {
            c.iter()
                .fold((i64::MAX, i64::MIN), |(lo, hi), &v| (lo.min(v), hi.max(v)))
        })
        .reduce_with(|a, b| (a.0.min(b.0), a.1.max(b.1)))
}

fn too_many(keys: usize) -> Error {
    Error::TooManyKeys {
        keys,
        max: MAX_KEYS,
    }
}

/// Marks not yet numbered: a slot holds `PRESENT` once some row has its value.
const PRESENT: u32 = 1;

fn code_dense(values: &[i64], min: i64, span: usize) -> Result<KeyCodes, Error> {
    let offset = |v: i64| (v as u64).wrapping_sub(min as u64) as usize;
    let mut table: Vec<AtomicU32> =
        alloc::collect((0..span + 1).into_par_iter().map(|_| AtomicU32::new(0)));
    values.par_iter().for_each(|&v| {
        let slot = &table[offset(v)];
        // Read first: once a value's slot is marked, rows of that value only read its line,
        // so the cores do not take it from each other.
        if slot.load(Ordering::Relaxed) == 0 {
            slot.store(PRESENT, Ordering::Relaxed);
        }
    });
    let mut levels = Vec::new();
    for (at, slot) in table.iter_mut().enumerate() {
        let mark = slot.get_mut();
        if *mark == PRESENT {
            *mark = levels.len() as u32;
            levels.push(min.wrapping_add(at as i64));
        }
        if levels.len() > MAX_KEYS {
            return Err(too_many(levels.len()));
        }
    }
    let codes = alloc::collect(
        values
            .par_iter()
            .map(|&v| table[offset(v)].load(Ordering::Relaxed)),
    );
    Ok(KeyCodes { levels, codes })
}

/// Rows one chunk of the hashed coding holds at least (small in tests, so that small
/// inputs are cut into several chunks).
const MIN_HASH_CHUNK: usize = if cfg!(test) { 8 } else { 1 << 16 };

fn code_hashed(values: &[i64]) -> Result<KeyCodes, Error> {
    let n = values.len();
    let chunks = (4 * rayon::current_num_threads())
        .min(n / MIN_HASH_CHUNK)
        .max(1);
    let chunk = n.div_ceil(chunks);
    let mut codes = alloc::filled(n, 0u32);
    // Each chunk's distinct values, in the order the chunk first saw them; its rows' codes
    // are for now positions in that list.
    let seen: Vec<Vec<i64>> = values
        .par_chunks(chunk)
        .zip(codes.par_chunks_mut(chunk))
        .map(|(values, codes)| number_in_chunk(values, codes))
        .collect();
    let (levels, remap) = merge_levels(&seen)?;
    let bases = chunk_bases(&seen);
    codes
        .par_chunks_mut(chunk)
        .zip(bases.par_iter())
        .for_each(|(codes, &base)| {
            let remap = &remap[base..];
            for code in codes {
                *code = remap[*code as usize];
            }
        });
    Ok(KeyCodes { levels, codes })
}

/// Where each chunk's list starts in the lists laid end to end.
fn chunk_bases(seen: &[Vec<i64>]) -> Vec<usize> {
    let mut base = 0;
    seen.iter()
        .map(|s| {
            let at = base;
            base += s.len();
            at
        })
        .collect()
}

/// The sorted distinct values of all the chunks' lists, and for every entry of the lists
/// laid end to end, its value's position among them.
fn merge_levels(seen: &[Vec<i64>]) -> Result<(Vec<i64>, Vec<u32>), Error> {
    let mut all: Vec<(i64, usize)> = seen
        .iter()
        .flatten()
        .enumerate()
        .map(|(at, &v)| (v, at))
        .collect();
    all.par_sort_unstable();
    let mut levels: Vec<i64> = Vec::new();
    let mut remap = vec![0u32; all.len()];
    for &(v, at) in &all {
        if levels.last() != Some(&v) {
            if levels.len() == MAX_KEYS {
                return Err(too_many(MAX_KEYS + 1));
            }
            levels.push(v);
        }
        remap[at] = (levels.len() - 1) as u32;
    }
    Ok((levels, remap))
}

/// Number the distinct values of one chunk in the order first seen, writing each row's
/// number to `codes`; the distinct values are returned in that order.
fn number_in_chunk(values: &[i64], codes: &mut [u32]) -> Vec<i64> {
    let mut table = ChunkTable::with_capacity(1024);
    for (&v, code) in values.iter().zip(codes.iter_mut()) {
        *code = table.number_of(v);
    }
    table.seen
}

/// An open-addressing hash table (linear probing) from a value to its number in one chunk.
struct ChunkTable {
    /// `slots[i]` is a number into `seen`, or `EMPTY`.
    slots: Vec<u32>,
    seen: Vec<i64>,
}

const EMPTY: u32 = u32::MAX;

impl ChunkTable {
    fn with_capacity(slots: usize) -> Self {
        ChunkTable {
            slots: vec![EMPTY; slots.next_power_of_two()],
            seen: Vec::new(),
        }
    }

    #[inline]
    fn slot_of(&self, v: i64) -> usize {
        (mix(v as u64) as usize) & (self.slots.len() - 1)
    }

    #[inline]
    fn number_of(&mut self, v: i64) -> u32 {
        let mask = self.slots.len() - 1;
        let mut at = self.slot_of(v);
        loop {
            let number = self.slots[at];
            if number == EMPTY {
                break;
            }
            if self.seen[number as usize] == v {
                return number;
            }
            at = (at + 1) & mask;
        }
        let number = self.seen.len() as u32;
        self.slots[at] = number;
        self.seen.push(v);
        // At most half full, so probe runs stay short.
        if 2 * self.seen.len() > self.slots.len() {
            self.grow();
        }
        number
    }

    fn grow(&mut self) {
        self.slots = vec![EMPTY; 2 * self.slots.len()];
        let mask = self.slots.len() - 1;
        for (number, &v) in self.seen.iter().enumerate() {
            let mut at = self.slot_of(v);
            while self.slots[at] != EMPTY {
                at = (at + 1) & mask;
            }
            self.slots[at] = number as u32;
        }
    }
}

/// The finaliser of SplitMix64 (Steele, Lea and Flood; constants from memory): every input
/// bit moves about half the output bits, so keys spaced by powers of two spread over the
/// table instead of falling into a few slots.
#[inline(always)]
fn mix(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use std::collections::BTreeSet;

    /// The definition: sort the distinct values, search each row's value among them.
    fn by_definition(values: &[i64]) -> KeyCodes {
        let levels: Vec<i64> = values
            .iter()
            .copied()
            .collect::<BTreeSet<_>>()
            .into_iter()
            .collect();
        let codes = values
            .iter()
            .map(|v| levels.binary_search(v).unwrap() as u32)
            .collect();
        KeyCodes { levels, codes }
    }

    fn check(values: &[i64]) {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(4)
            .build()
            .unwrap();
        let got = pool.install(|| code_keys(values)).unwrap();
        assert_eq!(got, by_definition(values));
    }

    #[test]
    fn both_ways_give_the_definitions_codes() {
        check(&[]);
        check(&[7]);
        check(&[3, 1, 3, 2, 1]); // dense
        check(&[i64::MIN, i64::MAX, 0, i64::MIN, -1]); // hashed, span of all of i64
        let spaced: Vec<i64> = (0..5000).map(|i| ((i * 37) % 200) << 40).collect();
        check(&spaced); // hashed, keys spaced by a power of two
        let wide: Vec<i64> = (0..3000).map(|i| (i % 5) * 10_000 - 7).collect();
        check(&wide);
    }

    #[test]
    fn spans_below_the_limit_are_dense_and_wider_ones_hashed() {
        let n = 100;
        let limit = dense_span_limit(n) as i64;
        assert!(is_dense(-5, limit - 6, n));
        assert!(!is_dense(-5, limit - 5, n));
        assert!(!is_dense(i64::MIN, i64::MAX, n));
        let mut values: Vec<i64> = (0..n as i64).collect();
        for top in [limit - 1, limit] {
            values[0] = top;
            check(&values);
        }
    }

    #[test]
    fn chunk_tables_grow_and_keep_their_numbers() {
        let values: Vec<i64> = (0..10_000).map(|i| (i * 7919) % 4999 - 2000).collect();
        let mut codes = vec![0u32; values.len()];
        let seen = number_in_chunk(&values, &mut codes);
        assert_eq!(seen.len(), 4999);
        for (&v, &c) in values.iter().zip(&codes) {
            assert_eq!(seen[c as usize], v);
        }
    }

    proptest! {
        #[test]
        fn codes_are_positions_among_the_sorted_distinct_values(
            values in proptest::collection::vec(
                prop_oneof![
                    -20i64..20,
                    any::<i64>(),
                    (0i64..8).prop_map(|v| v << 50),
                    Just(i64::MIN),
                    Just(i64::MAX),
                ],
                0..400,
            )
        ) {
            check(&values);
        }

        #[test]
        fn dense_keys_match_the_definition(
            values in proptest::collection::vec(-300i64..300, 0..600)
        ) {
            check(&values);
        }
    }
}
