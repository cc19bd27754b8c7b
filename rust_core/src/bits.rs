//! A bit vector with its rank directory interleaved, one cache line per 448 bits.
//!
//! Each 64-byte line holds the number of ones before it and seven 64-bit words of data, so a
//! rank (ones before a position) reads exactly one cache line: 1.14 bits per stored bit.

use rayon::prelude::*;

use crate::slab::Slab;

/// One cache line: the ones before it, then 448 bits.
#[repr(C, align(64))]
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, bytemuck::Pod, bytemuck::Zeroable)]
pub struct Line {
    ones_before: u64,
    words: [u64; WORDS_PER_LINE],
}

const WORDS_PER_LINE: usize = 7;
/// Bits of data in one line.
pub const BITS_PER_LINE: usize = WORDS_PER_LINE * 64;

/// An immutable bit vector answering `rank1` in O(1) from one cache line.
#[derive(Clone, Debug, Default)]
pub struct RankBits {
    lines: Slab<Line>,
    len: usize,
}

/// Bits being written: all zero at first, filled line by line, then sealed into
/// [`RankBits`].
pub struct RankBitsWriter {
    lines: Vec<Line>,
    len: usize,
}

/// Lines that hold `len` bits: one spare, so that `rank1(len)` never reads past the end.
pub fn lines_for(len: usize) -> usize {
    len / BITS_PER_LINE + 1
}

impl RankBitsWriter {
    /// `len` zero bits.
    pub fn zeroed(len: usize) -> Self {
        let lines = crate::alloc::filled(lines_for(len), Line::default());
        RankBitsWriter { lines, len }
    }

    /// Set every bit `p` for which `bit(p)` holds, in parallel over runs of lines.
    pub fn fill(&mut self, bit: impl Fn(usize) -> bool + Sync) {
        let len = self.len;
        self.lines
            .par_chunks_mut(256)
            .enumerate()
            .for_each(|(chunk, lines)| {
                for (i, line) in lines.iter_mut().enumerate() {
                    let first = (chunk * 256 + i) * BITS_PER_LINE;
                    for (w, word) in line.words.iter_mut().enumerate() {
                        let start = (first + 64 * w).min(len);
                        let end = (start + 64).min(len);
                        *word = (start..end)
                            .map(|p| (bit(p) as u64) << (p - start))
                            .fold(0, |a, b| a | b);
                    }
                }
            });
    }

    /// Fill in the per-line counts once every bit is written.
    pub fn seal(mut self) -> RankBits {
        let mut ones = 0u64;
        for line in &mut self.lines {
            line.ones_before = ones;
            ones += line.ones();
        }
        RankBits {
            lines: self.lines.into(),
            len: self.len,
        }
    }
}

impl RankBits {
    /// Bits read back from a file, with exactly the lines `len` bits need, whose counts are
    /// checked later ([`Self::counts_hold`]) before any rank is taken. Until then a rank may
    /// be wrong, but reads no line past the end.
    pub(crate) fn from_lines_unchecked(lines: Slab<Line>, len: usize) -> Option<Self> {
        (lines.len() == lines_for(len)).then_some(RankBits { lines, len })
    }

    /// Whether every per-line count is right and no bit at or past `len` is set.
    pub(crate) fn counts_hold(&self) -> bool {
        let mut ones = 0u64;
        for line in self.lines.iter() {
            if line.ones_before != ones {
                return false;
            }
            ones += line.ones();
        }
        let tail = self.len % BITS_PER_LINE;
        let Some(last) = self.lines.last() else {
            return false;
        };
        last.words.iter().enumerate().all(|(i, &w)| {
            let first_unused = tail.saturating_sub(i * 64).min(64);
            first_unused == 64 || w >> first_unused == 0
        })
    }

    /// The lines as stored, for writing to a file.
    pub fn lines(&self) -> &[Line] {
        &self.lines
    }

    /// Number of bits.
    pub fn len_bits(&self) -> usize {
        self.len
    }

    pub fn nbytes(&self) -> usize {
        self.lines.len() * std::mem::size_of::<Line>()
    }

    /// Ones in positions `[0, pos)`; `pos <= len`.
    #[inline(always)]
    pub fn rank1(&self, pos: usize) -> usize {
        debug_assert!(pos <= self.len);
        let line = &self.lines[pos / BITS_PER_LINE];
        let offset = pos % BITS_PER_LINE;
        let full_words = offset / 64;
        let mut ones = line.ones_before as usize;
        // A fixed trip count with masks keeps this branch-free.
        for (i, word) in line.words.iter().enumerate() {
            let mask = if i < full_words {
                u64::MAX
            } else if i == full_words {
                (1u64 << (offset % 64)) - 1
            } else {
                0
            };
            ones += (word & mask).count_ones() as usize;
        }
        ones
    }

    /// The line that holds `pos` (what [`Self::rank1`] reads).
    #[inline(always)]
    pub(crate) fn line_at(&self, pos: usize) -> &Line {
        &self.lines[pos / BITS_PER_LINE]
    }

    /// Ask the CPU to start loading the line that holds `pos`.
    #[inline(always)]
    pub fn prefetch(&self, pos: usize) {
        if let Some(line) = self.lines.get(pos / BITS_PER_LINE) {
            crate::prefetch::prefetch_read(line as *const Line as *const u8);
        }
    }

    /// The bit at `pos`.
    #[cfg(test)]
    pub fn get(&self, pos: usize) -> bool {
        let line = &self.lines[pos / BITS_PER_LINE];
        let offset = pos % BITS_PER_LINE;
        (line.words[offset / 64] >> (offset % 64)) & 1 == 1
    }
}

impl Line {
    fn ones(&self) -> u64 {
        self.words.iter().map(|w| w.count_ones() as u64).sum()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn build(bits: &[bool]) -> RankBits {
        let mut rb = RankBitsWriter::zeroed(bits.len());
        rb.fill(|i| bits[i]);
        rb.seal()
    }

    #[test]
    fn line_is_one_cache_line() {
        assert_eq!(std::mem::size_of::<Line>(), 64);
        assert_eq!(std::mem::align_of::<Line>(), 64);
    }

    #[test]
    fn rank_at_line_edges() {
        let bits = vec![true; 3 * BITS_PER_LINE];
        let rb = build(&bits);
        for pos in [0, 1, 447, 448, 449, 895, 896, 1344] {
            assert_eq!(rb.rank1(pos), pos);
        }
    }

    proptest! {
        #[test]
        fn rank_and_get_match_a_scan(bits in proptest::collection::vec(any::<bool>(), 0..2000)) {
            let rb = build(&bits);
            let mut ones = 0;
            for (i, &b) in bits.iter().enumerate() {
                prop_assert_eq!(rb.rank1(i), ones);
                prop_assert_eq!(rb.get(i), b);
                ones += b as usize;
            }
            prop_assert_eq!(rb.rank1(bits.len()), ones);
        }
    }
}
