"""Box joins: one output row per (box, point) match, carrying both frames' columns.

>>> import pandas as pd, boxwood
>>> trips = pd.DataFrame({"start": [0.0, 10.0, 25.0], "minutes": [12, 5, 8],
...                       "bike": ["B1", "B2", "B1"]})
>>> zones = pd.DataFrame({"x_lo": [0, 20], "x_hi": [15, 30], "y_lo": [0, 0], "y_hi": [10, 10],
...                       "zone": ["morning short", "noon short"]})
>>> boxwood.box_join(trips, zones, x="start", y="minutes")
   start  minutes bike  x_lo  x_hi  y_lo  y_hi           zone
0   10.0        5   B2     0    15     0    10  morning short
1   25.0        8   B1    20    30     0    10     noon short

:func:`box_join_chunks` yields the same rows as DataFrames of at most ``max_rows`` rows, planned
from the boxes' counts, so a join of billions of matches never sits in memory at once.
"""

from __future__ import annotations

import math
from collections.abc import Hashable, Iterator, Sequence
from typing import Any, Callable

import numpy as np

from . import _arrow_frames, _bounds, _polars_frames
from ._arrow_frames import ArrowJoinSide
from ._bounds import Inclusive, document_bounds
from ._columns import coordinate_column
from ._fingerprint import mismatch
from ._frame_kinds import frames_for
from ._frames import (
    box_bounds,
    box_keys,
    column_values,
    frame_parts,
    joined_names,
    key_roles,
    naming_columns,
    pandas,
    require_frame,
)
from ._parts import Layout
from ._polars_frames import PolarsJoinSide
from ._sets import sorted_unique
from ._tree import RangeTree

#: Engine bounds of one box: (x_lo, x_hi, y_lo, y_hi) as Python ints or floats.
_Box = list

DEFAULT_MAX_ROWS = 1_000_000
#: The layout of the tree a join builds for itself when given none: fast, since a join is a
#: report of many rows (benches/bench_layout.py measures both).
JOIN_LAYOUT: Layout = "fast"


@document_bounds
def box_join(
    points: Any,
    boxes: Any,
    *,
    x: Hashable,
    y: Hashable,
    x_lo: Any = "x_lo",
    x_hi: Any = "x_hi",
    y_lo: Any = "y_lo",
    y_hi: Any = "y_hi",
    inclusive: Inclusive = "both",
    suffixes: tuple[str | None, str | None] = ("_point", "_box"),
    keep_index: bool = False,
    tree: RangeTree | None = None,
    on_missing: str = "raise",
    check_memory: bool = True,
    by: Hashable | list[Hashable] | None = None,
    points_by: Hashable | list[Hashable] | None = None,
    boxes_by: Hashable | list[Hashable] | None = None,
) -> Any:
    """Every (box, point) pair with the point inside the box, as one DataFrame.

    The result has the points' columns, then the boxes' columns; a column name on both
    sides gets ``suffixes[0]`` on the points' side and ``suffixes[1]`` on the boxes' side
    (``None`` keeps that side's name). Dtypes, categoricals included, are kept. Rows come
    in box order and, within a box, in the points' order; the index is a fresh
    ``RangeIndex``. With ``keep_index=True`` each frame's index is carried as columns
    first, named as ``DataFrame.reset_index`` names them (``"index"`` when unnamed, so
    ``"index_point"`` and ``"index_box"`` by default).

    `x` and `y` name the points' coordinate columns; pass `tree` (built from `points`,
    e.g. with :meth:`RangeTree.from_frame`) to reuse a tree across joins. Points with NaN,
    NaT or NA coordinates raise unless ``on_missing="drop"``; boxes with a missing bound
    always raise. ``check_memory=False`` builds that tree past the memory estimate, as for
    :class:`RangeTree`.

    Keys: `by` names a key column (a list of labels for several) of both frames, or
    `points_by` and `boxes_by` name them in each: a box then joins only the points of its own
    key (a keyed `tree` must be built with ``by=`` from the points' key columns). The joined
    frame carries the key once, as the points' key columns.

    {frame bounds}
    """
    join = _Join(
        points,
        boxes,
        x,
        y,
        (x_lo, x_hi, y_lo, y_hi),
        inclusive,
        suffixes,
        keep_index,
        tree,
        on_missing,
        check_memory,
        key_sides(by, points_by, boxes_by),
    )
    return join.frame(*join.all_pairs(), start=0)


