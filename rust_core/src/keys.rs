//! Coordinates as order-preserving `u64` keys, and box bounds as ranks.
//!
//! Every coordinate is mapped once, at build time, to a `u64` whose unsigned order is the
//! coordinate's numeric order. After that the tree compares only integers. A query bound is
//! turned into a rank (a count of sorted keys) by one search (`search.rs`); the bound's value
//! is first rounded *into the column's domain* in the direction that keeps the comparison exact,
//! so an `i64` column queried with `2.5`, or an `f64` column queried with `2^53 + 1`, gets the
//! answer plain arithmetic would give.

use rayon::prelude::*;

use crate::alloc;
use crate::error::{Axis, Error};
use crate::search::{ranks_together, LineSearch, Node, Search};
use crate::slab::Slab;

/// A coordinate column as the caller hands it over.
///
/// Narrower types are widened losslessly by the caller: `f32` to `f64`, `i32`/`u32` and
/// datetime ticks to `i64`.
#[derive(Clone, Copy, Debug)]
pub enum Column<'a> {
    F64(&'a [f64]),
    I64(&'a [i64]),
}

impl Column<'_> {
    pub fn len(&self) -> usize {
        match self {
            Column::F64(v) => v.len(),
            Column::I64(v) => v.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    pub fn domain(&self) -> Domain {
        match self {
            Column::F64(_) => Domain::F64,
            Column::I64(_) => Domain::I64,
        }
    }

    /// Position of the first NaN, if any.
    pub fn first_nan(&self) -> Option<usize> {
        match self {
            Column::F64(values) => values.iter().position(|v| v.is_nan()),
            Column::I64(_) => None,
        }
    }

    /// Order-preserving keys, or the first NaN's position.
    pub fn keys(&self, axis: Axis) -> Result<Vec<u64>, Error> {
        match self {
            Column::F64(values) => {
                if let Some(position) = self.first_nan() {
                    return Err(Error::NotANumber {
                        what: axis.name().to_string(),
                        position,
                    });
                }
                Ok(alloc::collect(values.par_iter().map(|&v| f64_key(v))))
            }
            Column::I64(values) => Ok(alloc::collect(values.par_iter().map(|&v| i64_key(v)))),
        }
    }
}

/// The value space a column's keys live in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Domain {
    F64,
    I64,
}

/// One box bound as given by the caller.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Bound {
    F64(f64),
    I64(i64),
}

impl Bound {
    pub fn is_nan(&self) -> bool {
        matches!(self, Bound::F64(v) if v.is_nan())
    }

    /// A key in the bound's own order (floats and ints each keep their order).
    pub fn order_key(&self) -> u64 {
        match *self {
            Bound::F64(v) => f64_key(v),
            Bound::I64(v) => i64_key(v),
        }
    }
}

const SIGN: u64 = 1 << 63;

/// Key of a float: flip all bits of negatives, set the sign bit of positives.
/// `-0.0` is folded into `0.0` because the two compare equal.
#[inline]
pub fn f64_key(v: f64) -> u64 {
    let v = if v == 0.0 { 0.0 } else { v };
    let bits = v.to_bits();
    if bits & SIGN != 0 {
        !bits
    } else {
        bits | SIGN
    }
}

/// The coordinate a key stands for (the inverse of `f64_key` and `i64_key`).
pub fn value_of_key(domain: Domain, key: u64) -> Bound {
    match domain {
        Domain::F64 => {
            let bits = if key & SIGN != 0 { key & !SIGN } else { !key };
            Bound::F64(f64::from_bits(bits))
        }
        Domain::I64 => Bound::I64((key ^ SIGN) as i64),
    }
}

/// Key of a signed integer: flip the sign bit (two's complement to offset binary).
#[inline]
pub fn i64_key(v: i64) -> u64 {
    (v as u64) ^ SIGN
}

/// The smallest domain value `>= b`, as a key; `None` when every domain value is `< b`.
fn round_up(domain: Domain, b: Bound) -> Option<u64> {
    match (domain, b) {
        (Domain::F64, Bound::F64(v)) => Some(f64_key(v)),
        (Domain::F64, Bound::I64(v)) => Some(f64_key(f64_neighbours(v).1)),
        (Domain::I64, Bound::I64(v)) => Some(i64_key(v)),
        (Domain::I64, Bound::F64(v)) => {
            let c = v.ceil();
            if c >= TWO_POW_63 {
                None
            } else if c < -TWO_POW_63 {
                Some(i64_key(i64::MIN))
            } else {
                Some(i64_key(c as i64))
            }
        }
    }
}

