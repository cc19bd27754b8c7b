"""`GrowingTree`: points that arrive and age out, answered by a few static trees.

>>> import numpy as np, boxwood
>>> g = boxwood.GrowingTree("float64", "int64")
>>> first = g.append([0.0, 1.0, 2.0], [5, 6, 7])
>>> later = g.append([3.0, 4.0], [5, 9])
>>> later
array([3, 4])
>>> g.delete([1])
>>> g.count(0, 10, 0, 6)
2
>>> g.expire(3.0)          # rows 0 and 2 (row 1 is deleted already)
2
>>> g.report(0, 10, 0, 10)[1]
array([3, 4])

The logarithmic method (Bentley and Saxe 1980, from memory): appended rows become a new
static segment; a segment is merged into the one before it while that one is under twice
its size, so segment sizes fall geometrically and a box is asked of O(log n) trees.
"""

from __future__ import annotations

import dataclasses
import os
import threading
import time
from collections.abc import Hashable
from dataclasses import dataclass
from typing import Any, NamedTuple, TypeVar

import numpy as np

from .._bounds import Inclusive, document_bounds, strictly_below
from .._parts import Layout
from .._polars import is_polars_frame
from .._sets import sorted_unique
from .._tree import RangeTree
from . import _answer, _input, _merges
from ._folder import MANIFEST, Folder, ReadOnlyError, Snapshot, UnsupportedFolderError
from ._merges import Merger
from ._segments import (
    Schema,
    Segment,
    drop_empty,
    make_segment,
    merged,
    with_deleted,
)

_T = TypeVar("_T", bound="GrowingTree")


class SegmentInfo(NamedTuple):
    """One segment: its live rows, its deleted rows not yet purged, its bytes in memory."""

    rows: int
    deleted: int
    nbytes: int


@dataclass(frozen=True)
class _State:
    """Everything a query reads, swapped whole by each change: a query that took one state
    answers from it alone, whatever changes meanwhile."""

    schema: Schema
    segments: tuple[Segment, ...]
    next_id: int


