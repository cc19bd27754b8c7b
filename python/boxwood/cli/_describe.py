"""``boxwood describe``: what an index file holds."""

from __future__ import annotations

import argparse
import json
import os
from typing import Any

from .._tree import RangeTree
from . import _exits, _tables
from ._exits import UsageError
from ._sources import load_index


def run_describe(args: argparse.Namespace) -> int:
    if _tables.file_kind(args.index) != "index":
        raise UsageError(f"{args.index}: describe takes an index file (*.boxwood)")
    tree = load_index(args.index)
    facts = describe(args.index, tree)
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
        "x_column": tree.x_name,
        "y_column": tree.y_name,
        "x_dtype": _dtype_label(tree, "x"),
        "y_dtype": _dtype_label(tree, "y"),
        "weights_dtype": "none" if weights is None else str(weights),
        "layout": tree.layout,
        "keys": 0 if tree.key_names is None else len(tree.count_by_key()),
        "key_columns": "none" if tree.key_names is None else ",".join(tree.key_names),
    }


def _dtype_label(tree: RangeTree, axis: str) -> str:
    info = tree._parts.x if axis == "x" else tree._parts.y  # the axis keeps the time zone
    return str(info.dtype) if info.tz is None else f"{info.dtype} ({info.tz})"
