//! Reading an index file back: check what a count needs, then look into the bytes in place;
//! the rest is checked before its first use.

use std::fs::File;
use std::io::Read;
use std::path::Path;
use std::sync::Arc;

use rayon::prelude::*;

use super::error::{FormatError, LoadError};
use super::full::check_float_prefix_sums;
use super::layout::{
    data_start, header_checksum, section_checksum, Entry, Expected, Header, WeightCode,
    CHECKSUM_BYTES, ENTRY_BYTES, HEADER_BYTES, MAX_ATTACHMENTS, SECTION_ALIGN,
};
use crate::bits::{Line, RankBits};
use crate::build::{height_for, MAX_ROWS};
use crate::error::Error;
use crate::keyed::KeyRuns;
use crate::keys::{f64_key, Domain, SortedAxis};
use crate::replay::walk_merge;
use crate::slab::{SharedBytes, Slab};
use crate::tree::{BuildStats, Deferred, Group, LevelWeights, Parts, RangeTree};
use crate::wide::WideCascade;

/// A tree read from an index file, with the caller's attachments.
#[derive(Debug)]
pub struct LoadedTree {
    pub tree: RangeTree,
    pub attachments: Vec<Slab<u8>>,
}

/// Bytes in memory aligned to 64, so that sections at 64-byte offsets are aligned too.
pub struct AlignedBytes {
    blocks: Vec<Line>,
    len: usize,
}

impl AlignedBytes {
    /// `len` zero bytes.
    fn zeroed(len: usize) -> Self {
        let blocks = crate::alloc::filled(len.div_ceil(64), Line::default());
        AlignedBytes { blocks, len }
    }

    fn bytes_mut(&mut self) -> &mut [u8] {
        &mut bytemuck::cast_slice_mut(&mut self.blocks)[..self.len]
    }

    /// An aligned copy of `bytes`, ready for [`read_index`].
    pub fn copy_of(bytes: &[u8]) -> Arc<dyn SharedBytes> {
        let mut out = AlignedBytes::zeroed(bytes.len());
        out.bytes_mut().copy_from_slice(bytes);
        Arc::new(out)
    }
}

impl SharedBytes for AlignedBytes {
    fn bytes(&self) -> &[u8] {
        &bytemuck::cast_slice(&self.blocks)[..self.len]
    }
}

struct MappedFile(memmap2::Mmap);

impl SharedBytes for MappedFile {
    fn bytes(&self) -> &[u8] {
        &self.0
    }
}

/// How much of a file a load checks before handing back the tree.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Verify {
    /// Every checksum and every rule that keeps reads in bounds: the count path's at load,
    /// each other group's before its first use.
    #[default]
    Checksums,
    /// All of that at load, and every section that can be derived from others (the count
    /// cascade, the root-search indexes, level rows, integer and float prefix sums) derived
    /// again and compared: for files from elsewhere.
    Full,
}

/// Open the index file at `path`: memory-mapped read-only when `mmap` is true (processes
/// that map one file share its pages), else read into memory.
pub fn open(path: &Path, mmap: bool, verify: Verify) -> Result<LoadedTree, LoadError> {
    let mut file = File::open(path)?;
    let meta = file.metadata()?;
    if meta.is_dir() {
        return Err(std::io::Error::from_raw_os_error(libc::EISDIR).into());
    }
    let len = meta.len();
    let len = usize::try_from(len).map_err(|_| FormatError::Corrupt("file too large".into()))?;
    // Tiny files are read: mapping zero bytes is an error on some systems.
    let buffer: Arc<dyn SharedBytes> = if mmap && len >= HEADER_BYTES {
        // SAFETY: `Mmap::map` is unsafe because the compiler cannot see the mapped bytes
        // change, and another program may change them: it relies on nothing else writing to
        // or truncating the file while the map lives (it lives as long as the slabs that look
        // into it, which hold the `Arc`). boxwood itself never does: a save writes a new file
        // and renames it over the old one, so a mapped old file keeps its inode and bytes. If
        // another program does anyway, queries read whatever bytes are there at that moment
        // (bytes already checked can change under them, so answers may be wrong, and a
        // changed count could send a read to any position the structure's bounds allow), and
        // reading a page cut off by a truncation raises SIGBUS, which ends the process. The
        // README and docs/index-format.md tell users not to modify an index file while it is
        // mapped. The map is read-only and private to this process's address space.
        // Exercised by every `mmap=True` load in the tests (`open_maps_and_reads_the_file`).
        let map = unsafe { memmap2::MmapOptions::new().map(&file)? };
        Arc::new(MappedFile(map))
    } else {
        let mut bytes = AlignedBytes::zeroed(len);
        file.read_exact(bytes.bytes_mut())?;
        Arc::new(bytes)
    };
    Ok(read_index_from(buffer, verify, Some(path))?)
}

