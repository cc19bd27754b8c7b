//! What must hold for every tree the loader accepts, whatever bytes it was read from.
//!
//! The loader may refuse any input. A default load checks only the count path and leaves
//! the cascade bits, row ids and weights for their first use; whatever it accepts must
//! answer every query without panicking and within the tree's bounds (a query may still
//! refuse the file, when the part it reads fails its check). A full verification also
//! derives the count cascade again; once it accepts a file, the tree's answers must agree
//! with each other: the whole plane holds every row, a
//! count is the length of its report, a report holds distinct rows below `len`, splitting a
//! box splits its count, its rows and its integer sum, an empty box sums to zero, the batch
//! paths agree with the one-box paths, and the tree written back out loads again with the
//! same answers. The boxes are drawn from the input bytes, so a change to the input changes
//! the queries too.

use boxwood_core::file::{
    read_index, read_index_with, write_index, AlignedBytes, LoadedTree, Verify,
};
use boxwood_core::{
    Bound, BoxBounds, Boxes, Column, Error, Inclusive, LevelWeights, RangeTree, RankBox, SumColumn,
    WeightSum,
};

/// Boxes asked one at a time, in rank space and in bound space.
const BOXES: usize = 4;
/// Boxes asked as one batch.
const BATCH: usize = 6;

/// Load `bytes` by default and fully verified; check what each load promises of the tree.
pub fn load_and_check(bytes: &[u8]) {
    if let Ok(loaded) = read_index(AlignedBytes::copy_of(bytes)) {
        if loaded.tree.key_runs().is_some() {
            check_keyed(&loaded.tree, &mut Draws::from_input(bytes));
            return;
        }
        check_in_bounds(&loaded.tree, &mut Draws::from_input(bytes));
    }
    let Ok(loaded) = read_index_with(AlignedBytes::copy_of(bytes), Verify::Full) else {
        return;
    };
    if loaded.tree.key_runs().is_some() {
        check_keyed(&loaded.tree, &mut Draws::from_input(bytes));
        return;
    }
    let tree = &loaded.tree;
    let mut draws = Draws::from_input(bytes);
    check_whole_plane(tree);
    for _ in 0..BOXES {
        check_rank_box(tree, draws.rank_box(tree.len()));
    }
    let boxes: Vec<(BoxBounds, Inclusive)> = (0..BOXES)
        .map(|_| (draws.box_bounds(), draws.inclusive()))
        .collect();
    for &(b, inclusive) in &boxes {
        check_box(tree, &b, inclusive);
        check_splits(tree, &b, draws.bound(), draws.bound());
    }
    check_batch(tree, &mut draws);
    check_rewrite(&loaded, &boxes);
}

/// A default load: counts stay within the tree, and every other query answers within it or
/// refuses the file with the file's own error (its part failed the check before first use,
/// or a batch report found the count cascade disagreeing with the bits).
fn check_in_bounds(tree: &RangeTree, draws: &mut Draws) {
    let n = tree.len();
    for _ in 0..BOXES {
        assert!(tree.count_ranks(draws.rank_box(n)) <= n);
        let (b, inclusive) = (draws.box_bounds(), draws.inclusive());
        if has_nan(&b) {
            continue;
        }
        assert!(tree.count(&b, inclusive).unwrap() <= n);
        let mut rows = Vec::new();
        match tree.report(&b, inclusive, &mut rows) {
            Ok(()) => assert!(rows.iter().all(|&r| (r as usize) < n)),
            Err(e) => assert!(matches!(e, Error::IndexFile { .. }), "{e:?}"),
        }
        match tree.sum(&b, inclusive) {
            Ok(_) | Err(Error::IndexFile { .. } | Error::SumOverflow { .. } | Error::NoWeights) => {
            }
            Err(e) => panic!("unexpected sum error {e:?}"),
        }
        if let Ok((rows, _, _)) = tree.probe_report(&b, inclusive) {
            assert!(rows.len() <= n);
        }
    }
    let columns: [Vec<f64>; 4] =
        std::array::from_fn(|_| (0..BATCH).map(|_| value(draws.bound())).collect());
    if columns.iter().flatten().any(|v| v.is_nan()) {
        return;
    }
    let [x_lo, x_hi, y_lo, y_hi] = &columns;
    let boxes = Boxes {
        x_lo: Column::F64(x_lo),
        x_hi: Column::F64(x_hi),
        y_lo: Column::F64(y_lo),
        y_hi: Column::F64(y_hi),
    };
    let mut counts = vec![0i64; BATCH];
    tree.count_batch(&boxes, Inclusive::Both, &mut counts).unwrap();
    assert!(counts.iter().all(|&c| (0..=n as i64).contains(&c)));
    match tree.report_batch(&boxes, Inclusive::Both) {
        Ok(report) => assert!(report.rows.iter().all(|&r| (0..n as i64).contains(&r))),
        Err(e) => assert!(matches!(e, Error::IndexFile { .. }), "{e:?}"),
    }
}