@document_bounds
def box_join_chunks(
    points: Any,
    boxes: Any,
    *,
    x: Hashable,
    y: Hashable,
    x_lo: Any = "x_lo",
    x_hi: Any = "x_hi",
    y_lo: Any = "y_lo",
    y_hi: Any = "y_hi",
    inclusive: Inclusive = "both",
    suffixes: tuple[str | None, str | None] = ("_point", "_box"),
    keep_index: bool = False,
    tree: RangeTree | None = None,
    on_missing: str = "raise",
    max_rows: int = DEFAULT_MAX_ROWS,
    check_memory: bool = True,
    by: Hashable | list[Hashable] | None = None,
    points_by: Hashable | list[Hashable] | None = None,
    boxes_by: Hashable | list[Hashable] | None = None,
) -> Iterator[Any]:
    """:func:`box_join` as an iterator of DataFrames of at most `max_rows` rows each.

    Arguments are checked when this is called, before any chunk. The chunks' rows, in
    order, are the rows of :func:`box_join`, and their indexes continue one another, so
    ``pd.concat(chunks)`` equals the whole join; the only difference is inside a box with
    more than `max_rows` matches, which is cut into pieces along x (then y), each in the
    points' order. Boxes are counted first (O(log n) each) to plan the chunks, so only one
    chunk's row ids are in memory at a time; a piece can hold more than `max_rows` row ids
    (still yielded in frames of at most `max_rows` rows) only when more than `max_rows`
    points of one box share one exact (x, y) position. A join without matches yields one
    empty frame with the result's columns and dtypes. Keys (`by`, `points_by`, `boxes_by`)
    as for :func:`box_join`.

    {frame bounds}
    """
    if isinstance(max_rows, bool) or not isinstance(max_rows, (int, np.integer)) or max_rows < 1:
        raise ValueError(f"max_rows must be a positive integer, got {max_rows!r}")
    join = _Join(
        points,
        boxes,
        x,
        y,
        (x_lo, x_hi, y_lo, y_hi),
        inclusive,
        suffixes,
        keep_index,
        tree,
        on_missing,
        check_memory,
        key_sides(by, points_by, boxes_by),
    )
    return join.chunks(int(max_rows))


