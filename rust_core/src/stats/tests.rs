//! Order statistics and extreme rows against a scan of the points (sort the box's values,
//! take the rank: the definition), on small trees with many ties, in both layouts, keyed and
//! not; the transposed cascade against the count cascade of the tree built with its axes
//! swapped; and (ignored, run by hand) the measurement the module doc quotes.

use super::*;
use crate::batch::Boxes;
use crate::keyed::KeyColumn;
use crate::keys::{Column, Inclusive};
use crate::test_rng::XorShift;
use crate::{build, build_keyed, Layout};

const INCLUSIVE: [Inclusive; 4] = [
    Inclusive::Both,
    Inclusive::Neither,
    Inclusive::Left,
    Inclusive::Right,
];

struct Points {
    x: Vec<i64>,
    y: Vec<i64>,
    codes: Vec<u32>,
}

fn points(rng: &mut XorShift, n: usize, spread: u64) -> Points {
    Points {
        x: (0..n).map(|_| rng.below(spread) as i64 - 3).collect(),
        y: (0..n)
            .map(|_| rng.below(spread) as i64 * 1_000_003)
            .collect(),
        codes: (0..n).map(|_| rng.below(3) as u32).collect(),
    }
}

struct BoxCols([Vec<i64>; 4], Vec<i64>);

impl BoxCols {
    fn random(rng: &mut XorShift, q: usize, spread: u64) -> Self {
        let mut cols: [Vec<i64>; 4] = Default::default();
        let mut codes = Vec::new();
        for _ in 0..q {
            let (a, b) = (
                rng.below(spread + 2) as i64 - 4,
                rng.below(spread + 2) as i64 - 4,
            );
            let (c, d) = (
                rng.below(spread + 2) as i64 - 1,
                rng.below(spread + 2) as i64 - 1,
            );
            // Mostly ordered bounds, some reversed (empty boxes).
            let flip = rng.below(8) == 0;
            let (a, b) = if flip {
                (a.max(b), a.min(b))
            } else {
                (a.min(b), a.max(b))
            };
            cols[0].push(a);
            cols[1].push(b);
            cols[2].push(c.min(d) * 1_000_003);
            cols[3].push(c.max(d) * 1_000_003);
            codes.push(rng.below(4) as i64); // code 3 holds no points
        }
        BoxCols(cols, codes)
    }

    fn boxes(&self) -> Boxes<'_> {
        Boxes {
            x_lo: Column::I64(&self.0[0]),
            x_hi: Column::I64(&self.0[1]),
            y_lo: Column::I64(&self.0[2]),
            y_hi: Column::I64(&self.0[3]),
        }
    }

    /// The rows in box `i`, by testing every point (of key `code` when given).
    fn scan(&self, p: &Points, i: usize, inclusive: Inclusive, code: Option<i64>) -> Vec<usize> {
        let inside = |v: i64, lo: i64, hi: i64| {
            (if inclusive.lo_closed() {
                v >= lo
            } else {
                v > lo
            }) && (if inclusive.hi_closed() {
                v <= hi
            } else {
                v < hi
            })
        };
        (0..p.x.len())
            .filter(|&r| {
                inside(p.x[r], self.0[0][i], self.0[1][i])
                    && inside(p.y[r], self.0[2][i], self.0[3][i])
                    && code.is_none_or(|c| p.codes[r] as i64 == c)
            })
            .collect()
    }
}

fn axis_values(p: &Points, axis: Axis) -> &[i64] {
    match axis {
        Axis::X => &p.x,
        Axis::Y => &p.y,
    }
}

