"""The segments of a growing tree: static trees of live and deleted rows, and their merges.

A segment is one :class:`boxwood.RangeTree` of some appended rows (its rows' stable ids are
the tree's source rows, ascending) and, once some of them are deleted, a second small tree
of the deleted ones: a box's count or sum over the segment is the first tree's minus the
second's, exactly for counts and integer sums. Segments hold consecutive id ranges, oldest
first, so a box's rows over all segments, taken in segment order, ascend.

Everything here makes new segments from old ones; nothing changes a segment once made. The
columns a merge rebuilds from are the segments' own (``_Tree.columns``: the tree gives back
the points it holds), kept once read.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .._columns import AxisInfo
from .._parts import Layout, Provenance, build_parts
from .._sets import sorted_union
from .._tree import RangeTree

#: A segment is merged into the one before it while that one holds fewer than this many
#: times its live rows: sizes then fall geometrically from the oldest segment to the newest,
#: so there are at most log2(n) + 1 of them and a row is rebuilt O(log n) times (the
#: logarithmic method; Bentley and Saxe 1980, from memory).
GROWTH = 2
#: A segment whose deleted rows outnumber its live rows' half is rebuilt without them.
PURGE_SHARE = 0.5


@dataclass(frozen=True)
class Schema:
    """What every segment of one growing tree shares."""

    x: AxisInfo
    y: AxisInfo
    #: "float64", "int64" or None.
    weights: str | None
    #: The key columns' names (None for a tree without keys).
    key_names: tuple[str, ...] | None
    layout: Layout
    #: The name of the weight column of appended frames.
    weights_name: str = "weights"
    #: The kind of each key column ("int", "bool", "str", "datetime"), fixed by the first
    #: rows with keys; None before them.
    key_kinds: tuple[str, ...] | None = None


@dataclass(frozen=True)
class Columns:
    """Rows of a segment in id order: engine coordinates, weights, key values, ids."""

    x: np.ndarray
    y: np.ndarray
    weights: np.ndarray | None
    #: One array of values per key column (None without keys).
    keys: tuple[np.ndarray, ...] | None
    ids: np.ndarray

    def __len__(self) -> int:
        return int(self.ids.size)

    def take(self, which: np.ndarray) -> Columns:
        """The rows at positions (or a mask) `which`."""
        keys = None if self.keys is None else tuple(k[which] for k in self.keys)
        w = None if self.weights is None else self.weights[which]
        return Columns(self.x[which], self.y[which], w, keys, self.ids[which])

    @staticmethod
    def concat(parts: list[Columns]) -> Columns:
        first = parts[0]
        keys = None
        if first.keys is not None:
            keys = tuple(
                _concat_keys([p.keys[i] for p in parts if p.keys is not None])
                for i in range(len(first.keys))
            )
        weights = None
        if first.weights is not None:
            weights = np.concatenate([p.weights for p in parts if p.weights is not None])
        return Columns(
            np.concatenate([p.x for p in parts]),
            np.concatenate([p.y for p in parts]),
            weights,
            keys,
            np.concatenate([p.ids for p in parts]),
        )


def _concat_keys(arrays: list[np.ndarray]) -> np.ndarray:
    if any(a.dtype == object for a in arrays):
        return np.concatenate([a.astype(object) for a in arrays])
    return np.concatenate(arrays)


@dataclass(frozen=True, eq=False)
class Segment:
    """One static tree of rows, and the tree of those of its rows deleted since."""

    tree: RangeTree
    #: The stable ids of the tree's rows (int64, ascending): its source rows.
    ids: np.ndarray
    #: Ids deleted from this segment (int64, ascending), and the tree of their rows.
    dead: np.ndarray
    dead_tree: RangeTree | None
    #: The file names of a durable segment's tree and deleted-rows tree (None in memory,
    #: or not yet written).
    name: str | None = None
    dead_name: str | None = None
    #: The columns, once read from the tree (a merge, a delete or an expiry needs them).
    _columns: list[Columns] = field(default_factory=list, repr=False, compare=False)

    @property
    def live(self) -> int:
        return int(self.ids.size - self.dead.size)

    def columns(self, schema: Schema) -> Columns:
        """Every row of the tree, dead ones included, in id order."""
        if not self._columns:
            self._columns.append(tree_columns(self.tree, self.ids, schema))
        return self._columns[0]

    def live_columns(self, schema: Schema) -> Columns:
        cols = self.columns(schema)
        if self.dead.size == 0:
            return cols
        return cols.take(~np.isin(cols.ids, self.dead, assume_unique=True))

    def holds(self, ids: np.ndarray) -> np.ndarray:
        """Which of `ids` are rows of this segment that are not deleted."""
        pos = np.searchsorted(self.ids, ids)
        inside = pos < self.ids.size
        inside[inside] = self.ids[pos[inside]] == ids[inside]
        if self.dead.size:
            inside &= ~np.isin(ids, self.dead)
        return inside


def tree_columns(tree: RangeTree, ids: np.ndarray, schema: Schema) -> Columns:
    """The columns of `tree`, whose rows have the stable `ids`."""
    x, y, w, codes = tree._parts.engine.columns()
    keys = None
    dictionary = tree._parts.keys
    if dictionary is not None and codes is not None:
        keys = tuple(values[codes.astype(np.intp)] for values in dictionary.values())
    return Columns(x, y, w, keys, ids)


def build_tree(cols: Columns, schema: Schema) -> RangeTree:
    """The static tree of `cols`, its source rows the stable ids, its axes the schema's."""
    by: Any = None
    if schema.key_names is not None:
        assert cols.keys is not None
        by = cols.keys if len(cols.keys) > 1 else cols.keys[0]
    parts = build_parts(
        cols.x,
        cols.y,
        cols.weights,
        layout=schema.layout,
        provenance=Provenance(source_rows=cols.ids),
        by=by,
        by_names=schema.key_names,
    )
    return RangeTree._from_parts(dataclasses.replace(parts, x=schema.x, y=schema.y))