/// Validate an index held in `buffer` and return the tree, whose arrays look into it: the
/// count path checked now, the other groups before their first use ([`Verify::Checksums`]).
pub fn read_index(buffer: Arc<dyn SharedBytes>) -> Result<LoadedTree, FormatError> {
    read_index_with(buffer, Verify::Checksums)
}

/// [`read_index`], checking as much as `verify` says.
pub fn read_index_with(
    buffer: Arc<dyn SharedBytes>,
    verify: Verify,
) -> Result<LoadedTree, FormatError> {
    read_index_from(buffer, verify, None)
}

/// [`read_index_with`] of the file at `origin`, if the bytes came from one: the errors of
/// the checks left for first use name it (those of the load do not; its caller knows the
/// path).
fn read_index_from(
    buffer: Arc<dyn SharedBytes>,
    verify: Verify,
    origin: Option<&Path>,
) -> Result<LoadedTree, FormatError> {
    let bytes = buffer.bytes();
    let header = Header::decode(bytes)?;
    let entries = read_table(bytes, &header)?;
    let n = check_shape(&header)?;
    let expected = expected_sections(&header)?;
    check_placement(&entries, &expected, header.file_len)?;
    let placed: Vec<Placed> = entries
        .iter()
        .zip(&expected)
        .map(|(e, &what)| Placed {
            what,
            range: e.offset as usize..(e.offset + e.len) as usize,
            checksum: e.checksum,
        })
        .collect();
    let (now, later): (Vec<Placed>, Vec<Placed>) = placed
        .iter()
        .cloned()
        .partition(|p| p.what.kind.group().is_none());
    verify_checksums(bytes, &now)?;
    let loaded = assemble(&buffer, &header, n, &placed, later, origin)?;
    if verify == Verify::Full {
        verify_derived(&loaded.tree)?;
    }
    Ok(loaded)
}

/// Everything a full verification adds: every group checked now, then the count cascade
/// and any float prefix sums derived again from the checked cascade bits (and leaf weights)
/// and compared.
fn verify_derived(tree: &RangeTree) -> Result<(), FormatError> {
    tree.ensure_all().map_err(|e| match e {
        Error::IndexFile { error, .. } => error,
        other => corrupt(other.to_string()),
    })?;
    if !WideCascade::derive(&tree.bits, tree.n).same_as(&tree.wide) {
        return Err(corrupt(
            "the count cascade is not the one its cascade bits give",
        ));
    }
    if let Some(LevelWeights::F64(levels)) = &tree.weights {
        check_float_prefix_sums(&tree.bits, levels)?;
    }
    Ok(())
}

/// A section of the table, where it lies and what it should hash to.
#[derive(Clone, Debug)]
struct Placed {
    what: Expected,
    range: std::ops::Range<usize>,
    checksum: u64,
}

fn corrupt(what: impl Into<String>) -> FormatError {
    FormatError::Corrupt(what.into())
}

/// Rows and height that agree with each other and with what a tree can hold.
fn check_shape(h: &Header) -> Result<usize, FormatError> {
    if h.n > MAX_ROWS as u64 {
        return Err(corrupt(format!("row count {} is beyond the maximum", h.n)));
    }
    let n = h.n as usize;
    if h.height as usize != height_for(n) {
        return Err(corrupt(format!(
            "height {} does not fit {n} rows",
            h.height
        )));
    }
    Ok(n)
}

/// More table entries than any tree needs are refused before the header checksum vouches
/// for the count: a few per level at most, plus the attachments.
const MOST_SECTIONS: usize = 512;

