"""``boxwood describe``: what an index file or a growing tree's folder holds."""

from __future__ import annotations

import argparse
import json
import os
from typing import Any

from .._growing import GrowingTree
from .._tree import RangeTree
from . import _exits, _tables
from ._exits import UsageError
from ._folders import Tree, axis_of, open_folder
from ._sources import load_index


def run_describe(args: argparse.Namespace) -> int:
    kind = _tables.file_kind(args.index)
    if kind not in ("index", "folder"):
        raise UsageError(
            f"{args.index}: describe takes an index file (*.boxwood) or a growing tree's folder"
        )
    if kind == "index":
        facts = describe(args.index, load_index(args.index))
    else:
        with open_folder(args.index) as tree:
            facts = describe_folder(args.index, tree)
    if args.json:
        print(json.dumps(facts))
    else:
        width = max(len(k) for k in facts)
        for key, value in facts.items():
            shown = f"{value:,}" if isinstance(value, int) else str(value)
            print(f"{key:<{width}}  {shown}")
    return _exits.OK


def describe(path: str, tree: RangeTree) -> dict[str, Any]:
    weights = tree.weights_dtype
    return {
        "file": path,
        "file_bytes": os.path.getsize(path),
        "rows": len(tree),
        "rows_dropped": tree.rows_dropped,
        "levels": tree.height,
        "tree_bytes": tree.nbytes,
        **_axes(tree),
        "weights_dtype": "none" if weights is None else str(weights),
        "layout": tree.layout,
        "keys": 0 if tree.key_names is None else len(tree.count_by_key()),
        "key_columns": "none" if tree.key_names is None else ",".join(tree.key_names),
    }


def describe_folder(path: str, tree: GrowingTree) -> dict[str, Any]:
    """A growing folder: its live rows (a reader's view), segments, files and axes."""
    weights = tree.weights_dtype
    segments = tree.segments
    names = sorted(os.listdir(path))
    return {
        "folder": path,
        "folder_bytes": sum(os.path.getsize(os.path.join(path, n)) for n in names),
        "rows": len(tree),
        "rows_deleted": sum(s.deleted for s in segments),
        "next_id": tree.next_id,
        "segments": len(segments),
        "segment_rows": ",".join(str(s.rows) for s in segments) or "none",
        "tree_bytes": sum(s.nbytes for s in segments),
        **_axes(tree),
        "weights_dtype": "none" if weights is None else str(weights),
        "layout": tree.layout,
        "key_columns": "none" if tree.key_names is None else ",".join(tree.key_names),
    }


def _axes(tree: Tree) -> dict[str, str]:
    return {
        "x_column": tree.x_name,
        "y_column": tree.y_name,
        "x_dtype": _dtype_label(tree, "x"),
        "y_dtype": _dtype_label(tree, "y"),
    }


def _dtype_label(tree: Tree, axis: str) -> str:
    info = axis_of(tree, axis)  # the axis keeps the time zone
    return str(info.dtype) if info.tz is None else f"{info.dtype} ({info.tz})"