def make_segment(cols: Columns, schema: Schema) -> Segment:
    seg = Segment(build_tree(cols, schema), cols.ids, np.zeros(0, np.int64), None)
    seg._columns.append(cols)
    return seg


def with_deleted(seg: Segment, ids: np.ndarray, schema: Schema) -> Segment | None:
    """`seg` with rows `ids` (live rows of it) deleted too: rebuilt without its deleted rows
    once they are many (None if none are left), else with a new tree of them."""
    dead = sorted_union(seg.dead, ids.astype(np.int64))
    if dead.size > PURGE_SHARE * seg.ids.size:
        return purged(seg, dead, schema)
    cols = seg.columns(schema)
    dead_cols = cols.take(np.searchsorted(cols.ids, dead))
    out = Segment(seg.tree, seg.ids, dead, build_tree(dead_cols, schema), seg.name)
    out._columns.append(cols)
    return out


def purged(seg: Segment, dead: np.ndarray, schema: Schema) -> Segment | None:
    """`seg` rebuilt of its rows not in `dead`; None if none are left."""
    cols = seg.columns(schema)
    keep = cols.take(~np.isin(cols.ids, dead, assume_unique=True))
    return make_segment(keep, schema) if len(keep) else None


def merged(segs: list[Segment], schema: Schema) -> Segment:
    """One segment of the live rows of consecutive segments `segs` (oldest first)."""
    return make_segment(Columns.concat([s.live_columns(schema) for s in segs]), schema)


def next_run(segs: Sequence[Segment]) -> tuple[int, int] | None:
    """The run ``segs[start:stop]`` the policy merges next, or None once sizes settle: the
    newest adjacent pair whose older segment holds fewer than ``GROWTH`` times the newer's
    live rows, taken with the segments before it while each holds fewer than ``GROWTH``
    times the run's rows so far. A new segment's merges, pair by pair, are so found from
    the sizes alone and built as one tree: each row is rebuilt once a run."""
    for stop in range(len(segs), 1, -1):
        size, start = segs[stop - 1].live, stop - 1
        while start > 0 and segs[start - 1].live < GROWTH * size:
            start -= 1
            size += segs[start].live
        if start < stop - 1:
            return start, stop
    return None


def most_segments(rows: int, *, merging: bool) -> int:
    """The most segments of `rows` rows (deleted ones included) the policy keeps: once
    merges settle, each segment holds at least ``GROWTH`` times the next one's live rows,
    so there are at most ``floor(log_GROWTH(rows)) + 1``; while a merge runs, twice that,
    so that appends wait for a merge only when they outpace it by that much."""
    settled = 1
    while GROWTH**settled <= rows:
        settled += 1
    return 2 * settled if merging else settled


def drop_empty(segs: Sequence[Segment | None]) -> list[Segment]:
    return [s for s in segs if s is not None and s.live > 0]