fn read_table(bytes: &[u8], h: &Header) -> Result<Vec<Entry>, FormatError> {
    let count = h.sections as usize;
    if count > MOST_SECTIONS {
        return Err(corrupt(format!(
            "{count} sections listed, at most {MOST_SECTIONS} possible"
        )));
    }
    let table_start = HEADER_BYTES + CHECKSUM_BYTES;
    let table_end = table_start + count * ENTRY_BYTES;
    if bytes.len() < table_end {
        return Err(FormatError::Truncated {
            expected: h.file_len.max(table_end as u64),
            found: bytes.len() as u64,
        });
    }
    let stored = u64::from_le_bytes(bytes[HEADER_BYTES..HEADER_BYTES + 8].try_into().unwrap());
    if bytes[HEADER_BYTES + 8..HEADER_BYTES + CHECKSUM_BYTES] != [0u8; CHECKSUM_BYTES - 8] {
        return Err(corrupt(
            "the reserved bytes after the header checksum are not zero",
        ));
    }
    let table = &bytes[table_start..table_end];
    if header_checksum(&bytes[..HEADER_BYTES], table) != stored {
        return Err(FormatError::HeaderChecksum);
    }
    let found = bytes.len() as u64;
    if found < h.file_len {
        return Err(FormatError::Truncated {
            expected: h.file_len,
            found,
        });
    }
    if found > h.file_len {
        return Err(FormatError::TrailingBytes {
            expected: h.file_len,
            found,
        });
    }
    Ok(table.chunks_exact(ENTRY_BYTES).map(Entry::decode).collect())
}

fn expected_sections(h: &Header) -> Result<Vec<Expected>, FormatError> {
    let mut expected = h.tree_sections();
    let count = h.sections as usize;
    if count < expected.len() {
        return Err(corrupt(format!(
            "{count} sections listed, the tree needs {}",
            expected.len()
        )));
    }
    let attachments = count - expected.len();
    if attachments > MAX_ATTACHMENTS {
        return Err(corrupt(format!(
            "{attachments} attachments listed, at most {MAX_ATTACHMENTS} allowed"
        )));
    }
    expected.extend((0..attachments).map(Expected::attachment));
    Ok(expected)
}

/// Each entry is the section expected at its place, of the expected length, aligned, in
/// order, and inside the file.
fn check_placement(
    entries: &[Entry],
    expected: &[Expected],
    file_len: u64,
) -> Result<(), FormatError> {
    let mut next_free = data_start(entries.len()) as u64;
    for (e, x) in entries.iter().zip(expected) {
        let name = x.name();
        if e.kind != x.kind as u32 || e.index as usize != x.index {
            return Err(corrupt(format!("section table entry for {name} is wrong")));
        }
        if x.len.is_some_and(|len| e.len != len as u64) {
            return Err(corrupt(format!("section {name} has the wrong length")));
        }
        let end = e.offset.checked_add(e.len);
        if e.offset % SECTION_ALIGN as u64 != 0
            || e.offset < next_free
            || end.is_none_or(|end| end > file_len)
        {
            return Err(corrupt(format!("section {name} lies outside its place")));
        }
        next_free = end.unwrap_or(file_len);
    }
    Ok(())
}

/// Every section's checksum, in parallel; the first damaged one (in file order) is named.
fn verify_checksums(bytes: &[u8], sections: &[Placed]) -> Result<(), FormatError> {
    let bad = sections
        .par_iter()
        .position_first(|p| section_checksum(&bytes[p.range.clone()]) != p.checksum);
    match bad {
        None => Ok(()),
        Some(i) => Err(FormatError::SectionChecksum {
            section: sections[i].what.name(),
        }),
    }
}

/// The sections, handed out in file order as typed slabs.
struct Sections<'a> {
    buffer: &'a Arc<dyn SharedBytes>,
    placed: &'a [Placed],
    next: usize,
}

impl Sections<'_> {
    fn take<T: bytemuck::Pod>(&mut self) -> Result<Slab<T>, FormatError> {
        let p = &self.placed[self.next];
        self.next += 1;
        let size = std::mem::size_of::<T>();
        let len = p.range.len();
        if len % size != 0 {
            return Err(corrupt(
                "a section's length is not a whole number of values",
            ));
        }
        Slab::view(self.buffer, p.range.start, len / size)
            .ok_or_else(|| corrupt("a section is not aligned for its values"))
    }

    fn take_many<T: bytemuck::Pod>(&mut self, count: usize) -> Result<Vec<Slab<T>>, FormatError> {
        (0..count).map(|_| self.take()).collect()
    }
}

