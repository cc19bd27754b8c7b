//! Writing a tree as an index file.

use std::borrow::Cow;
use std::fs::{self, File};
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};

use rayon::prelude::*;

use super::layout::{
    align_up, data_start, header_checksum, section_checksum, Entry, Expected, Header, Kind,
    WeightCode, CHECKSUM_BYTES, HEADER_BYTES, MAX_ATTACHMENTS,
};
use crate::search::LineSearch;
use crate::tree::{LevelWeights, RangeTree};

/// Write `tree` and the caller's `attachments` as an index file to `out`.
///
/// Every section is hashed before anything is written, so `out` needs no seeking and a
/// pipe or a `Vec<u8>` will do.
pub fn write_index(tree: &RangeTree, attachments: &[&[u8]], out: impl Write) -> io::Result<()> {
    IndexWriter::new(tree, attachments)?.write_to(out)
}

/// An index file laid out and hashed, ready to be written: its length is known first, so a
/// caller can write it into a buffer of exactly that size.
pub struct IndexWriter<'a> {
    header: [u8; HEADER_BYTES],
    table: Vec<u8>,
    sections: Vec<Cow<'a, [u8]>>,
    offsets: Vec<usize>,
    len: usize,
}

impl<'a> IndexWriter<'a> {
    pub fn new(tree: &'a RangeTree, attachments: &[&'a [u8]]) -> io::Result<Self> {
        if attachments.len() > MAX_ATTACHMENTS {
            return Err(io::Error::new(
                io::ErrorKind::InvalidInput,
                format!("at most {MAX_ATTACHMENTS} attachments fit in an index file"),
            ));
        }
        // A loaded tree's groups not yet checked are checked first: a damaged section must
        // not be written out again under a fresh checksum.
        tree.ensure_all()
            .map_err(|e| io::Error::new(io::ErrorKind::InvalidData, e.to_string()))?;
        let mut sections = tree_section_bytes(tree);
        sections.extend(
            attachments
                .iter()
                .enumerate()
                .map(|(i, a)| (Expected::attachment(i), Cow::Borrowed(*a))),
        );
        let checksums: Vec<u64> = sections
            .par_iter()
            .map(|(_, bytes)| section_checksum(bytes.as_ref()))
            .collect();
        let mut offsets = Vec::with_capacity(sections.len());
        let mut entries = Vec::with_capacity(sections.len());
        let mut offset = data_start(sections.len());
        for ((expected, bytes), checksum) in sections.iter().zip(checksums) {
            offsets.push(offset);
            entries.push(Entry {
                kind: expected.kind as u32,
                index: expected.index as u32,
                offset: offset as u64,
                len: bytes.len() as u64,
                checksum,
            });
            offset = align_up(offset + bytes.len());
        }
        let stats = tree.build_stats();
        let header = Header {
            n: tree.len() as u64,
            height: tree.height() as u32,
            layout: tree.layout(),
            x_domain: tree.x_domain(),
            y_domain: tree.y_domain(),
            weights: weight_code(tree.weights()),
            keyed: tree.key_runs().is_some(),
            sections: sections.len() as u32,
            file_len: offset as u64,
            presorts: stats.presorts as u32,
            merge_passes: stats.merge_passes as u32,
            elements_merged: stats.elements_merged,
        }
        .encode();
        Ok(IndexWriter {
            header,
            table: entries.iter().flat_map(|e| e.encode()).collect(),
            sections: sections.into_iter().map(|(_, bytes)| bytes).collect(),
            offsets,
            len: offset,
        })
    }

    /// The file's length in bytes.
    pub fn len(&self) -> usize {
        self.len
    }

    pub fn is_empty(&self) -> bool {
        false // a header at least
    }

    /// Write the whole file to `out`.
    pub fn write_to(&self, out: impl Write) -> io::Result<()> {
        let mut out = BufWriter::with_capacity(1 << 20, out);
        out.write_all(&self.header)?;
        out.write_all(&header_checksum(&self.header, &self.table).to_le_bytes())?;
        out.write_all(&[0u8; CHECKSUM_BYTES - 8])?;
        out.write_all(&self.table)?;
        let mut written = self.header.len() + CHECKSUM_BYTES + self.table.len();
        for (bytes, &offset) in self.sections.iter().zip(&self.offsets) {
            pad_to(&mut out, &mut written, offset)?;
            out.write_all(bytes.as_ref())?;
            written += bytes.len();
        }
        pad_to(&mut out, &mut written, self.len)?;
        out.flush()
    }

    /// Write the whole file into `out`, which must be exactly [`IndexWriter::len`] bytes.
    pub fn write_into(&self, out: &mut [u8]) -> io::Result<()> {
        if out.len() != self.len {
            return Err(io::Error::new(
                io::ErrorKind::InvalidInput,
                format!("the index takes {} bytes, not {}", self.len, out.len()),
            ));
        }
        self.write_to(out)
    }
}

fn pad_to(out: &mut impl Write, written: &mut usize, to: usize) -> io::Result<()> {
    const ZEROS: [u8; 64] = [0; 64];
    debug_assert!(to >= *written && to - *written < ZEROS.len());
    out.write_all(&ZEROS[..to - *written])?;
    *written = to;
    Ok(())
}