/// The largest domain value `<= b`, as a key; `None` when every domain value is `> b`.
fn round_down(domain: Domain, b: Bound) -> Option<u64> {
    match (domain, b) {
        (Domain::F64, Bound::F64(v)) => Some(f64_key(v)),
        (Domain::F64, Bound::I64(v)) => Some(f64_key(f64_neighbours(v).0)),
        (Domain::I64, Bound::I64(v)) => Some(i64_key(v)),
        (Domain::I64, Bound::F64(v)) => {
            let f = v.floor();
            if f < -TWO_POW_63 {
                None
            } else if f >= TWO_POW_63 {
                Some(i64_key(i64::MAX))
            } else {
                Some(i64_key(f as i64))
            }
        }
    }
}

const TWO_POW_63: f64 = 9_223_372_036_854_775_808.0;

/// The floats just below-or-at and just above-or-at an integer (equal when it is exact).
fn f64_neighbours(v: i64) -> (f64, f64) {
    let f = v as f64;
    // |f| <= 2^63, so the cast to i128 is exact and the comparison is exact.
    let fi = f as i128;
    let vi = v as i128;
    if fi == vi {
        (f, f)
    } else if fi > vi {
        (f.next_down(), f)
    } else {
        (f, f.next_up())
    }
}

/// Sorted keys of one axis, answering "how many points lie below this bound".
///
/// The searches go through a static B-tree of cache lines over the keys ([`LineSearch`]),
/// so a search reads one line a level, the upper levels cache-resident, and ends in one line
/// of the keys.
#[derive(Clone, Debug)]
pub struct SortedAxis {
    pub domain: Domain,
    pub keys: Slab<u64>,
    /// The root-search index: derived from the keys by a build, checked against them by a
    /// load.
    search: LineSearch,
}

impl SortedAxis {
    pub fn new(domain: Domain, keys: Vec<u64>) -> Self {
        let keys: Slab<u64> = keys.into();
        SortedAxis {
            domain,
            search: LineSearch::new(&keys),
            keys,
        }
    }

    /// A keyed tree's x axis: keys sorted within each key's run only, so no root-search
    /// index (a keyed bound searches its run, `keyed.rs`).
    pub fn unsearched(domain: Domain, keys: Vec<u64>) -> Self {
        SortedAxis {
            domain,
            keys: keys.into(),
            search: LineSearch::default(),
        }
    }

    /// A keyed tree's x axis read back from a file (the runs check the keys' order).
    pub(crate) fn unsearched_from_file(domain: Domain, keys: Slab<u64>) -> Self {
        SortedAxis {
            domain,
            keys,
            search: LineSearch::default(),
        }
    }

    /// An axis from arrays read back from a file; `None` unless the keys are sorted and the
    /// root-search index is exactly the one derived from them.
    pub(crate) fn from_file(
        domain: Domain,
        keys: Slab<u64>,
        search: Vec<Slab<Node>>,
    ) -> Option<Self> {
        let sorted = keys.par_windows(2).all(|w| w[0] <= w[1]);
        let search = sorted.then(|| LineSearch::from_file(&keys, search))??;
        Some(SortedAxis {
            domain,
            keys,
            search,
        })
    }

    /// Whether the keys ascend as a whole and carry a root-search index (not a keyed x axis).
    pub(crate) fn is_searched(&self) -> bool {
        self.search.levels().next().is_some()
    }

    /// The root-search index, for writing to a file.
    pub(crate) fn search(&self) -> &LineSearch {
        &self.search
    }

    /// The smallest and largest coordinate, or `None` when there are no points.
    pub fn extremes(&self) -> Option<(Bound, Bound)> {
        let (first, last) = (self.keys.first()?, self.keys.last()?);
        Some((
            value_of_key(self.domain, *first),
            value_of_key(self.domain, *last),
        ))
    }

    /// The smallest and largest coordinate of keys that ascend within each run
    /// `starts[i]..starts[i + 1]` (a keyed x axis: one run a key), or `None` when there are
    /// no points: the least first key of a run and the greatest last key of one.
    pub fn extremes_of_runs(&self, starts: &[u32]) -> Option<(Bound, Bound)> {
        let (lo, hi) = starts
            .windows(2)
            .filter(|w| w[0] < w[1])
            .map(|w| (self.keys[w[0] as usize], self.keys[w[1] as usize - 1]))
            .reduce(|a, b| (a.0.min(b.0), a.1.max(b.1)))?;
        Some((value_of_key(self.domain, lo), value_of_key(self.domain, hi)))
    }

    pub fn nbytes(&self) -> usize {
        self.keys.len() * 8 + self.search.nbytes()
    }