class _Join:
    """One planned join: the tree, the boxes' engine bounds and the output's columns."""

    def __init__(
        self,
        points: Any,
        boxes: Any,
        x: Hashable,
        y: Hashable,
        specs: Sequence[Any],
        inclusive: Inclusive,
        suffixes: tuple[str | None, str | None],
        keep_index: bool,
        tree: RangeTree | None,
        on_missing: str,
        check_memory: bool,
        keys: tuple[Any, Any] = (None, None),
    ) -> None:
        side = join_side(points)
        self.side = side
        points = side.read(points, "points")
        boxes = side.read(boxes, "boxes")
        points_by, boxes_by = keys
        if tree is None:
            parts = side.parts(
                points,
                x,
                y,
                None,
                layout=JOIN_LAYOUT,
                on_missing=on_missing,
                check_memory=check_memory,
                by=points_by,
            )
            tree = RangeTree._from_parts(parts)
        _check_tree_fits(tree, side, points, x, y)
        check_key_names(tree.key_names, points_by)
        self.parts = tree._parts
        self.engine = self.parts.engine
        self.inclusive = inclusive
        self.points_frame = points
        self.axes = (x, y)
        bounds, names = side.bounds(boxes, specs)
        with naming_columns(names):
            self.bounds = _bounds.per_box_arrays(
                self.parts.x, self.parts.y, bounds, inclusive, side.rows(boxes)
            )
        # The boxes' key codes (None without keys); -1 for keys the tree does not hold.
        self.codes: np.ndarray | None = None
        if boxes_by is not None and tree._keys is not None:
            self.codes = np.ascontiguousarray(
                tree._keys.codes_of(side.keys(boxes, boxes_by)), dtype=np.int64
            )
            # The key once: the points' key columns stay, the boxes' are left out.
            boxes = side.drop(boxes, list(key_roles(boxes_by).values()))
        self.points, self.boxes = side.sides(points, boxes, suffixes, keep_index)
        self._distinct: dict[int, np.ndarray] = {}
        self._code: int | None = None  # the key code of the box being split

    # ------------------------------------------------------------ matches

    def all_pairs(self) -> tuple[np.ndarray, np.ndarray]:
        return self._report(self.bounds, first_box=0)

    def _codes_of(self, first: int, end: int) -> np.ndarray | None:
        return None if self.codes is None else self.codes[first:end]

    def _report(
        self, bounds: Sequence[np.ndarray], first_box: int
    ) -> tuple[np.ndarray, np.ndarray]:
        """``(box positions, point positions)`` of every match of these boxes, box by box,
        each box's points ascending."""
        x_lo, x_hi, y_lo, y_hi = bounds
        codes = self._codes_of(first_box, first_box + x_lo.size)
        offsets, rows = self.engine.report_many(x_lo, x_hi, y_lo, y_hi, self.inclusive, True, codes)
        box = np.repeat(np.arange(offsets.size - 1, dtype=np.int64), np.diff(offsets))
        source_rows = self.parts.provenance.source_rows
        if source_rows is not None:
            rows = source_rows[rows]
        return box + first_box, rows

    def chunks(self, max_rows: int) -> Iterator[Any]:
        start = 0
        for box, rows in self._pair_chunks(max_rows):
            for cut in range(0, rows.size, max_rows):
                piece = slice(cut, cut + max_rows)
                yield self.frame(box[piece], rows[piece], start=start)
                start += rows[piece].size
        if start == 0:
            yield self.frame(np.zeros(0, np.int64), np.zeros(0, np.int64), start=0)

    def _pair_chunks(self, max_rows: int) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """Matches in box order, in groups of at most `max_rows` (bar exact pile-ups)."""
        x_lo, x_hi, y_lo, y_hi = self.bounds
        counts = self.engine.count_many(
            x_lo, x_hi, y_lo, y_hi, self.inclusive, self._codes_of(0, x_lo.size)
        )
        total = np.concatenate(([0], np.cumsum(counts)))
        first = 0
        while first < counts.size:
            # The most boxes from `first` on whose matches fit in one chunk.
            end = int(np.searchsorted(total, total[first] + max_rows, side="right")) - 1
            if end > first:
                if total[end] > total[first]:
                    yield self._report([b[first:end] for b in self.bounds], first_box=first)
                first = end
            else:
                yield from self._split_box(first, max_rows)
                first += 1

    # ------------------------------------------------------------ boxes too big for a chunk

    def _split_box(self, index: int, max_rows: int) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        box = [b[index].item() for b in self.bounds]
        self._code = None if self.codes is None else int(self.codes[index])
        for piece in self._pieces(box, axis=0, max_rows=max_rows):
            bounds = [
                np.array([v], dtype=np.int64 if isinstance(v, int) else np.float64) for v in piece
            ]
            yield self._report(bounds, first_box=index)

    def _pieces(self, box: _Box, axis: int, max_rows: int) -> Iterator[_Box]:
        """Boxes that split `box` along `axis` at point coordinates, each with at most
        `max_rows` points, except one-coordinate slabs, which are split along the other
        axis (or returned whole when that is already done)."""
        lo_closed, hi_closed = _closed_sides(self.inclusive)
        values = self._inside(box, axis)
        lo_at, hi_at = 2 * axis, 2 * axis + 1

        def up_to(lower: Any, at: int) -> _Box:
            """`box` with this lower bound and upper bound 'coordinate <= values[at]'."""
            piece = list(box)
            piece[lo_at] = lower
            upper = values[at]
            piece[hi_at] = upper if hi_closed else self._next(axis, upper)
            return piece

        def fitting_from(lower: Any) -> Callable[[int], bool]:
            return lambda at: self._count(up_to(lower, at)) <= max_rows

        lower, first = box[lo_at], 0
        while first < len(values):
            fits = _last_true(first, len(values), fitting_from(lower))
            if fits is None:  # one coordinate value alone holds too many points
                slab = up_to(lower, first)
                if axis == 0:
                    yield from self._pieces(slab, axis=1, max_rows=max_rows)
                else:
                    yield slab
                fits = first
            elif fits == len(values) - 1:
                piece = list(box)
                piece[lo_at] = lower
                yield piece
                return
            else:
                yield up_to(lower, fits)
            done = values[fits]
            lower = self._next(axis, done) if lo_closed else done
            first = fits + 1

    def _count(self, box: _Box) -> int:
        x_lo, x_hi, y_lo, y_hi = box
        return self.engine.count_one(x_lo, x_hi, y_lo, y_hi, self.inclusive, self._code)

    def _next(self, axis: int, value: Any) -> Any:
        """The smallest value of the axis's domain above `value` (a point coordinate
        that is not the largest, so it exists)."""
        domain = self.engine.x_domain if axis == 0 else self.engine.y_domain
        return value + 1 if domain == "int64" else math.nextafter(value, math.inf)

    def _inside(self, box: _Box, axis: int) -> list:
        """The distinct point coordinates on `axis` that lie within `box`'s bounds on it,
        ascending, as Python numbers (compared exactly, as the engine compares)."""
        values = self._distinct_values(axis)
        lo, hi = box[2 * axis], box[2 * axis + 1]
        lo_closed, hi_closed = _closed_sides(self.inclusive)

        def above_lo(i: int) -> bool:
            v = values[i].item()  # a Python number: compares exactly with an int or a float
            return v >= lo if lo_closed else v > lo

        def above_hi(i: int) -> bool:
            v = values[i].item()
            return v > hi if hi_closed else v >= hi

        first = _first_true(0, values.size, above_lo)
        end = _first_true(first, values.size, above_hi)
        return values[first:end].tolist()

    def _distinct_values(self, axis: int) -> np.ndarray:
        if axis not in self._distinct:
            values, missing = self.side.coordinate(self.points_frame, self.axes[axis])
            kept = values[~missing] if isinstance(values, np.ndarray) else values[~missing]
            engine, _ = coordinate_column(kept, "xy"[axis])
            self._distinct[axis] = sorted_unique(engine)
        return self._distinct[axis]

    # ------------------------------------------------------------ output

    def frame(self, box: np.ndarray, rows: np.ndarray, start: int) -> Any:
        return self.side.joined(self.points, self.boxes, rows, box, start)


