//! Index files: round trips and damage, against the tree that was saved.

use proptest::prelude::*;

use super::*;
use crate::{
    build, Bound, BoxBounds, Column, Inclusive, Layout, LevelWeights, RangeTree, WeightColumn,
};

fn tree_of(n: usize, layout: Layout, weights: Option<&[i64]>, float_weights: bool) -> RangeTree {
    let x: Vec<f64> = (0..n).map(|i| ((i * 37) % 101) as f64 * 0.5).collect();
    let y: Vec<i64> = (0..n).map(|i| ((i * 53) % 89) as i64 - 40).collect();
    let fw: Vec<f64> = weights.map_or(Vec::new(), |w| w.iter().map(|&v| v as f64).collect());
    let w = match weights {
        None => None,
        Some(_) if float_weights => Some(WeightColumn::F64(&fw)),
        Some(w) => Some(WeightColumn::I64(w)),
    };
    build(Column::F64(&x), Column::I64(&y), w, layout).unwrap()
}

fn some_boxes() -> Vec<BoxBounds> {
    (0..40)
        .map(|i| {
            let (a, c) = ((i * 7 % 50) as f64, i * 11 % 80 - 45);
            BoxBounds {
                x_lo: Bound::F64(a),
                x_hi: Bound::F64(a + (i % 9) as f64 * 3.0),
                y_lo: Bound::I64(c),
                y_hi: Bound::I64(c + (i % 13) * 4),
            }
        })
        .collect()
}

/// Counts, sorted reports and sums of a fixed set of boxes: what a tree answers.
fn answers(tree: &RangeTree) -> Vec<(usize, Vec<u32>, Option<String>)> {
    some_boxes()
        .iter()
        .map(|b| {
            let mut rows = Vec::new();
            tree.report(b, Inclusive::Both, &mut rows).unwrap();
            rows.sort();
            let sum = tree
                .weights()
                .map(|_| format!("{:?}", tree.sum(b, Inclusive::Both)));
            (tree.count(b, Inclusive::Both).unwrap(), rows, sum)
        })
        .collect()
}

fn bytes_of(tree: &RangeTree, attachments: &[&[u8]]) -> Vec<u8> {
    let mut out = Vec::new();
    write_index(tree, attachments, &mut out).unwrap();
    out
}

fn load(bytes: &[u8]) -> Result<LoadedTree, FormatError> {
    read_index(AlignedBytes::copy_of(bytes))
}

#[test]
fn every_layout_and_weight_kind_round_trips() {
    let small: Vec<i64> = (0..1000).map(|i| i % 17 - 8).collect();
    let huge: Vec<i64> = (0..1000)
        .map(|i| (i64::MAX / 3) * (i % 2 * 2 - 1))
        .collect();
    for n in [0usize, 1, 2, 447, 448, 449, 1000] {
        for layout in [Layout::Fast, Layout::Compact] {
            for (weights, float) in [
                (None, false),
                (Some(&small[..n]), false),
                (Some(&small[..n]), true),
                (Some(&huge[..n]), false),
            ] {
                let tree = tree_of(n, layout, weights, float);
                let bytes = bytes_of(&tree, &[b"meta", b""]);
                assert_eq!(bytes.len() % 64, 0);
                let loaded = load(&bytes).unwrap();
                assert_eq!(loaded.tree.len(), n);
                assert_eq!(loaded.tree.layout(), layout);
                assert_eq!(loaded.tree.nbytes(), tree.nbytes());
                assert_eq!(loaded.tree.build_stats(), tree.build_stats());
                assert_eq!(answers(&loaded.tree), answers(&tree));
                assert_eq!(&loaded.attachments[0][..], b"meta");
                assert!(loaded.attachments[1].is_empty());
                // What is written back from a loaded tree is the same file.
                assert_eq!(bytes_of(&loaded.tree, &[b"meta", b""]), bytes);
            }
        }
    }
}

#[test]
fn header_problems_get_their_own_errors() {
    let tree = tree_of(300, Layout::Fast, None, false);
    let good = bytes_of(&tree, &[]);
    assert_eq!(load(b"").unwrap_err(), FormatError::NotAnIndex);
    assert_eq!(load(b"PAR1 not ours").unwrap_err(), FormatError::NotAnIndex);
    let mut newer = good.clone();
    newer[8] = 2;
    assert!(matches!(
        load(&newer).unwrap_err(),
        FormatError::UnsupportedVersion { found: 2, .. }
    ));
    let mut swapped = good.clone();
    swapped[12..16].reverse();
    assert_eq!(load(&swapped).unwrap_err(), FormatError::WrongByteOrder);
    assert!(matches!(
        load(&good[..good.len() - 1]).unwrap_err(),
        FormatError::Truncated { .. }
    ));
    assert!(matches!(
        load(&good[..70]).unwrap_err(),
        FormatError::Truncated { .. }
    ));
    let mut longer = good.clone();
    longer.push(0);
    assert!(matches!(
        load(&longer).unwrap_err(),
        FormatError::TrailingBytes { .. }
    ));
    let mut rows = good.clone();
    rows[16] ^= 1;
    assert_eq!(load(&rows).unwrap_err(), FormatError::HeaderChecksum);
    let mut data = good.clone();
    let last = data.len() - 65; // inside the leaf rows, the last section
    data[last] ^= 0x10;
    assert!(matches!(
        load(&data).unwrap_err(),
        FormatError::SectionChecksum { .. }
    ));
}

