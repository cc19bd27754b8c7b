//! Keyed trees: points carry a key code, and a box asks only the points of its own key.
//!
//! The x presort orders the points by `(key code, x, row)` instead of `(x, row)`, and a
//! point's x-rank is its position in that order. Everything after the rank conversion (the
//! levels, both cascades, counts, sums, reports) is the same code as for an unkeyed tree: a
//! keyed box `[(k, x_lo), (k, x_hi)] x [y_lo, y_hi]` is one ordinary box in rank space. The
//! tree keeps where each code's run starts in x order (`K + 1` offsets), and a keyed bound
//! becomes an x-rank with one search inside its key's run of the x keys, which are sorted
//! within each run (and not across runs, so a keyed tree has no global x search index). A
//! code outside `0..K` has an empty run and every box of it is empty.

use rayon::prelude::*;

use crate::error::Error;
use crate::keys::Cut;
use crate::slab::Slab;

/// The most distinct key codes a tree holds: codes are `u32`, and `u32::MAX` itself is kept
/// free so that the offsets (`K + 1` of them) fit a `u32` count.
pub const MAX_KEYS: usize = u32::MAX as usize;

/// Key codes as the caller hands them over: one `u32` a row, every code below `count`.
#[derive(Clone, Copy, Debug)]
pub struct KeyColumn<'a> {
    pub codes: &'a [u32],
    /// `K`, the number of distinct codes the tree knows (codes `0..K`), whether or not
    /// every code has points.
    pub count: usize,
}

impl KeyColumn<'_> {
    pub(crate) fn validate(&self, n: usize) -> Result<(), Error> {
        if self.codes.len() != n {
            return Err(Error::LengthMismatch {
                what: "keys",
                expected: n,
                got: self.codes.len(),
            });
        }
        if self.count > MAX_KEYS {
            return Err(Error::TooManyKeys {
                keys: self.count,
                max: MAX_KEYS,
            });
        }
        // The largest code first (a pass the compiler vectorises); where a code is out of
        // range, the first such one is found for the message.
        let largest = self
            .codes
            .par_chunks(1 << 16)
            .map(|c| c.iter().fold(0u32, |a, &b| a.max(b)))
            .max();
        match largest {
            Some(top) if top as usize >= self.count => {
                let position = self
                    .codes
                    .iter()
                    .position(|&c| c as usize >= self.count)
                    .expect("a code past the count was seen");
                Err(Error::KeyCode {
                    position,
                    code: self.codes[position] as i64,
                    count: self.count,
                })
            }
            _ => Ok(()),
        }
    }
}

/// Where each key code's points start in x-rank order: `starts[k]..starts[k + 1]` are the
/// x-ranks of code `k`, `starts[K] = n`.
#[derive(Clone, Debug)]
pub struct KeyRuns {
    starts: Slab<u32>,
}

impl KeyRuns {
    /// Runs read from a file; `None` unless they start at 0, never go down, end at `n`, and
    /// the x keys ascend within every run.
    pub(crate) fn from_file(starts: Slab<u32>, x_keys: &[u64]) -> Option<Self> {
        let n = x_keys.len();
        let shaped = starts.first() == Some(&0)
            && starts.last().is_some_and(|&end| end as usize == n)
            && starts.len() - 1 <= MAX_KEYS
            && starts.par_windows(2).all(|w| w[0] <= w[1]);
        let sorted = shaped
            && starts.par_windows(2).all(|w| {
                x_keys[w[0] as usize..w[1] as usize]
                    .windows(2)
                    .all(|p| p[0] <= p[1])
            });
        sorted.then_some(KeyRuns { starts })
    }