def join_side(points: Any) -> Any:
    """What a join does with frames of the kind of `points` (:mod:`boxwood._frame_kinds`)."""
    kind = frames_for(points)
    if kind is _polars_frames:
        return PolarsJoinSide
    return ArrowJoinSide if kind is _arrow_frames else PandasJoinSide


class PandasJoinSide:
    """What a join does with pandas frames (``ArrowJoinSide`` does it with Arrow tables,
    ``PolarsJoinSide`` with polars frames)."""

    @staticmethod
    def read(frame: Any, what: str) -> Any:
        require_frame(frame, what)
        return frame

    parts = staticmethod(frame_parts)
    bounds = staticmethod(box_bounds)
    keys = staticmethod(box_keys)

    @staticmethod
    def rows(frame: Any) -> int:
        return len(frame)

    @staticmethod
    def drop(frame: Any, columns: list[Hashable]) -> Any:
        return frame.drop(columns=columns)

    @staticmethod
    def sides(points: Any, boxes: Any, suffixes: Any, keep_index: bool) -> tuple[Any, Any]:
        return output_sides(points, boxes, suffixes, keep_index)

    @staticmethod
    def coordinate(frame: Any, column: Hashable) -> tuple[Any, np.ndarray]:
        return column_values(frame[column])

    @staticmethod
    def joined(points: Any, boxes: Any, rows: np.ndarray, box: np.ndarray, start: int) -> Any:
        """Rows `rows` of the points beside rows `box` of the boxes, indexed from `start`."""
        pd = pandas()
        left = points.iloc[rows].reset_index(drop=True)
        right = boxes.iloc[box].reset_index(drop=True)
        out = pd.concat([left, right], axis=1)
        out.index = pd.RangeIndex(start, start + rows.size)
        return out


