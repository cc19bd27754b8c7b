"""A growing tree's box join: its live matches, carrying the points' and boxes' columns."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, Callable

from .._frames import box_bounds, box_keys, key_roles, naming_columns, pandas, require_frame
from .._join import output_sides


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
    require_frame(points, "points")
    require_frame(boxes, "boxes")
    if len(points) < next_id:
        raise ValueError(
            f"points has {len(points)} rows but the growing tree has given out ids up to "
            f"{next_id - 1}: pass every row appended so far, in order"
        )
    bounds, names = box_bounds(boxes, specs)
    keys = box_keys(boxes, by)
    with naming_columns(names):
        box, rows = pairs(*bounds, inclusive=inclusive, **({} if keys is None else {"by": keys}))
    if by is not None:  # the key once: the points' key columns stay
        boxes = boxes.drop(columns=list(key_roles(by).values()))
    left_side, right_side = output_sides(points, boxes, suffixes, keep_index)
    pd = pandas()
    if box.size != len(boxes) and box.size and box.max() >= len(boxes):
        raise AssertionError("one box per boxes row")
    left = left_side.iloc[rows].reset_index(drop=True)
    right = right_side.iloc[box].reset_index(drop=True)
    out = pd.concat([left, right], axis=1)
    out.index = pd.RangeIndex(0, rows.size)
    return out
