//! The count path: a 16-way cascade over every fourth level.
//!
//! The binary cascade carries a y-rank interval down one level with two rank lookups; at
//! 10^7 points that is 24 levels, and at that size almost every lookup misses the cache. A
//! count needs neither row ids nor weights, only how many points of a node's y-interval lie
//! left of a root-to-leaf path. So the tree also keeps a cascade that takes four levels at a
//! step: for every element of the level where a step starts, the 4-bit digit of its x-rank
//! that names which of the 16 blocks four levels down it falls into. The first step takes
//! what the height leaves over (`height % 4` levels, or four), so the steps start on levels
//! 0, 4, 8, ... when the height is a multiple of four and, say, on 0, 3, 7, ... at height 27;
//! a first step of `r` levels has `2^r`-way digits. One 64-byte line holds the digits of 64
//! elements as four bit planes, next to per-digit counts of the elements before the line, so
//! one line answers both questions a step asks at a position: how many earlier elements of the level have a
//! digit below `c` (the points left of the path), and how many have digit `c` (where the
//! interval lands on the step's last level). A count reads a quarter of the lines the binary
//! cascade would, and each line once.
//!
//! The digits follow from the binary cascade bits alone (replaying each level's merge, see
//! `replay.rs`). A build derives them; an index file stores them, so that a load uses them
//! where they lie. A load checks what keeps every position a count reads in bounds (each
//! line's counts are those of the digits before it, every block holds each digit as often
//! as its x-ranks say) in one pass over the lines; whether the digits are the ones the bits
//! give is checked only by a full verification, which derives them again and compares.
//!
//! Memory: one line per 64 elements per step, 1 byte a point a step (0.25 bytes a point a
//! level), plus one line per 65,536 elements a step for the counts before each superblock.

use rayon::prelude::*;

use crate::alloc;
use crate::bits::RankBits;
use crate::probe::{read_one, Part, Probe};
use crate::replay::{replay_range, REPLAY_CHUNK};
use crate::slab::Slab;

/// Levels one step takes at most: digits of 4 bits, 16 blocks below a node.
const DIGIT_BITS: usize = 4;
const FANOUT: usize = 1 << DIGIT_BITS;
/// Elements in one line.
const PER_LINE: usize = 64;
/// Lines in a superblock: the in-line counts are `u16`, relative to their superblock, which
/// holds fewer than 2^16 elements before any of its lines.
const LINES_PER_SUPER: usize = 1024;
const PER_SUPER: usize = PER_LINE * LINES_PER_SUPER;

/// The digits of 64 consecutive elements of a level and the counts before them.
#[repr(C, align(64))]
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, bytemuck::Pod, bytemuck::Zeroable)]
pub(crate) struct DigitLine {
    /// Elements of this line's superblock before this line whose digit is at most `c`.
    at_most: [u16; FANOUT],
    /// Bit `j` of the digit of each of the line's 64 elements.
    planes: [u64; DIGIT_BITS],
}

/// One step: from binary level `level` down `width` levels.
#[derive(Clone, Debug)]
struct Step {
    level: usize,
    width: usize,
    lines: Slab<DigitLine>,
    /// Elements before each superblock whose digit is at most `c`.
    supers: Slab<Supers>,
}

/// Elements before a superblock whose digit is at most `c`, for each `c`.
pub(crate) type Supers = [u32; FANOUT];

/// The 16-way count cascade of one tree.
#[derive(Clone, Debug, Default)]
pub(crate) struct WideCascade {
    height: usize,
    steps: Vec<Step>,
    /// For each level `0..=height`, the step that starts there, if one does.
    step_at: Vec<Option<usize>>,
}

/// A run one step down: `(level, block start, start, end)` with `start..end` relative to the
/// block, as [`WideCascade::split_run`] hands them out.
pub(crate) type ChildRun = (usize, usize, usize, usize);