/// A keyed tree: asked without a key it refuses; the whole plane of every code (and of one
/// code past them) holds that code's run; drawn boxes of drawn codes stay within their run.
fn check_keyed(tree: &RangeTree, draws: &mut Draws) {
    let everything = BoxBounds {
        x_lo: Bound::F64(f64::NEG_INFINITY),
        x_hi: Bound::F64(f64::INFINITY),
        y_lo: Bound::F64(f64::NEG_INFINITY),
        y_hi: Bound::F64(f64::INFINITY),
    };
    assert_eq!(tree.count(&everything, Inclusive::Both), Err(Error::KeysRequired));
    let runs = tree.key_runs().expect("a keyed tree");
    let codes = runs.len().min(64) as i64;
    for code in 0..=codes {
        let (s, e) = runs.run(code);
        let count = tree.count_by(&everything, Some(code), Inclusive::Both).unwrap();
        assert!(count <= e - s);
        for _ in 0..BOXES {
            let (b, inclusive) = (draws.box_bounds(), draws.inclusive());
            if has_nan(&b) {
                continue;
            }
            assert!(tree.count_by(&b, Some(code), inclusive).unwrap() <= e - s);
            let mut rows = Vec::new();
            match tree.report_by(&b, Some(code), inclusive, &mut rows) {
                Ok(()) => assert!(rows.iter().all(|&r| (r as usize) < tree.len())),
                Err(e) => assert!(matches!(e, Error::IndexFile { .. }), "{e:?}"),
            }
        }
    }
}

/// Every row lies in the box of all numbers, on any pair of key domains.
fn check_whole_plane(tree: &RangeTree) {
    let everything = BoxBounds {
        x_lo: Bound::F64(f64::NEG_INFINITY),
        x_hi: Bound::F64(f64::INFINITY),
        y_lo: Bound::F64(f64::NEG_INFINITY),
        y_hi: Bound::F64(f64::INFINITY),
    };
    let count = tree.count(&everything, Inclusive::Both).unwrap();
    assert_eq!(count, tree.len(), "the whole plane must hold every row");
    let rows = sorted_report(tree, &everything, Inclusive::Both);
    assert_eq!(rows.len(), tree.len());
    assert!(rows.iter().enumerate().all(|(i, &r)| r as usize == i));
}