/// A file whose checksums were recomputed after its contents were changed: the checksums
/// cannot catch it, the structural checks must.
fn rehash(bytes: &mut [u8]) {
    rehash_for_fuzzing(bytes);
}

fn section_offset(bytes: &[u8], i: usize) -> usize {
    use super::layout::*;
    let at = HEADER_BYTES + CHECKSUM_BYTES + i * ENTRY_BYTES;
    Entry::decode(&bytes[at..at + ENTRY_BYTES]).offset as usize
}

#[test]
fn crafted_files_with_good_checksums_are_refused() {
    let tree = tree_of(1000, Layout::Fast, None, false);
    let good = bytes_of(&tree, &[]);
    let at = |section: usize, byte: usize| section_offset(&good, section) + byte;
    let last_line_of_root = at(5, 0) - 64;
    // (what, byte position, value XORed in)
    let cases = [
        ("unsorted x keys", at(0, 7), 0x80),
        ("wrong top index", at(1, 8), 1),
        ("wrong rank count", at(4, 64), 1),
        ("unbalanced bits", last_line_of_root + 8, 1),
        ("row past the end", at(20, 3), 0x40),
        ("height", 24, 1),
        ("row count", 23, 0x10),
        ("layout code", 28, 8),
        ("section offset", 80 + 8, 64),
    ];
    for (what, position, xor) in cases {
        let mut bytes = good.clone();
        bytes[position] ^= xor;
        rehash(&mut bytes);
        let err = load(&bytes).expect_err(what);
        assert!(matches!(err, FormatError::Corrupt(_)), "{what}: {err:?}");
    }
}

#[test]
fn leaf_rows_must_be_a_permutation() {
    let tree = tree_of(100, Layout::Compact, None, false);
    let mut bytes = bytes_of(&tree, &[]);
    let leaf = section_offset(&bytes, 4 + tree.height());
    let first: [u8; 4] = bytes[leaf..leaf + 4].try_into().unwrap();
    bytes[leaf + 4..leaf + 8].copy_from_slice(&first); // a duplicate row id
    rehash(&mut bytes);
    assert!(matches!(load(&bytes).unwrap_err(), FormatError::Corrupt(_)));
}

/// `good` with `value` written at byte `at` and every checksum recomputed.
fn rewritten(good: &[u8], at: usize, value: &[u8]) -> Vec<u8> {
    let mut bytes = good.to_vec();
    bytes[at..at + value.len()].copy_from_slice(value);
    rehash(&mut bytes);
    bytes
}

/// Whether `what` blames `section` of level `level` or of the level above, which reads
/// from it: a change at one level breaks both, and the first is reported.
fn blames(what: &str, section: &str, level: usize) -> bool {
    let near = [level.saturating_sub(1).max(1), level];
    near.iter()
        .any(|l| what.contains(&format!("{section} of level {l} do not follow")))
}

fn corrupt_message(bytes: &[u8]) -> String {
    match load(bytes) {
        Err(FormatError::Corrupt(what)) => what,
        other => panic!("expected a corrupt-file error, got {other:?}"),
    }
}

/// The first weights section: after the keys, the bits, the level rows and the leaf rows.
fn first_weights_section(tree: &RangeTree) -> usize {
    let h = tree.height();
    let level_rows = if tree.layout() == Layout::Fast {
        h - 1
    } else {
        0
    };
    4 + h + level_rows + 1
}