class GrowingTree:
    """Points that grow by appends and shrink by deletes and expiry, answered exactly.

    Made empty with the axes' dtypes (and the weights' dtype and key column names), or
    from an existing :class:`boxwood.RangeTree` (:meth:`from_tree`). Every appended row gets
    an id (int64, increasing, never reused); :meth:`report` and :meth:`pairs` answer with
    those ids. Counts and sums answer for the live rows only; deletes are subtracted
    exactly from counts and integer sums.

    Parameters
    ----------
    x, y
        The axes' dtypes: any coordinate dtype of :class:`boxwood.RangeTree` (a
        ``datetime64`` unit, or a pandas ``"datetime64[ns, UTC]"`` for tz-aware times).
    weights
        The weights' dtype (a float or integer dtype), or None for a tree without sums.
    by
        The key column name (a list of names for several) of a keyed tree: every append
        then gives its rows' keys, and every query its boxes' keys, as for ``RangeTree``.
    layout
        The segments' layout, as for :class:`boxwood.RangeTree`.
    names
        The x, y and weight column names: appended DataFrames are read by them.
    """

    __slots__ = ("_empty", "_lock", "_merges", "_state", "_store")

    def __init__(
        self,
        x: Any = "float64",
        y: Any = "float64",
        *,
        weights: Any = None,
        by: Hashable | list[Hashable] | None = None,
        layout: Layout = "compact",
        names: tuple[Hashable, Hashable, Hashable] = ("x", "y", "weights"),
    ) -> None:
        schema = _input.schema_of(x, y, weights=weights, by=by, layout=layout, names=names)
        self._setup(None, _State(schema, (), 0))

    def _setup(self, store: Folder | None, state: _State) -> None:
        """The one place a tree's private state is made (every constructor comes here)."""
        self._store = store
        #: Held by every change and every merge's commit: one change at a time. Queries
        #: take no lock: they read ``_state`` once, and a commit swaps it whole.
        self._lock = threading.RLock()
        self._merges = Merger(self._lock)
        self._adopt(state)

    @classmethod
    def _made(cls: type[_T], store: Folder | None, state: _State) -> _T:
        out = cls.__new__(cls)
        out._setup(store, state)
        return out

    @classmethod
    def open(
        cls,
        folder: str | os.PathLike[str],
        x: Any = None,
        y: Any = None,
        *,
        weights: Any = None,
        by: Hashable | list[Hashable] | None = None,
        layout: Layout = "compact",
        names: tuple[Hashable, Hashable, Hashable] = ("x", "y", "weights"),
        tree: RangeTree | None = None,
        readonly: bool = False,
    ) -> GrowingTree:
        """A growing tree kept in `folder`: every append, delete, expiry and compaction is
        durable when it returns (``docs/growing-folder.md``).

        A folder without a growing tree is made one (its directory created) with the axes'
        dtypes `x` and `y` and the other arguments as for :class:`GrowingTree`, or from a
        static `tree` as :meth:`from_tree`; an existing one is opened as it is (those
        arguments are then not given). One writer at a time holds the folder (a second gets
        :class:`boxwood.FolderLockedError`); ``readonly=True`` opens a reader, which takes
        no lock, sees the state committed when it opened, and moves on with
        :meth:`refresh`. A process killed at any moment leaves the folder at its last
        completed change; files an interrupted change left are deleted when a writer
        opens it next.
        """
        path = os.fspath(folder)
        store = Folder(path, readonly)
        try:
            if store.exists():
                if x is not None or y is not None or tree is not None:
                    raise ValueError(
                        f"{path} holds a growing tree already: open it without x, y or tree"
                    )
                snap = store.read()
                return cls._made(store, _State(snap.schema, snap.segments, snap.next_id))
            if readonly:
                raise FileNotFoundError(f"{path} holds no growing tree (no {MANIFEST} file)")
            if tree is not None:
                out = cls.from_tree(tree)
            elif x is None or y is None:
                raise ValueError(f"{path} holds no growing tree: pass x and y (dtypes) to make one")
            else:
                out = cls(x, y, weights=weights, by=by, layout=layout, names=names)
            out._store = store
            out._commit(out._state)
            return out
        except BaseException:
            store.close()
            raise

    def refresh(self) -> None:
        """Move a reader on to the folder's latest committed state (a writer is always
        there already, its merges included once committed). Segments it holds already are
        kept, not read again."""
        if self._store is not None and self._store.readonly:
            self._adopt_snapshot(self._store.read(reuse=self._state.segments))

    def close(self) -> None:
        """Wait for the background merges to settle (every merge the policy asks for
        committed), then release the folder (a writer's lock); a tree in a folder takes no
        further changes. A failed merge's :class:`boxwood.MergeError` is raised here, after
        the folder is released."""
        try:
            self.wait_for_merges()
        finally:
            if self._store is not None:
                self._store.close()

    def wait_for_merges(self) -> None:
        """Return once the background merges have settled (no merge running, none left for
        the policy to start); raises :class:`boxwood.MergeError` if one failed."""
        with self._lock:
            self._merges.wait()
            self._merges.raise_failed()

    def __enter__(self) -> GrowingTree:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    @property
    def folder(self) -> str | None:
        """The folder the tree is kept in, or None for one in memory."""
        return None if self._store is None else self._store.path

    def _adopt_snapshot(self, snap: Snapshot) -> None:
        self._adopt(_State(snap.schema, snap.segments, snap.next_id))

    def _commit(self, state: _State) -> None:
        """Make `state` the tree's: durable first when the tree is kept in a folder."""
        if self._store is not None:
            snap = self._store.commit(state.schema, state.segments, state.next_id)
            state = _State(snap.schema, snap.segments, snap.next_id)
        self._state = state

    def _changing(self) -> _State:
        """The state a change starts from (called holding the lock); a reader refuses to
        change; a failed merge's error is raised first."""
        with self._lock:
            self._merges.raise_failed()
        if self._store is not None and self._store.readonly:
            raise ReadOnlyError(
                f"{self._store.path} was opened with readonly=True: it cannot change"
            )
        return self._state

    @classmethod
    def from_tree(cls, tree: RangeTree) -> GrowingTree:
        """A growing tree holding the rows of `tree`, with its axes, weights, keys and
        layout; the rows' ids are their rows in `tree` (positions in its source frame).
        The tree itself becomes the first segment, so nothing is rebuilt."""
        parts = tree._parts
        keys = parts.keys
        schema = Schema(
            parts.x,
            parts.y,
            parts.engine.weights_kind,
            None if keys is None else keys.names,
            tree.layout,  # type: ignore[arg-type]
            key_kinds=None if keys is None else tuple(c.kind for c in keys.columns),
        )
        source_rows = parts.provenance.source_rows
        ids = np.arange(len(tree), dtype=np.int64) if source_rows is None else source_rows
        next_id = len(tree) + tree.rows_dropped
        segments: tuple[Segment, ...] = ()
        if len(tree):
            segments = (Segment(tree, ids, np.zeros(0, np.int64), None),)
        return cls._made(
            None, _State(schema, segments, max(next_id, int(ids[-1]) + 1 if ids.size else 0))
        )

    def _adopt(self, state: _State) -> None:
        self._state = state
        self._empty = _answer.empty_tree(state.schema)

    def _answering(self) -> tuple[tuple[Segment, ...], RangeTree]:
        """The segments a query answers from (one committed state, read once) and the tree
        of no rows; a failed merge's error is raised first."""
        if self._merges.failed:
            with self._lock:
                self._merges.raise_failed()
        return self._state.segments, self._empty

    # ------------------------------------------------------------ merges

    def _start_merges(self) -> None:
        """Start merger threads for the runs the policy has to merge (called holding the
        lock). A tree in memory merges on daemon threads (its merges die with the process,
        as the tree does); a folder's mergers are waited for at exit, so their merges are
        committed."""
        self._merges.start(self._state.segments, self._merge_runs, daemon=self._store is None)

    def _merge_runs(self, lane: int, job: _merges.Job) -> None:
        """A merger thread: its lane's jobs in turn, each built and written without the
        lock and committed holding it, until the policy has none left for it."""
        store = self._store
        write = None if store is None else store.write_pending
        next_job: _merges.Job | None = job
        while next_job is not None:
            with self._lock:
                schema = self._state.schema
            seg: Segment | None = None
            try:
                seg = _merges.build(next_job, schema, write)
                with self._lock:
                    segs = _merges.committed(next_job, seg, self._state.segments, schema)
                    if segs is not None:
                        self._commit(dataclasses.replace(self._state, segments=segs))
                    next_job = self._merges.next_job(lane, self._state.segments)
            except BaseException as exc:  # raised by the tree's next call: never lost
                with self._lock:
                    self._merges.failed_job(lane, exc)
                return
            finally:
                if store is not None and seg is not None and seg.name is not None:
                    with self._lock:
                        named = any(s.name == seg.name for s in self._state.segments)
                        store.settled(seg.name, named=named)

    # ------------------------------------------------------------ changes

    def append(
        self,
        x: Any,
        y: Any = None,
        *,
        weights: Any = None,
        by: Any = None,
        on_missing: str = "raise",
    ) -> np.ndarray:
        """Add rows; returns their ids (int64, increasing, never used before).

        `x` and `y` are arrays, lists, Series or Arrow arrays; or `x` is a frame (a pandas
        DataFrame, an Arrow Table or RecordBatch, a polars DataFrame or LazyFrame) holding
        the columns the tree was named
        with (``names``, and the key columns of ``by``). A frame's missing values (null,
        NaN, NaT) raise naming column and row, or with ``on_missing="drop"`` their rows are
        left out (with a warning) and get no id. The rows form a new segment, merged with
        the newest ones as the policy says.
        """
        with self._lock:
            return self._append(x, y, weights, by, on_missing)

    def _append(self, x: Any, y: Any, weights: Any, by: Any, on_missing: str) -> np.ndarray:
        state = self._changing()
        schema = state.schema
        # A polars frame first: asking a LazyFrame for `columns` warns that it resolves
        # the schema.
        if y is None and (is_polars_frame(x) or hasattr(x, "columns")):
            x, y, weights, by = _input.from_frame(x, schema, on_missing)
        elif y is None:
            raise TypeError("append needs x and y, or one frame")
        cols, schema = _input.appended_columns(x, y, weights, by, schema, state.next_id)
        if len(cols) == 0:
            return cols.ids
        began = time.perf_counter()
        segments = (*state.segments, make_segment(cols, schema))
        self._commit(_State(schema, segments, state.next_id + len(cols)))
        self._start_merges()
        # Appends pay for the merges here, and only here: a little while merges run, more
        # as they fall behind, until a merge commits once crowded.
        took = time.perf_counter() - began
        self._merges.after_append(lambda: self._state.segments, len(cols), took)
        return cols.ids

    def delete(self, rows: Any) -> None:
        """Remove rows by id. An id that is not a live row (never given out, or deleted
        already, or given twice) raises ``KeyError`` naming it, and nothing changes."""
        with self._lock:
            self._delete(rows)

    def _delete(self, rows: Any) -> None:
        state = self._changing()
        ids = _ids(rows)
        if ids.size == 0:
            return
        unique, counts = sorted_unique(ids, return_counts=True)
        if (counts > 1).any():
            raise KeyError(f"row {int(unique[counts > 1][0])} is given twice")
        found = np.zeros(unique.size, dtype=bool)
        hits = []
        for seg in state.segments:
            mine = seg.holds(unique)
            found |= mine
            hits.append(unique[mine])
        if not found.all():
            raise KeyError(
                f"row {int(unique[~found][0])} is not a live row (never appended, deleted or "
                "expired)"
            )
        segments = [
            with_deleted(seg, hit, state.schema) if hit.size else seg
            for seg, hit in zip(state.segments, hits)
        ]
        self._commit(dataclasses.replace(state, segments=tuple(drop_empty(segments))))
        self._start_merges()

    def expire(self, x_before: Any) -> int:
        """Remove every row with x below `x_before` (a bound of the x axis's type, compared
        exactly); returns how many live rows went. Segments wholly below the bound are
        dropped without reading them; only those it cuts through are filtered."""
        with self._lock:
            return self._expire(x_before)

    def _expire(self, x_before: Any) -> int:
        state = self._changing()
        schema = state.schema
        out: list[Segment | None] = []
        removed = 0
        for seg in state.segments:
            lo, hi = seg.tree._parts.engine.x_extremes  # type: ignore[misc]
            below = strictly_below(np.array([lo, hi]), x_before, schema.x, "x_before")
            if below[1]:
                removed += seg.live
                continue
            if not below[0]:
                out.append(seg)
                continue
            cols = seg.columns(schema)
            cut = strictly_below(cols.x, x_before, schema.x, "x_before")
            gone = cols.ids[cut]
            if seg.dead.size:
                gone = gone[~np.isin(gone, seg.dead)]
            removed += gone.size
            out.append(with_deleted(seg, gone, schema) if gone.size else seg)
        if not state.segments:  # still check the bound
            strictly_below(np.zeros(0, np.float64), x_before, schema.x, "x_before")
        if removed or len(out) != len(state.segments):
            self._commit(dataclasses.replace(state, segments=tuple(drop_empty(out))))
            self._start_merges()
        return removed

    def compact(self) -> None:
        """Merge every segment into one, without the deleted rows, on the calling thread
        (after the running background merge, if any, has committed; no further one starts
        meanwhile)."""
        with self._lock:
            self._changing()
            self._merges.wait_held()
            try:
                self._merges.raise_failed()
                state = self._state
                if len(state.segments) > 1 or any(s.dead.size for s in state.segments):
                    one = merged(list(state.segments), state.schema)
                    self._commit(dataclasses.replace(state, segments=(one,) if one.live else ()))
            finally:
                self._merges.release()

    # ------------------------------------------------------------ frozen views

    def snapshot(self) -> GrowingSnapshot:
        """A frozen view of the rows the tree holds now: it answers every query as the tree
        answers it at this moment, whatever changes later, refuses changes, holds no folder
        and no lock, and pickles as its segments (so :func:`boxwood.dask.broadcast` takes
        it). Nothing is copied: segments never change once made, so they are shared."""
        return GrowingSnapshot._made(None, self._state)

    def to_tree(self) -> RangeTree:
        """One static :class:`boxwood.RangeTree` of the live rows, their ids its source rows
        (so its reports answer with ids), for what does not add up across segments (such as
        ``min``, ``max`` and ``quantile``): the one segment's own tree when it has no deleted
        rows, else built from the segments' columns; the growing tree is not changed. With
        no live rows, a tree of no rows (and no keys)."""
        segs = self._state.segments
        if not segs:
            return self._empty
        if len(segs) == 1 and segs[0].dead.size == 0:
            return segs[0].tree
        return merged(list(segs), self._state.schema).tree

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        """Pickled: the schema, the next id and each segment's trees and ids (trees pickle as
        their index bytes), never a folder or its lock. A tree in memory unpickles as a tree
        in memory that can change (a copy); a snapshot, and a tree kept in a folder (writer
        or reader), as a :class:`GrowingSnapshot` of the rows it held when pickled, not tied
        to the folder: open the folder again to change it or to see later changes."""
        state = self._state
        frozen = self._store is not None or isinstance(self, GrowingSnapshot)
        segments = tuple((s.tree, s.ids, s.dead, s.dead_tree) for s in state.segments)
        return (_unpickled, (PICKLE_VERSION, frozen, state.schema, state.next_id, segments))

    # ------------------------------------------------------------ description

    def __len__(self) -> int:
        return sum(s.live for s in self._state.segments)

    @property
    def segments(self) -> tuple[SegmentInfo, ...]:
        """The segments, oldest first: live rows, deleted rows, bytes."""
        return tuple(
            SegmentInfo(
                s.live,
                int(s.dead.size),
                s.tree.nbytes + (0 if s.dead_tree is None else s.dead_tree.nbytes),
            )
            for s in self._state.segments
        )

    @property
    def next_id(self) -> int:
        """The id the next appended row gets."""
        return self._state.next_id

    @property
    def x_dtype(self) -> np.dtype:
        return self._state.schema.x.dtype

    @property
    def y_dtype(self) -> np.dtype:
        return self._state.schema.y.dtype

    @property
    def weights_dtype(self) -> np.dtype | None:
        kind = self._state.schema.weights
        return None if kind is None else np.dtype(kind)

    @property
    def key_names(self) -> tuple[str, ...] | None:
        return self._state.schema.key_names

    @property
    def layout(self) -> str:
        return self._state.schema.layout

    @property
    def x_name(self) -> str:
        """The x column's name (``names`` when made): appended frames are read by it."""
        return self._state.schema.x.name

    @property
    def y_name(self) -> str:
        """The y column's name (``names`` when made): appended frames are read by it."""
        return self._state.schema.y.name

    @property
    def x_range(self) -> tuple[Any, Any] | None:
        """``(min, max)`` of the live rows' x in x's own type (None without live rows)."""
        return _answer.live_range(self._state.segments, self._state.schema, "x")

    @property
    def y_range(self) -> tuple[Any, Any] | None:
        """``(min, max)`` of the live rows' y in y's own type (None without live rows)."""
        return _answer.live_range(self._state.segments, self._state.schema, "y")

    @property
    def _schema(self) -> Schema:
        """The axes (with their time zones), weights, keys and layout, for boxwood's own
        modules (the command line), as a ``RangeTree``'s ``_parts``."""
        return self._state.schema

    def __repr__(self) -> str:
        s = self._state.schema
        return (
            f"GrowingTree(rows={len(self):,}, segments={len(self._state.segments)}, "
            f"x={s.x.dtype}, y={s.y.dtype}, weights={s.weights}, layout={s.layout!r})"
        )

    # ------------------------------------------------------------ queries

    @document_bounds
    def count(self, x_lo, x_hi, y_lo, y_hi, *, by=None, inclusive: Inclusive = "both"):
        """Live points in each box: an ``int`` for scalar bounds, else an int64 array.

        {array bounds}
        {by}
        """
        kw = _by(by, inclusive=inclusive)
        return _answer.total(*self._answering(), "count", x_lo, x_hi, y_lo, y_hi, **kw)

    @document_bounds
    def sum(self, x_lo, x_hi, y_lo, y_hi, *, by=None, inclusive: Inclusive = "both"):
        """Weight sum of the live points in each box (see :meth:`RangeTree.sum`).

        {array bounds}
        {by}
        """
        kw = _by(by, inclusive=inclusive)
        return _answer.total(*self._answering(), "sum", x_lo, x_hi, y_lo, y_hi, **kw)

    @document_bounds
    def report(
        self, x_lo, x_hi, y_lo, y_hi, *, by=None, inclusive: Inclusive = "both", ordered=True
    ) -> tuple[np.ndarray, np.ndarray]:
        """The live rows' ids in each box, as CSR ``(offsets, ids)`` (see
        :meth:`RangeTree.report`).

        {array bounds}
        {by}
        {ordered}
        """
        kw = _by(by, inclusive=inclusive, ordered=bool(ordered))
        return _answer.report(*self._answering(), (x_lo, x_hi, y_lo, y_hi), **kw)

    @document_bounds
    def pairs(
        self, x_lo, x_hi, y_lo, y_hi, *, by=None, inclusive: Inclusive = "both", ordered=True
    ) -> tuple[np.ndarray, np.ndarray]:
        """One ``(box, id)`` entry per match, as two int64 arrays.

        {array bounds}
        {by}
        {ordered}
        """
        offsets, rows = self.report(
            x_lo, x_hi, y_lo, y_hi, by=by, inclusive=inclusive, ordered=ordered
        )
        boxes = np.repeat(np.arange(offsets.size - 1, dtype=np.int64), np.diff(offsets))
        return boxes, rows

    def grid(self, x_edges: Any, y_edges: Any, *, by: Any = None, weighted: bool = False):
        """Live points (or their weight sum) per grid cell (see :meth:`RangeTree.grid`)."""
        kw = _by(by, weighted=weighted)
        return _answer.total(*self._answering(), "grid", x_edges, y_edges, **kw)

    @document_bounds
    def count_boxes(
        self,
        boxes,
        x_lo="x_lo",
        x_hi="x_hi",
        y_lo="y_lo",
        y_hi="y_hi",
        *,
        by=None,
        inclusive: Inclusive = "both",
    ):
        """Live points in each row of a DataFrame of boxes (see
        :meth:`RangeTree.count_boxes`).

        {frame bounds}
        {frame by}
        """
        from .._frame_kinds import frames_for

        return frames_for(boxes).count_boxes(
            self.count, boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, by
        )

    @document_bounds
    def sum_boxes(
        self,
        boxes,
        x_lo="x_lo",
        x_hi="x_hi",
        y_lo="y_lo",
        y_hi="y_hi",
        *,
        by=None,
        inclusive: Inclusive = "both",
    ):
        """Weight sum of each row of a DataFrame of boxes.

        {frame bounds}
        {frame by}
        """
        from .._frame_kinds import frames_for

        return frames_for(boxes).sum_boxes(self.sum, boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, by)

    @document_bounds
    def report_boxes(
        self,
        boxes,
        x_lo="x_lo",
        x_hi="x_hi",
        y_lo="y_lo",
        y_hi="y_hi",
        *,
        by=None,
        inclusive: Inclusive = "both",
        ordered=True,
    ):
        """One row per (box, live point) match: columns ``box`` (the box's index label) and
        ``row`` (the point's id).

        {frame bounds}
        {frame by}
        {ordered}
        """
        from .._frame_kinds import frames_for

        return frames_for(boxes).report_boxes(
            self.pairs, boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, ordered, by
        )

    @document_bounds
    def box_join(
        self,
        points,
        boxes,
        x_lo="x_lo",
        x_hi="x_hi",
        y_lo="y_lo",
        y_hi="y_hi",
        *,
        by=None,
        inclusive: Inclusive = "both",
        suffixes=("_point", "_box"),
        keep_index=False,
    ):
        """Every (box, live point) pair as one DataFrame, as :func:`boxwood.box_join` (an
        Arrow Table for Arrow tables, a polars DataFrame for polars frames).

        `points` is a frame whose row ``i`` is the row of id ``i``: every row appended
        so far, in order (deleted ones included; ``from_tree`` trees count their source
        frame's rows first). `by` names the boxes' key column(s).

        {frame bounds}
        """
        from ._join import join

        return join(
            self.pairs,
            points,
            boxes,
            (x_lo, x_hi, y_lo, y_hi),
            by,
            inclusive,
            suffixes,
            keep_index,
            self._state.next_id,
        )