fn assemble(
    buffer: &Arc<dyn SharedBytes>,
    h: &Header,
    n: usize,
    placed: &[Placed],
    later: Vec<Placed>,
    origin: Option<&Path>,
) -> Result<LoadedTree, FormatError> {
    let mut s = Sections {
        buffer,
        placed,
        next: 0,
    };
    let height = h.height as usize;
    let search_levels = crate::search::level_lines(n).len();
    let (x, key_runs) = if h.keyed {
        let (x, runs) = take_keyed_axis(&mut s, h.x_domain)?;
        (x, Some(runs))
    } else {
        (take_axis(&mut s, h.x_domain, search_levels, "x")?, None)
    };
    let y = take_axis(&mut s, h.y_domain, search_levels, "y")?;
    let steps = (0..WideCascade::steps_for(height))
        .map(|_| Ok((s.take()?, s.take()?)))
        .collect::<Result<Vec<_>, FormatError>>()?;
    let wide = WideCascade::from_file(n, height, steps).map_err(corrupt)?;
    let bits = s
        .take_many(height)?
        .into_iter()
        .map(|lines| {
            RankBits::from_lines_unchecked(lines, n)
                .ok_or_else(|| corrupt("a level of cascade bits has the wrong length"))
        })
        .collect::<Result<Vec<_>, _>>()?;
    let level_rows = match h.layout {
        crate::tree::Layout::Fast => s.take_many(height.saturating_sub(1))?,
        crate::tree::Layout::Compact => Vec::new(),
    };
    let leaf_rows: Slab<u32> = s.take()?;
    let weights = match h.weights {
        WeightCode::None => None,
        WeightCode::F64 => Some(LevelWeights::F64(s.take_many(height)?)),
        WeightCode::I64 => Some(LevelWeights::I64(s.take_many(height)?)),
        WeightCode::I128 => Some(LevelWeights::I128(s.take_many(height)?)),
    };
    let attachments = (s.next..placed.len())
        .map(|_| s.take())
        .collect::<Result<_, _>>()?;
    let parts = Parts {
        n,
        height,
        layout: h.layout,
        x,
        y,
        bits,
        level_rows,
        leaf_rows,
        weights,
        key_runs,
        stats: BuildStats {
            presorts: h.presorts as usize,
            merge_passes: h.merge_passes as usize,
            elements_merged: h.elements_merged,
        },
    };
    let check = Box::new(deferred_check(Arc::clone(buffer), later));
    let deferred = Deferred::new(check, origin.map(Path::to_path_buf));
    let tree = RangeTree::from_file(parts, wide, deferred);
    Ok(LoadedTree { tree, attachments })
}

/// One axis: its keys and the levels of its root-search index, checked against each other.
fn take_axis(
    s: &mut Sections<'_>,
    domain: Domain,
    search_levels: usize,
    name: &str,
) -> Result<SortedAxis, FormatError> {
    let keys = s.take()?;
    let search = s.take_many(search_levels)?;
    let axis = SortedAxis::from_file(domain, keys, search).ok_or_else(|| {
        corrupt(format!(
            "{name} keys are not sorted or their search index does not match them"
        ))
    })?;
    check_float_keys(&axis, name)?;
    Ok(axis)
}

/// A keyed tree's x axis: its keys and the key offsets, checked against each other (keys
/// ascending within every run, no global search index).
fn take_keyed_axis(
    s: &mut Sections<'_>,
    domain: Domain,
) -> Result<(SortedAxis, KeyRuns), FormatError> {
    let keys: Slab<u64> = s.take()?;
    let starts: Slab<u32> = s.take()?;
    let runs = KeyRuns::from_file(starts, &keys).ok_or_else(|| {
        corrupt("the key offsets do not fit the points, or x keys are not sorted within a key")
    })?;
    let axis = SortedAxis::unsearched_from_file(domain, keys);
    check_float_keys(&axis, "x")?;
    Ok((axis, runs))
}