/// Every rank of every box on both axes (and two past the ends), and the k extreme rows for
/// several k, against the scan.
fn check_tree(tree: &RangeTree, p: &Points, cols: &BoxCols, keyed: bool) {
    let q = cols.1.len();
    let keys = keyed.then_some(&cols.1[..]);
    for inclusive in INCLUSIVE {
        for axis in [Axis::X, Axis::Y] {
            let per_box = 6;
            let mut ranks = Vec::new();
            for i in 0..q {
                ranks.extend([0, -1, 1, -2, (i % 9) as i64, 40]);
            }
            let stats = tree
                .kth_batch_by(&cols.boxes(), keys, inclusive, axis, &ranks, per_box)
                .unwrap();
            let counted = tree
                .count_for_stats(&cols.boxes(), keys, inclusive, axis)
                .unwrap();
            let mut counts = vec![0i64; q];
            tree.count_batch_by(&cols.boxes(), keys, inclusive, &mut counts)
                .unwrap();
            assert_eq!(counted.counts(), counts);
            let StatValues::I64(values) = &stats.values else {
                panic!("int axes give ints");
            };
            for i in 0..q {
                let code = keyed.then_some(cols.1[i]);
                let mut sorted: Vec<i64> = cols
                    .scan(p, i, inclusive, code)
                    .iter()
                    .map(|&r| axis_values(p, axis)[r])
                    .collect();
                sorted.sort_unstable();
                for j in 0..per_box {
                    let r = ranks[i * per_box + j];
                    let want = if r >= 0 {
                        sorted.get(r as usize).copied()
                    } else {
                        sorted
                            .len()
                            .checked_sub(r.unsigned_abs() as usize)
                            .map(|k| sorted[k])
                    };
                    let slot = i * per_box + j;
                    let got = stats.found[slot].then_some(values[slot]);
                    assert_eq!(got, want, "box {i} rank {r} {axis:?} {inclusive:?}");
                }
            }
            for largest in [false, true] {
                for k in [0u64, 1, 2, 5, 1000] {
                    let ks = vec![k; q];
                    let report = tree
                        .extreme_rows_batch_by(&cols.boxes(), keys, inclusive, axis, &ks, largest)
                        .unwrap();
                    for i in 0..q {
                        let code = keyed.then_some(cols.1[i]);
                        let values = axis_values(p, axis);
                        let mut rows = cols.scan(p, i, inclusive, code);
                        // The definition: sorted by value (descending for largest), then row.
                        rows.sort_by_key(|&r| {
                            let v = values[r] as i128;
                            (if largest { -v } else { v }, r)
                        });
                        rows.truncate(k as usize);
                        rows.sort_unstable();
                        let want: Vec<i64> = rows.iter().map(|&r| r as i64).collect();
                        let (a, b) = (report.offsets[i] as usize, report.offsets[i + 1] as usize);
                        assert_eq!(
                            &report.rows[a..b],
                            &want[..],
                            "box {i} k {k} largest {largest} {axis:?} {inclusive:?}"
                        );
                    }
                }
            }
        }
    }
}

#[test]
fn order_statistics_and_extreme_rows_equal_a_scan() {
    let mut rng = XorShift::new(2024);
    // Sizes around block and line edges; spreads from all-tied to nearly distinct.
    for (n, spread) in [
        (0, 5),
        (1, 3),
        (2, 2),
        (17, 4),
        (300, 12),
        (1500, 40),
        (5000, 3000),
    ] {
        let p = points(&mut rng, n, spread);
        let cols = BoxCols::random(&mut rng, 60, spread);
        for layout in [Layout::Fast, Layout::Compact] {
            let tree = build(Column::I64(&p.x), Column::I64(&p.y), None, layout).unwrap();
            check_tree(&tree, &p, &cols, false);
            let keys = KeyColumn {
                codes: &p.codes,
                count: 3,
            };
            let keyed = build_keyed(
                Column::I64(&p.x),
                Column::I64(&p.y),
                None,
                Some(keys),
                layout,
            )
            .unwrap();
            check_tree(&keyed, &p, &cols, true);
        }
    }
}