/// Where the steps start and how many levels each takes: the first step takes what is left
/// over, so that every later step is a full four levels.
fn step_plan(height: usize) -> Vec<(usize, usize)> {
    let mut plan = Vec::new();
    let mut level = 0;
    while level < height {
        let width = match (level, height % DIGIT_BITS) {
            (0, 0) => DIGIT_BITS,
            (0, rest) => rest,
            _ => DIGIT_BITS,
        };
        plan.push((level, width));
        level += width;
    }
    plan
}

impl WideCascade {
    /// The cascade of a tree with these (balanced) bits on levels `0..bits.len()`.
    pub(crate) fn derive(bits: &[RankBits], n: usize) -> Self {
        let height = bits.len();
        // Two digit buffers serve every step: fresh memory is slow to touch the first time.
        let mut buffers = (alloc::filled(n, 0u8), alloc::filled(n, 0u8));
        let steps: Vec<Step> = step_plan(height)
            .into_iter()
            .map(|(level, width)| Step::derive(bits, level, width, &mut buffers))
            .collect();
        let mut step_at = vec![None; height + 1];
        for (i, step) in steps.iter().enumerate() {
            step_at[step.level] = Some(i);
        }
        WideCascade {
            height,
            steps,
            step_at,
        }
    }

    /// Bytes the cascade of a tree of `n` points and this height takes: what [`Self::nbytes`]
    /// will report, known before the build.
    pub(crate) fn nbytes_for(n: usize, height: usize) -> usize {
        let (lines, supers) = Self::step_lens(n);
        Self::steps_for(height) * (lines + supers) * 64
    }

    /// Steps of a tree of this height.
    pub(crate) fn steps_for(height: usize) -> usize {
        step_plan(height).len()
    }

    /// Digit lines and superblock entries of one step over `n` points (64 bytes each).
    pub(crate) fn step_lens(n: usize) -> (usize, usize) {
        let lines = n / PER_LINE + 1;
        (lines, lines.div_ceil(LINES_PER_SUPER))
    }

    /// Each step's lines and superblock counts, for writing to a file.
    pub(crate) fn steps(&self) -> impl Iterator<Item = (&[DigitLine], &[Supers])> {
        self.steps.iter().map(|s| (&s.lines[..], &s.supers[..]))
    }

    /// A cascade read from a file for a tree of `n` points and this height, one
    /// `(lines, supers)` pair a step; refused (saying what is wrong) unless every line's and
    /// superblock's counts are those of the digits before it, no digit is set past `n` or
    /// wider than its step, and every block holds each digit exactly as often as its
    /// x-ranks say. That keeps every position a count or a report computes inside its
    /// block; whether the digits are the ones the cascade bits give is for
    /// [`Self::same_as`] to say.
    pub(crate) fn from_file(
        n: usize,
        height: usize,
        parts: Vec<(Slab<DigitLine>, Slab<Supers>)>,
    ) -> Result<Self, String> {
        let plan = step_plan(height);
        if parts.len() != plan.len() {
            return Err(format!(
                "{} count cascade steps, expected {}",
                parts.len(),
                plan.len()
            ));
        }
        let mut steps = Vec::with_capacity(plan.len());
        for (i, ((level, width), (lines, supers))) in plan.into_iter().zip(parts).enumerate() {
            let step = Step {
                level,
                width,
                lines,
                supers,
            };
            step.check(n, height)
                .map_err(|what| format!("count cascade step {i}: {what}"))?;
            steps.push(step);
        }
        let mut step_at = vec![None; height + 1];
        for (i, step) in steps.iter().enumerate() {
            step_at[step.level] = Some(i);
        }
        Ok(WideCascade {
            height,
            steps,
            step_at,
        })
    }

    /// Whether both cascades hold the same digits and counts.
    pub(crate) fn same_as(&self, other: &WideCascade) -> bool {
        self.height == other.height
            && self.steps.len() == other.steps.len()
            && self.steps.iter().zip(&other.steps).all(|(a, b)| {
                (a.level, a.width) == (b.level, b.width)
                    && a.lines[..] == b.lines[..]
                    && a.supers[..] == b.supers[..]
            })
    }

