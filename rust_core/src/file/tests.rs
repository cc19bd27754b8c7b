//! Index files: round trips and damage, against the tree that was saved.

use proptest::prelude::*;

use super::layout::Kind;
use super::*;
use crate::{
    build, Bound, BoxBounds, Column, Error, Group, Inclusive, Layout, LevelWeights, RangeTree,
    WeightColumn,
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

/// Load, then check every group a load leaves for first use: what a file holds, all told.
fn load_all(bytes: &[u8]) -> Result<LoadedTree, FormatError> {
    let loaded = load(bytes)?;
    loaded.tree.ensure_all().map_err(file_error)?;
    Ok(loaded)
}

fn load_full(bytes: &[u8]) -> Result<LoadedTree, FormatError> {
    read_index_with(AlignedBytes::copy_of(bytes), Verify::Full)
}

fn file_error(e: Error) -> FormatError {
    match e {
        Error::IndexFile { error, file: None } => error,
        other => panic!("expected an index file error, got {other:?}"),
    }
}

/// The table position of the section of `kind` and `index`.
fn section_of(bytes: &[u8], kind: Kind, index: usize) -> usize {
    use super::layout::*;
    let count = u32::from_le_bytes(bytes[32..36].try_into().unwrap()) as usize;
    (0..count)
        .find(|&i| {
            let at = HEADER_BYTES + CHECKSUM_BYTES + i * ENTRY_BYTES;
            let e = Entry::decode(&bytes[at..at + ENTRY_BYTES]);
            e.kind == kind as u32 && e.index as usize == index
        })
        .unwrap_or_else(|| panic!("no section {kind:?} {index}"))
}

/// The byte offset of the section of `kind` and `index`.
fn offset_of(bytes: &[u8], kind: Kind, index: usize) -> usize {
    section_offset(bytes, section_of(bytes, kind, index))
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
                assert!(load_full(&bytes).is_ok());
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
    assert_eq!(load(b"").unwrap_err(), FormatError::Empty);
    assert!(FormatError::Empty.to_string().contains("empty (0 bytes)"));
    assert!(matches!(
        load(&good[..5]).unwrap_err(),
        FormatError::Truncated { .. }
    ));
    assert_eq!(load(b"PAR1 not ours").unwrap_err(), FormatError::NotAnIndex);
    assert_eq!(load(b"PAR").unwrap_err(), FormatError::NotAnIndex);
    let mut newer = good.clone();
    newer[8] = 3;
    let err = load(&newer).unwrap_err();
    assert!(matches!(
        err,
        FormatError::UnsupportedVersion { found: 3, .. }
    ));
    assert!(err.to_string().contains("upgrade boxwood"), "{err}");
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
    let mut keys = good.clone();
    keys[offset_of(&good, Kind::YKeys, 0) + 100] ^= 0x10;
    assert_eq!(
        load(&keys).unwrap_err(),
        FormatError::SectionChecksum {
            section: "'y keys'".into()
        }
    );
}

/// Version 1 (the format before the count path was stored) is refused by its number, with
/// a message that says to rebuild; its header is read only as far as the version.
#[test]
fn version_1_files_are_refused_with_a_rebuild_message() {
    let tree = tree_of(300, Layout::Compact, None, false);
    let mut v1 = bytes_of(&tree, &[]);
    v1[8..12].copy_from_slice(&1u32.to_le_bytes());
    let err = load(&v1).unwrap_err();
    assert_eq!(
        err,
        FormatError::UnsupportedVersion {
            found: 1,
            supported: 2
        }
    );
    let msg = err.to_string();
    assert!(
        msg.contains("version 1") && msg.contains("rebuild"),
        "{msg}"
    );
    // Only the first 12 bytes are needed to say so.
    assert_eq!(load(&v1[..12]).unwrap_err(), err);
}

/// A count reads the keys, the search indexes and the count cascade, all checked at load;
/// the other groups are checked when first used, and damage there fails that use (and only
/// it) with the file's own error.
#[test]
fn groups_are_checked_before_their_first_use_and_not_before() {
    let w: Vec<i64> = (0..2000).map(|i| i % 11).collect();
    for layout in [Layout::Fast, Layout::Compact] {
        let tree = tree_of(2000, layout, Some(&w), false);
        let good = bytes_of(&tree, &[]);
        let mut damaged = good.clone();
        damaged[offset_of(&good, Kind::Weights, tree.height()) + 8 * 1500] ^= 4;
        let loaded = load(&damaged).expect("damaged weights do not stop a load");
        let t = &loaded.tree;
        assert!(Group::ALL.iter().all(|&g| !t.is_verified(g)));
        for b in some_boxes() {
            assert_eq!(
                t.count(&b, Inclusive::Both),
                tree.count(&b, Inclusive::Both)
            );
        }
        assert!(
            Group::ALL.iter().all(|&g| !t.is_verified(g)),
            "counts check nothing"
        );
        let b = some_boxes()[3];
        let err = file_error(t.sum(&b, Inclusive::Both).unwrap_err());
        assert_eq!(
            err,
            FormatError::SectionChecksum {
                section: format!("'weights of level {}'", tree.height())
            }
        );
        assert!(t.is_verified(Group::CascadeBits) && !t.is_verified(Group::Weights));
        // The failure is remembered, and reports (which need no weights) still work.
        assert!(t.sum(&b, Inclusive::Both).is_err());
        let mut rows = Vec::new();
        t.report(&b, Inclusive::Both, &mut rows).unwrap();
        assert_eq!(rows.len(), tree.count(&b, Inclusive::Both).unwrap());
        assert!(t.is_verified(Group::Rows));
        // Nor can the damage be written out again under a fresh checksum.
        assert!(IndexWriter::new(t, &[]).is_err());
        assert!(load_full(&damaged).is_err());
    }
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
    let at = |kind: Kind, index: usize, byte: usize| offset_of(&good, kind, index) + byte;
    let last_line_of_root = at(Kind::Bits, 1, 0) - 64;
    let leaf_rows = at(Kind::LeafRows, 0, 0);
    // (what, byte position, value XORed in, refused at load rather than at first use)
    let cases = [
        ("unsorted x keys", at(Kind::XKeys, 0, 7), 0x80, true),
        ("wrong search index", at(Kind::XSearch, 0, 8), 1, true),
        ("wrong upper search index", at(Kind::YSearch, 1, 8), 1, true),
        (
            "wrong count cascade counts",
            at(Kind::CountLines, 1, 64 + 2),
            1,
            true,
        ),
        (
            "digit past the end",
            at(Kind::CountLines, 0, 15 * 64 + 63),
            0x80,
            true,
        ),
        (
            "wrong superblock counts",
            at(Kind::CountSupers, 0, 4),
            1,
            true,
        ),
        ("wrong rank count", at(Kind::Bits, 4, 64), 1, false),
        ("unbalanced bits", last_line_of_root + 8, 1, false),
        ("row past the end", leaf_rows + 3, 0x40, false),
        ("height", 24, 1, true),
        ("row count", 23, 0x10, true),
        ("layout code", 28, 8, true),
        ("section offset", 80 + 8, 64, true),
    ];
    for (what, position, xor, at_load) in cases {
        let mut bytes = good.clone();
        bytes[position] ^= xor;
        rehash(&mut bytes);
        assert_eq!(load(&bytes).is_err(), at_load, "{what}");
        let err = load_all(&bytes).expect_err(what);
        assert!(matches!(err, FormatError::Corrupt(_)), "{what}: {err:?}");
    }
}

/// A count cascade whose counts all hold but whose digits are not the ones the cascade bits
/// give: a load takes it (its reads stay in bounds), a full verification refuses it.
#[test]
fn a_full_verification_refuses_a_count_cascade_the_bits_do_not_give() {
    let tree = tree_of(1000, Layout::Compact, None, false);
    let good = bytes_of(&tree, &[]);
    let line = offset_of(&good, Kind::CountLines, 0);
    let planes: Vec<u64> = (0..4)
        .map(|j| {
            u64::from_le_bytes(
                good[line + 32 + 8 * j..line + 40 + 8 * j]
                    .try_into()
                    .unwrap(),
            )
        })
        .collect();
    let digit = |k: usize| (0..4).map(|j| ((planes[j] >> k) & 1) << j).sum::<u64>();
    // Two elements of the root's one block with different digits: swapping them keeps every
    // count of the line and every block's balance.
    let other = (1..64).find(|&k| digit(k) != digit(0)).unwrap();
    let mut bytes = good.clone();
    for (j, &plane) in planes.iter().enumerate() {
        let (a, b) = (plane & 1, (plane >> other) & 1);
        let swapped = plane & !(1 | 1 << other) | b | a << other;
        let at = line + 32 + 8 * j;
        bytes[at..at + 8].copy_from_slice(&swapped.to_le_bytes());
    }
    rehash(&mut bytes);
    let loaded = load_all(&bytes).expect("its counts hold");
    // Counts may be wrong now, but stay within the tree.
    for b in some_boxes() {
        assert!(loaded.tree.count(&b, Inclusive::Both).unwrap() <= 1000);
    }
    let what = match load_full(&bytes) {
        Err(FormatError::Corrupt(what)) => what,
        other => panic!("expected a corrupt-file error, got {other:?}"),
    };
    assert!(what.contains("count cascade is not the one"), "{what}");
    assert!(load_full(&good).is_ok());
}

#[test]
fn leaf_rows_must_be_a_permutation() {
    let tree = tree_of(100, Layout::Compact, None, false);
    let mut bytes = bytes_of(&tree, &[]);
    let leaf = offset_of(&bytes, Kind::LeafRows, 0);
    let first: [u8; 4] = bytes[leaf..leaf + 4].try_into().unwrap();
    bytes[leaf + 4..leaf + 8].copy_from_slice(&first); // a duplicate row id
    rehash(&mut bytes);
    assert!(load(&bytes).is_ok());
    assert!(matches!(
        load_all(&bytes).unwrap_err(),
        FormatError::Corrupt(_)
    ));
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
    match load_all(bytes) {
        Err(FormatError::Corrupt(what)) => what,
        other => panic!("expected a corrupt-file error, got {other:?}"),
    }
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
            let weights_of = |level: usize| offset_of(&good, Kind::Weights, level);
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
        let at = offset_of(&good, Kind::LevelRows, level) + 40;
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
    let (x_keys, y_keys) = (
        offset_of(&good, Kind::XKeys, 0),
        offset_of(&good, Kind::YKeys, 0),
    );
    let last = 999 * 8;
    // The last key (not the first of a line, so not in the search index) becomes a NaN's
    // key: still sorted.
    let nan = rewritten(&good, x_keys + last, &u64::MAX.to_le_bytes());
    assert!(corrupt_message(&nan).contains("x keys include the key of a NaN"));
    // The first key becomes the key of -0.0, just below that of 0.0, and so does the first
    // entry of every level of the search index, which starts with it.
    let minus_zero = (!(-0.0f64).to_bits()).to_le_bytes();
    let mut bytes = rewritten(&good, x_keys, &minus_zero);
    for level in 0..crate::search::level_lines(1000).len() {
        bytes = rewritten(&bytes, offset_of(&good, Kind::XSearch, level), &minus_zero);
    }
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
        for verify in [Verify::Checksums, Verify::Full] {
            let loaded = open(&path, mmap, verify).unwrap();
            assert_eq!(answers(&loaded.tree), answers(&second));
            assert_eq!(&loaded.attachments[0][..], b"two");
        }
    }
    // An empty file (mapping zero bytes is refused by some systems, so it is read).
    std::fs::write(folder.join("empty.boxwood"), b"").unwrap();
    assert!(matches!(
        open(&folder.join("empty.boxwood"), true, Verify::Checksums),
        Err(LoadError::Format(FormatError::Empty))
    ));
    std::fs::remove_file(folder.join("empty.boxwood")).unwrap();
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
        open(&folder.join("absent"), true, Verify::Checksums),
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
            // The count path is checked at load: counts are right whatever else is damaged.
            let counts: Vec<usize> = expected.iter().map(|a| a.0).collect();
            let got: Vec<usize> = some_boxes()
                .iter()
                .map(|b| loaded.tree.count(b, Inclusive::Both).unwrap())
                .collect();
            prop_assert_eq!(got, counts);
        }
        if let Ok(loaded) = load_all(&flipped) {
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
        let at = offset_of(&good, Kind::Weights, 2) + 511 * 8;
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

/// Float weights whose prefix sums round: mixed magnitudes and signs, fractions, `-0.0`.
fn rounding_weights(n: usize) -> Vec<f64> {
    (0..n)
        .map(|i| match i % 5 {
            0 => 0.1 * i as f64,
            1 => -1e15 / (i as f64 + 1.0),
            2 => -0.0,
            3 => 1e-7 * (i % 13) as f64,
            _ => 3.0e8 - i as f64 / 3.0,
        })
        .collect()
}

fn float_weighted_tree(w: &[f64], layout: Layout) -> RangeTree {
    let n = w.len();
    let x: Vec<f64> = (0..n).map(|i| ((i * 37) % 101) as f64 * 0.5).collect();
    let y: Vec<i64> = (0..n).map(|i| ((i * 53) % 89) as i64 - 40).collect();
    build(
        Column::F64(&x),
        Column::I64(&y),
        Some(WeightColumn::F64(w)),
        layout,
    )
    .unwrap()
}

/// Float prefix sums with good checksums but one upper-level value one unit in the last
/// place off: a load and every first-use check take them (they are rounded, so nothing but
/// deriving them again can tell), a full verification derives every level again from the
/// leaf weights and refuses them, naming the level. The untouched file passes.
#[test]
fn a_full_verification_derives_float_prefix_sums_again() {
    let w = rounding_weights(1000);
    for layout in [Layout::Fast, Layout::Compact] {
        let tree = float_weighted_tree(&w, layout);
        let good = bytes_of(&tree, &[]);
        assert!(load_full(&good).is_ok());
        for level in 1..tree.height() {
            let at = offset_of(&good, Kind::Weights, level) + (37 * level % 1000) * 8;
            let stored = f64::from_le_bytes(good[at..at + 8].try_into().unwrap());
            let off = f64::from_bits(stored.to_bits() + 1);
            let bytes = rewritten(&good, at, &off.to_le_bytes());
            assert!(load_all(&bytes).is_ok(), "level {level}");
            let what = match load_full(&bytes) {
                Err(FormatError::Corrupt(what)) => what,
                other => panic!("level {level}: expected a corrupt-file error, got {other:?}"),
            };
            assert!(
                what.contains(&format!("float prefix sums of level {level} are not")),
                "{what}"
            );
        }
        // A leaf weight changed alone: the levels above no longer follow from the leaves.
        let leaves = offset_of(&good, Kind::Weights, tree.height());
        let bytes = rewritten(&good, leaves + 8 * 500, &7.5f64.to_le_bytes());
        assert!(load_all(&bytes).is_ok());
        assert!(matches!(load_full(&bytes), Err(FormatError::Corrupt(_))));
        // A NaN or an infinity among the leaves is no build's.
        for bad in [f64::NAN, f64::INFINITY] {
            let bytes = rewritten(&good, leaves + 8 * 3, &bad.to_le_bytes());
            let what = match load_full(&bytes) {
                Err(FormatError::Corrupt(what)) => what,
                other => panic!("expected a corrupt-file error, got {other:?}"),
            };
            assert!(what.contains("float leaf weights include"), "{what}");
        }
    }
}

proptest! {
    /// Whatever finite weights a tree is built with, a full verification of its file derives
    /// the same float prefix sums, bit for bit.
    #[test]
    fn every_built_float_weighting_passes_a_full_verification(
        w in proptest::collection::vec(
            prop_oneof![-1e300f64..1e300, -1.0f64..1.0, Just(-0.0f64), Just(f64::MAX)],
            0..1500,
        ),
        compact in any::<bool>(),
    ) {
        let layout = if compact { Layout::Compact } else { Layout::Fast };
        let tree = float_weighted_tree(&w, layout);
        prop_assert!(load_full(&bytes_of(&tree, &[])).is_ok());
    }
}

/// A check left for first use fails long after the load, so a query's error names the file
/// a tree was opened from; the error is still the file's own (a checksum mismatch, a corrupt
/// section). A tree read from bytes has no path to name.
#[test]
fn a_failed_check_before_first_use_names_the_file() {
    let folder = std::env::temp_dir().join(format!("boxwood-origin-{}", std::process::id()));
    std::fs::create_dir_all(&folder).unwrap();
    let w: Vec<i64> = (0..1000).map(|i| i % 7).collect();
    let tree = tree_of(1000, Layout::Fast, Some(&w), false);
    let good = bytes_of(&tree, &[]);
    let b = &some_boxes()[3];
    // Damaged weights (no checksum to match), then unbalanced cascade bits (checksums to match).
    let mut weights = good.clone();
    weights[offset_of(&good, Kind::Weights, 2) + 16] ^= 1;
    let mut bits = good.clone();
    bits[offset_of(&good, Kind::Bits, 1) - 64 + 8] ^= 1;
    rehash(&mut bits);
    for (name, bytes) in [("weights.boxwood", weights), ("bits.boxwood", bits)] {
        let path = folder.join(name);
        std::fs::write(&path, &bytes).unwrap();
        for mmap in [true, false] {
            let loaded = open(&path, mmap, Verify::Checksums).unwrap();
            let err = loaded.tree.sum(b, Inclusive::Both).unwrap_err();
            let Error::IndexFile { error, file } = &err else {
                panic!("{name}: expected an index file error, got {err:?}");
            };
            assert_eq!(file.as_deref(), Some(path.as_path()), "{name}");
            assert!(err
                .to_string()
                .starts_with(&format!("{}: ", path.display())));
            assert!(err.to_string().ends_with(&error.to_string()));
            let expected_kind = match name {
                "weights.boxwood" => matches!(error, FormatError::SectionChecksum { .. }),
                _ => matches!(error, FormatError::Corrupt(_)),
            };
            assert!(expected_kind, "{name}: {error:?}");
        }
        // From bytes: the same error, no path.
        let from_bytes = load(&bytes).unwrap();
        let err = from_bytes.tree.sum(b, Inclusive::Both).unwrap_err();
        assert!(
            matches!(err, Error::IndexFile { file: None, .. }),
            "{err:?}"
        );
    }
    std::fs::remove_dir_all(&folder).unwrap();
}

fn keyed_tree_of(n: usize, layout: Layout, keys: usize) -> RangeTree {
    let x: Vec<f64> = (0..n).map(|i| ((i * 37) % 101) as f64 * 0.5).collect();
    let y: Vec<i64> = (0..n).map(|i| ((i * 53) % 89) as i64 - 40).collect();
    let codes: Vec<u32> = (0..n).map(|i| ((i * 7) % keys.max(1)) as u32).collect();
    let key_column = crate::KeyColumn {
        codes: &codes,
        count: keys,
    };
    crate::build_keyed(
        Column::F64(&x),
        Column::I64(&y),
        None,
        Some(key_column),
        layout,
    )
    .unwrap()
}

/// Counts and sorted reports of every box for every code (and one code past the end).
fn keyed_answers(tree: &RangeTree, keys: usize) -> Vec<(usize, Vec<u32>)> {
    let mut out = Vec::new();
    for b in some_boxes() {
        for code in 0..=keys as i64 {
            let mut rows = Vec::new();
            tree.report_by(&b, Some(code), Inclusive::Both, &mut rows)
                .unwrap();
            rows.sort();
            out.push((
                tree.count_by(&b, Some(code), Inclusive::Both).unwrap(),
                rows,
            ));
        }
    }
    out
}

#[test]
fn keyed_trees_round_trip_with_their_key_offsets() {
    for (n, keys) in [(0, 0), (1, 1), (100, 3), (1000, 40), (50, 200)] {
        for layout in [Layout::Fast, Layout::Compact] {
            let tree = keyed_tree_of(n, layout, keys);
            let bytes = bytes_of(&tree, &[b"meta"]);
            assert_eq!(bytes[36], 1, "the key flag");
            let loaded = load_full(&bytes).unwrap().tree;
            assert_eq!(
                loaded.key_runs().unwrap().starts(),
                tree.key_runs().unwrap().starts()
            );
            assert_eq!(keyed_answers(&loaded, keys), keyed_answers(&tree, keys));
            assert_eq!(loaded.nbytes(), tree.nbytes());
        }
    }
    // An unkeyed tree's flag stays 0 and it has no key offsets.
    let plain = bytes_of(&tree_of(100, Layout::Fast, None, false), &[]);
    assert_eq!(plain[36], 0);
    assert!(load(&plain).unwrap().tree.key_runs().is_none());
}

#[test]
fn crafted_key_offsets_are_refused_at_load() {
    let tree = keyed_tree_of(1000, Layout::Fast, 40);
    let good = bytes_of(&tree, &[]);
    let starts = offset_of(&good, Kind::KeyStarts, 0);
    let x_keys = offset_of(&good, Kind::XKeys, 0);
    let cases: [(&str, usize, Vec<u8>); 5] = [
        ("first offset not 0", starts, 1u32.to_le_bytes().to_vec()),
        (
            "offsets going down",
            starts + 4 * 5,
            900u32.to_le_bytes().to_vec(),
        ),
        (
            "last offset not n",
            starts + 4 * 40,
            999u32.to_le_bytes().to_vec(),
        ),
        // The first run's second key made larger than its third: unsorted within a key.
        (
            "x keys unsorted in a run",
            x_keys + 8,
            u64::MAX.to_le_bytes().to_vec(),
        ),
        ("unknown key flag", 36, vec![2]),
    ];
    for (what, at, value) in cases {
        let bytes = rewritten(&good, at, &value);
        match load(&bytes) {
            Err(FormatError::Corrupt(_)) => {}
            other => panic!("{what}: expected a corrupt-file error, got {other:?}"),
        }
    }
    // Damage without a fresh checksum names the section.
    let mut damaged = good.clone();
    damaged[starts + 4] ^= 1;
    match load(&damaged) {
        Err(FormatError::SectionChecksum { section }) => assert!(section.contains("key offsets")),
        other => panic!("expected a checksum error, got {other:?}"),
    }
    // A keyed file whose flag is cleared no longer has the sections its header calls for.
    assert!(matches!(
        load(&rewritten(&good, 36, &[0])),
        Err(FormatError::Corrupt(_))
    ));
}