fn weight_code(w: Option<&LevelWeights>) -> WeightCode {
    match w {
        None => WeightCode::None,
        Some(LevelWeights::F64(_)) => WeightCode::F64,
        Some(LevelWeights::I64(_)) => WeightCode::I64,
        Some(LevelWeights::I128(_)) => WeightCode::I128,
    }
}

/// The tree's arrays as bytes, in the order `Header::tree_sections` lists them.
fn tree_section_bytes(tree: &RangeTree) -> Vec<(Expected, Cow<'_, [u8]>)> {
    fn bytes(kind: Kind, index: usize, b: &[u8]) -> (Expected, Cow<'_, [u8]>) {
        (Expected::new(kind, index, b.len()), Cow::Borrowed(b))
    }
    let mut out = Vec::new();
    for (axis, keys, search) in [
        (&tree.x, Kind::XKeys, Kind::XSearch),
        (&tree.y, Kind::YKeys, Kind::YSearch),
    ] {
        out.push(bytes(keys, 0, bytemuck::cast_slice(&axis.keys)));
        match (&tree.key_runs, keys) {
            (Some(runs), Kind::XKeys) => out.push((
                Expected::variable(Kind::KeyStarts, 0),
                Cow::Borrowed(bytemuck::cast_slice(runs.starts())),
            )),
            _ => out.extend(search_levels(axis.search(), &axis.keys, search)),
        }
    }
    for (step, (lines, supers)) in tree.wide.steps().enumerate() {
        out.push(bytes(Kind::CountLines, step, bytemuck::cast_slice(lines)));
        out.push(bytes(Kind::CountSupers, step, bytemuck::cast_slice(supers)));
    }
    for (level, bits) in tree.bits.iter().enumerate() {
        out.push(bytes(Kind::Bits, level, bytemuck::cast_slice(bits.lines())));
    }
    for (i, rows) in tree.level_rows.iter().enumerate() {
        out.push(bytes(Kind::LevelRows, i + 1, bytemuck::cast_slice(rows)));
    }
    out.push(bytes(
        Kind::LeafRows,
        0,
        bytemuck::cast_slice(&tree.leaf_rows),
    ));
    let weight_levels: Vec<&[u8]> = match &tree.weights {
        None => Vec::new(),
        Some(LevelWeights::F64(v)) => v.iter().map(|l| bytemuck::cast_slice(l)).collect(),
        Some(LevelWeights::I64(v)) => v.iter().map(|l| bytemuck::cast_slice(l)).collect(),
        Some(LevelWeights::I128(v)) => v.iter().map(|l| bytemuck::cast_slice(l)).collect(),
    };
    for (i, w) in weight_levels.into_iter().enumerate() {
        out.push(bytes(Kind::Weights, i + 1, w));
    }
    out
}

/// The levels of an axis's root-search index as a file stores them: for keys that start on
/// a line. A built tree's keys need not, and then the file's index is made for the purpose.
fn search_levels<'a>(
    search: &'a LineSearch,
    keys: &[u64],
    kind: Kind,
) -> Vec<(Expected, Cow<'a, [u8]>)> {
    let as_stored = |levels: Vec<Cow<'a, [u8]>>| {
        levels
            .into_iter()
            .enumerate()
            .map(|(l, b)| (Expected::new(kind, l, b.len()), b))
            .collect()
    };
    if search.pad() == 0 {
        return as_stored(
            search
                .levels()
                .map(|l| Cow::Borrowed(bytemuck::cast_slice(l)))
                .collect(),
        );
    }
    let aligned = LineSearch::with_pad(keys, 0);
    as_stored(
        aligned
            .levels()
            .map(|l| Cow::Owned(bytemuck::cast_slice(l).to_vec()))
            .collect(),
    )
}

/// Save `tree` to `path` so that a crash or a full disk at any moment leaves whatever file
/// was at `path` before intact: write a temporary file in the same folder, sync it, rename
/// it over `path` (atomic on POSIX file systems), then sync the folder.
pub fn save(tree: &RangeTree, attachments: &[&[u8]], path: &Path) -> io::Result<()> {
    let partial = partial_path(path)?;
    let result = write_and_sync(tree, attachments, &partial).and_then(|()| {
        fs::rename(&partial, path)?;
        sync_folder(path)
    });
    if result.is_err() {
        let _ = fs::remove_file(&partial);
    }
    result
}

fn write_and_sync(tree: &RangeTree, attachments: &[&[u8]], partial: &Path) -> io::Result<()> {
    let file = File::options().write(true).create_new(true).open(partial)?;
    write_index(tree, attachments, &file)?;
    file.sync_all()
}

/// `.<name>.<pid>-<nanos>.partial` beside `path`: hidden, unique per process and moment, and
/// never mistaken for a finished index.
fn partial_path(path: &Path) -> io::Result<PathBuf> {
    let name = path.file_name().ok_or_else(|| {
        io::Error::new(
            io::ErrorKind::InvalidInput,
            format!("{} does not name a file", path.display()),
        )
    })?;
    let nanos = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.subsec_nanos());
    let mut partial = std::ffi::OsString::from(".");
    partial.push(name);
    partial.push(format!(".{}-{nanos}.partial", std::process::id()));
    Ok(path.with_file_name(partial))
}

fn sync_folder(path: &Path) -> io::Result<()> {
    #[cfg(unix)]
    {
        let folder = match path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => Path::new("."),
        };
        File::open(folder)?.sync_all()
    }
    #[cfg(not(unix))]
    {
        let _ = path;
        Ok(())
    }
}
