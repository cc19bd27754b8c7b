"""``boxwood count`` and ``boxwood sum``: one answer column beside the boxes' columns."""

from __future__ import annotations

import argparse

from . import _exits, _tables
from ._exits import UsageError
from ._output import counted, note, prepare_output, shown_path
from ._sources import batched, open_source, read_box_keys, read_boxes


def run_count(args: argparse.Namespace) -> int:
    return _answer_boxes(args, "count")


def run_sum(args: argparse.Namespace) -> int:
    return _answer_boxes(args, "sum")


def _answer_boxes(args: argparse.Namespace, what: str) -> int:
    """count or sum: the boxes' columns and one result column, to a file or stdout."""
    prepare_output(args, args.output)
    source = open_source(args, weights=what == "sum")
    tree = source.tree
    if what == "sum" and tree.weights_dtype is None:
        raise UsageError(f"{source.path}: the index was built without --weights; cannot sum")
    boxes, bounds = read_boxes(args, tree)
    keys = read_box_keys(args, tree)
    if args.column in boxes.column_names:
        raise UsageError(
            f"{args.boxes}: already has a column {args.column!r}; name the result with --column"
        )
    method = tree.count if what == "count" else tree.sum
    values = batched(args, what, method, bounds, boxes.num_rows, keys=keys)
    pa = _tables.pyarrow()
    result = boxes.append_column(args.column, pa.array(values))
    _tables.write_table(args.output, result)
    boxes_written = counted(boxes.num_rows, "box", "boxes")
    note(args, f"wrote {boxes_written} with {args.column!r} to {shown_path(args.output)}")
    return _exits.OK
