//! Index files: a tree as one byte layout, written once and read back without copying.
//!
//! ```
//! use boxwood_core::{build, file, Column, Layout};
//!
//! let x = [3.0, 1.0, 4.0, 1.0, 5.0];
//! let y = [9_i64, 2, 6, 5, 3];
//! let tree = build(Column::F64(&x), Column::I64(&y), None, Layout::Fast).unwrap();
//!
//! let mut bytes = Vec::new();
//! file::write_index(&tree, &[b"caller's notes"], &mut bytes).unwrap();
//! let loaded = file::read_index(file::AlignedBytes::copy_of(&bytes)).unwrap();
//! assert_eq!(loaded.tree.len(), 5);
//! assert_eq!(&loaded.attachments[0][..], b"caller's notes");
//! ```
//!
//! The layout (all integers little-endian; `docs/index-format.md` in the repository is the
//! full description):
//!
//! - a 64-byte header: magic, format version, byte-order tag, rows, height, layout, the two
//!   key domains, the weight kind, the section count, the file length, the build counts;
//! - a checksum of the header and the section table (XXH3-64), then 8 reserved bytes;
//! - the section table: one 32-byte entry per section (kind, index, offset, length,
//!   XXH3-64 checksum), in a fixed order that the header alone determines;
//! - the sections, each starting on a 64-byte boundary so that a memory-mapped file can be
//!   used in place (the cascade lines are 64-byte aligned in memory too), zero padding between.
//!
//! Reading validates everything before any of it is used: the magic, the version, the byte
//! order, the length, both kinds of checksum, every offset and length against the file, and
//! the invariants the query code relies on (sorted keys, a matching top index, per-line rank
//! counts, balanced cascade blocks, row ids in range), so a damaged or hostile file is refused
//! with a [`FormatError`] instead of answering wrongly or reading out of bounds.

mod error;
mod full;
mod layout;
mod read;
mod write;

pub use error::{FormatError, LoadError};
pub use layout::{FORMAT_VERSION, MAGIC};
pub use read::{open, read_index, read_index_with, AlignedBytes, LoadedTree, Verify};
pub use write::{save, write_index, IndexWriter};

/// Recompute every checksum in an index file's bytes in place, so that a fuzzer's changes
/// reach the structural checks behind the checksums. For fuzzing and tests only.
#[doc(hidden)]
pub fn rehash_for_fuzzing(bytes: &mut [u8]) {
    layout::rehash(bytes);
}

#[cfg(test)]
mod tests;
