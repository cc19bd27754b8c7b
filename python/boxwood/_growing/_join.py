"""A growing tree's box join: its live matches, carrying the points' and boxes' columns, in
the frames' own kind (pandas, Arrow or polars: the join side of :mod:`boxwood._join`)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, Callable

from .._frames import key_roles, naming_columns
from .._join import join_side


def join(
    pairs: Callable[..., Any],
    points: Any,
    boxes: Any,
    specs: Sequence[Any],
    by: Any,
    inclusive: Any,
    suffixes: tuple[str | None, str | None],
    keep_index: bool,
    next_id: int,
) -> Any:
    """One output row per (box, live point) pair: row ``id`` of `points`, then the box."""
    side = join_side(points)
    points = side.read(points, "points")
    boxes = side.read(boxes, "boxes")
    if side.rows(points) < next_id:
        raise ValueError(
            f"points has {side.rows(points)} rows but the growing tree has given out ids up to "
            f"{next_id - 1}: pass every row appended so far, in order"
        )
    bounds, names = side.bounds(boxes, specs)
    keys = side.keys(boxes, by)
    with naming_columns(names):
        box, rows = pairs(*bounds, inclusive=inclusive, **({} if keys is None else {"by": keys}))
    if box.size and box.max() >= side.rows(boxes):
        raise AssertionError("one box per boxes row")
    if by is not None:  # the key once: the points' key columns stay
        boxes = side.drop(boxes, list(key_roles(by).values()))
    left, right = side.sides(points, boxes, suffixes, keep_index)
    return side.joined(left, right, rows, box, 0)