def _check_tree_fits(tree: RangeTree, side: Any, points: Any, x: Hashable, y: Hashable) -> None:
    """Refuse a tree that was not built from columns `x`, `y` of `points` (its rows, and
    for a tree built from a frame or an Arrow table its column names, dtypes and sampled
    values)."""
    rows = len(tree) + tree.rows_dropped
    why = None
    if rows != side.rows(points):
        why = f"tree was built from {rows} rows but points has {side.rows(points)}"
    elif tree._parts.provenance.columns is not None:
        why = mismatch(tree._parts.provenance.columns, points, x, y)
    if why is not None:
        raise ValueError(
            f"{why}; pass the frame and columns the tree was built from (or leave tree=None "
            "to build one)"
        )


def key_sides(by: Any, points_by: Any, boxes_by: Any) -> tuple[Any, Any]:
    """The points' and the boxes' key columns: `by` for both, or each named apart."""
    if by is not None and (points_by is not None or boxes_by is not None):
        raise ValueError(
            "pass by= (the same key columns in both frames) or points_by= and boxes_by=, not both"
        )
    if by is not None:
        return by, by
    if (points_by is None) != (boxes_by is None):
        raise ValueError("points_by= and boxes_by= go together: name the key columns of both")
    if points_by is not None and len(key_roles(points_by)) != len(key_roles(boxes_by)):
        raise ValueError("points_by= and boxes_by= must name as many key columns")
    return points_by, boxes_by


def check_key_names(have: tuple[str, ...] | None, points_by: Any) -> None:
    """A keyed join needs a tree keyed by the points' key columns (`have`, the tree's key
    names), an unkeyed one none."""
    names = None if points_by is None else tuple(str(c) for c in key_roles(points_by).values())
    if names != have:
        had = "no keys" if have is None else f"keys {', '.join(have)}"
        want = "no keys" if names is None else f"keys {', '.join(names)}"
        raise ValueError(
            f"tree was built with {had} but the join asks for {want}; build the tree with "
            "by= on the points' key columns"
        )


def _closed_sides(inclusive: str) -> tuple[bool, bool]:
    _bounds.check_inclusive(inclusive)
    return inclusive in ("both", "left"), inclusive in ("both", "right")


def _first_true(lo: int, hi: int, predicate: Callable[[int], bool]) -> int:
    """The first index in [lo, hi) where a monotone (False..., True...) predicate holds,
    else hi."""
    while lo < hi:
        mid = (lo + hi) // 2
        if predicate(mid):
            hi = mid
        else:
            lo = mid + 1
    return lo


def _last_true(lo: int, hi: int, predicate: Callable[[int], bool]) -> int | None:
    """The last index in [lo, hi) where a monotone (True..., False...) predicate holds."""
    end = _first_true(lo, hi, lambda i: not predicate(i))
    return None if end == lo else end - 1


def output_sides(
    points: Any, boxes: Any, suffixes: tuple[str | None, str | None], keep_index: bool
) -> tuple[Any, Any]:
    """Both frames with the columns the result carries, clashing names suffixed."""
    sides = []
    for frame, what in ((points, "points"), (boxes, "boxes")):
        if keep_index:
            try:
                frame = frame.reset_index()
            except ValueError as exc:
                raise ValueError(
                    f"keep_index=True: the {what} index cannot become a column ({exc}); "
                    "rename the index or the column"
                ) from None
        sides.append(frame)
    left, right = sides
    renames = joined_names(list(left.columns), list(right.columns), suffixes)
    return left.rename(columns=renames[0]), right.rename(columns=renames[1])