/// Float axes give floats, and the largest and smallest finite values survive the keys.
#[test]
fn float_axes_give_their_own_values() {
    let x = [f64::MAX, -f64::MAX, 0.5, -0.0, 2.5];
    let y = [1.0, 2.0, 3.0, 4.0, 5.0];
    let tree = build(Column::F64(&x), Column::F64(&y), None, Layout::Fast).unwrap();
    let (lo, hi) = ([f64::NEG_INFINITY], [f64::INFINITY]);
    let boxes = Boxes {
        x_lo: Column::F64(&lo),
        x_hi: Column::F64(&hi),
        y_lo: Column::F64(&lo),
        y_hi: Column::F64(&hi),
    };
    let stats = tree
        .kth_batch_by(
            &boxes,
            None,
            Inclusive::Both,
            Axis::X,
            &[0, 1, 2, -2, -1],
            5,
        )
        .unwrap();
    // -0.0 and 0.0 are one key (they compare equal), which stands for 0.0.
    assert_eq!(
        stats.values,
        StatValues::F64(vec![-f64::MAX, 0.0, 0.5, 2.5, f64::MAX])
    );
    assert!(stats.found.iter().all(|&f| f));
    let stats = tree
        .kth_batch_by(&boxes, None, Inclusive::Both, Axis::Y, &[2], 1)
        .unwrap();
    assert_eq!(stats.values, StatValues::F64(vec![3.0]));
}

/// The transposed cascade is, digit for digit, the count cascade of the same points built
/// with x and y swapped (whose root is in x-rank order and whose levels split y ranks).
#[test]
fn transposed_cascade_is_the_swapped_trees_count_cascade() {
    let mut rng = XorShift::new(77);
    for n in [0usize, 1, 5, 64, 65, 1000, 70_000] {
        let x: Vec<i64> = (0..n).map(|_| rng.below(50) as i64).collect();
        let y: Vec<i64> = (0..n).map(|_| rng.below(1 << 40) as i64).collect();
        let tree = build(Column::I64(&x), Column::I64(&y), None, Layout::Compact).unwrap();
        let swapped = build(Column::I64(&y), Column::I64(&x), None, Layout::Compact).unwrap();
        assert!(tree.transposed.get().is_none());
        assert!(tree.transposed().unwrap().same_as(&swapped.wide), "n = {n}");
        let parts = tree.nbytes_by_part();
        assert_eq!(parts[6], ("transposed cascade", swapped.wide.nbytes()));
    }
}

/// The k-th y of a rank box by a search over y ranks, a count per halving: the alternative
/// the module doc measures. Up to [`GROUP_BOXES`] boxes, their counts taken together.
fn kth_y_by_search(tree: &RangeTree, ranks: &[RankBox], k: &[usize]) -> Vec<usize> {
    const D: usize = GROUP_BOXES * 2;
    let (mut lo, mut hi): (Vec<usize>, Vec<usize>) = ranks.iter().map(|r| r.y).unzip();
    loop {
        let (mut target, mut a, mut b) = ([0usize; D], [0usize; D], [0usize; D]);
        let mut mids = [0usize; GROUP_BOXES];
        let mut busy = false;
        for (i, r) in ranks.iter().enumerate() {
            if lo[i] < hi[i] {
                busy = true;
                mids[i] = (lo[i] + hi[i]) / 2;
                (target[2 * i], target[2 * i + 1]) = (r.x.1, r.x.0);
                (a[2 * i], a[2 * i + 1]) = (r.y.0, r.y.0);
                (b[2 * i], b[2 * i + 1]) = (mids[i] + 1, mids[i] + 1);
            }
        }
        if !busy {
            return lo;
        }
        let below = tree.wide.below_many(&target, a, b);
        for i in 0..ranks.len() {
            if lo[i] < hi[i] {
                if below[2 * i] - below[2 * i + 1] > k[i] {
                    hi[i] = mids[i];
                } else {
                    lo[i] = mids[i] + 1;
                }
            }
        }
    }
}

