//! Keyed trees against a naive keyed scan over every point, on random inputs: each box asks
//! only the points whose key code is its own.

use boxwood_core::file::{read_index, write_index, AlignedBytes};
use boxwood_core::{
    build, build_keyed, Bound, BoundColumn, BoxBounds, Boxes, Column, Error, Inclusive, KeyColumn,
    Layout, RangeTree, SumColumn, WeightColumn, WeightSum,
};
use proptest::prelude::*;

const INCLUSIVE: [Inclusive; 4] = [
    Inclusive::Both,
    Inclusive::Neither,
    Inclusive::Left,
    Inclusive::Right,
];

fn inside(v: f64, lo: f64, hi: f64, inc: Inclusive) -> bool {
    let lo_ok = if inc.lo_closed() { v >= lo } else { v > lo };
    let hi_ok = if inc.hi_closed() { v <= hi } else { v < hi };
    lo_ok && hi_ok
}

/// The naive keyed scan: rows of code `key` inside the box.
fn scan(pts: &Points, b: [f64; 4], key: i64, inc: Inclusive) -> Vec<u32> {
    (0..pts.x.len())
        .filter(|&i| {
            pts.codes[i] as i64 == key
                && inside(pts.x[i] as f64, b[0], b[1], inc)
                && inside(pts.y[i], b[2], b[3], inc)
        })
        .map(|i| i as u32)
        .collect()
}

#[derive(Clone, Debug)]
struct Points {
    x: Vec<i64>,
    y: Vec<f64>,
    w: Vec<i64>,
    codes: Vec<u32>,
    /// K: codes are below it; some codes may have no points.
    count: usize,
}

/// Points on a small grid (duplicates and boxes on exact coordinates are common), with a
/// few keys of many points or many keys of a few.
fn points() -> impl Strategy<Value = Points> {
    (
        0usize..300,
        prop_oneof![1usize..4, 4usize..40, Just(300usize)],
    )
        .prop_flat_map(|(n, k)| {
            (
                proptest::collection::vec(-20i64..20, n),
                proptest::collection::vec((-10i32..10).prop_map(|v| v as f64 * 0.5), n),
                proptest::collection::vec(-1000i64..1000, n),
                proptest::collection::vec(0..k as u32, n),
                Just(k),
            )
                .prop_map(|(x, y, w, codes, count)| Points {
                    x,
                    y,
                    w,
                    codes,
                    count,
                })
        })
}

/// Boxes with key codes, some outside `0..K` (absent keys answer nothing).
fn boxes() -> impl Strategy<Value = Vec<([f64; 4], i64)>> {
    let edge = prop_oneof![
        (-22i32..22).prop_map(|v| v as f64),
        (-44i32..44).prop_map(|v| v as f64 * 0.25),
        Just(f64::INFINITY),
        Just(f64::NEG_INFINITY),
    ];
    let key = prop_oneof![4 => 0i64..40, 1 => Just(-1i64), 1 => Just(i64::MAX), 1 => 300i64..310];
    proptest::collection::vec(
        (edge.clone(), edge.clone(), edge.clone(), edge, key)
            .prop_map(|(a, b, c, d, k)| ([a, b, c, d], k)),
        1..40,
    )
}

fn bounds(b: [f64; 4]) -> BoxBounds {
    BoxBounds {
        x_lo: Bound::F64(b[0]),
        x_hi: Bound::F64(b[1]),
        y_lo: Bound::F64(b[2]),
        y_hi: Bound::F64(b[3]),
    }
}

fn build_of(p: &Points, layout: Layout) -> RangeTree {
    build_keyed(
        Column::I64(&p.x),
        Column::F64(&p.y),
        Some(WeightColumn::I64(&p.w)),
        Some(KeyColumn {
            codes: &p.codes,
            count: p.count,
        }),
        layout,
    )
    .unwrap()
}

/// The tree written as an index file and read back.
fn reloaded(tree: &RangeTree) -> RangeTree {
    let mut bytes = Vec::new();
    write_index(tree, &[], &mut bytes).unwrap();
    read_index(AlignedBytes::copy_of(&bytes)).unwrap().tree
}

