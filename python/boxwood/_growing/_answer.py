"""Answers over a snapshot of segments: each segment's answer minus its deleted rows'.

Counts and integer sums of deleted rows are subtracted exactly; float sums carry the
rounding of one more sum (that of the deleted rows). Reports drop deleted ids and keep each
box's rows ascending: segments hold consecutive id ranges, oldest first.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from .._columns import axis_value
from .._tree import RangeTree
from ._segments import Columns, Schema, Segment, build_tree

_I64_MIN, _I64_MAX = -(2**63), 2**63 - 1


def total(segs: tuple[Segment, ...], empty: RangeTree, method: str, *args: Any, **kw: Any) -> Any:
    """The sum over segments of ``tree.<method>(...)`` (count, sum, grid), deleted rows
    taken away; `empty` (a tree of no rows) answers when there are no segments."""
    if not segs:
        return _nothing(empty, method, args, kw)
    out: Any = None
    for seg in segs:
        part = getattr(seg.tree, method)(*args, **kw)
        if seg.dead_tree is not None:
            part = _checked(part, getattr(seg.dead_tree, method)(*args, **kw), subtract=True)
        out = part if out is None else _checked(out, part)
    return out


def _checked(a: Any, b: Any, subtract: bool = False) -> Any:
    """``a + b`` (or ``a - b``), refusing an int64 answer that wraps."""
    if isinstance(a, np.ndarray) and a.dtype == np.int64:
        out = a - b if subtract else a + b
        same = (a >= 0) == ((b < 0) if subtract else (b >= 0))
        wrapped = same & ((out >= 0) != (a >= 0))
        if wrapped.any():
            raise OverflowError("an integer weight sum does not fit in int64")
        return out
    out = a - b if subtract else a + b
    if isinstance(out, int) and not _I64_MIN <= out <= _I64_MAX:
        raise OverflowError("an integer weight sum does not fit in int64")
    return out


def _nothing(empty: RangeTree, method: str, args: tuple, kw: dict) -> Any:
    """The answer of a tree of no rows: an unkeyed empty tree's, broadcast with the keys'
    shape for a keyed one (whose keys' types no row has fixed yet)."""
    by = kw.pop("by", None)
    answer = getattr(empty, method)(*args, **kw)
    if by is None:
        return answer
    key_shape = _key_shape(by)
    if method == "grid":
        return np.zeros(key_shape + np.shape(answer), dtype=np.asarray(answer).dtype)
    shape = np.broadcast_shapes(np.shape(answer), key_shape)
    if shape == ():
        return answer
    return np.broadcast_to(np.asarray(answer), shape).copy()


def report(
    segs: tuple[Segment, ...], empty: RangeTree, box: tuple, **kw: Any
) -> tuple[np.ndarray, np.ndarray]:
    """Each box's live rows (stable ids) as CSR, ascending within a box when ordered."""
    if not segs:
        offsets, rows = _nothing_reported(empty, box, kw)
        return offsets, rows
    boxes_of, rows_of = [], []
    n_boxes = 0
    for seg in segs:
        offsets, rows = seg.tree.report(*box, **kw)
        n_boxes = offsets.size - 1
        if len(segs) == 1 and seg.dead.size == 0:
            return offsets, rows
        which = np.repeat(np.arange(n_boxes, dtype=np.int64), np.diff(offsets))
        if seg.dead.size:
            keep = ~np.isin(rows, seg.dead)
            which, rows = which[keep], rows[keep]
        boxes_of.append(which)
        rows_of.append(rows)
    which = np.concatenate(boxes_of)
    order = np.argsort(which, kind="stable")  # segment order within a box: ids ascend
    counts = np.bincount(which, minlength=n_boxes)
    offsets = np.concatenate(([0], np.cumsum(counts))).astype(np.int64)
    return offsets, np.concatenate(rows_of)[order]


def _nothing_reported(empty: RangeTree, box: tuple, kw: dict) -> tuple[np.ndarray, np.ndarray]:
    by = kw.pop("by", None)
    offsets, rows = empty.report(*box, **kw)
    if by is None:
        return offsets, rows
    shape = np.broadcast_shapes(*(np.shape(b) for b in box), _key_shape(by))
    return np.zeros(int(np.prod(shape)) + 1, dtype=np.int64), rows


def _key_shape(by: Any) -> tuple[int, ...]:
    return np.broadcast_shapes(*(np.shape(k) for k in (by if isinstance(by, tuple) else (by,))))


def empty_tree(schema: Schema) -> RangeTree:
    """A tree of no rows with the schema's axes and weights, keys left out."""
    dtype = {"float": np.float64}.get(schema.x.kind, np.int64)
    x = np.zeros(0, dtype=dtype)
    y = np.zeros(0, dtype={"float": np.float64}.get(schema.y.kind, np.int64))
    w = None if schema.weights is None else np.zeros(0, dtype=schema.weights)
    unkeyed = dataclasses.replace(schema, key_names=None)
    return build_tree(Columns(x, y, w, None, np.zeros(0, np.int64)), unkeyed)


def live_range(segs: tuple[Segment, ...], schema: Schema, axis: str) -> tuple[Any, Any] | None:
    """``(min, max)`` of one axis over the live rows, in the axis's own type: a segment's
    tree's extremes when it has no deleted rows, else its live columns' (deleted rows may
    hold the extremes)."""
    lows, highs = [], []
    for seg in segs:
        if seg.dead.size == 0:
            engine = seg.tree._parts.engine
            lo, hi = engine.x_extremes if axis == "x" else engine.y_extremes  # type: ignore[misc]
        else:
            cols = seg.live_columns(schema)
            values = cols.x if axis == "x" else cols.y
            lo, hi = values.min(), values.max()
        lows.append(lo)
        highs.append(hi)
    if not lows:
        return None
    info = schema.x if axis == "x" else schema.y
    return axis_value(info, min(lows)), axis_value(info, max(highs))
