//! The engine against a naive scan over every point, on random inputs.

use boxwood_core::{
    build, Bound, BoundColumn, BoxBounds, Boxes, Column, Inclusive, Layout, SumColumn,
    WeightColumn, WeightSum,
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

fn scan(x: &[i64], y: &[f64], b: [f64; 4], inc: Inclusive) -> Vec<u32> {
    (0..x.len())
        .filter(|&i| inside(x[i] as f64, b[0], b[1], inc) && inside(y[i], b[2], b[3], inc))
        .map(|i| i as u32)
        .collect()
}

/// The boxes as four bound columns.
fn columns(qs: &[[f64; 4]]) -> Vec<Vec<f64>> {
    (0..4).map(|k| qs.iter().map(|q| q[k]).collect()).collect()
}

fn batch_of(cols: &[Vec<f64>]) -> Boxes<'_> {
    Boxes {
        x_lo: BoundColumn::F64(&cols[0]),
        x_hi: BoundColumn::F64(&cols[1]),
        y_lo: BoundColumn::F64(&cols[2]),
        y_hi: BoundColumn::F64(&cols[3]),
    }
}

fn bounds(b: [f64; 4]) -> BoxBounds {
    BoxBounds {
        x_lo: Bound::F64(b[0]),
        x_hi: Bound::F64(b[1]),
        y_lo: Bound::F64(b[2]),
        y_hi: Bound::F64(b[3]),
    }
}

/// Points on a small grid so that duplicates and boxes on exact coordinates are common.
fn points() -> impl Strategy<Value = (Vec<i64>, Vec<f64>, Vec<i64>)> {
    (0usize..300).prop_flat_map(|n| {
        (
            proptest::collection::vec(-20i64..20, n),
            proptest::collection::vec((-10i32..10).prop_map(|v| v as f64 * 0.5), n),
            proptest::collection::vec(-1000i64..1000, n),
        )
    })
}

fn boxes() -> impl Strategy<Value = Vec<[f64; 4]>> {
    let edge = prop_oneof![
        (-22i32..22).prop_map(|v| v as f64),
        (-44i32..44).prop_map(|v| v as f64 * 0.25),
        Just(f64::INFINITY),
        Just(f64::NEG_INFINITY),
    ];
    proptest::collection::vec(
        (edge.clone(), edge.clone(), edge.clone(), edge).prop_map(|(a, b, c, d)| [a, b, c, d]),
        1..30,
    )
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(300))]

    #[test]
    fn count_report_sum_match_the_scan((x, y, w) in points(), qs in boxes()) {
        for layout in [Layout::Fast, Layout::Compact] {
            let tree = build(Column::I64(&x), Column::F64(&y), Some(WeightColumn::I64(&w)), layout)
                .unwrap();
            for &q in &qs {
                for inc in INCLUSIVE {
                    let expected = scan(&x, &y, q, inc);
                    let b = bounds(q);
                    prop_assert_eq!(tree.count(&b, inc).unwrap(), expected.len());
                    let mut rows = Vec::new();
                    tree.report(&b, inc, &mut rows).unwrap();
                    rows.sort();
                    prop_assert_eq!(&rows, &expected);
                    let want: i64 = expected.iter().map(|&r| w[r as usize]).sum();
                    prop_assert_eq!(tree.sum(&b, inc).unwrap(), WeightSum::I64(want));
                    let (count, tally) = tree.probe_count(&b, inc).unwrap();
                    prop_assert_eq!(count, expected.len());
                    // From memory (de Berg et al., ch. 5): two root-to-leaf descents.
                    prop_assert!(tally.nodes.iter().all(|&k| k <= 2));
                }
            }
        }
    }

    #[test]
    fn batches_match_single_boxes((x, y, w) in points(), qs in boxes()) {
        let wf: Vec<f64> = w.iter().map(|&v| v as f64 / 8.0).collect();
        for layout in [Layout::Fast, Layout::Compact] {
            let tree = build(Column::I64(&x), Column::F64(&y), Some(WeightColumn::F64(&wf)), layout)
                .unwrap();
            let cols = columns(&qs);
            let batch = batch_of(&cols);
            let mut counts = vec![0i64; qs.len()];
            tree.count_batch(&batch, Inclusive::Left, &mut counts).unwrap();
            let report = tree.report_batch(&batch, Inclusive::Left).unwrap();
            let SumColumn::F64(sums) = tree.sum_batch(&batch, Inclusive::Left).unwrap() else {
                panic!("float weights give float sums");
            };
            for (i, &q) in qs.iter().enumerate() {
                let expected = scan(&x, &y, q, Inclusive::Left);
                prop_assert_eq!(counts[i] as usize, expected.len());
                let (s, e) = (report.offsets[i] as usize, report.offsets[i + 1] as usize);
                let mut rows: Vec<u32> = report.rows[s..e].iter().map(|&r| r as u32).collect();
                rows.sort();
                prop_assert_eq!(&rows, &expected);
                // Weights are multiples of 1/8 well below 2^50: every sum is exact.
                let want: f64 = expected.iter().map(|&r| wf[r as usize]).sum();
                prop_assert_eq!(sums[i], want);
            }
        }
    }
}