    /// The number of key codes `K`.
    pub fn len(&self) -> usize {
        self.starts.len() - 1
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The offsets, `K + 1` of them.
    pub fn starts(&self) -> &[u32] {
        &self.starts
    }

    /// The x-ranks of code `code`; empty (at 0) for a code outside `0..K`.
    #[inline(always)]
    pub fn run(&self, code: i64) -> (usize, usize) {
        match usize::try_from(code) {
            Ok(k) if k < self.len() => (self.starts[k] as usize, self.starts[k + 1] as usize),
            _ => (0, 0),
        }
    }

    pub fn nbytes(&self) -> usize {
        self.starts.len() * 4
    }
}

/// Bytes of the offsets of `keys` codes.
pub(crate) fn nbytes_for(keys: usize) -> usize {
    (keys + 1) * 4
}

/// Reorder the x presort (`order`, rows in `(x, row)` order, and `sorted`, their keys) into
/// `(code, x, row)` order, and the runs of each code: a stable counting sort by code of the
/// x order, so within a code the rows keep their x order. (Two 11-bit radix passes over
/// `code << 32 | position` do the same with three passes over twice the bytes.)
///
/// The x order is cut into chunks, placed side by side: each chunk counts its codes, and a
/// chunk's points of code `k` go after code `k`'s points of the chunks before it, which is
/// where the one serial pass would put them, so the result does not depend on the cut.
pub(crate) fn order_by_key(
    order: Vec<u32>,
    sorted: Vec<u64>,
    keys: KeyColumn<'_>,
) -> (Vec<u32>, Vec<u64>, KeyRuns) {
    let n = order.len();
    let codes: Vec<u32> =
        crate::alloc::collect(order.par_iter().map(|&row| keys.codes[row as usize]));
    let chunk = n.div_ceil(placing_chunks(n, keys.count)).max(1);
    let mut cursors: Vec<Vec<u32>> = codes
        .par_chunks(chunk)
        .map(|c| histogram(c, keys.count))
        .collect();
    let starts = cursors_from_counts(&mut cursors, keys.count);
    let mut keyed_order = crate::alloc::filled(n, 0u32);
    let mut keyed_sorted = crate::alloc::filled(n, 0u64);
    let out = Placing::new(&mut keyed_order, &mut keyed_sorted);
    codes
        .par_chunks(chunk)
        .zip(order.par_chunks(chunk))
        .zip(sorted.par_chunks(chunk))
        .zip(cursors.par_iter_mut())
        .for_each(|(((codes, order), sorted), next)| {
            for ((&code, &row), &key) in codes.iter().zip(order).zip(sorted) {
                let slot = &mut next[code as usize];
                // SAFETY: the cursors of chunk `c` for code `k` run over
                // `starts[k] + (code k's points in chunks before c)` onwards, one slot a
                // point of code `k` in chunk `c` (cursors_from_counts): over all chunks and
                // codes those ranges tile `0..n` without overlap, so no slot is written by
                // two tasks or twice, and `put` checks the slot is below `n`. Exercised by
                // `placing_in_chunks_matches_one_pass_and_a_sort` (several chunks, several
                // threads) and every keyed build.
                unsafe { out.put(*slot as usize, row, key) };
                *slot += 1;
            }
        });
    (
        keyed_order,
        keyed_sorted,
        KeyRuns {
            starts: starts.into(),
        },
    )
}

/// Points of the x order a chunk of the placing pass holds at least: small in tests, so
/// that small inputs take the path of several chunks.
const MIN_PLACING_CHUNK: usize = if cfg!(test) { 16 } else { 1 << 16 };

/// How many chunks the placing pass cuts `n` points of `keys` codes into: a few a thread,
/// so a busy core does not hold the others up, but only while each chunk's counters (one
/// a code) stay small beside its points.
fn placing_chunks(n: usize, keys: usize) -> usize {
    let wanted = 4 * rayon::current_num_threads();
    let by_size = n / MIN_PLACING_CHUNK;
    let by_counters = n / (8 * keys.max(1));
    wanted.min(by_size).min(by_counters).max(1)
}

/// Bytes of the placing pass's counters for `n` points of `keys` codes (for the estimate).
pub(crate) fn placing_bytes(n: usize, keys: usize) -> usize {
    (placing_chunks(n, keys) * keys + keys + 1) * 4
}

fn histogram(codes: &[u32], keys: usize) -> Vec<u32> {
    let mut counts = vec![0u32; keys];
    for &code in codes {
        counts[code as usize] += 1;
    }
    counts
}

/// Turn each chunk's counts into its cursors (where its first point of each code goes),
/// in place, and give the runs' starts (`keys + 1` of them, the last the number of points).
fn cursors_from_counts(counts: &mut [Vec<u32>], keys: usize) -> Vec<u32> {
    let mut starts = Vec::with_capacity(keys + 1);
    let mut next = 0u32;
    for k in 0..keys {
        starts.push(next);
        for chunk in counts.iter_mut() {
            let count = chunk[k];
            chunk[k] = next;
            next += count;
        }
    }
    starts.push(next);
    starts
}

/// The two output arrays of the placing pass, written through raw pointers by several
/// tasks at once, each at slots no other task writes.
struct Placing {
    order: *mut u32,
    sorted: *mut u64,
    len: usize,
}

// SAFETY: a `Placing` is only a pair of pointers into two live buffers of `len` values that
// nothing else touches while the tasks holding it run; each slot is written by one task
// only (see order_by_key), so sharing it between threads makes no data race.
unsafe impl Sync for Placing {}
unsafe impl Send for Placing {}

impl Placing {
    fn new(order: &mut [u32], sorted: &mut [u64]) -> Self {
        assert_eq!(order.len(), sorted.len());
        Placing {
            order: order.as_mut_ptr(),
            sorted: sorted.as_mut_ptr(),
            len: order.len(),
        }
    }