    pub(crate) fn nbytes(&self) -> usize {
        self.steps
            .iter()
            .map(|s| (s.lines.len() + s.supers.len()) * 64)
            .sum()
    }

    /// If a step starts on `level`: split the run of positions `start..end` of the block that
    /// starts at `s` into the runs of its up to 16 child blocks on the step's last level, and
    /// hand each non-empty one to `child`. One line at each end answers all 16. `None` (and
    /// nothing handed out) when no step starts there. `probe` is told what is read.
    #[inline]
    pub(crate) fn split_run(
        &self,
        level: usize,
        s: usize,
        start: usize,
        end: usize,
        mut child: impl FnMut(ChildRun),
        probe: &mut impl Probe,
    ) -> Option<()> {
        let step = &self.steps[(*self.step_at.get(level)?)?];
        probe.node(level);
        let below = self.height - step.level - step.width;
        if below == 0 {
            // The children are single leaves: each element's digit is its own x-rank offset
            // in the block, so the run is read element by element, with no counting.
            for p in s + start..s + end {
                child((self.height, s + step.digit(p, probe), 0, 1));
            }
            return Some(());
        }
        let before = s >> step.width; // each digit's elements in the full blocks before `s`
        let (lo, hi) = (
            step.equal_counts(s + start, probe),
            step.equal_counts(s + end, probe),
        );
        for digit in 0..1usize << step.width {
            if lo[digit] < hi[digit] {
                child((
                    step.level + step.width,
                    s + (digit << below),
                    lo[digit] - before,
                    hi[digit] - before,
                ));
            }
        }
        Some(())
    }

    /// For each descent `d`: the points with x-rank below `x[d]` among positions
    /// `a[d]..b[d]` of the root (y-ranks). All descents take each step together, and each
    /// prefetches the lines it will read on the next step before any of them reads, so their
    /// cache misses overlap.
    #[inline]
    pub(crate) fn below_many<const N: usize>(
        &self,
        x: &[usize; N],
        a: [usize; N],
        b: [usize; N],
    ) -> [usize; N] {
        self.below_many_probed(x, a, b, &mut ())
    }

    /// [`Self::below_many`], telling `probe` every node it visits and every line it reads.
    #[inline]
    pub(crate) fn below_many_probed<const N: usize>(
        &self,
        x: &[usize; N],
        mut a: [usize; N],
        mut b: [usize; N],
        probe: &mut impl Probe,
    ) -> [usize; N] {
        let h = self.height;
        let mut below = [0usize; N];
        for (i, step) in self.steps.iter().enumerate() {
            let top = h - step.level;
            let shift = top - step.width;
            let mask = (1usize << step.width) - 1;
            for d in 0..N {
                let c = (x[d] >> shift) & mask;
                probe.node(step.level);
                let (less_a, equal_a) = step.ranks(a[d], c, probe);
                let (less_b, equal_b) = step.ranks(b[d], c, probe);
                below[d] += less_b - less_a;
                // Every block before this node's is full and holds each digit 2^shift times,
                // so the digit-c elements before the node number its start >> width; the
                // others go, in order, to the child block that starts at (x >> shift) << shift.
                let node_start = (x[d] >> top) << top;
                let base = ((x[d] >> shift) << shift) - (node_start >> step.width);
                a[d] = base + equal_a;
                b[d] = base + equal_b;
            }
            if (0..N).all(|d| a[d] == b[d]) {
                break; // every interval is empty: nothing more to add
            }
            if let Some(next) = self.steps.get(i + 1) {
                for d in 0..N {
                    next.prefetch(a[d]);
                    next.prefetch(b[d]);
                }
            }
        }
        below
    }