#[test]
fn empty_tree_counts_zero() {
    let tree = build(Column::F64(&[]), Column::F64(&[]), None, Layout::Fast).unwrap();
    let b = bounds([
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
    ]);
    assert_eq!(tree.count(&b, Inclusive::Both).unwrap(), 0);
    assert_eq!(tree.height(), 0);
}

#[test]
fn nan_coordinates_and_bounds_are_refused() {
    let err = build(
        Column::F64(&[1.0, f64::NAN]),
        Column::F64(&[1.0, 2.0]),
        None,
        Layout::Fast,
    )
    .unwrap_err();
    assert_eq!(err.to_string(), "x contains NaN at position 1");
    let tree = build(Column::F64(&[1.0]), Column::F64(&[1.0]), None, Layout::Fast).unwrap();
    let err = tree
        .count(&bounds([0.0, 2.0, f64::NAN, 2.0]), Inclusive::Both)
        .unwrap_err();
    assert_eq!(err.to_string(), "y_lo contains NaN at position 0");
}

#[test]
fn int64_sums_beyond_2_pow_63_are_exact_or_refused() {
    let big = 1i64 << 62;
    let w = [big, big, big, -big];
    let x = [0.0, 1.0, 2.0, 3.0];
    let tree = build(
        Column::F64(&x),
        Column::F64(&x),
        Some(WeightColumn::I64(&w)),
        Layout::Fast,
    )
    .unwrap();
    let all = bounds([0.0, 3.0, 0.0, 3.0]);
    // 2^62 * 3 - 2^62 = 2^63: one past i64::MAX.
    assert!(tree.sum(&all, Inclusive::Both).is_err());
    let one = bounds([0.0, 0.0, 0.0, 0.0]);
    assert_eq!(
        tree.sum(&one, Inclusive::Both).unwrap(),
        WeightSum::I64(big)
    );
    let mixed = bounds([1.0, 3.0, 1.0, 3.0]);
    assert_eq!(
        tree.sum(&mixed, Inclusive::Both).unwrap(),
        WeightSum::I64(big)
    );
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]

    #[test]
    fn integer_sum_batches_match_the_scan((x, y, w) in points(), qs in boxes(), big in any::<bool>()) {
        // With `big`, the absolute weights add up past 2^63, so the tree keeps i128 prefix
        // sums and checks every box; without, i64 prefix sums suffice.
        let w: Vec<i64> = if big { w.iter().map(|&v| v.signum() * (1 << 60) + v).collect() } else { w };
        let tree = build(Column::I64(&x), Column::F64(&y), Some(WeightColumn::I64(&w)), Layout::Compact)
            .unwrap();
        let cols = columns(&qs);
        let batch = batch_of(&cols);
        let exact: Vec<i128> = qs
            .iter()
            .map(|&q| scan(&x, &y, q, Inclusive::Right).iter().map(|&r| w[r as usize] as i128).sum())
            .collect();
        match tree.sum_batch(&batch, Inclusive::Right) {
            Ok(SumColumn::I64(sums)) => {
                for (got, want) in sums.iter().zip(&exact) {
                    prop_assert_eq!(*got as i128, *want);
                }
            }
            Ok(SumColumn::F64(_)) => panic!("integer weights give integer sums"),
            Err(boxwood_core::Error::SumOverflow { box_index }) => {
                // Refused only where the exact sum really leaves int64, and at the first such box.
                prop_assert!(i64::try_from(exact[box_index]).is_err());
                prop_assert!(exact[..box_index].iter().all(|v| i64::try_from(*v).is_ok()));
            }
            Err(e) => panic!("unexpected error {e}"),
        }
    }
}