/// A rank box holds at most its narrower side; a full side holds exactly the other side;
/// splitting either side splits the count.
fn check_rank_box(tree: &RangeTree, r: RankBox) {
    let n = tree.len();
    let width = |(a, b): (usize, usize)| b.saturating_sub(a);
    let count = tree.count_ranks(r);
    assert!(count <= width(r.x).min(width(r.y)));
    assert_eq!(tree.count_ranks(RankBox { x: (0, n), y: r.y }), width(r.y));
    assert_eq!(tree.count_ranks(RankBox { x: r.x, y: (0, n) }), width(r.x));
    if r.is_empty() {
        return;
    }
    let mid_x = (r.x.0 + r.x.1) / 2;
    let left = RankBox {
        x: (r.x.0, mid_x),
        y: r.y,
    };
    let right = RankBox {
        x: (mid_x, r.x.1),
        y: r.y,
    };
    assert_eq!(tree.count_ranks(left) + tree.count_ranks(right), count);
    let mid_y = (r.y.0 + r.y.1) / 2;
    let low = RankBox {
        x: r.x,
        y: (r.y.0, mid_y),
    };
    let high = RankBox {
        x: r.x,
        y: (mid_y, r.y.1),
    };
    assert_eq!(tree.count_ranks(low) + tree.count_ranks(high), count);
}

fn has_nan(b: &BoxBounds) -> bool {
    [b.x_lo, b.x_hi, b.y_lo, b.y_hi].iter().any(Bound::is_nan)
}

/// One box: count, report, probed count, rank box and sum agree; NaN bounds are refused by all.
fn check_box(tree: &RangeTree, b: &BoxBounds, inclusive: Inclusive) {
    let count = tree.count(b, inclusive);
    let mut rows = Vec::new();
    let report = tree.report(b, inclusive, &mut rows);
    if has_nan(b) {
        assert!(matches!(count, Err(Error::NotANumber { .. })));
        assert!(matches!(report, Err(Error::NotANumber { .. })));
        assert!(tree.probe_count(b, inclusive).is_err());
        return;
    }
    let count = count.unwrap();
    report.unwrap();
    assert_eq!(rows.len(), count, "a count is the length of its report");
    rows.sort_unstable();
    assert!(rows.windows(2).all(|w| w[0] < w[1]), "reported rows repeat");
    assert!(rows.last().is_none_or(|&r| (r as usize) < tree.len()));
    assert_eq!(tree.probe_count(b, inclusive).unwrap().0, count);
    let ranks = tree.rank_box(b, inclusive).unwrap();
    assert_eq!(tree.count_ranks(ranks), count);
    if let Some(sum) = checked_sum(tree, b, inclusive) {
        if count == 0 {
            assert!(sum == WeightSum::I64(0) || sum == WeightSum::F64(0.0));
        }
    }
}

/// The box's weight sum, checking it is refused only where an overflow is possible.
fn checked_sum(tree: &RangeTree, b: &BoxBounds, inclusive: Inclusive) -> Option<WeightSum> {
    let weights = tree.weights()?;
    match (weights, tree.sum(b, inclusive)) {
        (LevelWeights::F64(_), Ok(s @ WeightSum::F64(_))) => Some(s),
        (LevelWeights::I64(_) | LevelWeights::I128(_), Ok(s @ WeightSum::I64(_))) => Some(s),
        (LevelWeights::I128(_), Err(Error::SumOverflow { .. })) => None,
        (_, other) => panic!("unexpected sum {other:?}"),
    }
}

fn sorted_report(tree: &RangeTree, b: &BoxBounds, inclusive: Inclusive) -> Vec<u32> {
    let mut rows = Vec::new();
    tree.report(b, inclusive, &mut rows).unwrap();
    rows.sort_unstable();
    rows
}

fn value(b: Bound) -> f64 {
    match b {
        Bound::F64(v) => v,
        Bound::I64(v) => v as f64,
    }
}

