"""A growing tree's folder checked through and through (``boxwood verify FOLDER``).

Opening a folder checks the manifest's checksum and fields, and each file the checksums a
load checks. :func:`verify_folder` also fully verifies every segment file and deleted-rows
file (``boxwood.load(verify="full")``: every section, and what can be derived derived again
and compared) and checks the ids across the folder: ascending within each segment, the
segments' ranges ascending and disjoint, below the manifest's next id, and each deleted row
one of its segment's with the same coordinates, weight and keys.

>>> import tempfile, boxwood
>>> folder = tempfile.mkdtemp() + "/g"
>>> with boxwood.GrowingTree.open(folder, "int64", "float64") as g:
...     _ = g.append([1, 2, 3], [0.5, 1.5, 2.5])
...     g.delete([1])
>>> check = boxwood.verify_folder(folder)
>>> check.live_rows, check.deleted_rows, check.segments, check.next_id
(2, 1, 1, 3)
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from .._tree import load
from ._folder import LOCK, MANIFEST, CorruptFolderError, Folder
from ._segments import Columns, Schema, Segment, tree_columns


@dataclass(frozen=True)
class FolderCheck:
    """What :func:`verify_folder` found in a folder that passed."""

    path: str
    generation: int
    segments: int
    live_rows: int
    deleted_rows: int
    next_id: int
    #: Index files verified (segments and deleted-rows files) and their bytes.
    files: int
    file_bytes: int
    #: Files an interrupted change left, which the next writer deletes (not an error).
    leftovers: tuple[str, ...]


def verify_folder(folder: str | os.PathLike[str]) -> FolderCheck:
    """Check a growing tree's folder through and through (see the module's description);
    takes no lock, so a writer may hold the folder meanwhile. Raises
    :class:`boxwood.CorruptFolderError` (or the index file's error, naming the file) for
    what is wrong, ``FileNotFoundError`` for a folder without a growing tree."""
    path = os.fspath(folder)
    if not os.path.isfile(os.path.join(path, MANIFEST)):
        raise FileNotFoundError(f"{path} holds no growing tree (no {MANIFEST} file)")
    snap = Folder(path, readonly=True).read()
    files, file_bytes = 0, 0
    named = {MANIFEST, LOCK}
    last_id = -1
    for seg in snap.segments:
        for name in (seg.name, seg.dead_name):
            if name is not None:
                load(os.path.join(path, name), verify="full")
                files += 1
                file_bytes += os.path.getsize(os.path.join(path, name))
                named.add(name)
        last_id = _check_ids(path, seg, last_id, snap.next_id)
        if seg.dead_tree is not None:
            _check_deleted_rows(path, seg, snap.schema)
    leftovers = tuple(sorted(n for n in os.listdir(path) if _leftover(n) and n not in named))
    return FolderCheck(
        path,
        snap.generation,
        len(snap.segments),
        sum(s.live for s in snap.segments),
        sum(int(s.dead.size) for s in snap.segments),
        snap.next_id,
        files,
        file_bytes,
        leftovers,
    )


def _check_ids(path: str, seg: Segment, last_id: int, next_id: int) -> int:
    """The segment's ids ascend, all above the previous segment's and below `next_id`;
    returns its last."""
    ids = seg.ids
    if ids.size == 0:
        return last_id
    if (np.diff(ids) <= 0).any():
        raise CorruptFolderError(f"{path}: segment {seg.name} holds ids out of order")
    if ids[0] <= last_id:
        raise CorruptFolderError(
            f"{path}: segment {seg.name} starts at id {int(ids[0])}, not after the id "
            f"{last_id} of the segment before it"
        )
    if ids[-1] >= next_id:
        raise CorruptFolderError(
            f"{path}: segment {seg.name} holds id {int(ids[-1])}, but the manifest gives out "
            f"ids from {next_id} on"
        )
    return int(ids[-1])


def _check_deleted_rows(path: str, seg: Segment, schema: Schema) -> None:
    """Each deleted row's coordinates, weight and keys are its segment's row's: else the
    subtracted counts and sums would not be that row's."""
    assert seg.dead_tree is not None
    rows = seg.columns(schema)
    dead = tree_columns(seg.dead_tree, seg.dead, schema)
    theirs = rows.take(np.searchsorted(rows.ids, seg.dead))
    if not _same_rows(theirs, dead):
        raise CorruptFolderError(
            f"{path}: {seg.dead_name} deletes rows whose points differ from {seg.name}'s"
        )


def _same_rows(a: Columns, b: Columns) -> bool:
    same = np.array_equal(a.ids, b.ids) and np.array_equal(a.x, b.x) and np.array_equal(a.y, b.y)
    if a.weights is not None and b.weights is not None:
        same = same and np.array_equal(a.weights, b.weights)
    if a.keys is not None and b.keys is not None:
        same = same and all(np.array_equal(p, q) for p, q in zip(a.keys, b.keys))
    return bool(same)


def _leftover(name: str) -> bool:
    return name.endswith((".boxwood", ".partial"))