/// Found by the `load_rehashed` fuzz target: an int128 prefix sum near `i128::MAX`, with
/// checksums to match, loaded, and a sum over it overflowed (a panic with overflow checks,
/// a wrong sum without). Any prefix sum that is not the sum of the weights below it is now
/// refused, at any level, for both integer encodings.
#[test]
fn integer_weights_must_follow_the_cascade() {
    let huge: Vec<i64> = (0..1000)
        .map(|i| (i64::MAX / 3) * (i % 2 * 2 - 1))
        .collect();
    let small: Vec<i64> = (0..1000).map(|i| i % 5).collect();
    for layout in [Layout::Fast, Layout::Compact] {
        for weights in [&huge, &small] {
            let tree = tree_of(1000, layout, Some(weights), false);
            let good = bytes_of(&tree, &[]);
            let (value_bytes, near_max) = match tree.weights() {
                Some(LevelWeights::I128(_)) => (16, i128::MAX.to_le_bytes().to_vec()),
                Some(LevelWeights::I64(_)) => (8, i64::MAX.to_le_bytes().to_vec()),
                other => panic!("integer weights expected, got {other:?}"),
            };
            let weights_of =
                |level: usize| section_offset(&good, first_weights_section(&tree) + level - 1);
            let plus_one = |at: usize| {
                let mut v = good[at..at + value_bytes].to_vec();
                v[0] = v[0].wrapping_add(1);
                v
            };
            let at = weights_of(1) + 5 * value_bytes;
            let what = corrupt_message(&rewritten(&good, at, &near_max));
            assert!(what.contains("weights of level 1"), "{what}");
            let at = weights_of(3) + 100 * value_bytes;
            let what = corrupt_message(&rewritten(&good, at, &plus_one(at)));
            assert!(blames(&what, "weights", 3), "{what}");
            // A leaf weight changed alone no longer matches the level above it.
            let at = weights_of(tree.height()) + 7 * value_bytes;
            let what = corrupt_message(&rewritten(&good, at, &plus_one(at)));
            assert!(blames(&what, "weights", tree.height()), "{what}");
        }
    }
}

/// Level rows swapped within a level are still distinct row ids below `n`, but a report
/// would name the wrong rows.
#[test]
fn level_rows_must_follow_the_cascade() {
    let tree = tree_of(1000, Layout::Fast, None, false);
    let good = bytes_of(&tree, &[]);
    for level in 1..tree.height() {
        let at = section_offset(&good, 4 + tree.height() + level - 1) + 40;
        let mut swapped = good[at..at + 8].to_vec();
        swapped.rotate_left(4);
        let what = corrupt_message(&rewritten(&good, at, &swapped));
        assert!(blames(&what, "level rows", level), "{what}");
    }
}

/// A float axis holds keys of numbers only; an integer axis can hold any key.
#[test]
fn float_keys_must_be_numbers() {
    let tree = tree_of(1000, Layout::Compact, None, false);
    let good = bytes_of(&tree, &[]);
    let (x_keys, y_keys) = (section_offset(&good, 0), section_offset(&good, 2));
    let last = 999 * 8;
    // The last key (not a sample of the top index) becomes a NaN's key: still sorted.
    let nan = rewritten(&good, x_keys + last, &u64::MAX.to_le_bytes());
    assert!(corrupt_message(&nan).contains("x keys include the key of a NaN"));
    // The first key and its sample become the key of -0.0, just below that of 0.0.
    let minus_zero = (!(-0.0f64).to_bits()).to_le_bytes();
    let mut bytes = rewritten(&good, x_keys, &minus_zero);
    bytes = rewritten(&bytes, section_offset(&good, 1), &minus_zero);
    assert!(corrupt_message(&bytes).contains("x keys include the key of a NaN"));
    // The same last key on the integer y axis is i64::MAX: a different but valid tree.
    let bytes = rewritten(&good, y_keys + last, &u64::MAX.to_le_bytes());
    let loaded = load(&bytes).unwrap();
    let everything = BoxBounds {
        x_lo: Bound::F64(f64::NEG_INFINITY),
        x_hi: Bound::F64(f64::INFINITY),
        y_lo: Bound::I64(i64::MIN),
        y_hi: Bound::I64(i64::MAX),
    };
    assert_eq!(
        loaded.tree.count(&everything, Inclusive::Both).unwrap(),
        1000
    );
}