    /// Write point `row` with x key `key` at `slot`.
    ///
    /// # Safety
    /// No other thread may write or read `slot` while this runs.
    #[inline(always)]
    unsafe fn put(&self, slot: usize, row: u32, key: u64) {
        assert!(slot < self.len, "placing slot {slot} past {}", self.len);
        // SAFETY: `slot < len`, inside both buffers; exclusive by the caller's contract.
        unsafe {
            self.order.add(slot).write(row);
            self.sorted.add(slot).write(key);
        }
    }
}

/// The x-rank of a cut inside the run `run` of the x keys: the run's end for `Cut::All`,
/// else its start plus the keys of the run below the cut.
#[inline]
pub(crate) fn rank_in_run(keys: &[u64], run: (usize, usize), cut: Cut) -> usize {
    match cut {
        Cut::All => run.1,
        Cut::Below(t) => run.0 + keys[run.0..run.1].partition_point(|&k| k < t),
    }
}

/// [`rank_in_run`] for `N` cuts at once: branch-free binary searches taken a step each in
/// turn, so the misses of all `N` are in flight together rather than one after another.
#[inline]
pub(crate) fn ranks_in_runs<const N: usize>(
    keys: &[u64],
    runs: &[(usize, usize); N],
    cuts: &[Cut; N],
    out: &mut [usize; N],
) {
    let mut base = [0usize; N];
    let mut size = [0usize; N];
    let mut limit = [0u64; N];
    let mut widest = 0;
    for i in 0..N {
        // An empty run reads nothing: it searches position 0 with nothing left to halve.
        let empty = runs[i].0 >= runs[i].1;
        base[i] = if empty { 0 } else { runs[i].0 };
        size[i] = runs[i].1 - runs[i].0;
        widest = widest.max(size[i]);
        limit[i] = match cuts[i] {
            Cut::All => u64::MAX,
            Cut::Below(t) => t,
        };
    }
    // The lower bound of Khuong and Morin's branch-free search (from memory): the answer
    // stays within `base..=base + size`. Every lane takes the same number of rounds, enough
    // for the widest run; a lane whose size is down to 1 (or 0) reads `keys[base]` and keeps
    // its base, so no round needs a branch.
    if !keys.is_empty() {
        for _ in 0..(usize::BITS - widest.leading_zeros()) {
            for i in 0..N {
                let half = size[i] / 2;
                let probe = base[i] + half;
                base[i] = if keys[probe] < limit[i] {
                    probe
                } else {
                    base[i]
                };
                size[i] -= half;
            }
        }
    }
    for i in 0..N {
        out[i] = match cuts[i] {
            Cut::All => runs[i].1,
            _ if size[i] == 0 => runs[i].0,
            Cut::Below(_) => base[i] + (keys[base[i]] < limit[i]) as usize,
        };
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// The batched search against a plain count of the run's keys below the cut.
        #[test]
        fn searches_in_runs_match_a_scan(
            mut runs_keys in proptest::collection::vec(
                proptest::collection::vec(0u64..40, 0..30), 1..6),
            limits in proptest::collection::vec(prop_oneof![0u64..45, Just(u64::MAX)], 8),
            all in proptest::collection::vec(any::<bool>(), 8),
            picks in proptest::collection::vec(0usize..6, 8),
        ) {
            let mut keys = Vec::new();
            let mut runs = Vec::new();
            for run in runs_keys.iter_mut() {
                run.sort();
                runs.push((keys.len(), keys.len() + run.len()));
                keys.extend_from_slice(run);
            }
            let mut rs = [(0usize, 0usize); 8];
            let mut cuts = [Cut::All; 8];
            for i in 0..8 {
                rs[i] = runs[picks[i] % runs.len()];
                cuts[i] = if all[i] { Cut::All } else { Cut::Below(limits[i]) };
            }
            let mut out = [0usize; 8];
            ranks_in_runs(&keys, &rs, &cuts, &mut out);
            for i in 0..8 {
                let (s, e) = rs[i];
                let expected = match cuts[i] {
                    Cut::All => e,
                    Cut::Below(t) => s + keys[s..e].iter().filter(|&&k| k < t).count(),
                };
                prop_assert_eq!(out[i], expected);
                prop_assert_eq!(rank_in_run(&keys, rs[i], cuts[i]), expected);
            }
        }
    }

    /// The counting sort as one serial pass (the placing pass before it was cut into
    /// chunks): what the chunked pass must give exactly.
    fn order_by_key_in_one_pass(
        order: &[u32],
        sorted: &[u64],
        codes: &[u32],
        count: usize,
    ) -> (Vec<u32>, Vec<u64>, Vec<u32>) {
        let mut starts = vec![0u32; count + 1];
        for &row in order {
            starts[codes[row as usize] as usize + 1] += 1;
        }
        for k in 0..count {
            starts[k + 1] += starts[k];
        }
        let mut next = starts[..count].to_vec();
        let mut keyed_order = vec![0u32; order.len()];
        let mut keyed_sorted = vec![0u64; order.len()];
        for (&row, &key) in order.iter().zip(sorted) {
            let slot = &mut next[codes[row as usize] as usize];
            keyed_order[*slot as usize] = row;
            keyed_sorted[*slot as usize] = key;
            *slot += 1;
        }
        (keyed_order, keyed_sorted, starts)
    }

    fn check_placing(x: &[u64], codes: &[u32], count: usize) {
        let mut order: Vec<u32> = (0..x.len() as u32).collect();
        order.sort_by_key(|&r| (x[r as usize], r));
        let sorted: Vec<u64> = order.iter().map(|&r| x[r as usize]).collect();
        let keys = KeyColumn { codes, count };
        keys.validate(x.len()).unwrap();
        let (got_order, got_sorted, runs) = order_by_key(order.clone(), sorted.clone(), keys);
        let (one_order, one_sorted, one_starts) =
            order_by_key_in_one_pass(&order, &sorted, codes, count);
        assert_eq!(got_order, one_order);
        assert_eq!(got_sorted, one_sorted);
        assert_eq!(runs.starts(), &one_starts[..]);
        // And against the definition: rows sorted by (code, x, row).
        let mut by_definition: Vec<u32> = (0..x.len() as u32).collect();
        by_definition.sort_by_key(|&r| (codes[r as usize], x[r as usize], r));
        assert_eq!(got_order, by_definition);
        for k in 0..count {
            let (s, e) = runs.run(k as i64);
            assert!(got_order[s..e]
                .iter()
                .all(|&r| codes[r as usize] as usize == k));
        }
    }

    proptest! {
        /// The chunked placing pass (several chunks at these sizes, on a pool of four
        /// threads so chunks really run at once) against one serial pass and a sort.
        #[test]
        fn placing_in_chunks_matches_one_pass_and_a_sort(
            n in 0usize..3000,
            count in 1usize..60,
            x_span in 1u64..500,
            seed in any::<u64>(),
        ) {
            let mut rng = crate::test_rng::XorShift::new(seed);
            let x: Vec<u64> = (0..n).map(|_| rng.below(x_span)).collect();
            // Some codes left without points: only the lower half is drawn from at times.
            let drawn = if seed % 3 == 0 { count.div_ceil(2) } else { count };
            let codes: Vec<u32> = (0..n).map(|_| rng.below(drawn as u64) as u32).collect();
            let pool = rayon::ThreadPoolBuilder::new().num_threads(4).build().unwrap();
            pool.install(|| check_placing(&x, &codes, count));
        }
    }

    #[test]
    fn placing_cuts_into_several_chunks_when_there_are_few_codes() {
        // The sizes above take the chunked path: more than one chunk, each several points.
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(4)
            .build()
            .unwrap();
        pool.install(|| {
            assert!(placing_chunks(3000, 3) > 1);
            assert_eq!(placing_chunks(3000, 3000), 1);
            assert_eq!(placing_chunks(0, 5), 1);
        });
        check_placing(&[5, 5, 1], &[1, 0, 1], 4);
        check_placing(&[], &[], 3);
    }

    #[test]
    fn an_out_of_range_code_is_named_with_its_first_position() {
        let codes = [0u32, 2, 7, 1, 9];
        let err = KeyColumn {
            codes: &codes,
            count: 5,
        }
        .validate(5)
        .unwrap_err();
        assert!(matches!(
            err,
            Error::KeyCode {
                position: 2,
                code: 7,
                count: 5
            }
        ));
        let ok = KeyColumn {
            codes: &codes,
            count: 10,
        };
        assert!(ok.validate(5).is_ok());
    }

    #[test]
    fn codes_outside_the_tree_have_empty_runs() {
        let runs = KeyRuns {
            starts: vec![0u32, 2, 2, 5].into(),
        };
        assert_eq!(runs.len(), 3);
        assert_eq!(runs.run(0), (0, 2));
        assert_eq!(runs.run(1), (2, 2));
        assert_eq!(runs.run(2), (2, 5));
        for code in [-1, 3, i64::MAX, i64::MIN] {
            assert_eq!(runs.run(code), (0, 0));
        }
    }
}