/// The check of each group a load leaves for later: the checksums of its sections (in
/// `later`, which `buffer` holds), then the rules its use relies on. The tree's own slabs
/// look into the same buffer, so what is hashed is what queries read.
fn deferred_check(
    buffer: Arc<dyn SharedBytes>,
    later: Vec<Placed>,
) -> impl Fn(Group, &RangeTree) -> Result<(), FormatError> + Send + Sync {
    move |group, tree| {
        let mine: Vec<Placed> = later
            .iter()
            .filter(|p| p.what.kind.group() == Some(group))
            .cloned()
            .collect();
        verify_checksums(buffer.bytes(), &mine)?;
        match group {
            Group::CascadeBits => check_bits(&tree.bits),
            Group::Rows => {
                check_permutation(&tree.leaf_rows)?;
                check_level_rows(&tree.bits, &tree.level_rows, &tree.leaf_rows)
            }
            Group::Weights => tree
                .weights
                .as_ref()
                .map_or(Ok(()), |w| check_weights(&tree.bits, w)),
        }
    }
}

/// Every level's per-line counts and clean tail, then its blocks' balance.
fn check_bits(bits: &[RankBits]) -> Result<(), FormatError> {
    let height = bits.len();
    for (level, level_bits) in bits.iter().enumerate() {
        if !level_bits.counts_hold() {
            return Err(corrupt(format!("rank counts of level {level} are wrong")));
        }
        check_blocks_balanced(level_bits, level, height)?;
    }
    Ok(())
}

/// Every block of level `level` sends exactly its right half's size to the right child, as
/// the merge that built it did; the descent relies on that to stay inside its block.
fn check_blocks_balanced(bits: &RankBits, level: usize, height: usize) -> Result<(), FormatError> {
    let n = bits.len_bits();
    let block = 1usize << (height - level);
    let balanced = (0..n.div_ceil(block)).into_par_iter().all(|b| {
        let s = b * block;
        let mid = (s + block / 2).min(n);
        let end = (s + block).min(n);
        bits.rank1(end) - bits.rank1(s) == end - mid
    });
    if balanced {
        Ok(())
    } else {
        Err(corrupt(format!(
            "cascade bits of level {level} are unbalanced"
        )))
    }
}

fn check_permutation(rows: &[u32]) -> Result<(), FormatError> {
    let n = rows.len();
    let mut seen = vec![0u64; n.div_ceil(64)];
    for &r in rows {
        let r = r as usize;
        if r >= n || seen[r / 64] >> (r % 64) & 1 == 1 {
            return Err(corrupt("leaf rows are not a permutation of the rows"));
        }
        seen[r / 64] |= 1 << (r % 64);
    }
    Ok(())
}

/// Float keys are keys of numbers: no NaN (outside the infinities' keys, which a sorted axis
/// shows at its ends) and no `-0.0` (folded into `0.0` when keys are made). A NaN point would
/// lie in no box, not even the whole plane.
fn check_float_keys(axis: &SortedAxis, name: &str) -> Result<(), FormatError> {
    if axis.domain != Domain::F64 {
        return Ok(());
    }
    let keys = &axis.keys;
    let (lowest, highest) = (f64_key(f64::NEG_INFINITY), f64_key(f64::INFINITY));
    let minus_zero = !(-0.0f64).to_bits();
    // A keyed x axis is sorted only within each key's run: every key is looked at.
    let numbers = if axis.is_searched() || keys.is_empty() {
        keys.first().is_none_or(|&k| k >= lowest)
            && keys.last().is_none_or(|&k| k <= highest)
            && keys.binary_search(&minus_zero).is_err()
    } else {
        keys.par_iter()
            .all(|&k| k >= lowest && k <= highest && k != minus_zero)
    };
    if numbers {
        Ok(())
    } else {
        Err(corrupt(format!(
            "{name} keys include the key of a NaN or of -0.0, which no build writes"
        )))
    }
}

