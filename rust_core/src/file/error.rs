//! The file layer's one error type.

use std::fmt;
use std::io;

/// Why bytes could not be read back as an index.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum FormatError {
    /// No bytes at all: a file created but never written, or a copy cut off at once.
    Empty,
    /// The bytes do not start with the index file's magic.
    NotAnIndex,
    /// Written by a newer (or unknown) version of the format.
    UnsupportedVersion { found: u32, supported: u32 },
    /// Written on a machine of the other byte order.
    WrongByteOrder,
    /// Fewer bytes than the header says the file holds.
    Truncated { expected: u64, found: u64 },
    /// More bytes than the header says the file holds.
    TrailingBytes { expected: u64, found: u64 },
    /// The header or section table does not match its checksum.
    HeaderChecksum,
    /// A section does not match its checksum.
    SectionChecksum { section: String },
    /// The header, the section table or a section's contents break a rule of the format.
    Corrupt(String),
}

impl fmt::Display for FormatError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FormatError::Empty => write!(
                f,
                "the file is empty (0 bytes), not an index file: it was created but never \
                 written, or its copy was cut off; save the tree again"
            ),
            FormatError::NotAnIndex => write!(f, "not a boxwood index file (wrong magic bytes)"),
            FormatError::UnsupportedVersion { found, supported } if found < supported => write!(
                f,
                "index file format version {found} is an earlier format that this boxwood no \
                 longer reads (it reads version {supported}); rebuild the index from its data \
                 and save it again"
            ),
            FormatError::UnsupportedVersion { found, supported } => write!(
                f,
                "index file format version {found} is not supported by this boxwood \
                 (it reads version {supported}); upgrade boxwood or rebuild the index"
            ),
            FormatError::WrongByteOrder => write!(
                f,
                "index file was written on a machine of the other byte order; rebuild it here"
            ),
            FormatError::Truncated { expected, found } => write!(
                f,
                "index file is truncated: the header promises {expected} bytes, found {found}"
            ),
            FormatError::TrailingBytes { expected, found } => write!(
                f,
                "index file has bytes past its end: the header promises {expected} bytes, \
                 found {found}"
            ),
            FormatError::HeaderChecksum => {
                write!(f, "index file header is damaged (checksum mismatch)")
            }
            FormatError::SectionChecksum { section } => write!(
                f,
                "index file section {section} is damaged (checksum mismatch)"
            ),
            FormatError::Corrupt(what) => write!(f, "index file is corrupt: {what}"),
        }
    }
}

impl std::error::Error for FormatError {}

/// Why an index file could not be opened.
#[derive(Debug)]
pub enum LoadError {
    Io(io::Error),
    Format(FormatError),
}

impl fmt::Display for LoadError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            LoadError::Io(e) => e.fmt(f),
            LoadError::Format(e) => e.fmt(f),
        }
    }
}

impl std::error::Error for LoadError {}

impl From<io::Error> for LoadError {
    fn from(e: io::Error) -> Self {
        LoadError::Io(e)
    }
}

impl From<FormatError> for LoadError {
    fn from(e: FormatError) -> Self {
        LoadError::Format(e)
    }
}
