"""Data that grows: appends, deletes and retention over a few static trees.

>>> import boxwood
>>> g = boxwood.GrowingTree("float64", "float64")
>>> g.append([1.0, 2.0], [1.0, 2.0]).tolist()
[0, 1]
"""

from ._folder import (
    CorruptFolderError,
    FolderError,
    FolderLockedError,
    ReadOnlyError,
    UnsupportedFolderError,
)
from ._merges import MergeError
from ._tree import GrowingSnapshot, GrowingTree, SegmentInfo
from ._verify import FolderCheck, verify_folder

__all__ = [
    "CorruptFolderError",
    "FolderCheck",
    "FolderError",
    "FolderLockedError",
    "GrowingSnapshot",
    "GrowingTree",
    "MergeError",
    "ReadOnlyError",
    "SegmentInfo",
    "UnsupportedFolderError",
    "verify_folder",
]