    /// The rank of one cut: one line a level of the search index, then one line of keys.
    #[cfg(test)]
    fn rank_of_cut(&self, cut: Cut) -> usize {
        match cut {
            Cut::All => self.keys.len(),
            Cut::Below(t) => self.search.rank(&self.keys, t),
        }
    }

    /// Number of points with coordinate `< b`.
    #[cfg(test)]
    fn count_below(&self, b: Bound) -> usize {
        self.rank_of_cut(self.cut_below(b))
    }

    /// Number of points with coordinate `<= b`.
    #[cfg(test)]
    fn count_at_most(&self, b: Bound) -> usize {
        self.rank_of_cut(self.cut_at_most(b))
    }

    /// Where the points `< b` end, as a cut.
    #[inline]
    pub fn cut_below(&self, b: Bound) -> Cut {
        match round_up(self.domain, b) {
            None => Cut::All,
            Some(t) => Cut::Below(t),
        }
    }

    /// Where the points `<= b` end, as a cut.
    #[inline]
    pub fn cut_at_most(&self, b: Bound) -> Cut {
        match round_down(self.domain, b) {
            None => Cut::Below(0),
            Some(u64::MAX) => Cut::All,
            Some(t) => Cut::Below(t + 1),
        }
    }

    /// The cuts for the lower and upper end of an interval, as `inclusive` says.
    #[inline]
    pub fn interval_cuts(&self, lo: Bound, hi: Bound, inclusive: Inclusive) -> (Cut, Cut) {
        let start = if inclusive.lo_closed() {
            self.cut_below(lo)
        } else {
            self.cut_at_most(lo)
        };
        let end = if inclusive.hi_closed() {
            self.cut_at_most(hi)
        } else {
            self.cut_below(hi)
        };
        (start, end)
    }

    /// The search of one cut, for [`crate::search::ranks_together`]: `Cut::All` is searched
    /// as "below u64::MAX" and must be fixed up with [`Self::fix_all`].
    #[inline(always)]
    pub(crate) fn search_of(&self, cut: Cut) -> Search<'_> {
        let limit = match cut {
            Cut::All => u64::MAX,
            Cut::Below(t) => t,
        };
        (&self.search, &self.keys, limit)
    }

    /// The rank of a cut from the rank its search gave: `Cut::All` is every key (a key equal
    /// to u64::MAX is not below u64::MAX).
    #[inline(always)]
    pub(crate) fn fix_all(&self, cut: Cut, rank: usize) -> usize {
        if matches!(cut, Cut::All) {
            self.keys.len()
        } else {
            rank
        }
    }

    /// The rank of every cut, all searches taking each level of the search index together
    /// so that their cache misses overlap.
    pub fn ranks_of_cuts<const N: usize>(&self, cuts: &[Cut; N], out: &mut [usize; N]) {
        let rank = ranks_together(&cuts.map(|cut| self.search_of(cut)));
        for i in 0..N {
            out[i] = self.fix_all(cuts[i], rank[i]);
        }
    }
}

/// A position in an axis's sorted keys: everything, or the keys below a threshold.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Cut {
    All,
    Below(u64),
}

/// Which box edges belong to the box, on both axes (the pandas `inclusive` convention).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum Inclusive {
    #[default]
    Both,
    Neither,
    Left,
    Right,
}

impl Inclusive {
    pub fn lo_closed(self) -> bool {
        matches!(self, Inclusive::Both | Inclusive::Left)
    }

    pub fn hi_closed(self) -> bool {
        matches!(self, Inclusive::Both | Inclusive::Right)
    }