#[test]
fn saves_replace_the_old_file_and_leave_nothing_behind() {
    let folder = std::env::temp_dir().join(format!("boxwood-save-{}", std::process::id()));
    std::fs::create_dir_all(&folder).unwrap();
    let path = folder.join("trips.boxwood");
    let first = tree_of(200, Layout::Fast, None, false);
    let second = tree_of(500, Layout::Compact, None, false);
    save(&first, &[b"one"], &path).unwrap();
    save(&second, &[b"two"], &path).unwrap();
    for mmap in [true, false] {
        let loaded = open(&path, mmap).unwrap();
        assert_eq!(answers(&loaded.tree), answers(&second));
        assert_eq!(&loaded.attachments[0][..], b"two");
    }
    let names: Vec<_> = std::fs::read_dir(&folder)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(names, ["trips.boxwood"]);
    let missing = save(
        &first,
        &[],
        &folder.join("no-such-folder").join("t.boxwood"),
    );
    assert_eq!(missing.unwrap_err().kind(), std::io::ErrorKind::NotFound);
    assert!(matches!(
        open(&folder.join("absent"), true),
        Err(LoadError::Io(_))
    ));
    std::fs::remove_dir_all(&folder).unwrap();
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(300))]

    /// Any one damaged byte, cut or extension is refused, or (in padding) changes nothing.
    #[test]
    fn damage_is_refused_or_harmless(
        at in any::<prop::sample::Index>(),
        flip in 1u8..=255,
        cut in any::<prop::sample::Index>(),
        extra in 1usize..200,
        weighted in any::<bool>(),
        compact in any::<bool>(),
    ) {
        let weights: Vec<i64> = (0..700).map(|i| i % 5).collect();
        let layout = if compact { Layout::Compact } else { Layout::Fast };
        let tree = tree_of(700, layout, weighted.then_some(&weights[..]), false);
        let good = bytes_of(&tree, &[b"{}"]);
        let expected = answers(&tree);

        let mut flipped = good.clone();
        flipped[at.index(good.len())] ^= flip;
        if let Ok(loaded) = load(&flipped) {
            prop_assert_eq!(answers(&loaded.tree), expected.clone());
        }
        prop_assert!(load(&good[..cut.index(good.len())]).is_err());
        let mut longer = good.clone();
        longer.resize(good.len() + extra, 0);
        prop_assert!(load(&longer).is_err());
    }
}

#[test]
fn a_writer_knows_its_length_and_fills_exactly_that() {
    let tree = tree_of(321, Layout::Compact, None, false);
    let writer = IndexWriter::new(&tree, &[b"m"]).unwrap();
    let mut exact = vec![0u8; writer.len()];
    writer.write_into(&mut exact).unwrap();
    assert_eq!(exact, bytes_of(&tree, &[b"m"]));
    let mut short = vec![0u8; writer.len() - 1];
    assert!(writer.write_into(&mut short).is_err());
}

/// Found by the `load_rehashed` fuzz target: float prefix sums are rounded, so they are not
/// checked against the weights, and a crafted file can hold a NaN in them. Its sums are then
/// NaN, from a batch and from one-box calls alike; Rust leaves the payload of a NaN result
/// unspecified, so only NaN-ness is compared there, and every other sum is equal to the bit.
#[test]
fn float_prefix_sums_may_hold_nan_and_sums_stay_nan() {
    let w: Vec<i64> = (0..1000).map(|i| i % 7).collect();
    for layout in [Layout::Fast, Layout::Compact] {
        let tree = tree_of(1000, layout, Some(&w), true);
        let good = bytes_of(&tree, &[]);
        // The last prefix sum of level 2's second block (positions 256 to 511): the whole
        // plane's first canonical run is that block, on the path towards x-rank 0.
        let at = section_offset(&good, first_weights_section(&tree) + 1) + 511 * 8;
        let loaded = load(&rewritten(&good, at, &f64::NAN.to_le_bytes())).unwrap();
        let t = &loaded.tree;
        let mut boxes = some_boxes();
        boxes.push(BoxBounds {
            x_lo: Bound::F64(f64::NEG_INFINITY),
            x_hi: Bound::F64(f64::INFINITY),
            y_lo: Bound::I64(i64::MIN),
            y_hi: Bound::I64(i64::MAX),
        });
        // The boxes as columns: x bounds are floats and y bounds integers here.
        let (mut x_lo, mut x_hi, mut y_lo, mut y_hi) = (vec![], vec![], vec![], vec![]);
        for b in &boxes {
            let (Bound::F64(a), Bound::F64(b2), Bound::I64(c), Bound::I64(d)) =
                (b.x_lo, b.x_hi, b.y_lo, b.y_hi)
            else {
                unreachable!("float x bounds and integer y bounds");
            };
            x_lo.push(a);
            x_hi.push(b2);
            y_lo.push(c);
            y_hi.push(d);
        }
        let batch = crate::Boxes {
            x_lo: Column::F64(&x_lo),
            x_hi: Column::F64(&x_hi),
            y_lo: Column::I64(&y_lo),
            y_hi: Column::I64(&y_hi),
        };
        let Ok(crate::SumColumn::F64(sums)) = t.sum_batch(&batch, Inclusive::Both) else {
            panic!("float weights give float sums");
        };
        let mut nan = 0;
        for (b, &s) in boxes.iter().zip(&sums) {
            let Ok(crate::WeightSum::F64(one)) = t.sum(b, Inclusive::Both) else {
                panic!("float weights give float sums");
            };
            assert!(one.to_bits() == s.to_bits() || (one.is_nan() && s.is_nan()));
            nan += one.is_nan() as usize;
        }
        assert!(sums.last().is_some_and(|s| s.is_nan()));
        assert!(nan >= 1);
    }
}