    /// For each descent `d`: the x-rank of the element that is `k[d]`-th smallest by x-rank
    /// (0 for the smallest) among positions `a[d]..b[d]` of the root, which hold more than
    /// `k[d]` elements (a descent with `a[d] == b[d]` is skipped and answers 0). The wavelet
    /// descent: on every step the element lies in the first child block whose elements of
    /// the interval, counted digit by digit from the same two lines a count reads, pass
    /// `k[d]`; the interval and `k[d]` follow it there. The descents take each step together
    /// with prefetches between, as in [`Self::below_many`].
    #[inline]
    pub(crate) fn kth_many<const N: usize>(
        &self,
        mut a: [usize; N],
        mut b: [usize; N],
        mut k: [usize; N],
    ) -> [usize; N] {
        let h = self.height;
        let mut node = [0usize; N];
        for (i, step) in self.steps.iter().enumerate() {
            let top = h - step.level;
            let shift = top - step.width;
            for d in 0..N {
                if a[d] >= b[d] {
                    continue;
                }
                let (c, lo, hi, rest) = step.select(a[d], b[d], k[d]);
                k[d] = rest;
                let child = node[d] + (c << shift);
                let base = child - (node[d] >> step.width);
                node[d] = child;
                (a[d], b[d]) = (base + lo, base + hi);
            }
            if let Some(next) = self.steps.get(i + 1) {
                for d in 0..N {
                    if a[d] < b[d] {
                        next.prefetch(a[d]);
                        next.prefetch(b[d]);
                    }
                }
            }
        }
        node
    }
}

impl Step {
    /// Work out the digits of level `level` by replaying the merges of levels
    /// `level + width - 1` up to `level` (in two buffers of one byte a point), then pack them
    /// into lines.
    fn derive(
        bits: &[RankBits],
        level: usize,
        width: usize,
        (digits, next): &mut (Vec<u8>, Vec<u8>),
    ) -> Self {
        let height = bits.len();
        // The digits of each level's elements over the levels replayed so far; below the
        // step's last level there are none yet.
        digits.par_iter_mut().for_each(|d| *d = 0);
        for l in (level..level + width).rev() {
            let bit = level + width - 1 - l;
            let block = 1usize << (height - l);
            let (level_bits, below) = (&bits[l], &*digits);
            next.par_chunks_mut(REPLAY_CHUNK)
                .enumerate()
                .for_each(|(chunk, out)| {
                    let start = chunk * REPLAY_CHUNK;
                    let end = start + out.len();
                    replay_range(level_bits, block, start, end, |p, from, right, _| {
                        out[p - start] = ((right as u8) << bit) | below[from];
                        true
                    });
                });
            std::mem::swap(digits, next);
        }
        let (lines, supers) = pack(digits);
        Step {
            level,
            width,
            lines: lines.into(),
            supers: supers.into(),
        }
    }

    /// The rules [`WideCascade::from_file`] states, for this step of a tree of `n` points.
    fn check(&self, n: usize, height: usize) -> Result<(), String> {
        let (lines, supers) = WideCascade::step_lens(n);
        if self.lines.len() != lines || self.supers.len() != supers {
            return Err("wrong number of lines".into());
        }
        let block = 1usize << (height - self.level);
        let totals: Vec<Result<Supers, String>> = self
            .lines
            .par_chunks(LINES_PER_SUPER)
            .enumerate()
            .map(|(sup, lines)| self.check_superblock(sup, lines, n, block))
            .collect();
        let mut before = [0u32; FANOUT];
        for (sup, totals) in totals.into_iter().enumerate() {
            let totals = totals?;
            if self.supers[sup] != cumulative(&before) {
                return Err(format!("the counts before superblock {sup} are wrong"));
            }
            for c in 0..FANOUT {
                before[c] += totals[c];
            }
        }
        if block >= PER_LINE && !self.blocks_hold_their_digits(n, block) {
            return Err("a block does not hold each digit as often as its x-ranks say".into());
        }
        Ok(())
    }