    pub fn parse(s: &str) -> Result<Self, Error> {
        match s {
            "both" => Ok(Inclusive::Both),
            "neither" => Ok(Inclusive::Neither),
            "left" => Ok(Inclusive::Left),
            "right" => Ok(Inclusive::Right),
            other => Err(Error::BadInclusive(other.to_string())),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keys_decode_to_the_values_they_came_from() {
        for v in [
            0.0,
            -0.0,
            1.5,
            -1.5,
            f64::MIN_POSITIVE,
            f64::MAX,
            -f64::MAX,
            f64::INFINITY,
        ] {
            let back = value_of_key(Domain::F64, f64_key(v));
            assert_eq!(back, Bound::F64(if v == 0.0 { 0.0 } else { v }));
        }
        for v in [0i64, -1, 1, i64::MIN, i64::MAX] {
            assert_eq!(value_of_key(Domain::I64, i64_key(v)), Bound::I64(v));
        }
        let axis = SortedAxis::new(Domain::I64, vec![i64_key(-4), i64_key(2), i64_key(9)]);
        assert_eq!(axis.extremes(), Some((Bound::I64(-4), Bound::I64(9))));
        assert_eq!(SortedAxis::new(Domain::F64, vec![]).extremes(), None);
    }
    use proptest::prelude::*;

    #[test]
    fn float_keys_order_like_floats() {
        let mut v = [
            f64::NEG_INFINITY,
            -1e300,
            -1.0,
            -f64::MIN_POSITIVE,
            -0.0,
            0.0,
            5e-324,
            1.0,
            1e300,
            f64::INFINITY,
        ];
        v.sort_by(|a, b| a.partial_cmp(b).unwrap());
        for w in v.windows(2) {
            assert!(f64_key(w[0]) <= f64_key(w[1]), "{} {}", w[0], w[1]);
        }
        assert_eq!(f64_key(-0.0), f64_key(0.0));
    }

    #[test]
    fn int_bound_on_float_column_is_exact_beyond_2_pow_53() {
        // 2^53 + 1 is not a float: the floats around it are 2^53 and 2^53 + 2.
        let axis = SortedAxis::new(
            Domain::F64,
            vec![f64_key(9007199254740992.0), f64_key(9007199254740994.0)],
        );
        let b = Bound::I64(9007199254740993);
        assert_eq!(axis.count_below(b), 1);
        assert_eq!(axis.count_at_most(b), 1);
    }

    #[test]
    fn float_bound_on_int_column_rounds_inward() {
        let axis = SortedAxis::new(
            Domain::I64,
            [i64::MIN, -3, 2, 3, i64::MAX].map(i64_key).to_vec(),
        );
        assert_eq!(axis.count_below(Bound::F64(2.5)), 3);
        assert_eq!(axis.count_at_most(Bound::F64(2.5)), 3);
        assert_eq!(axis.count_below(Bound::F64(f64::INFINITY)), 5);
        assert_eq!(axis.count_at_most(Bound::F64(1e30)), 5);
        assert_eq!(axis.count_below(Bound::F64(-1e30)), 0);
        assert_eq!(axis.count_at_most(Bound::F64(f64::NEG_INFINITY)), 0);
        // 2^63 as a float is above i64::MAX, so every point is below it.
        assert_eq!(axis.count_below(Bound::F64(TWO_POW_63)), 5);
        assert_eq!(axis.count_at_most(Bound::F64(-TWO_POW_63)), 1);
    }

    proptest! {
        #[test]
        fn i64_keys_order_like_i64(a: i64, b: i64) {
            prop_assert_eq!(a.cmp(&b), i64_key(a).cmp(&i64_key(b)));
        }

        #[test]
        fn f64_keys_order_like_f64(a in proptest::num::f64::ANY, b in proptest::num::f64::ANY) {
            prop_assume!(!a.is_nan() && !b.is_nan());
            prop_assert_eq!(a.partial_cmp(&b).unwrap(), f64_key(a).cmp(&f64_key(b)));
        }

        #[test]
        fn ranks_match_a_scan_for_int_columns(
            mut v in proptest::collection::vec(-50i64..50, 0..200),
            b in -60.0f64..60.0,
        ) {
            v.sort();
            let axis = SortedAxis::new(Domain::I64, v.iter().map(|&x| i64_key(x)).collect());
            prop_assert_eq!(axis.count_below(Bound::F64(b)), v.iter().filter(|&&x| (x as f64) < b).count());
            prop_assert_eq!(axis.count_at_most(Bound::F64(b)), v.iter().filter(|&&x| (x as f64) <= b).count());
        }

        #[test]
        fn ranks_match_a_scan_for_float_columns_and_int_bounds(
            offsets in proptest::collection::vec(-8i64..8, 0..40),
            d in -10i64..10,
        ) {
            // Values near 2^60, where floats are 256 apart.
            let base: i64 = 1 << 60;
            let mut v: Vec<f64> = offsets.iter().map(|&o| (base + o * 256) as f64).collect();
            v.sort_by(|a, b| a.partial_cmp(b).unwrap());
            let b = base + d * 100;
            let axis = SortedAxis::new(Domain::F64, v.iter().map(|&x| f64_key(x)).collect());
            let below = v.iter().filter(|&&x| (x as i128) < b as i128).count();
            let at_most = v.iter().filter(|&&x| (x as i128) <= b as i128).count();
            prop_assert_eq!(axis.count_below(Bound::I64(b)), below);
            prop_assert_eq!(axis.count_at_most(Bound::I64(b)), at_most);
        }
    }
}