/// The search agrees with the transposed cascade (so the measurement compares equals).
#[test]
fn search_over_y_ranks_agrees_with_the_transposed_cascade() {
    let mut rng = XorShift::new(5);
    let n = 20_000;
    let x: Vec<i64> = (0..n).map(|_| rng.below(1000) as i64).collect();
    let y: Vec<i64> = (0..n).map(|_| rng.below(1000) as i64).collect();
    let tree = build(Column::I64(&x), Column::I64(&y), None, Layout::Compact).unwrap();
    let lens = tree.lens(Axis::Y).unwrap();
    for _ in 0..200 {
        let mut group = [RankBox::default(); GROUP_BOXES];
        for r in group.iter_mut() {
            let (a, b) = (
                rng.below(n as u64 + 1) as usize,
                rng.below(n as u64 + 1) as usize,
            );
            let (c, d) = (
                rng.below(n as u64 + 1) as usize,
                rng.below(n as u64 + 1) as usize,
            );
            *r = RankBox {
                x: (a.min(b), a.max(b)),
                y: (c.min(d), c.max(d)),
            };
        }
        let counts = lens.counts(&group);
        let k: Vec<usize> = (0..GROUP_BOXES).map(|i| counts.0[i] / 3).collect();
        let want = lens.kth(&group, &counts, |i| Some(k[i]));
        let got = kth_y_by_search(&tree, &group, &k);
        for i in 0..GROUP_BOXES {
            if let Some(w) = want[i] {
                assert_eq!(got[i], w, "{:?}", group[i]);
            }
        }
    }
}

/// Run by hand (`cargo test --release -p boxwood-core measure_y -- --ignored --nocapture`,
/// with `RAYON_NUM_THREADS=1`): the throughputs the module doc quotes.
#[test]
#[ignore]
fn measure_y_statistics() {
    use std::time::Instant;
    let mut rng = XorShift::new(1);
    let n = 2_000_000;
    let x: Vec<f64> = (0..n).map(|_| rng.unit()).collect();
    let y: Vec<f64> = (0..n).map(|_| rng.unit()).collect();
    let tree = build(Column::F64(&x), Column::F64(&y), None, Layout::Compact).unwrap();
    let t = Instant::now();
    tree.transposed().unwrap();
    println!(
        "derive the transposed cascade: {:.2} s",
        t.elapsed().as_secs_f64()
    );
    let q = 20_000;
    let mut cols: [Vec<f64>; 4] = Default::default();
    for _ in 0..q {
        let (a, c) = (rng.unit() * 0.99, rng.unit() * 0.99);
        cols[0].push(a);
        cols[1].push(a + 0.01);
        cols[2].push(c);
        cols[3].push(c + 0.01);
    }
    let boxes = Boxes {
        x_lo: Column::F64(&cols[0]),
        x_hi: Column::F64(&cols[1]),
        y_lo: Column::F64(&cols[2]),
        y_hi: Column::F64(&cols[3]),
    };
    let rate = |f: &dyn Fn()| {
        let t = Instant::now();
        for _ in 0..3 {
            f();
        }
        3.0 * q as f64 / t.elapsed().as_secs_f64()
    };
    let mut out = vec![0i64; q];
    let count = rate(&|| {
        let mut out = out.clone();
        tree.count_batch(&boxes, Inclusive::Both, &mut out).unwrap();
    });
    tree.count_batch(&boxes, Inclusive::Both, &mut out).unwrap();
    let half: Vec<i64> = out.iter().map(|c| c / 2).collect();
    let kx = rate(&|| {
        tree.kth_batch_by(&boxes, None, Inclusive::Both, Axis::X, &half, 1)
            .unwrap();
    });
    let ky = rate(&|| {
        tree.kth_batch_by(&boxes, None, Inclusive::Both, Axis::Y, &half, 1)
            .unwrap();
    });
    let ranks: Vec<RankBox> = (0..q)
        .map(|i| {
            let b = crate::query::BoxBounds {
                x_lo: crate::keys::Bound::F64(cols[0][i]),
                x_hi: crate::keys::Bound::F64(cols[1][i]),
                y_lo: crate::keys::Bound::F64(cols[2][i]),
                y_hi: crate::keys::Bound::F64(cols[3][i]),
            };
            tree.rank_box(&b, Inclusive::Both).unwrap()
        })
        .collect();
    let search = rate(&|| {
        for (g, k) in ranks.chunks(GROUP_BOXES).zip(half.chunks(GROUP_BOXES)) {
            let k: Vec<usize> = k.iter().map(|&k| k as usize).collect();
            std::hint::black_box(kth_y_by_search(&tree, g, &k));
        }
    });
    println!("count {count:.0}/s, kth x {kx:.0}/s, kth y transposed {ky:.0}/s, kth y search {search:.0}/s (search without the root searches)");
}