    /// One superblock's lines: their in-line counts, the bits past `n` or above the step's
    /// width, and (for blocks shorter than a line) each block's digits. Its digit totals.
    fn check_superblock(
        &self,
        sup: usize,
        lines: &[DigitLine],
        n: usize,
        block: usize,
    ) -> Result<Supers, String> {
        let mut counts = [0u32; FANOUT];
        for (i, line) in lines.iter().enumerate() {
            let start = (sup * LINES_PER_SUPER + i) * PER_LINE;
            if line.at_most != cumulative(&counts).map(|c| c as u16) {
                return Err(format!("the counts of line {} are wrong", start / PER_LINE));
            }
            let valid = match n.saturating_sub(start) {
                left if left >= PER_LINE => u64::MAX,
                left => (1u64 << left) - 1,
            };
            let stray = line
                .planes
                .iter()
                .enumerate()
                .any(|(j, &plane)| plane & !valid != 0 || (j >= self.width && plane != 0));
            if stray {
                return Err(format!(
                    "line {} has digits it cannot hold",
                    start / PER_LINE
                ));
            }
            for (c, count) in counts.iter_mut().enumerate().take(1 << self.width) {
                let matching = digit_mask(line, c, valid);
                *count += matching.count_ones();
                if block < PER_LINE && !self.windows_hold(matching, c, start, n, block) {
                    return Err(format!(
                        "a block in line {} does not hold digit {c} as often as its x-ranks say",
                        start / PER_LINE
                    ));
                }
            }
        }
        Ok(counts)
    }

    /// Blocks shorter than a line: each of those in the line at `start` holds digit `c`
    /// (the elements in `matching`) as often as [`expected_count`] says.
    fn windows_hold(&self, matching: u64, c: usize, start: usize, n: usize, block: usize) -> bool {
        let window = (1u64 << block) - 1;
        (0..PER_LINE / block)
            .map(|k| start + k * block)
            .take_while(|&s| s < n)
            .enumerate()
            .all(|(k, s)| {
                let got = (matching >> (k * block)) & window;
                got.count_ones() as usize == self.expected_count(s, c, n, block)
            })
    }

    /// Blocks of a line or more (starting on a line), once every line's counts are known to
    /// be right: each holds every digit as often as [`expected_count`] says.
    fn blocks_hold_their_digits(&self, n: usize, block: usize) -> bool {
        (0..n.div_ceil(block)).into_par_iter().all(|b| {
            let s = b * block;
            let (lo, hi) = (
                self.equal_counts(s, &mut ()),
                self.equal_counts((s + block).min(n), &mut ()),
            );
            (0..1usize << self.width).all(|c| hi[c] - lo[c] == self.expected_count(s, c, n, block))
        })
    }

    /// How many elements of the block at `s` have digit `c`: the block holds x-ranks
    /// `s..min(s + block, n)`, and digit `c` names the `c`-th run of `block >> width` of them.
    fn expected_count(&self, s: usize, c: usize, n: usize, block: usize) -> usize {
        let run = block >> self.width;
        let end = (s + block).min(n);
        end.saturating_sub(s + c * run).min(run)
    }

    /// Among positions `[0, p)` of the level: how many have a digit below `c`, and how many
    /// have digit `c`. `p` is at most the level's length; one line and one (cache-resident)
    /// superblock entry are read.
    #[inline(always)]
    fn ranks(&self, p: usize, c: usize, probe: &mut impl Probe) -> (usize, usize) {
        let line = &self.lines[p / PER_LINE];
        let sup = &self.supers[p / PER_SUPER];
        read_one(probe, Part::CountLines, line);
        read_one(probe, Part::CountSupers, sup);
        // Counts up to digit c - 1; for c = 0 the index wraps to 15 and the count is zeroed.
        let prev = c.wrapping_sub(1) & (FANOUT - 1);
        let has_prev = (c != 0) as usize;
        let at_most_c = sup[c] as usize + line.at_most[c] as usize;
        let below_c = (sup[prev] as usize + line.at_most[prev] as usize) * has_prev;
        // Within the line: walk the digit's bits from the top. At each bit where c has a one,
        // the elements still matching c above it and having a zero there are below c.
        let mut matching = (1u64 << (p % PER_LINE)) - 1;
        let mut less = 0u32;
        for j in (0..DIGIT_BITS).rev() {
            let plane = line.planes[j];
            let one = 0u64.wrapping_sub(((c >> j) & 1) as u64);
            less += (matching & !plane & one).count_ones();
            matching &= !(plane ^ one);
        }
        (
            below_c + less as usize,
            at_most_c - below_c + matching.count_ones() as usize,
        )
    }

