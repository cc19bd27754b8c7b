"""boxwood: exact counts, weight sums and rows for millions of axis-parallel boxes.

A static 2-D range tree (array layout, fractional cascading, rank space) in Rust:

>>> import boxwood
>>> tree = boxwood.RangeTree([1.0, 2.0, 3.0], [10, 20, 30])
>>> tree.count(1.5, 3.0, 0, 100)
2
"""

from ._cpu import check as _check_cpu

_check_cpu()  # before the compiled engine loads: a clear ImportError, not SIGILL, on old CPUs

from ._accessor import install as _install_accessor
from ._boxwood import MAX_ROWS as _MAX_ROWS  # noqa: F401  (read by tests)
from ._boxwood import (
    ChecksumMismatchError,
    CorruptIndexFileError,
    IndexFileError,
    InternalError,
    NotAnIndexFileError,
    TruncatedIndexFileError,
    UnsupportedIndexFileError,
)
from ._frames import MissingColumnError, MissingValuesDropped
from ._growing import (
    CorruptFolderError,
    FolderError,
    FolderLockedError,
    GrowingSnapshot,
    GrowingTree,
    MergeError,
    ReadOnlyError,
    UnsupportedFolderError,
    verify_folder,
)
from ._join import box_join, box_join_chunks
from ._memory import InsufficientMemoryError, MemoryEstimate, estimate_bytes
from ._tree import RangeTree, load
from ._version import package_version as _package_version

__all__ = [
    "ChecksumMismatchError",
    "CorruptFolderError",
    "CorruptIndexFileError",
    "FolderError",
    "FolderLockedError",
    "MergeError",
    "IndexFileError",
    "InsufficientMemoryError",
    "InternalError",
    "MemoryEstimate",
    "NotAnIndexFileError",
    "TruncatedIndexFileError",
    "UnsupportedFolderError",
    "UnsupportedIndexFileError",
    "GrowingSnapshot",
    "GrowingTree",
    "MissingColumnError",
    "MissingValuesDropped",
    "RangeTree",
    "ReadOnlyError",
    "box_join",
    "box_join_chunks",
    "estimate_bytes",
    "load",
    "verify_folder",
]
#: The installed distribution's version: one source, the Cargo workspace's (pyproject.toml);
#: in a checkout used without installing, read from its Cargo.toml.
__version__ = _package_version()

_install_accessor()  # DataFrame.boxwood, once pandas is imported (boxwood never imports it)
