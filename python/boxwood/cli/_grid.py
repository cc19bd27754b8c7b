"""``boxwood grid``: counts or weight sums per grid cell, as text, a file or a heatmap."""

from __future__ import annotations

import argparse
import csv
import os
from typing import Any

import numpy as np

from .._boxwood import IndexFileError
from . import _bins, _cells, _exits, _tables
from ._datasets import source_kind
from ._exits import BadValues, UsageError
from ._folders import Tree, axis_of, tree_keys
from ._output import counted, note, prepare_output, shown_path
from ._progress import Progress, run_with_activity
from ._sources import Source, open_source


def run_grid(args: argparse.Namespace) -> int:
    """Counts (or sums) per grid cell: a matrix on stdout, or one row per cell to a file."""
    if args.output is not None:
        prepare_output(args, args.output)
    if args.png is not None:
        _prepare_png(args.png)
    _refuse_index_by(args)
    source = open_source(args, weights=args.sum)
    tree = source.tree
    if args.sum and tree.weights_dtype is None:
        raise UsageError(f"{source.path}: the index was built without --weights; cannot sum")
    key = grid_key(args, tree)
    x_edges = _grid_edges(args, source, "x")
    y_edges = _grid_edges(args, source, "y")
    values = grid_values(args, tree, x_edges, y_edges, sums=args.sum, key=key)
    what = "weight sum" if args.sum else "points"
    if args.output is None:
        print(_bins.matrix_text(values, x_edges, y_edges, what))
    else:
        _tables.write_table(args.output, _grid_table(values, x_edges, y_edges, args.sum))
        note(args, f"wrote {counted(values.size, 'cell')} to {shown_path(args.output)}")
    if args.png is not None:
        from ._plot import write_heatmap

        x_name = args.x or tree.x_name
        y_name = args.y or tree.y_name
        write_heatmap(
            args.png,
            values,
            _bins.naive_numpy(x_edges),
            _bins.naive_numpy(y_edges),
            title=f"{os.path.basename(source.path)}: {what} per cell",
            x_label=x_name + (" (UTC)" if axis_of(tree, "x").tz else ""),
            y_label=y_name + (" (UTC)" if axis_of(tree, "y").tz else ""),
            value_label="weight sum per cell" if args.sum else "points per cell",
        )
        note(args, f"wrote the heatmap to {args.png}")
    return _exits.OK


def _refuse_index_by(args: argparse.Namespace) -> None:
    """An index file's keys are fixed when it is built (a growing folder's when it is
    made): its grid picks one with --key, so a --by there names nothing (unlike count's,
    which names the boxes file's key columns)."""
    kind = source_kind(args.source)
    if args.by is not None and kind in ("index", "folder"):
        what = "an index file" if kind == "index" else "a growing tree's folder"
        raise UsageError(
            f"--by: an option for a points file, but {args.source} is {what} "
            "(its keys were fixed at build; choose one with --key VALUE)"
        )


def _grid_edges(args: argparse.Namespace, source: Source, axis: str) -> Any:
    """The bin edges of one axis, from --AXIS-edges or --AXIS-bins (with --AXIS-range)."""
    info = axis_of(source.tree, axis)
    edges_text = getattr(args, f"{axis}_edges")
    range_text = getattr(args, f"{axis}_range")
    if edges_text is not None:
        if range_text is not None:
            raise UsageError(f"--{axis}-range goes with --{axis}-bins, not with --{axis}-edges")
        return _bins.parse_edges(edges_text, info, f"--{axis}-edges")
    if range_text is not None:
        lo, hi = _bins.parse_range(range_text, info, f"--{axis}-range")
    elif source.coordinates is not None:
        lo, hi = _bins.data_range(source.coordinates[0 if axis == "x" else 1])
    else:
        lo, hi = _bins.index_range(source.tree, axis)
    return _bins.equal_bins(getattr(args, f"{axis}_bins"), lo, hi, info)


