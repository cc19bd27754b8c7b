//! Index files: round trips and damage, against the tree that was saved.

use proptest::prelude::*;

use super::*;
use crate::{build, Bound, BoxBounds, Column, Inclusive, Layout, RangeTree, WeightColumn};

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
    use super::layout::*;
    let sections = u32::from_le_bytes(bytes[32..36].try_into().unwrap()) as usize;
    let table_start = HEADER_BYTES + CHECKSUM_BYTES;
    for i in 0..sections {
        let at = table_start + i * ENTRY_BYTES;
        let e = Entry::decode(&bytes[at..at + ENTRY_BYTES]);
        let sum = section_checksum(&bytes[e.offset as usize..(e.offset + e.len) as usize]);
        bytes[at + 24..at + 32].copy_from_slice(&sum.to_le_bytes());
    }
    let table_end = table_start + sections * ENTRY_BYTES;
    let sum = header_checksum(&bytes[..HEADER_BYTES], &bytes[table_start..table_end]);
    bytes[HEADER_BYTES..HEADER_BYTES + 8].copy_from_slice(&sum.to_le_bytes());
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