/// Cut a half-open box (`Inclusive::Left`) at `x_cut` across x and at `y_cut` across y: the
/// two parts' counts, rows and integer sums add up to the whole's.
fn check_splits(tree: &RangeTree, b: &BoxBounds, x_cut: Bound, y_cut: Bound) {
    if has_nan(b) || x_cut.is_nan() || y_cut.is_nan() {
        return;
    }
    // Order the three values on each axis so that the cut lies inside the interval. Integer
    // bounds are small, so comparing them as floats is exact.
    let ordered = |lo: Bound, cut: Bound, hi: Bound| {
        let mut v = [lo, cut, hi];
        v.sort_by(|a, b| value(*a).total_cmp(&value(*b)));
        v
    };
    let [x_lo, x_mid, x_hi] = ordered(b.x_lo, x_cut, b.x_hi);
    let [y_lo, y_mid, y_hi] = ordered(b.y_lo, y_cut, b.y_hi);
    let whole = BoxBounds {
        x_lo,
        x_hi,
        y_lo,
        y_hi,
    };
    let across_x = [
        BoxBounds {
            x_hi: x_mid,
            ..whole
        },
        BoxBounds {
            x_lo: x_mid,
            ..whole
        },
    ];
    let across_y = [
        BoxBounds {
            y_hi: y_mid,
            ..whole
        },
        BoxBounds {
            y_lo: y_mid,
            ..whole
        },
    ];
    for parts in [across_x, across_y] {
        check_parts_add_up(tree, &whole, &parts);
    }
}

fn check_parts_add_up(tree: &RangeTree, whole: &BoxBounds, parts: &[BoxBounds; 2]) {
    let half_open = Inclusive::Left;
    let count = |b| tree.count(b, half_open).unwrap();
    assert_eq!(count(&parts[0]) + count(&parts[1]), count(whole));
    let mut rows = sorted_report(tree, &parts[0], half_open);
    rows.extend(sorted_report(tree, &parts[1], half_open));
    rows.sort_unstable();
    assert_eq!(rows, sorted_report(tree, whole, half_open));
    let integer_sum = |b| match checked_sum(tree, b, half_open) {
        Some(WeightSum::I64(s)) => Some(s as i128),
        _ => None,
    };
    if let (Some(a), Some(b)) = (integer_sum(&parts[0]), integer_sum(&parts[1])) {
        let expected = i64::try_from(a + b).ok().map(i128::from);
        if expected.is_some() || matches!(tree.weights(), Some(LevelWeights::I128(_))) {
            assert_eq!(integer_sum(whole), expected, "sums of the parts add up");
        }
    }
}

/// A batch of float boxes: the batch counts, reports and sums equal the one-box answers.
fn check_batch(tree: &RangeTree, draws: &mut Draws) {
    let mut columns: [Vec<f64>; 4] = Default::default();
    for _ in 0..BATCH {
        for column in &mut columns {
            column.push(value(draws.bound()));
        }
    }
    let [x_lo, x_hi, y_lo, y_hi] = &columns;
    let boxes = Boxes {
        x_lo: Column::F64(x_lo),
        x_hi: Column::F64(x_hi),
        y_lo: Column::F64(y_lo),
        y_hi: Column::F64(y_hi),
    };
    let inclusive = draws.inclusive();
    let mut counts = vec![0i64; BATCH];
    let counted = tree.count_batch(&boxes, inclusive, &mut counts);
    if columns.iter().flatten().any(|v| v.is_nan()) {
        assert!(matches!(counted, Err(Error::NotANumber { .. })));
        assert!(tree.report_batch(&boxes, inclusive).is_err());
        return;
    }
    counted.unwrap();
    let report = tree.report_batch(&boxes, inclusive).unwrap();
    let sums = tree.weights().map(|_| tree.sum_batch(&boxes, inclusive));
    for (i, &count) in counts.iter().enumerate() {
        let b = BoxBounds {
            x_lo: Bound::F64(x_lo[i]),
            x_hi: Bound::F64(x_hi[i]),
            y_lo: Bound::F64(y_lo[i]),
            y_hi: Bound::F64(y_hi[i]),
        };
        assert_eq!(count as usize, tree.count(&b, inclusive).unwrap());
        let (start, end) = (report.offsets[i] as usize, report.offsets[i + 1] as usize);
        let mut rows: Vec<u32> = report.rows[start..end].iter().map(|&r| r as u32).collect();
        rows.sort_unstable();
        assert_eq!(rows, sorted_report(tree, &b, inclusive));
        match &sums {
            Some(Ok(SumColumn::I64(s))) => {
                assert_eq!(tree.sum(&b, inclusive).unwrap(), WeightSum::I64(s[i]))
            }
            // Batch and one-box sums add the same runs in the same order: equal to the last
            // bit. A crafted file's float prefix sums can hold NaN (they are not checked, see
            // docs/index-format.md), and Rust leaves the payload of a NaN result unspecified.
            Some(Ok(SumColumn::F64(s))) => match tree.sum(&b, inclusive).unwrap() {
                WeightSum::F64(one) => assert!(
                    one.to_bits() == s[i].to_bits() || (one.is_nan() && s[i].is_nan()),
                    "{one} != {}",
                    s[i]
                ),
                other => panic!("float weights gave {other:?}"),
            },
            Some(Err(e)) => assert!(matches!(e, Error::SumOverflow { .. }), "{e:?}"),
            None => {}
        }
    }
}