    /// Where the element of rank `k` (0 for the first) by digit among positions `a..b`
    /// (`a <= b`) lies: its digit `c`, how many of positions `[0, a)` and `[0, b)` have digit
    /// `c`, and its rank among the interval's elements of digit `c`. The digit is found a
    /// bit at a time from the top, as in a binary wavelet tree: the elements whose digit has
    /// the bits found so far and a zero next are counted at both ends (the line's counts give
    /// those before the line, the planes those in it), and `k` goes to the zeros or past
    /// them. One line at each end, read once; `k` past the interval ends at the last digit.
    #[inline(always)]
    fn select(&self, a: usize, b: usize, mut k: usize) -> (usize, usize, usize, usize) {
        let ends = [a, b].map(|p| (&self.lines[p / PER_LINE], &self.supers[p / PER_SUPER]));
        // Elements before the line holding an end with a digit at most `c` (none below 0).
        let up_to = |end: usize, c: usize| -> usize {
            let (line, sup) = ends[end];
            match c.checked_sub(1) {
                None => 0,
                Some(c) => sup[c] as usize + line.at_most[c] as usize,
            }
        };
        let mut inside = [a, b].map(|p| (1u64 << (p % PER_LINE)) - 1);
        let mut low = 0;
        for j in (0..self.width).rev() {
            let mid = low + (1 << j);
            // Elements before each end whose digit is in [low, mid): bits found, then a zero.
            let zeros = [0, 1].map(|e| {
                let in_line = (inside[e] & !ends[e].0.planes[j]).count_ones() as usize;
                up_to(e, mid) - up_to(e, low) + in_line
            });
            let between = zeros[1].saturating_sub(zeros[0]);
            if k < between {
                for (e, m) in inside.iter_mut().enumerate() {
                    *m &= !ends[e].0.planes[j];
                }
            } else {
                k -= between;
                low = mid;
                for (e, m) in inside.iter_mut().enumerate() {
                    *m &= ends[e].0.planes[j];
                }
            }
        }
        let equal =
            [0, 1].map(|e| up_to(e, low + 1) - up_to(e, low) + inside[e].count_ones() as usize);
        (low, equal[0], equal[1], k)
    }

    /// The digit of position `p`.
    #[inline(always)]
    fn digit(&self, p: usize, probe: &mut impl Probe) -> usize {
        let line = &self.lines[p / PER_LINE];
        read_one(probe, Part::CountLines, line);
        let k = p % PER_LINE;
        line.planes
            .iter()
            .enumerate()
            .map(|(j, &plane)| (((plane >> k) & 1) as usize) << j)
            .sum()
    }

    /// For every digit, how many of positions `[0, p)` have it.
    #[inline]
    fn equal_counts(&self, p: usize, probe: &mut impl Probe) -> [usize; FANOUT] {
        let line = &self.lines[p / PER_LINE];
        let sup = &self.supers[p / PER_SUPER];
        read_one(probe, Part::CountLines, line);
        read_one(probe, Part::CountSupers, sup);
        let before = (1u64 << (p % PER_LINE)) - 1;
        let mut out = [0usize; FANOUT];
        let mut at_most_prev = 0;
        for (digit, slot) in out.iter_mut().enumerate() {
            let at_most = sup[digit] as usize + line.at_most[digit] as usize;
            let mut matching = before;
            for (j, &plane) in line.planes.iter().enumerate() {
                let one = 0u64.wrapping_sub(((digit >> j) & 1) as u64);
                matching &= !(plane ^ one);
            }
            *slot = at_most - at_most_prev + matching.count_ones() as usize;
            at_most_prev = at_most;
        }
        out
    }

    #[inline(always)]
    fn prefetch(&self, p: usize) {
        if let Some(line) = self.lines.get(p / PER_LINE) {
            crate::prefetch::prefetch_read(line as *const DigitLine as *const u8);
        }
    }
}

