"""``boxwood join``: one row per (box, point) match, written piece by piece."""

from __future__ import annotations

import argparse
from collections.abc import Iterator
from typing import Any

import numpy as np

from .._join import JOIN_LAYOUT
from . import _exits, _sources, _tables
from ._exits import UsageError
from ._output import counted, note, prepare_output, shown_path
from ._progress import Progress
from ._sources import batched, key_columns, keys_of, open_source, read_box_keys, read_boxes, rows_of

#: Matched (box, point) pairs per piece of a join written out, to bound memory.
JOIN_ROWS_PER_PIECE = 1 << 21
#: Suffixes for a column name that both the points and the boxes files have, in a join:
#: the points' side first, as in boxwood.box_join.
JOIN_SUFFIXES = ("_point", "_box")


def run_join(args: argparse.Namespace) -> int:
    """One row per match, written piece by piece, so the join never sits in memory whole."""
    prepare_output(args, args.output)
    carry = ["*"] if args.point_columns is None else _split_names(args.point_columns)
    # A tree built for this join alone is built as box_join builds its own (JOIN_LAYOUT).
    source = open_source(args, carry=carry, layout=JOIN_LAYOUT)
    tree = source.tree
    boxes, bounds = read_boxes(args, tree)
    keys = read_box_keys(args, tree)
    counts = batched(args, "count", tree.count, bounds, boxes.num_rows, keys=keys)
    total = int(counts.sum())
    points = None
    if source.points is not None:
        keep = source.points.column_names if carry == ["*"] else carry
        points = source.points.select(keep)
    if keys is not None:
        # The key once: from the points' columns where they carry it, else the boxes'.
        carried = points.column_names if points is not None else []
        boxes = boxes.drop_columns([c for c in key_columns(args) if c in carried])
    empty = np.zeros(0, dtype=np.int64)
    schema = _joined(points, boxes, empty, empty).schema
    progress = Progress("join", total=total, unit="matches", enabled=not args.quiet)
    with _tables.TableWriter(args.output, schema) as out, progress:
        for start, stop in join_pieces(counts, JOIN_ROWS_PER_PIECE):
            piece = [rows_of(bound, start, stop) for bound in bounds]
            by = {} if keys is None else {"by": keys_of(keys, start, stop)}
            box, row = tree.pairs(*piece, inclusive=args.inclusive, ordered=True, **by)
            out.write(_joined(points, boxes, row, box + start))
            progress.advance(box.size)
    written = f"{counted(total, 'match', 'matches')} of {counted(boxes.num_rows, 'box', 'boxes')}"
    note(args, f"wrote {written} to {shown_path(args.output)}")
    return _exits.OK


def join_pieces(counts: np.ndarray, limit: int) -> Iterator[tuple[int, int]]:
    """Runs ``[start, stop)`` of boxes with about ``limit`` matches each (at least one box)."""
    ends = np.cumsum(counts)
    start = 0
    while start < counts.size:
        before = int(ends[start - 1]) if start else 0
        stop = int(np.searchsorted(ends, before + limit, side="right"))
        stop = min(max(stop, start + 1), start + _sources.BOXES_PER_CALL)
        yield start, stop
        start = stop


def _joined(points: Any, boxes: Any, point_row: np.ndarray, box: np.ndarray) -> Any:
    """The table of matches, in box_join's column order: point_row, the points' columns,
    box_row, the boxes' columns (a name on both sides suffixed as JOIN_SUFFIXES says)."""
    pa = _tables.pyarrow()
    point_side = {"point_row": pa.array(point_row, pa.int64())}
    if points is not None:
        for name in points.column_names:
            point_side[name] = points.column(name).take(pa.array(point_row, pa.int64()))
    box_side = {"box_row": pa.array(box, pa.int64())}
    for name in boxes.column_names:
        box_side[name] = boxes.column(name).take(pa.array(box, pa.int64()))
    clash = set(point_side) & set(box_side)
    columns = {}
    for side, suffix in ((point_side, JOIN_SUFFIXES[0]), (box_side, JOIN_SUFFIXES[1])):
        for name, values in side.items():
            columns[name + suffix if name in clash else name] = values
    return pa.table(columns)


def _split_names(text: str) -> list[str]:
    names = [n.strip() for n in text.split(",") if n.strip()]
    if not names:
        raise UsageError(f"--point-columns: no column names in {text!r}")
    return names