/// The loaded tree written back out loads again and answers the same.
fn check_rewrite(loaded: &LoadedTree, boxes: &[(BoxBounds, Inclusive)]) {
    let attachments: Vec<&[u8]> = loaded.attachments.iter().map(|a| &a[..]).collect();
    let mut bytes = Vec::new();
    write_index(&loaded.tree, &attachments, &mut bytes).unwrap();
    let again = read_index(AlignedBytes::copy_of(&bytes)).expect("a rewritten tree loads");
    assert_eq!(again.tree.len(), loaded.tree.len());
    assert_eq!(again.attachments.len(), attachments.len());
    for (b, inclusive) in boxes.iter().filter(|(b, _)| !has_nan(b)) {
        assert_eq!(
            again.tree.count(b, *inclusive).unwrap(),
            loaded.tree.count(b, *inclusive).unwrap()
        );
    }
}

/// Query parameters drawn from the input: a small generator seeded by its last bytes and its
/// length, so that every change the fuzzer makes there asks different boxes.
struct Draws {
    state: u64,
}

impl Draws {
    fn from_input(bytes: &[u8]) -> Self {
        // FNV-1a over the tail and the length.
        let tail = &bytes[bytes.len().saturating_sub(64)..];
        let mut state = 0xcbf2_9ce4_8422_2325u64 ^ bytes.len() as u64;
        for &b in tail {
            state = (state ^ b as u64).wrapping_mul(0x0100_0000_01b3);
        }
        Draws { state }
    }

    /// splitmix64.
    fn next(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }

    fn rank(&mut self, n: usize) -> usize {
        (self.next() % (n as u64 + 1)) as usize
    }

    fn rank_box(&mut self, n: usize) -> RankBox {
        RankBox {
            x: (self.rank(n), self.rank(n)),
            y: (self.rank(n), self.rank(n)),
        }
    }

    /// Mostly small values among the keys of the seed files, sometimes an infinity or any
    /// float at all (NaN included).
    fn bound(&mut self) -> Bound {
        let r = self.next();
        let small = ((r >> 8) % 241) as f64 * 0.5 - 60.0;
        match r % 16 {
            0 => Bound::F64(f64::NEG_INFINITY),
            1 => Bound::F64(f64::INFINITY),
            2 => Bound::F64(f64::from_bits(self.next())),
            3..=6 if small.fract() == 0.0 => Bound::I64(small as i64),
            _ => Bound::F64(small),
        }
    }

    fn box_bounds(&mut self) -> BoxBounds {
        BoxBounds {
            x_lo: self.bound(),
            x_hi: self.bound(),
            y_lo: self.bound(),
            y_hi: self.bound(),
        }
    }

    fn inclusive(&mut self) -> Inclusive {
        [
            Inclusive::Both,
            Inclusive::Neither,
            Inclusive::Left,
            Inclusive::Right,
        ][(self.next() % 4) as usize]
    }
}