/// For each digit `d`, the elements with a digit at most `d` among those counted.
fn cumulative(counts: &[u32; FANOUT]) -> [u32; FANOUT] {
    let mut running = 0;
    counts.map(|c| {
        running += c;
        running
    })
}

/// The elements of `line` (within `valid`) whose digit is `c`.
#[inline]
fn digit_mask(line: &DigitLine, c: usize, valid: u64) -> u64 {
    line.planes
        .iter()
        .enumerate()
        .fold(valid, |m, (j, &plane)| {
            if (c >> j) & 1 == 1 {
                m & plane
            } else {
                m & !plane
            }
        })
}

/// Lines of 64 digits with their counts, and the counts before each superblock. One line
/// more than `digits.len() / 64`, so that the position just past the end can be ranked.
fn pack(digits: &[u8]) -> (Vec<DigitLine>, Vec<[u32; FANOUT]>) {
    let n = digits.len();
    let mut lines = alloc::filled(n / PER_LINE + 1, DigitLine::default());
    let totals: Vec<[u32; FANOUT]> = lines
        .par_chunks_mut(LINES_PER_SUPER)
        .enumerate()
        .map(|(sup, lines)| {
            let mut counts = [0u32; FANOUT];
            for (i, line) in lines.iter_mut().enumerate() {
                let mut at_most = 0;
                for (c, &count) in counts.iter().enumerate() {
                    at_most += count;
                    line.at_most[c] = at_most as u16;
                }
                let start = ((sup * LINES_PER_SUPER + i) * PER_LINE).min(n);
                let end = (start + PER_LINE).min(n);
                for (k, &d) in digits[start..end].iter().enumerate() {
                    counts[d as usize] += 1;
                    for (j, plane) in line.planes.iter_mut().enumerate() {
                        *plane |= (((d >> j) & 1) as u64) << k;
                    }
                }
            }
            counts
        })
        .collect();
    let mut supers = Vec::with_capacity(totals.len());
    let mut before = [0u32; FANOUT];
    for counts in totals {
        let mut at_most = [0u32; FANOUT];
        let mut running = 0;
        for c in 0..FANOUT {
            running += before[c];
            at_most[c] = running;
        }
        supers.push(at_most);
        for c in 0..FANOUT {
            before[c] += counts[c];
        }
    }
    (lines, supers)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{build, Column, Layout, RankBox};
    use proptest::prelude::*;

    #[test]
    fn steps_cover_every_level_once() {
        for height in 0..34 {
            let plan = step_plan(height);
            let mut level = 0;
            for &(start, width) in &plan {
                assert_eq!(start, level);
                assert!((1..=DIGIT_BITS).contains(&width));
                level += width;
            }
            assert_eq!(level, height);
            assert!(plan.iter().skip(1).all(|&(_, w)| w == DIGIT_BITS));
        }
    }

    #[test]
    fn ranks_match_a_scan_of_the_digits() {
        // Two superblocks and a bit, so the superblock counts are used.
        let n = PER_SUPER * 2 + 77;
        let digits: Vec<u8> = (0..n)
            .map(|i| ((i * 2_654_435_761) >> 7) as u8 & 15)
            .collect();
        let (lines, supers) = pack(&digits);
        let step = Step {
            level: 0,
            width: 4,
            lines: lines.into(),
            supers: supers.into(),
        };
        let mut counts = [0usize; FANOUT];
        for p in 0..=n {
            if p % 997 == 0 || p % PER_LINE < 2 || p > n - 70 {
                for c in 0..FANOUT {
                    let less: usize = counts[..c].iter().sum();
                    assert_eq!(
                        step.ranks(p, c, &mut ()),
                        (less, counts[c]),
                        "p = {p}, c = {c}"
                    );
                }
            }
            if p < n {
                counts[digits[p] as usize] += 1;
            }
        }
    }

    /// Several superblocks (65,536 positions) and a short first step, against a scan: counts,
    /// and the rows a compact tree reports (its runs walked down the steps).
    #[test]
    fn counts_and_compact_reports_over_several_superblocks_match_a_scan() {
        let n = 200_003;
        let x: Vec<i64> = (0..n as i64).map(|i| (i * 7_919) % 100_003).collect();
        let y: Vec<i64> = (0..n as i64).map(|i| (i * 104_729) % 50_021).collect();
        let tree = build(Column::I64(&x), Column::I64(&y), None, Layout::Compact).unwrap();
        assert_eq!(tree.wide.steps.len(), 5); // height 18: steps of 2, 4, 4, 4, 4 levels
                                              // Each point's x-rank, and the points in y order (ties by row), by sorting.
        let mut x_order: Vec<usize> = (0..n).collect();
        x_order.sort_by_key(|&i| (x[i], i));
        let mut x_rank = vec![0; n];
        for (rank, &row) in x_order.iter().enumerate() {
            x_rank[row] = rank;
        }
        let mut y_order: Vec<usize> = (0..n).collect();
        y_order.sort_by_key(|&i| (y[i], i));
        let mut rng = crate::test_rng::XorShift::new(12_345);
        let mut next = |below: usize| rng.below(below as u64) as usize;
        for _ in 0..300 {
            let (a, b, c, d) = (next(n + 1), next(n + 1), next(n + 1), next(n + 1));
            let r = RankBox {
                x: (a.min(b), a.max(b)),
                y: (c.min(d), c.max(d)),
            };
            let mut expected: Vec<u32> = y_order[r.y.0..r.y.1]
                .iter()
                .filter(|&&row| (r.x.0..r.x.1).contains(&x_rank[row]))
                .map(|&row| row as u32)
                .collect();
            assert_eq!(tree.count_ranks(r), expected.len(), "{r:?}");
            let mut got = Vec::new();
            tree.for_each_run(r, |run| {
                tree.push_run_rows(run, &mut |rows| got.extend_from_slice(rows))
            });
            got.sort_unstable();
            expected.sort_unstable();
            assert_eq!(got, expected, "{r:?}");
        }
    }

    /// Points with x-rank below `x` and y-rank in `[a, b)`, by a scan of the points.
    fn naive_below(x_rank_of_y: &[usize], x: usize, a: usize, b: usize) -> usize {
        x_rank_of_y[a..b].iter().filter(|&&r| r < x).count()
    }

    proptest! {
        #[test]
        fn below_matches_a_scan(
            points in proptest::collection::vec((0i64..40, 0i64..40), 0..700),
            queries in proptest::collection::vec((0usize..701, 0usize..701, 0usize..701), 1..40),
        ) {
            let (x, y): (Vec<i64>, Vec<i64>) = points.iter().copied().unzip();
            let n = x.len();
            let tree = build(Column::I64(&x), Column::I64(&y), None, Layout::Compact).unwrap();
            // x-rank and y-rank of every row, by sorting (key, row) pairs.
            let rank_of = |keys: &[i64]| {
                let mut order: Vec<usize> = (0..n).collect();
                order.sort_by_key(|&r| (keys[r], r));
                let mut rank = vec![0; n];
                for (k, &r) in order.iter().enumerate() {
                    rank[r] = k;
                }
                (order, rank)
            };
            let (_, x_rank) = rank_of(&x);
            let (y_order, _) = rank_of(&y);
            let x_rank_of_y: Vec<usize> = y_order.iter().map(|&r| x_rank[r]).collect();
            for (xq, p, q) in queries {
                let (xq, lo, hi) = (xq.min(n), p.min(q).min(n), p.max(q).min(n));
                let [got] = tree.wide.below_many(&[xq], [lo], [hi]);
                prop_assert_eq!(got, naive_below(&x_rank_of_y, xq, lo, hi));
                let r = RankBox { x: (lo.min(xq), xq), y: (lo, hi) };
                let mut binary = 0;
                tree.for_each_run(r, |run| binary += run.end - run.start);
                prop_assert_eq!(tree.count_ranks(r), binary);
            }
        }
    }
}
