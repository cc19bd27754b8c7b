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
    /// The runs of a build's keyed x presort (`presort::sort_rows_by_code_and_key`).
    pub(crate) fn from_starts(starts: Vec<u32>) -> Self {
        KeyRuns {
            starts: starts.into(),
        }
    }

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
