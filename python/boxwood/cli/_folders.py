"""Growing trees' folders for the command line, and what a command asks of its source's tree
(axes, keys) whether that is a static tree or a growing one.

A folder given as a SOURCE is opened as a reader (``readonly=True``): it takes no lock, so a
writer may append meanwhile, and the command answers for the rows committed when it opened,
reports and joins in the folder's stable row ids. Every failure to open it is a bad-file
error naming the folder.
"""

from __future__ import annotations

import os
from typing import Any

from .._boxwood import IndexFileError
from .._columns import AxisInfo
from .._growing import FolderError, FolderLockedError, GrowingTree
from .._growing._folder import MANIFEST
from ._exits import CommandError, FileUnreadable, Locked

#: A source's tree: a static one (an index file, a points file) or a growing folder's.
Tree = Any


def is_growing(tree: Tree) -> bool:
    return isinstance(tree, GrowingTree)


def axis_of(tree: Tree, axis: str) -> AxisInfo:
    """One axis's description (dtype, kind, time zone) of a static or a growing tree."""
    if is_growing(tree):
        schema = tree._schema
        return schema.x if axis == "x" else schema.y
    return tree._parts.x if axis == "x" else tree._parts.y


def tree_keys(tree: Tree) -> list[tuple[str, str]] | None:
    """The key columns as ``(name, kind)`` (kind ``int``, ``bool``, ``str``, ``datetime``, or
    ``""`` for a keyed growing tree no rows have given keys yet), or None without keys."""
    if is_growing(tree):
        schema = tree._schema
        if schema.key_names is None:
            return None
        kinds = schema.key_kinds or ("",) * len(schema.key_names)
        return list(zip(schema.key_names, kinds))
    keys = tree._parts.keys
    return None if keys is None else [(c.name, c.kind) for c in keys.columns]


def open_folder(path: str, *, readonly: bool = True) -> GrowingTree:
    """A growing folder as a reader (or its writer); a folder without one, or a damaged one,
    is a bad file, one that another writer holds is locked."""
    if not os.path.isfile(os.path.join(path, MANIFEST)):
        raise FileUnreadable(not_growing(path))
    try:
        return GrowingTree.open(path, readonly=readonly)
    except (FolderError, IndexFileError, OSError, ValueError) as exc:
        raise folder_error(path, exc) from None


def not_growing(path: str) -> str:
    return (
        f"{path}: a folder that holds no growing tree (no {MANIFEST} file); "
        "boxwood append makes one"
    )


def folder_error(path: str, exc: BaseException) -> CommandError:
    """The command line's error for a growing folder's: a locked folder, or a bad file."""
    message = str(exc) if path in str(exc) else f"{path}: {exc}"
    if isinstance(exc, FolderLockedError):
        return Locked(message)
    return FileUnreadable(message)