/// Fast layout: the row ids of every level are those the cascade bits take from the level
/// below, down to the leaf rows, so a report never repeats or misses a row.
fn check_level_rows(
    bits: &[RankBits],
    level_rows: &[Slab<u32>],
    leaf_rows: &[u32],
) -> Result<(), FormatError> {
    let height = bits.len();
    let rows_at = |level: usize| -> &[u32] {
        if level == height {
            leaf_rows
        } else {
            &level_rows[level - 1]
        }
    };
    let bad = (1..=level_rows.len()).into_par_iter().find_first(|&level| {
        !rows_follow_cascade(
            &bits[level],
            height,
            level,
            rows_at(level),
            rows_at(level + 1),
        )
    });
    match bad {
        None => Ok(()),
        Some(level) => Err(corrupt(format!(
            "level rows of level {level} do not follow the cascade bits"
        ))),
    }
}

/// Whether every row id of level `level` is the one its cascade bit takes from the level
/// below (`child`).
fn rows_follow_cascade(
    bits: &RankBits,
    height: usize,
    level: usize,
    parent: &[u32],
    child: &[u32],
) -> bool {
    walk_merge(bits, 1usize << (height - level), |_, _, _| {
        |p: usize, from: usize, _: bool, _: bool| child.get(from) == Some(&parent[p])
    })
}

/// Integer weights: the leaves' weights are what the encoding promises (absolute values
/// adding up to less than 2^63 for int64 prefix sums, each an int64 for int128 ones), and
/// every level's prefix sums are those of the weights the cascade bits take from the level
/// below. Together these make every sum a query takes exact and free of overflow. Float
/// prefix sums are rounded, so they cannot be checked this way (a full verification derives
/// them again from the leaves instead, `full.rs`); they cannot overflow either.
fn check_weights(bits: &[RankBits], weights: &LevelWeights) -> Result<(), FormatError> {
    let height = bits.len();
    let leaves_fit = match weights {
        LevelWeights::F64(_) => return Ok(()),
        LevelWeights::I64(levels) => levels.last().is_none_or(|leaves| {
            leaves
                .iter()
                .map(|w| w.unsigned_abs() as u128)
                .sum::<u128>()
                < 1 << 63
        }),
        LevelWeights::I128(levels) => levels
            .last()
            .is_none_or(|leaves| leaves.iter().all(|&w| i64::try_from(w).is_ok())),
    };
    if !leaves_fit {
        return Err(corrupt("leaf weights do not fit their encoding"));
    }
    let follows = |level: usize| match weights {
        LevelWeights::F64(_) => true,
        LevelWeights::I64(levels) => prefix_sums_follow(bits, level, levels, i128::from),
        LevelWeights::I128(levels) => prefix_sums_follow(bits, level, levels, |w| w),
    };
    match (1..height)
        .into_par_iter()
        .find_first(|&level| !follows(level))
    {
        None => Ok(()),
        Some(level) => Err(corrupt(format!(
            "weights of level {level} do not follow the cascade bits"
        ))),
    }
}

/// Whether every block prefix sum of level `level` (`1..height`) is the sum of the prefixes
/// of its two children that the cascade bits have taken so far. Where every level passes,
/// the leaves bound every sum by induction, so the wrapping additions never wrap.
fn prefix_sums_follow<S: Copy + Sync>(
    bits: &[RankBits],
    level: usize,
    levels: &[Slab<S>],
    widen: impl Fn(S) -> i128 + Sync,
) -> bool {
    let height = bits.len();
    let (parent, child): (&[S], &[S]) = (&levels[level - 1], &levels[level]);
    let (level_bits, block) = (&bits[level], 1usize << (height - level));
    let half = block / 2;
    let widen = &widen;
    // The prefix through the `k`-th element taken from the child block at `start`.
    let taken = move |start: usize, k: usize| {
        if k == 0 {
            0
        } else {
            widen(child[start + k - 1])
        }
    };
    walk_merge(level_bits, block, move |start, block_start, ones| {
        // The sums taken from each child before `start` (a chunk can start mid-block).
        let mut sums = (
            taken(block_start, start - block_start - ones),
            taken(block_start + half, ones),
        );
        move |p: usize, from: usize, right: bool, block_starts: bool| {
            if block_starts {
                sums = (0, 0);
            }
            let v = child.get(from).map_or(0, |&c| widen(c));
            sums = if right { (sums.0, v) } else { (v, sums.1) };
            widen(parent[p]) == sums.0.wrapping_add(sums.1)
        }
    })
}