class GrowingSnapshot(GrowingTree):
    """A frozen view of a growing tree's live rows (:meth:`GrowingTree.snapshot`): every
    query of :class:`GrowingTree`, answered for the rows the tree held when the snapshot
    was taken; every change raises :class:`boxwood.ReadOnlyError`. It holds no folder and
    no lock, and pickles as its segments' trees (for :func:`boxwood.dask.broadcast`)."""

    __slots__ = ()

    def _changing(self) -> _State:
        raise ReadOnlyError("a snapshot of a growing tree cannot change: change the tree itself")

    def __repr__(self) -> str:
        return "GrowingSnapshot" + super().__repr__().removeprefix("GrowingTree")


#: The version of a pickled growing tree's contents; unpickling refuses others.
PICKLE_VERSION = 1


def _unpickled(
    version: int, frozen: bool, schema: Schema, next_id: int, segments: tuple[tuple, ...]
) -> GrowingTree:
    """The tree that :meth:`GrowingTree.__reduce__` pickled."""
    if version != PICKLE_VERSION:
        raise UnsupportedFolderError(
            f"a growing tree pickled with contents version {version}; this boxwood reads "
            f"version {PICKLE_VERSION} (unpickle it with the boxwood that pickled it)"
        )
    parts = tuple(Segment(tree, ids, dead, dead_tree) for tree, ids, dead, dead_tree in segments)
    return (GrowingSnapshot if frozen else GrowingTree)._made(None, _State(schema, parts, next_id))


def _by(by: Any, **kw: Any) -> dict[str, Any]:
    if by is not None:
        kw["by"] = by
    return kw


def _ids(rows: Any) -> np.ndarray:
    arr = np.asarray(rows)
    if arr.dtype.kind not in "iu" and not (arr.size == 0):
        raise TypeError(f"row ids must be integers, got dtype {arr.dtype}")
    return arr.astype(np.int64).reshape(-1)
