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
    taken away; `empty` (a tree of no rows) answers when there are no segments.

    Integer sums are exact: only the live rows' total must fit in int64, not a segment's
    total with its deleted rows, nor a segment's share of it (``OverflowError`` otherwise).
    """
    if not segs:
        return _nothing(empty, method, args, kw)
    parts = [_segment_part(seg, method, args, kw) for seg in segs]
    try:
        out = parts[0]
        for part in parts[1:]:
            out = _checked(out, part)
        return _fitted(out)
    except OverflowError:
        if method != "sum":
            raise
    return _fitted(sum(_as_python_ints(p) for p in parts))  # exact, the slow way


def _segment_part(seg: Segment, method: str, args: tuple, kw: dict) -> Any:
    """One segment's answer less its deleted rows'. A segment whose integer sum passes int64
    (its deleted rows' included) answers its live rows' sums exactly as Python ints."""
    try:
        part = getattr(seg.tree, method)(*args, **kw)
        if seg.dead_tree is not None:
            part = _checked(part, getattr(seg.dead_tree, method)(*args, **kw), subtract=True)
        return part
    except OverflowError:
        if method != "sum":
            raise
    return _live_sums_exactly(seg, args, kw)


def _live_sums_exactly(seg: Segment, args: tuple, kw: dict) -> Any:
    """The live rows' integer weight sum of each box as Python ints (a scalar box: one int;
    else an object array of the boxes' shape), added up from the box's reported rows."""
    offsets, rows = seg.tree.report(*args, **kw, ordered=False)
    weights = seg.tree._parts.engine.columns()[2]
    assert weights is not None, "only trees with weights sum"
    taken = weights[np.searchsorted(seg.ids, rows)].astype(object)
    if seg.dead.size:
        taken[np.isin(rows, seg.dead)] = 0
    sums = np.array([sum(taken[a:b], 0) for a, b in zip(offsets[:-1], offsets[1:])], object)
    shape = np.broadcast_shapes(*(np.shape(b) for b in args), _key_shape(kw.get("by")))
    return int(sums[0]) if shape == () else sums.reshape(shape)


def _is_exact(part: Any) -> bool:
    """An answer held as Python ints (an object array), added without a range check."""
    return isinstance(part, np.ndarray) and part.dtype == object


def _as_python_ints(part: Any) -> Any:
    return part.astype(object) if isinstance(part, np.ndarray) else int(part)


def _fitted(out: Any) -> Any:
    """An answer back in the caller's type: object (Python int) arrays as int64, refusing
    a sum that does not fit."""
    if isinstance(out, np.ndarray) and out.dtype == object:
        for position, value in enumerate(out.flat):
            if not _I64_MIN <= value <= _I64_MAX:
                raise OverflowError(f"the weight sum of box {position} does not fit in int64")
        return out.astype(np.int64)
    if isinstance(out, int) and not isinstance(out, bool) and not _I64_MIN <= out <= _I64_MAX:
        raise OverflowError("the weight sum of the box does not fit in int64")
    return out


def _checked(a: Any, b: Any, subtract: bool = False) -> Any:
    """``a + b`` (or ``a - b``), refusing an int64 answer that wraps."""
    if _is_exact(a) or _is_exact(b):
        return a - b if subtract else a + b
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