def grid_key(args: argparse.Namespace, tree: Tree) -> Any:
    """``--key`` as a key of `tree`, or None: one CSV record, a value per key column in the
    order of the index's key columns (``describe``'s ``key_columns``), so a value holding a
    comma is quoted as in CSV (``--key '"Dock, north",3'``)."""
    keys = tree_keys(tree)
    text = getattr(args, "key", None)
    if keys is None:
        if text is not None:
            raise UsageError(f"--key: {args.source} holds no keys (build it with --by)")
        return None
    names = ", ".join(name for name, _ in keys)
    if text is None:
        raise UsageError(
            f"{args.source}: the index is keyed by {names}; choose whose grid with --key VALUE"
        )
    values = key_record(text)
    if len(values) != len(keys):
        raise UsageError(
            f"--key: {len(values)} value(s) in {text!r} but the index has "
            f"{len(keys)} key column(s) ({names}): one value per key "
            'column, comma-separated, a value holding a comma in double quotes ("a,b")'
        )
    parsed = tuple(_key_value(v, kind, name) for v, (name, kind) in zip(values, keys))
    return parsed if len(parsed) > 1 else parsed[0]


def key_record(text: str) -> list[str]:
    """The values of ``--key``: `text` read as one CSV record (RFC 4180 quoting)."""
    try:
        rows = list(csv.reader([text], strict=True))
    except csv.Error as exc:
        raise UsageError(f"--key: {text!r} is not one CSV record ({exc})") from None
    return rows[0] if rows else [""]


def _key_value(text: str, kind: str, name: str) -> Any:
    if kind == "int":
        try:
            return int(text)
        except ValueError:
            raise UsageError(f"--key: {text!r} is not a key of column {name!r} (int)") from None
    if kind == "datetime":
        stamp = _cells.time_cell(text)
        if stamp is None:
            raise UsageError(f"--key: {text!r} is not a time (ISO 8601) for key column {name!r}")
        return stamp  # an offset (or Z) makes it UTC, as the index keeps tz-aware keys
    if kind == "bool":
        if text.lower() not in ("true", "false"):
            raise UsageError(f"--key: column {name!r} holds booleans: true or false, not {text!r}")
        return text.lower() == "true"
    return text


def grid_values(
    args: argparse.Namespace,
    tree: Tree,
    x_edges: Any,
    y_edges: Any,
    *,
    sums: bool,
    key: Any = None,
) -> np.ndarray:
    """Cell values by numpy.histogram2d's bins: ``[lo, hi)``, the last bin on each axis closed;
    a keyed tree's of the points of `key`."""
    cells = (len(x_edges) - 1) * (len(y_edges) - 1)
    progress = Progress(f"grid of {cells:,} cells", enabled=not args.quiet)
    by = {} if key is None else {"by": key}
    with progress:
        try:
            return run_with_activity(
                progress, lambda: tree.grid(x_edges, y_edges, weighted=sums, **by)
            )
        except IndexFileError:  # a part checked at its first use: the entry point's to report
            raise
        except (TypeError, ValueError) as exc:
            raise UsageError(f"grid edges: {exc}") from None
        except OverflowError as exc:
            raise BadValues(f"{args.source}: {exc}") from None


def _grid_table(values: np.ndarray, x_edges: Any, y_edges: Any, sums: bool) -> Any:
    pa = _tables.pyarrow()
    nx, ny = values.shape
    xi = np.repeat(np.arange(nx), ny)
    yj = np.tile(np.arange(ny), nx)
    return pa.table(
        {
            "x_lo": pa.array(_bins.take(x_edges, xi)),
            "x_hi": pa.array(_bins.take(x_edges, xi + 1)),
            "y_lo": pa.array(_bins.take(y_edges, yj)),
            "y_hi": pa.array(_bins.take(y_edges, yj + 1)),
            "sum" if sums else "count": pa.array(values.ravel()),
        }
    )


def _prepare_png(path: str) -> None:
    if not path.lower().endswith(".png"):
        raise UsageError(f"{path}: a heatmap is written as .png")
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        raise _exits.extra_missing("matplotlib", "plot", "drawing a heatmap") from None
    _tables.check_writable(path)
