//! The engine's one error type.

use std::fmt;
use std::path::PathBuf;

use crate::file::FormatError;

/// Which coordinate axis a message is about.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Axis {
    X,
    Y,
}

impl Axis {
    pub fn name(self) -> &'static str {
        match self {
            Axis::X => "x",
            Axis::Y => "y",
        }
    }
}

/// Everything the engine can refuse, each with what the caller needs to fix it.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Error {
    /// Two inputs that must describe the same rows have different lengths.
    LengthMismatch {
        what: &'static str,
        expected: usize,
        got: usize,
    },
    /// A coordinate, weight or bound is NaN (or NaT).
    NotANumber { what: String, position: usize },
    /// A weight is infinite: prefix sums over it would turn into NaN.
    NonFiniteWeight { position: usize },
    /// More rows than the 32-bit row ids can name.
    TooManyRows { rows: usize, max: usize },
    /// `inclusive` is not one of the four accepted words.
    BadInclusive(String),
    /// A weighted query on a tree built without weights.
    NoWeights,
    /// An integer box sum does not fit in `i64`.
    SumOverflow { box_index: usize },
    /// The boxes' bound columns have different lengths.
    BoundLengths,
    /// More distinct key codes than a tree holds.
    TooManyKeys { keys: usize, max: usize },
    /// A point's key code is not below the number of codes the tree was told of.
    KeyCode {
        position: usize,
        code: i64,
        count: usize,
    },
    /// A keyed tree was asked without keys.
    KeysRequired,
    /// Keys were given to a tree built without them.
    NotKeyed,
    /// The boxes' key column is not as long as their bounds.
    KeyLengths { expected: usize, got: usize },
    /// A part of a loaded index file that is checked before its first use (cascade bits, row
    /// ids, weights) failed its check: the file is damaged. `file` is its path when the tree
    /// was opened from one, so that an error raised long after the load names the file.
    IndexFile {
        error: FormatError,
        file: Option<PathBuf>,
    },
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Error::LengthMismatch {
                what,
                expected,
                got,
            } => write!(f, "{what} has {got} rows but x has {expected}"),
            Error::NotANumber { what, position } => {
                write!(f, "{what} contains NaN at position {position}")
            }
            Error::NonFiniteWeight { position } => write!(
                f,
                "weights contains an infinite value at position {position}; weights must be finite"
            ),
            Error::TooManyRows { rows, max } => write!(
                f,
                "{rows} rows is more than a tree holds (at most {max}, the range of its 32-bit row ids)"
            ),
            Error::BadInclusive(got) => write!(
                f,
                "inclusive must be 'both', 'neither', 'left' or 'right', got {got:?}"
            ),
            Error::NoWeights => write!(
                f,
                "this tree was built without weights; pass weights= when building it to use sum()"
            ),
            Error::SumOverflow { box_index } => write!(
                f,
                "the weight sum of box {box_index} does not fit in int64"
            ),
            Error::BoundLengths => write!(f, "the four bound arrays must have the same length"),
            Error::TooManyKeys { keys, max } => write!(
                f,
                "{keys} distinct keys is more than a tree holds (at most {max}, the range of its 32-bit key codes)"
            ),
            Error::KeyCode {
                position,
                code,
                count,
            } => write!(
                f,
                "key code {code} at position {position} is not below the number of keys, {count}"
            ),
            Error::KeysRequired => write!(
                f,
                "this tree was built with keys (by=): every box needs its key"
            ),
            Error::NotKeyed => write!(
                f,
                "this tree was built without keys (by=): boxes cannot ask for one"
            ),
            Error::KeyLengths { expected, got } => write!(
                f,
                "the boxes' keys have {got} rows but their bounds have {expected}"
            ),
            Error::IndexFile { error, file: None } => error.fmt(f),
            Error::IndexFile {
                error,
                file: Some(path),
            } => write!(f, "{}: {error}", path.display()),
        }
    }
}

impl std::error::Error for Error {}