fn check_tree(tree: &RangeTree, p: &Points, qs: &[([f64; 4], i64)]) -> Result<(), TestCaseError> {
    // The x keys ascend within each key's run, not as a whole: the extremes are the scan's.
    let scanned = p.x.iter().min().zip(p.x.iter().max());
    let extremes = tree.x_extremes().map(|(lo, hi)| match (lo, hi) {
        (Bound::I64(lo), Bound::I64(hi)) => (lo, hi),
        other => panic!("an i64 axis gave {other:?}"),
    });
    prop_assert_eq!(extremes, scanned.map(|(lo, hi)| (*lo, *hi)));
    let cols: Vec<Vec<f64>> = (0..4)
        .map(|k| qs.iter().map(|q| q.0[k]).collect())
        .collect();
    let keys: Vec<i64> = qs.iter().map(|q| q.1).collect();
    let batch = Boxes {
        x_lo: BoundColumn::F64(&cols[0]),
        x_hi: BoundColumn::F64(&cols[1]),
        y_lo: BoundColumn::F64(&cols[2]),
        y_hi: BoundColumn::F64(&cols[3]),
    };
    for inc in INCLUSIVE {
        let mut counts = vec![0i64; qs.len()];
        tree.count_batch_by(&batch, Some(&keys), inc, &mut counts)
            .unwrap();
        let report = tree
            .report_batch_by(&batch, Some(&keys), inc, false)
            .unwrap();
        let SumColumn::I64(sums) = tree.sum_batch_by(&batch, Some(&keys), inc).unwrap() else {
            panic!("integer weights give integer sums");
        };
        for (i, &(b, key)) in qs.iter().enumerate() {
            let expected = scan(p, b, key, inc);
            let want_sum: i64 = expected.iter().map(|&r| p.w[r as usize]).sum();
            prop_assert_eq!(counts[i] as usize, expected.len());
            prop_assert_eq!(
                tree.count_by(&bounds(b), Some(key), inc).unwrap(),
                expected.len()
            );
            let mut one = Vec::new();
            tree.report_by(&bounds(b), Some(key), inc, &mut one)
                .unwrap();
            one.sort();
            prop_assert_eq!(&one, &expected);
            let (s, e) = (report.offsets[i] as usize, report.offsets[i + 1] as usize);
            let mut got: Vec<u32> = report.rows[s..e].iter().map(|&r| r as u32).collect();
            got.sort();
            prop_assert_eq!(&got, &expected);
            prop_assert_eq!(sums[i], want_sum);
            prop_assert_eq!(
                tree.sum_by(&bounds(b), Some(key), inc).unwrap(),
                WeightSum::I64(want_sum)
            );
        }
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]

    #[test]
    fn keyed_count_report_sum_match_the_keyed_scan(p in points(), qs in boxes()) {
        for layout in [Layout::Fast, Layout::Compact] {
            let tree = build_of(&p, layout);
            let runs = tree.key_runs().unwrap();
            prop_assert_eq!(runs.len(), p.count);
            for k in 0..p.count {
                let (s, e) = runs.run(k as i64);
                prop_assert_eq!(e - s, p.codes.iter().filter(|&&c| c as usize == k).count());
            }
            check_tree(&tree, &p, &qs)?;
            check_tree(&reloaded(&tree), &p, &qs)?;
        }
    }
}

#[test]
fn keys_must_match_the_tree() {
    let x = [1.0, 2.0, 3.0];
    let codes = [0u32, 1, 0];
    let keyed = build_keyed(
        Column::F64(&x),
        Column::F64(&x),
        None,
        Some(KeyColumn {
            codes: &codes,
            count: 2,
        }),
        Layout::Fast,
    )
    .unwrap();
    let plain = build(Column::F64(&x), Column::F64(&x), None, Layout::Fast).unwrap();
    let b = bounds([0.0, 5.0, 0.0, 5.0]);
    assert_eq!(keyed.count(&b, Inclusive::Both), Err(Error::KeysRequired));
    assert_eq!(
        plain.count_by(&b, Some(0), Inclusive::Both),
        Err(Error::NotKeyed)
    );
    assert_eq!(keyed.count_by(&b, Some(0), Inclusive::Both), Ok(2));
    let cols = [vec![0.0], vec![5.0], vec![0.0], vec![5.0]];
    let batch = Boxes {
        x_lo: BoundColumn::F64(&cols[0]),
        x_hi: BoundColumn::F64(&cols[1]),
        y_lo: BoundColumn::F64(&cols[2]),
        y_hi: BoundColumn::F64(&cols[3]),
    };
    let mut out = [0i64];
    assert_eq!(
        keyed.count_batch_by(&batch, Some(&[0, 1]), Inclusive::Both, &mut out),
        Err(Error::KeyLengths {
            expected: 1,
            got: 2
        })
    );
    assert_eq!(
        keyed.report_batch_by(&batch, None, Inclusive::Both, false),
        Err(Error::KeysRequired)
    );
    // Codes at or past the count are refused at build, naming the row.
    let bad = build_keyed(
        Column::F64(&x),
        Column::F64(&x),
        None,
        Some(KeyColumn {
            codes: &[0, 2, 1],
            count: 2,
        }),
        Layout::Fast,
    );
    assert_eq!(
        bad.unwrap_err(),
        Error::KeyCode {
            position: 1,
            code: 2,
            count: 2
        }
    );
    let too_many = build_keyed(
        Column::F64(&x),
        Column::F64(&x),
        None,
        Some(KeyColumn {
            codes: &codes,
            count: u32::MAX as usize + 1,
        }),
        Layout::Fast,
    );
    assert!(matches!(too_many, Err(Error::TooManyKeys { .. })));
}
